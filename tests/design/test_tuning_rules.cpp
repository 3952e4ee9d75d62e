// The published tuning rules (tuning_rules.hpp): the SIMC and AMIGO settings against their
// formulas written out here independently from the published statements, the half rule against
// its statement and a worked example, and the cases where a rule is left out.
//
// Sources:
//  - SIMC: S. Skogestad, "Simple analytic rules for model reduction and PID controller tuning",
//    J. Process Control 13 (2003) 291–309: Table 1 (PI on k·e^(−θs)/(τ1·s + 1): Kc = τ1/(k(τc + θ)),
//    τI = min(τ1, 4(τc + θ)); PID in series form on the second-order model, τD = τ2; the
//    integrating cases with k'), and the half rule of §3 (eqs. for τ1, τ2, θ).
//  - AMIGO PI: K. J. Åström, T. Hägglund, "Revisiting the Ziegler–Nichols step response method for
//    PID control", J. Process Control 14 (2004) 635–650.
//  - AMIGO PID: K. J. Åström, T. Hägglund, "Advanced PID Control", ISA (2006), the FOTD rule.
// The formulas below are typed from those statements (recalled from memory, the equation
// numbers not checked against the pages); the AMIGO PI gain and integral time and the PID
// gain and integral time agree with the Modelica Buildings library's documentation of its AMIGO
// blocks, which cites the same papers.
#include <catch2/catch.hpp>
#include <cmath>

#include "specloop/design/design.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {

PlantSpec plant_of(std::vector<std::complex<double>> zeros, std::vector<std::complex<double>> poles, double gain,
                   double delay = 0.0) {
  PlantSpec p;
  p.zeros = std::move(zeros);
  p.poles = std::move(poles);
  p.gain = gain;
  p.delay_s = delay;
  return p;
}

// k·e^(−L s)/(T s + 1) as a zeros/poles/gain plant: pole −1/T, gain k/T.
PlantSpec fopdt(double k, double t, double l) { return plant_of({}, {{-1.0 / t, 0.0}}, k / t, l); }

// The published formulas, written out again (not the module's code).
double simc_kc(double k, double tau1, double theta, double tc) { return tau1 / (k * (tc + theta)); }
double simc_ti(double tau1, double theta, double tc) { return std::min(tau1, 4.0 * (tc + theta)); }
double amigo_pi_k(double k, double t, double l) {
  return 0.15 / k + (0.35 - l * t / std::pow(l + t, 2)) * t / (k * l);
}
double amigo_pi_ti(double t, double l) { return 0.35 * l + 13.0 * l * t * t / (t * t + 12.0 * l * t + 7.0 * l * l); }
double amigo_pid_k(double k, double t, double l) { return (0.2 + 0.45 * t / l) / k; }
double amigo_pid_ti(double t, double l) { return (0.4 * l + 0.8 * t) / (l + 0.1 * t) * l; }
double amigo_pid_td(double t, double l) { return 0.5 * l * t / (0.3 * l + t); }

RuleInputs inputs(Structure s, double action = 1.0, std::optional<double> tau_c = std::nullopt) {
  RuleInputs in;
  in.structure = s;
  in.derivative_filter = 10.0;
  in.action = action;
  in.simc_tau_c_s = tau_c;
  return in;
}

}  // namespace

