// Unusual but valid plants: the controller's action (direct/reverse), the set of P gains that
// stabilize a loop, the lower gain margin of a conditionally stable loop, an exact zero
// undershoot, and how a missed requirement is shown. Checked against the Routh–Hurwitz criterion
// worked by hand (the criterion is common practice; each worked case is shown beside it) and
// against polynomial roots on gain grids.
#include <catch2/catch.hpp>
#include <cmath>

#include "specloop/design/design.hpp"
#include "specloop/core/margins.hpp"
#include "specloop/sim/response.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {

TransferFunction tf(std::vector<double> num, std::vector<double> den) {
  return TransferFunction(Polynomial(std::move(num)), Polynomial(std::move(den)));
}

// The closed loop of K·G settles on the reference: stable with T(0) > 0.
bool settles_on_reference(const TransferFunction& g, double k) {
  const Polynomial p = g.denominator + k * g.numerator;
  if (!all_stable(p.roots())) return false;
  return close_loop(g, tf({k}, {1.0})).output.dc_gain() > 0.0;
}

}  // namespace

TEST_CASE("the action is the only sign of the gain that can settle on the reference", "[plants]") {
  struct Case {
    const char* what;
    TransferFunction g;
    double action;
  };
  const std::vector<Case> cases{
      {"stable, negative DC gain", TransferFunction::from_zeros_poles({}, {{-1.0, 0.0}, {-5.0, 0.0}}, -5.0), -1.0},
      {"stable, positive DC gain", TransferFunction::from_zeros_poles({}, {{-1.0, 0.0}, {-5.0, 0.0}}, 5.0), 1.0},
      // Open-loop unstable: G(0) = 1/(−1) < 0, yet K > 1 stabilizes K/(s − 1) with T(0) = K/(K − 1) > 0.
      {"unstable real pole", tf({1.0}, {1.0, -1.0}), 1.0},
      // Integrating, negative velocity gain.
      {"integrating, reverse", TransferFunction::from_zeros_poles({}, {{0.0, 0.0}, {-2.0, 0.0}}, -0.8), -1.0},
      // Non-minimum phase: DC gain −2·(−1.5)/3 = +1, high-frequency gain −2: the DC sign rules.
      {"non-minimum phase, mixed signs", TransferFunction::from_zeros_poles({{1.5, 0.0}}, {{-1.0, 0.0}, {-3.0, 0.0}}, -2.0),
       1.0},
  };
  for (const Case& c : cases) {
    INFO(c.what);
    CHECK(loop_action(c.g) == c.action);
    // Some gain of the action's sign settles on the reference; no gain of the other sign does.
    bool found = false, wrong = false;
    for (double k = 1e-3; k < 1e3; k *= 1.1) {
      found = found || settles_on_reference(c.g, c.action * k);
      wrong = wrong || settles_on_reference(c.g, -c.action * k);
    }
    CHECK(found);
    CHECK_FALSE(wrong);
  }
}

TEST_CASE("a reverse-acting controller carries its sign in C(s) and every gain, not in its time constants", "[plants]") {
  const Controller direct = make_controller(Structure::pid, {2.0, 3.0, 0.9}, 10.0, 1.0);
  const Controller reverse = make_controller(Structure::pid, {2.0, 3.0, 0.9}, 10.0, -1.0);
  REQUIRE(reverse.parallel);
  REQUIRE(reverse.standard);
  CHECK(reverse.parallel->kp == -direct.parallel->kp);
  CHECK(reverse.parallel->ki == -direct.parallel->ki);
  CHECK(reverse.parallel->kd == -direct.parallel->kd);
  CHECK(reverse.parallel->filter_time == direct.parallel->filter_time);
  CHECK(reverse.standard->kp == -direct.standard->kp);
  CHECK(reverse.standard->ti == direct.standard->ti);
  CHECK(reverse.standard->td == direct.standard->td);
  for (std::size_t i = 0; i < direct.transfer.numerator.coefficients.size(); ++i)
    CHECK(reverse.transfer.numerator.coefficients[i] == -direct.transfer.numerator.coefficients[i]);
  CHECK(reverse.transfer.denominator.coefficients == direct.transfer.denominator.coefficients);
  CHECK(signed_series(reverse).front() == -2.0);
  // C·G of the reverse controller on G equals the direct one on −G: the same loop, the same margins.
  const auto g = TransferFunction::from_zeros_poles({}, {{-1.0, 0.0}, {-5.0, 0.0}}, -5.0);
  const TransferFunction minus_g(-1.0 * g.numerator, g.denominator);
  const Margins a = loop_margins(reverse.transfer * g), b = loop_margins(direct.transfer * minus_g);
  REQUIRE(a.phase_margin_deg);
  CHECK_THAT(*a.phase_margin_deg, WithinRel(*b.phase_margin_deg, 1e-12));
  CHECK_THROWS_AS(make_controller(Structure::p, {1.0}, 10.0, 0.5), std::invalid_argument);
}