TEST_CASE("SIMC and AMIGO PI on first-order-plus-delay plants match the published formulas", "[rules]") {
  // L/T = 0.1, 1 and 5 (lag-dominant, balanced, delay-dominant), gains of both signs.
  struct Case { double k, t, l; };
  for (const Case c : {Case{2.0, 10.0, 1.0}, Case{0.5, 3.0, 3.0}, Case{-4.0, 0.4, 2.0}}) {
    CAPTURE(c.k, c.t, c.l);
    const PlantSpec p = fopdt(c.k, c.t, c.l);
    const ModelOutcome m = half_rule_model(p, 1);
    REQUIRE(m.model);
    CHECK(m.model->exact);  // already first order plus delay
    CHECK_THAT(m.model->gain, WithinRel(c.k, 1e-14));
    CHECK_THAT(m.model->lag_s, WithinRel(c.t, 1e-14));
    CHECK_THAT(m.model->delay_s, WithinRel(c.l, 1e-14));
    const double action = c.k > 0 ? 1.0 : -1.0;
    const double k = std::abs(c.k);

    // SIMC with τc = θ (the default) and with τc = 2.5 s.
    for (const std::optional<double> tc : {std::optional<double>{}, std::optional<double>{2.5}}) {
      const RuleOutcome simc = simc_rule(p, inputs(Structure::pi, action, tc));
      REQUIRE(simc.applied());
      const double tau_c = tc.value_or(c.l);
      CHECK_THAT(*simc.tau_c_s, WithinRel(tau_c, 1e-15));
      const StandardForm& f = *simc.controller->standard;
      CHECK_THAT(f.kp, WithinRel(action * simc_kc(k, c.t, c.l, tau_c), 1e-12));
      CHECK_THAT(f.ti, WithinRel(simc_ti(c.t, c.l, tau_c), 1e-12));
    }
    // AMIGO PI and PID (the spec's N applies to the PID's derivative).
    const RuleOutcome pi = amigo_rule(p, inputs(Structure::pi, action));
    REQUIRE(pi.applied());
    CHECK_THAT(pi.controller->standard->kp, WithinRel(action * amigo_pi_k(k, c.t, c.l), 1e-12));
    CHECK_THAT(pi.controller->standard->ti, WithinRel(amigo_pi_ti(c.t, c.l), 1e-12));
    const RuleOutcome pid = amigo_rule(p, inputs(Structure::pid, action));
    REQUIRE(pid.applied());
    CHECK_THAT(pid.controller->standard->kp, WithinRel(action * amigo_pid_k(k, c.t, c.l), 1e-9));
    CHECK_THAT(pid.controller->standard->ti, WithinRel(amigo_pid_ti(c.t, c.l), 1e-9));
    CHECK_THAT(pid.controller->standard->td, WithinRel(amigo_pid_td(c.t, c.l), 1e-9));
    CHECK(pid.controller->standard->n == 10.0);
  }
}

TEST_CASE("hand-computed values of the rules on one plant", "[rules]") {
  // k = 2, T = 10, L = 1 (computed by hand from the formulas above):
  //   SIMC PI, τc = θ = 1: Kc = 10/(2·2) = 2.5, τI = min(10, 8) = 8.
  //   AMIGO PI: K = 0.075 + (0.35 − 10/121)·10/2 = 0.075 + 1.3367769 = 1.4117769,
  //             Ti = 0.35 + 1300/(100 + 120 + 7) = 0.35 + 5.7268722 = 6.0768722.
  //   AMIGO PID: K = (0.2 + 4.5)/2 = 2.35, Ti = (0.4 + 8)/(1 + 1) = 4.2, Td = 5/10.3 = 0.48543689.
  const PlantSpec p = fopdt(2.0, 10.0, 1.0);
  const auto simc = simc_rule(p, inputs(Structure::pi));
  CHECK_THAT(simc.controller->standard->kp, WithinRel(2.5, 1e-12));
  CHECK_THAT(simc.controller->standard->ti, WithinRel(8.0, 1e-12));
  const auto pi = amigo_rule(p, inputs(Structure::pi));
  CHECK_THAT(pi.controller->standard->kp, WithinRel(1.4117769, 1e-7));
  CHECK_THAT(pi.controller->standard->ti, WithinRel(6.0768722, 1e-7));
  const auto pid = amigo_rule(p, inputs(Structure::pid));
  CHECK_THAT(pid.controller->standard->kp, WithinRel(2.35, 1e-9));
  CHECK_THAT(pid.controller->standard->ti, WithinRel(4.2, 1e-9));
  CHECK_THAT(pid.controller->standard->td, WithinRel(0.48543689, 1e-7));
}

TEST_CASE("SIMC PID on a second-order-plus-delay plant: series settings and their standard form", "[rules]") {
  // k = 3, τ1 = 8, τ2 = 2, θ = 0.5, exact (no neglected lag). Series: Kc = 8/(3·1) = 2.6667,
  // τI = min(8, 4) = 4, τD = 2. Standard: Kp = Kc·(1 + 2/4) = 4, Ti = 6, Td = 8/6 (common practice).
  const PlantSpec p = plant_of({}, {{-1.0 / 8.0, 0.0}, {-0.5, 0.0}}, 3.0 / 16.0, 0.5);
  const ModelOutcome m = half_rule_model(p, 2);
  REQUIRE(m.model);
  CHECK(m.model->exact);
  CHECK_THAT(m.model->lag_s, WithinRel(8.0, 1e-14));
  CHECK_THAT(m.model->second_lag_s, WithinRel(2.0, 1e-14));
  const SeriesSettings s = simc_settings(*m.model, 0.5);
  CHECK_THAT(s.kc, WithinRel(8.0 / 3.0, 1e-14));
  CHECK_THAT(s.ti, WithinRel(4.0, 1e-14));
  CHECK_THAT(s.td, WithinRel(2.0, 1e-14));
  const RuleOutcome r = simc_rule(p, inputs(Structure::pid));
  REQUIRE(r.applied());
  const StandardForm& f = *r.controller->standard;
  CHECK_THAT(f.kp, WithinRel(4.0, 1e-9));
  CHECK_THAT(f.ti, WithinRel(6.0, 1e-9));
  CHECK_THAT(f.td, WithinRel(8.0 / 6.0, 1e-9));
  // Without the derivative filter the controller is the series form itself: C(jω) against
  // Kc·(1 + 1/(τI·jω))·(1 + τD·jω) at a frequency well below N/Td, within the filter's effect.
  const Complex s1(0.0, 0.05);
  const Complex series = s.kc * (1.0 + 1.0 / (s.ti * s1)) * (1.0 + s.td * s1);
  const Complex filtered = r.controller->transfer(s1);
  CHECK(std::abs(filtered - series) / std::abs(series) < 0.02);
}

TEST_CASE("SIMC on integrating plants", "[rules]") {
  // k'·e^(−θs)/s with k' = 0.2, θ = 1.5: Kc = 1/(0.2·3) = 1.6667, τI = 4·3 = 12 (τc = θ).
  const PlantSpec p = plant_of({}, {{0.0, 0.0}}, 0.2, 1.5);
  const ModelOutcome m = half_rule_model(p, 1);
  REQUIRE(m.model);
  CHECK(m.model->integrating);
  CHECK(m.model->exact);
  CHECK_THAT(m.model->gain, WithinRel(0.2, 1e-14));
  const RuleOutcome pi = simc_rule(p, inputs(Structure::pi));
  REQUIRE(pi.applied());
  CHECK_THAT(pi.controller->standard->kp, WithinRel(1.0 / 0.6, 1e-12));
  CHECK_THAT(pi.controller->standard->ti, WithinRel(12.0, 1e-12));
  // AMIGO is left out for an integrating plant, with the reason.
  const RuleOutcome amigo = amigo_rule(p, inputs(Structure::pi));
  CHECK_FALSE(amigo.applied());
  CHECK_THAT(amigo.reason, Catch::Matchers::Contains("integrating"));

  // k'/(s(τ s + 1)) with τ = 4, lags 0.5 and a delay 0.2: PI model k'·e^(−θs)/s with the largest
  // lag halved into the delay (the integrator as a lag T → ∞): θ = 0.2 + 4/2 + 0.5 = 2.7, k' =
  // 0.3 (gain 0.3/(4·0.5) over the two lags' poles). PID model: τ2 = 4 + 0.5/2 = 4.25,
  // θ = 0.2 + 0.25 = 0.45; Kc = 1/(k'(τc + θ)), τI = 4(τc + θ), τD = τ2.
  const PlantSpec q = plant_of({}, {{0.0, 0.0}, {-0.25, 0.0}, {-2.0, 0.0}}, 0.3 * 0.25 * 2.0, 0.2);
  const ModelOutcome m1 = half_rule_model(q, 1);
  REQUIRE(m1.model);
  CHECK_THAT(m1.model->gain, WithinRel(0.3, 1e-12));
  CHECK_THAT(m1.model->delay_s, WithinRel(2.7, 1e-12));
  const ModelOutcome m2 = half_rule_model(q, 2);
  REQUIRE(m2.model);
  CHECK_THAT(m2.model->second_lag_s, WithinRel(4.25, 1e-12));
  CHECK_THAT(m2.model->delay_s, WithinRel(0.45, 1e-12));
  const SeriesSettings s = simc_settings(*m2.model, 0.45);
  CHECK_THAT(s.kc, WithinRel(1.0 / (0.3 * 0.9), 1e-12));
  CHECK_THAT(s.ti, WithinRel(3.6, 1e-12));
  CHECK_THAT(s.td, WithinRel(4.25, 1e-12));
}