TEST_CASE("the stable P gains agree with the Routh–Hurwitz criterion worked by hand", "[plants]") {
  // G = 6/((s+1)(s+2)(s+3)): 1 + K·G → s³ + 6s² + 11s + 6 + 6K. Routh–Hurwitz for a cubic
  // s³ + a s² + b s + c (common practice): stable iff a > 0, c > 0 and a·b > c, i.e.
  // 66 > 6 + 6K → K < 10; the crossing is at s = ±j√11.
  const StableGainSet cubic = stable_gain_set(tf({6.0}, {1.0, 6.0, 11.0, 6.0}));
  REQUIRE(cubic.ranges.size() == 2);
  CHECK(cubic.ranges[0].state == StableGainSet::State::stable);
  CHECK(cubic.ranges[0].low == 0.0);
  CHECK_THAT(cubic.ranges[0].high, WithinRel(10.0, 1e-9));
  CHECK_THAT(cubic.ranges[0].high_frequency, WithinRel(std::sqrt(11.0), 1e-9));
  CHECK(cubic.ranges[1].state == StableGainSet::State::unstable);
  CHECK(std::isinf(cubic.ranges[1].high));
  CHECK(cubic.text(1.0) == "stable only for K in (0, 10); unstable for K in (10, ∞)");
  CHECK(cubic.text(-1.0) == "stable only for K in (-10, 0); unstable for K in (-∞, -10)");

  // 1/(s² − s + 2): s² − s + 2 + K keeps its s¹ coefficient −1, so no K > 0 is stable (a stable
  // polynomial has coefficients of one sign). The old analysis said "turns unstable at K ≈ …".
  const StableGainSet negative_s1 = stable_gain_set(tf({1.0}, {1.0, -1.0, 2.0}));
  CHECK(negative_s1.never_stable());
  CHECK(negative_s1.text(1.0) == "unstable for every K > 0");

  // 1/s²: s² + K has the roots ±j√K for every K > 0: undamped, never stable, never divergent.
  const StableGainSet double_integrator = stable_gain_set(tf({1.0}, {1.0, 0.0, 0.0}));
  REQUIRE(double_integrator.ranges.size() == 1);
  CHECK(double_integrator.ranges[0].state == StableGainSet::State::undamped);
  CHECK_THAT(double_integrator.text(1.0), Catch::Matchers::StartsWith("undamped for every K > 0"));

  // 1/s³: s³ + K lacks s² and s¹ terms: unstable for every K.
  CHECK(stable_gain_set(tf({1.0}, {1.0, 0.0, 0.0, 0.0})).text(1.0) == "unstable for every K > 0");

  // 24/((s − 1.5)(s + 8)): s² + 6.5s − 12 + 24K: stable iff 24K > 12, K > 0.5 (crossing at s = 0).
  const StableGainSet lower = stable_gain_set(TransferFunction::from_zeros_poles({}, {{1.5, 0.0}, {-8.0, 0.0}}, 24.0));
  REQUIRE(lower.ranges.size() == 2);
  CHECK(lower.ranges[0].state == StableGainSet::State::unstable);
  CHECK_THAT(lower.ranges[1].low, WithinRel(0.5, 1e-12));
  CHECK(lower.ranges[1].low_frequency == 0.0);
  CHECK(lower.ranges[1].state == StableGainSet::State::stable);
}