TEST_CASE("the half rule on a higher-order plant with zeros follows its published statement", "[rules]") {
  // Skogestad 2003's worked example (recalled from memory, not checked against the page):
  // G = (−0.3s + 1)(0.08s + 1)/((2s + 1)(s + 1)(0.4s + 1)(0.2s + 1)(0.05s + 1)³). The LHP zero
  // 0.08 is taken out against the closest larger lag 0.2 by rule T3 (τ̃0 = min(0.2, 5θ) = 0.2):
  // a lag 0.12; the RHP zero's 0.3 goes to the delay. First-order model: τ1 = 2 + 1/2 = 2.5,
  // θ = 1/2 + 0.4 + 0.12 + 3·0.05 + 0.3 = 1.47. Second-order: τ1 = 2, τ2 = 1 + 0.4/2 = 1.2,
  // θ = 0.4/2 + 0.12 + 0.15 + 0.3 = 0.77. k = 1.
  std::vector<std::complex<double>> poles{{-0.5, 0}, {-1.0, 0}, {-2.5, 0}, {-5.0, 0}, {-20.0, 0}, {-20.0, 0}, {-20.0, 0}};
  // gain of k·Π(s − z)/Π(s − p) with unit steady-state gain: k = Π(−p)/Π(−z).
  double k = 1.0;
  for (const auto& pole : poles) k *= -pole.real();
  k /= (1.0 / 0.3) * (1.0 / 0.08);
  k = -k;  // (−0.3s + 1) = −0.3·(s − 1/0.3): the leading coefficients' signs, so that G(0) = +1
  const PlantSpec p = plant_of({{1.0 / 0.3, 0}, {-1.0 / 0.08, 0}}, poles, k);
  const ModelOutcome m1 = half_rule_model(p, 1);
  REQUIRE(m1.model);
  CHECK_FALSE(m1.model->exact);
  CHECK_THAT(m1.model->gain, WithinRel(1.0, 1e-12));
  CHECK_THAT(m1.model->lag_s, WithinRel(2.5, 1e-12));
  CHECK_THAT(m1.model->delay_s, WithinRel(1.47, 1e-12));
  const ModelOutcome m2 = half_rule_model(p, 2);
  REQUIRE(m2.model);
  CHECK_THAT(m2.model->lag_s, WithinRel(2.0, 1e-12));
  CHECK_THAT(m2.model->second_lag_s, WithinRel(1.2, 1e-12));
  CHECK_THAT(m2.model->delay_s, WithinRel(0.77, 1e-12));
  // The derivation says where each part went.
  bool t3 = false;
  for (const std::string& step : m1.model->steps) t3 = t3 || step.find("rule T3") != std::string::npos;
  CHECK(t3);
}

TEST_CASE("the half rule without zeros, and Skogestad's zero rules T1 and T2", "[rules]") {
  // Lags 5, 2, 1, 0.5 and delay 0.1 (the statement of the half rule):
  //   first order: T = 5 + 2/2 = 6, θ = 0.1 + 1 + 1 + 0.5 = 2.6;
  //   second order: T1 = 5, T2 = 2 + 1/2 = 2.5, θ = 0.1 + 0.5 + 0.5 = 1.1.
  const PlantSpec p = plant_of({}, {{-0.2, 0}, {-0.5, 0}, {-1.0, 0}, {-2.0, 0}}, 0.2 * 0.5 * 2.0, 0.1);
  const auto m1 = half_rule_model(p, 1).model;
  const auto m2 = half_rule_model(p, 2).model;
  REQUIRE(m1);
  REQUIRE(m2);
  CHECK_THAT(m1->lag_s, WithinRel(6.0, 1e-12));
  CHECK_THAT(m1->delay_s, WithinRel(2.6, 1e-12));
  CHECK_THAT(m1->gain, WithinRel(1.0, 1e-12));
  CHECK_THAT(m2->lag_s, WithinRel(5.0, 1e-12));
  CHECK_THAT(m2->second_lag_s, WithinRel(2.5, 1e-12));
  CHECK_THAT(m2->delay_s, WithinRel(1.1, 1e-12));
  // A sampled controller adds h/2 to the delay.
  CHECK_THAT(half_rule_model(p, 1, 0.4).model->delay_s, WithinRel(2.8, 1e-12));

  // Rule T2 (τ0 ≥ T0 ≥ 5θ): (6s + 1)/((10s + 1)(0.2s + 1)), first order: θ starts at 0.1 (the lag
  // 0.2 half to the delay), T0 = 6 ≥ 5θ = 0.5, so (6s + 1)/(10s + 1) ≈ 6/10: the model keeps the
  // lag 0.2 with gain 0.6: 0.6/(0.2s + 1), no delay left (θ = 0; the rule still holds at θ = 0).
  const PlantSpec t2 = plant_of({{-1.0 / 6.0, 0}}, {{-0.1, 0}, {-5.0, 0}}, 0.1 * 5.0 * 6.0);
  const auto m = half_rule_model(t2, 1).model;
  REQUIRE(m);
  CHECK_THAT(m->gain, WithinRel(0.6, 1e-12));
  CHECK_THAT(m->lag_s, WithinRel(0.2, 1e-12));
  CHECK_THAT(m->delay_s, WithinAbs(0.0, 1e-15));
  // Rule T1 (T0 ≥ τ0 ≥ θ, no larger lag): (4s + 1)/((2s + 1)(0.1s + 1)) with delay 0.05; the
  // second-order model keeps both lags, so θ = 0.05 ≤ τ0 = 2: the pair → 4/2 = 2, leaving
  // 2·e^(−0.05s)/(0.1s + 1) with T2 = 0.
  const PlantSpec t1 = plant_of({{-0.25, 0}}, {{-0.5, 0}, {-10.0, 0}}, 0.5 * 10.0 * 4.0, 0.05);
  const auto n = half_rule_model(t1, 2).model;
  REQUIRE(n);
  CHECK_THAT(n->gain, WithinRel(2.0, 1e-12));
  CHECK_THAT(n->lag_s, WithinRel(0.1, 1e-12));
  CHECK(n->second_lag_s == 0.0);
  CHECK_THAT(n->delay_s, WithinRel(0.05, 1e-12));
}