TEST_CASE("the stable P gains agree with polynomial roots on a gain grid", "[plants]") {
  // A conditionally stable loop: (s + 1)² / (s (s − 1) (s + 6) (s + 0.5)) is unstable at small and
  // at large gains and stable in between.
  const Polynomial den = Polynomial({1.0, 0.0}) * Polynomial({1.0, -1.0}) * Polynomial({1.0, 6.0}) * Polynomial({1.0, 0.5});
  const std::vector<TransferFunction> loops{
      TransferFunction(Polynomial({1.0, 2.0, 1.0}), den),
      TransferFunction::from_zeros_poles({{-2.0, 0.0}}, {{-1.0, 2.0}, {-1.0, -2.0}, {-0.2, 0.0}, {-9.0, 0.0}}, 3.0),
      tf({1.0, -3.0}, {1.0, 4.0, 6.0, 4.0}),
  };
  for (const TransferFunction& g : loops) {
    const StableGainSet set = stable_gain_set(g);
    for (double k = 1e-4; k < 1e4; k *= 1.07) {
      const Polynomial p = g.denominator + k * g.numerator;
      const bool stable = all_stable(p.roots(), 1e-9);
      const auto* range = set.stable_at(k);
      // Within 1e-6 of a cut the classification is rounding: skip.
      bool near_cut = false;
      for (const auto& r : set.ranges) near_cut = near_cut || std::abs(k - r.low) <= 1e-6 * k;
      if (near_cut) continue;
      INFO("K = " << k);
      CHECK(stable == (range != nullptr));
    }
  }
}

TEST_CASE("a conditionally stable loop reports how far its gain may drop", "[plants]") {
  // K·24/((s − 1.5)(s + 8)) at K = 2: stable down to K = 0.5, a drop of 20·log10(4) = 12.04 dB,
  // where a pole crosses at s = 0; no upper limit (the phase never reaches −180°).
  const TransferFunction loop = TransferFunction::from_zeros_poles({}, {{1.5, 0.0}, {-8.0, 0.0}}, 48.0);
  const Margins m = loop_margins(loop);
  REQUIRE(m.lower_gain_margin_db);
  CHECK_THAT(*m.lower_gain_margin_db, WithinRel(-20.0 * std::log10(4.0), 1e-9));
  CHECK(*m.lower_phase_crossover_rad_s == 0.0);
  CHECK_FALSE(m.gain_margin_db);
  // The usual loop has none.
  CHECK_FALSE(loop_margins(tf({6.0}, {1.0, 6.0, 11.0, 6.0})).lower_gain_margin_db);
}

TEST_CASE("a conditionally stable loop: both gain margins and the requirement read the nearer", "[plants][margins]") {
  // L(s) = K·(s + 1)²/(s³·(s + 10)²): 1 + L = 0 is s⁵ + 20s⁴ + 100s³ + K·s² + 2K·s + K = 0.
  // Routh–Hurwitz worked by hand: rows s⁵ [1, 100, 2K], s⁴ [20, K, K], s³ [(2000 − K)/20, 1.95K],
  // s² [K(1220 − K)/(2000 − K), K], s¹ [1.95K − (2000 − K)²/(20(1220 − K))], s⁰ [K]; every first
  // column entry is positive iff K² − 1289.5K + 100000 < 0, i.e. K in (K₁, K₂) with
  // K₁,₂ = (1289.5 ∓ √(1289.5² − 4·10⁵))/2 ≈ 82.87, 1206.6. At a root the s² row's auxiliary
  // polynomial b₁s² + K has its roots on the axis: ω² = K/b₁ = (2000 − K)/(1220 − K).
  const double k0 = 300.0;
  const TransferFunction loop(Polynomial({k0, 2.0 * k0, k0}), Polynomial({1.0, 20.0, 100.0, 0.0, 0.0, 0.0}));
  const double root = std::sqrt(1289.5 * 1289.5 - 4e5);
  const double k1 = (1289.5 - root) / 2.0, k2 = (1289.5 + root) / 2.0;
  const Margins m = loop_margins(loop);
  REQUIRE(m.gain_margin_db);
  REQUIRE(m.lower_gain_margin_db);
  CHECK_THAT(*m.gain_margin_db, WithinAbs(20.0 * std::log10(k2 / k0), 1e-9));
  CHECK_THAT(*m.lower_gain_margin_db, WithinAbs(20.0 * std::log10(k1 / k0), 1e-9));
  CHECK_THAT(*m.phase_crossover_rad_s, WithinRel(std::sqrt((2000.0 - k2) / (1220.0 - k2)), 1e-9));
  CHECK_THAT(*m.lower_phase_crossover_rad_s, WithinRel(std::sqrt((2000.0 - k1) / (1220.0 - k1)), 1e-9));
  // The requirement reads the nearer of the two: the loop turns unstable when its gain falls by
  // 11.2 dB before it does when the gain rises by 12.1 dB.
  Requirement r{"gain_margin_min_db", "dB", false, 6.0};
  const auto v = requirement_value(r, StepMetrics{}, m, std::nullopt, 2.0);
  REQUIRE(v);
  CHECK_THAT(*v, WithinAbs(-*m.lower_gain_margin_db, 1e-12));
  CHECK(*v < *m.gain_margin_db);
  // The same loop at a gain below K₁ is unstable: no margins at all.
  const Margins unstable = loop_margins(TransferFunction(Polynomial({50.0, 100.0, 50.0}), loop.denominator));
  CHECK_FALSE(unstable.gain_margin_db);
  CHECK_FALSE(unstable.lower_gain_margin_db);
}