TEST_CASE("rules are left out with a reason where they do not apply", "[rules]") {
  const auto reason_of = [](const RuleOutcome& r) {
    CHECK_FALSE(r.applied());
    CHECK_FALSE(r.reason.empty());
    return r.reason;
  };
  // Structures other than PI/PID.
  for (const Structure s : {Structure::p, Structure::pd, Structure::lead, Structure::lag, Structure::lead_lag}) {
    CHECK_THAT(reason_of(simc_rule(fopdt(1.0, 1.0, 0.2), inputs(s))), Catch::Matchers::Contains("PI or PID"));
    CHECK_THAT(reason_of(amigo_rule(fopdt(1.0, 1.0, 0.2), inputs(s))), Catch::Matchers::Contains("PI or PID"));
  }
  // No delay: SIMC's default τc = 0, AMIGO divides by L; a τc given makes SIMC apply.
  const PlantSpec lag = fopdt(1.0, 2.0, 0.0);
  CHECK_THAT(reason_of(simc_rule(lag, inputs(Structure::pi))), Catch::Matchers::Contains("rules.simc_tau_c"));
  CHECK_THAT(reason_of(amigo_rule(lag, inputs(Structure::pi))), Catch::Matchers::Contains("L = 0"));
  const RuleOutcome given = simc_rule(lag, inputs(Structure::pi, 1.0, 0.5));
  REQUIRE(given.applied());
  CHECK_THAT(given.controller->standard->kp, WithinRel(2.0 / 0.5, 1e-12));  // T/(k·τc)
  CHECK_THAT(given.controller->standard->ti, WithinRel(2.0, 1e-12));        // min(2, 4·0.5)
  // PID on a single lag: no second lag for τD.
  CHECK_THAT(reason_of(simc_rule(fopdt(1.0, 2.0, 0.3), inputs(Structure::pid))), Catch::Matchers::Contains("T2 = 0"));
  // Unstable, oscillatory, doubly integrating plants; a zero at the origin.
  CHECK_THAT(reason_of(simc_rule(plant_of({}, {{1.0, 0}}, 1.0, 0.1), inputs(Structure::pi))),
             Catch::Matchers::Contains("unstable"));
  CHECK_THAT(reason_of(amigo_rule(plant_of({}, {{-1.0, 2.0}, {-1.0, -2.0}}, 5.0, 0.1), inputs(Structure::pi))),
             Catch::Matchers::Contains("complex poles"));
  CHECK_THAT(reason_of(simc_rule(plant_of({}, {{0.0, 0}, {0.0, 0}}, 1.0, 0.1), inputs(Structure::pid))),
             Catch::Matchers::Contains("poles at s = 0"));
  CHECK_THAT(reason_of(simc_rule(plant_of({{0.0, 0}}, {{-1.0, 0}, {-2.0, 0}}, 1.0, 0.1), inputs(Structure::pi))),
             Catch::Matchers::Contains("zero at s = 0"));
}

TEST_CASE("reverse action: the rule on |k|, the controller carries the action", "[rules]") {
  const RuleOutcome up = simc_rule(fopdt(2.0, 5.0, 1.0), inputs(Structure::pi, 1.0));
  const RuleOutcome down = simc_rule(fopdt(-2.0, 5.0, 1.0), inputs(Structure::pi, -1.0));
  REQUIRE(up.applied());
  REQUIRE(down.applied());
  CHECK(down.controller->standard->kp == -up.controller->standard->kp);
  CHECK(down.controller->standard->ti == up.controller->standard->ti);
  CHECK(down.controller->series == up.controller->series);  // magnitudes
}

TEST_CASE("a rule whose loop leaves the range the numerics honour is left out, with the reason", "[rules]") {
  // Lags 10 s, 1 s and 1e-5 s: the second-order model's delay is 5e-6 s, and SIMC's default
  // τc = L gives Kc = 1e6 (series), τI = 4e-5 s: closed-loop poles near 3e5 rad/s, beyond kMaxRate.
  const PlantSpec edge = plant_of({}, {{-0.1, 0}, {-1.0, 0}, {-1e5, 0}}, 1e4);
  const TransferFunction g = TransferFunction::from_zeros_poles(edge.zeros, edge.poles, edge.gain);
  RuleOutcome fast = simc_rule(edge, inputs(Structure::pid));
  REQUIRE(fast.applied());
  const auto poles = close_loop(g, fast.controller->transfer).output.poles();
  const double fastest = std::abs(*std::max_element(poles.begin(), poles.end(),
                                                    [](Complex a, Complex b) { return std::abs(a) < std::abs(b); }));
  CHECK(fastest > kMaxRate);
  screen_rule_loop(fast, g);
  CHECK_FALSE(fast.applied());
  CHECK_THAT(fast.reason, Catch::Matchers::Contains("rules.simc_tau_c"));
  // With τc = 0.1 s the same rule stays inside and is kept.
  RuleOutcome slow = simc_rule(edge, inputs(Structure::pid, 1.0, 0.1));
  screen_rule_loop(slow, g);
  CHECK(slow.applied());
}