TEST_CASE("a response that never goes the wrong way has exactly zero undershoot", "[plants]") {
  // A P loop and a PID loop on a fourth-order plant whose responses start flat (relative degree
  // ≥ 2, no right-half-plane zero): the cubic interpolant of the first interval used to dip and
  // report undershoots of 1e-9 … 4e-7 %.
  const TransferFunction g = tf({6e9}, {1.0, 6000.0, 1.3e7, 1.4e10, 6e12});
  StepSimulator sim;
  StepMetrics m;
  REQUIRE(sim.simulate(close_loop(realize(g), static_gain(354.5664106975752)), 1.0, 0.02, m) == StepStatus::ok);
  CHECK(m.undershoot_pct == 0.0);
  const Controller pid = make_controller(Structure::pid, {1888.8888888888891, 927.1973314838352, 0.9772991539767322}, 10.0);
  REQUIRE(sim.simulate(close_loop(realize(g), realize(pid.transfer)), 1.0, 0.02, m) == StepStatus::ok);
  CHECK(m.undershoot_pct == 0.0);
  // A real inverse response is still measured: (1 − s)/(s + 1)² under K = 0.5 dips first.
  REQUIRE(sim.simulate(close_loop(realize(tf({-1.0, 1.0}, {1.0, 2.0, 1.0})), static_gain(0.5)), 1.0, 0.02, m) ==
          StepStatus::ok);
  CHECK(m.undershoot_pct > 1.0);
}

TEST_CASE("a missed requirement never shows as its own limit; the steady-state error stays signed", "[plants]") {
  const Requirement overshoot{"overshoot_max_pct", "%", true, 10.0, false};
  RequirementCheck c{overshoot, 10.0000213, false, requirement_violation(overshoot, 10.0000213)};
  c.met = c.violation == 0.0;
  REQUIRE_FALSE(c.met);
  CHECK(shown_value(c) == "10.00002");
  c.value = 9.99997;
  c.violation = requirement_violation(overshoot, c.value);
  c.met = c.violation == 0.0;
  CHECK(shown_value(c) == "10");  // met: 4 digits
  // |e∞| ≤ 0.05 read on the signed error: −0.06 misses, −0.04 meets, and the value stays signed.
  Requirements r;
  r.steady_state_error_max = 0.05;
  const Requirement sse = requirement_list(r).front();
  CHECK(sse.magnitude);
  CHECK(requirement_violation(sse, -0.06) > 0.0);
  CHECK(requirement_violation(sse, -0.04) == 0.0);
  StepMetrics m;
  m.steady_state_error = -0.04;
  CHECK(requirement_value(sse, m, std::nullopt, std::nullopt, 2.0) == -0.04);
}
