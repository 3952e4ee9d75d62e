// The nonlinear-loop simulator (saturation, rate limit, anti-windup) against the exact linear
// step simulation, a closed-form saturated first-order loop, and properties of windup and rate
// limiting. Plants and controllers are invented for the tests.
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <complex>
#include <limits>
#include <string>
#include <vector>

#include "specloop/sim/nonlinear.hpp"

using namespace specloop;
using Catch::Matchers::Contains;

namespace {

StateSpace plant_of(std::vector<double> num, std::vector<double> den) {
  return realize(TransferFunction(Polynomial(std::move(num)), Polynomial(std::move(den))));
}

// A lag plant 1/((s + 1)(0.4 s + 1)) = 2.5/(s² + 3.5 s + 2.5).
StateSpace lag_plant() { return plant_of({2.5}, {1.0, 3.5, 2.5}); }

bool all_finite(const std::vector<double>& v) {
  return std::all_of(v.begin(), v.end(), [](double x) { return std::isfinite(x); });
}

// Runs the exact linear simulation and the nonlinear one with wide limits at the linear samples;
// returns the largest output difference relative to |y∞| and effort difference relative to max|u|.
std::pair<double, double> linear_mismatch(const StateSpace& plant, const Controller& c) {
  StepSimulator sim;
  StepMetrics lin;
  StepTrace trace;
  REQUIRE(sim.simulate(close_loop(plant, realize(c.transfer)), 1.0, 0.02, lin, &trace) == StepStatus::ok);
  LoopOptions opt;
  opt.sample_times_s = trace.time_s;
  opt.horizon_s = trace.time_s.back();
  ActuatorModel wide;  // ±inf: never saturates
  const NonlinearResult nl = simulate_nonlinear(plant, c, wide, opt, 1.0, 0.02);
  REQUIRE(nl.status == NonlinearStatus::ok);
  REQUIRE(nl.time_s.size() == trace.time_s.size());
  double dy = 0.0, du = 0.0, umax = 0.0;
  for (std::size_t k = 0; k < trace.time_s.size(); ++k) {
    dy = std::max(dy, std::abs(nl.output[k] - trace.output[k]));
    du = std::max(du, std::abs(nl.control[k] - trace.effort[k]));
    umax = std::max(umax, std::abs(trace.effort[k]));
  }
  CHECK(nl.saturated_fraction == 0.0);
  // Overshoot: the linear one is refined between samples (cubic Hermite), ours is the sample
  // maximum at the same samples; with >= 2000 samples the difference is ~(ω·h)²/8 of the
  // peak, far below 0.01 points.
  CHECK(std::abs(nl.metrics.overshoot_pct - lin.overshoot_pct) < 1e-2);
  CHECK(std::abs(nl.metrics.final_value - lin.final_value) <= 1e-12 * std::abs(lin.final_value));
  return {dy / std::abs(lin.final_value), du / umax};
}

}  // namespace

TEST_CASE("nonlinear loop with wide limits equals the exact linear step response", "[nonlinear]") {
  // Reference: the library's exact zero-order-hold step simulation (itself checked against
  // SciPy in check_scipy_step.py). Tolerance 1e-6 relative: dopri5 at rtol 1e-8 / atol 1e-10
  // accumulates a global error of order 1e-7 over a few hundred steps; a wrong sign, gain or
  // derivative kick shows up at the 1e-2 level.
  SECTION("PI") {
    const auto [dy, du] = linear_mismatch(lag_plant(), make_controller(Structure::pi, {1.5, 0.8}, 10.0));
    CHECK(dy < 1e-6);
    CHECK(du < 1e-6);
  }
  SECTION("PID (derivative on the error, with the kick at 0+)") {
    const auto [dy, du] = linear_mismatch(lag_plant(), make_controller(Structure::pid, {2.0, 1.2, 0.7}, 10.0));
    CHECK(dy < 1e-6);
    CHECK(du < 1e-6);
  }
  SECTION("lead on an integrating plant (parallel form Kp + Kd·s/(Tf·s + 1))") {
    const auto [dy, du] = linear_mismatch(plant_of({1.0}, {1.0, 2.0, 0.0}), make_controller(Structure::lead, {4.0, 1.5, 5.0}, 10.0));
    CHECK(dy < 1e-6);
    CHECK(du < 1e-6);
  }
  SECTION("lead-lag (no parallel form: state-space controller on e)") {
    const Controller c = make_controller(Structure::lead_lag, {3.0, 2.0, 4.0, 0.1, 5.0}, 10.0);
    REQUIRE_FALSE(c.parallel);
    const auto [dy, du] = linear_mismatch(lag_plant(), c);
    CHECK(dy < 1e-6);
    CHECK(du < 1e-6);
  }
}

TEST_CASE("saturated proportional loop on a first-order plant follows the closed form", "[nonlinear]") {
  // P = 1/(s + 1), u = clamp(10·(1 − y), −inf, 2), r = 1. Closed form (derived by hand):
  // while saturated y = 2(1 − e^{−t}) until 10(1 − y) = 2, i.e. y = 0.8 at t* = ln(1/0.6);
  // then y' = 10 − 11y, y = 10/11 + (0.8 − 10/11)·e^{−11(t − t*)}. Tolerance 1e-7 absolute:
  // integrator error only; stepping blindly across the switch would cost ~1e-5 or more.
  const StateSpace plant = plant_of({1.0}, {1.0, 1.0});
  const Controller c = make_controller(Structure::p, {10.0}, 10.0);
  ActuatorModel act;
  act.max = 2.0;
  LoopOptions opt;
  opt.horizon_s = 3.0;
  const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  const double ts = std::log(1.0 / 0.6);
  double worst = 0.0;
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    const double t = r.time_s[k];
    const double y = t <= ts ? 2.0 * (1.0 - std::exp(-t)) : 10.0 / 11.0 + (0.8 - 10.0 / 11.0) * std::exp(-11.0 * (t - ts));
    worst = std::max(worst, std::abs(r.output[k] - y));
  }
  CHECK(worst < 1e-7);
  CHECK(r.switches >= 1);
  // Time at the limit ÷ horizon = t*/3, to the bisection's precision.
  CHECK(std::abs(r.saturated_fraction - ts / 3.0) < 1e-9);
  CHECK(*std::max_element(r.control.begin(), r.control.end()) <= 2.0);
}

TEST_CASE("integrator windup: no anti-windup overshoots more than clamping and back-calculation", "[nonlinear]") {
  // Property (Åström & Hägglund, Advanced PID Control, 2006, integrator windup): with a
  // saturating actuator the unprotected integrator accumulates error and overshoots more.
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pi, {3.0, 1.5}, 10.0);
  ActuatorModel act;
  act.min = -1.3;
  act.max = 1.3;  // the steady state needs u = 1; the kick asks for 3
  LoopOptions opt;
  opt.horizon_s = 30.0;
  auto run = [&](AntiWindup a) {
    opt.anti_windup = a;
    const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    CHECK(r.saturated_fraction > 0.0);
    CHECK(*std::max_element(r.control.begin(), r.control.end()) <= act.max);
    CHECK(std::abs(r.output.back() - 1.0) < 1e-3);  // integral action still reaches r
    return r.metrics.overshoot_pct;
  };
  const double none = run(AntiWindup::none);
  const double clamp = run(AntiWindup::conditional_integration);
  const double back = run(AntiWindup::back_calculation);
  CHECK(none > clamp + 1.0);  // at least a percentage point apart: windup is visible, not noise
  CHECK(none > back + 1.0);
}

TEST_CASE("a rate limit bounds the slope of the applied control", "[nonlinear]") {
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pid, {2.0, 1.2, 0.7}, 10.0);
  ActuatorModel act;
  act.min = -2.0;
  act.max = 2.0;
  act.rate_max = 0.8;
  LoopOptions opt;
  opt.horizon_s = 25.0;
  const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  double steepest = 0.0;
  for (std::size_t k = 1; k < r.time_s.size(); ++k)
    steepest = std::max(steepest, std::abs(r.control[k] - r.control[k - 1]) / (r.time_s[k] - r.time_s[k - 1]));
  // Tolerance 1e-6 relative: slewing is integrated exactly (u' = ±R), tracking stays below R
  // to the switch location precision.
  CHECK(steepest <= 0.8 * (1.0 + 1e-6));
  CHECK(steepest >= 0.8 * (1.0 - 1e-3));  // the limit is active (the PID kick is a jump)
  CHECK(r.control.front() == 0.0);         // the actuator starts at rest
  CHECK(std::abs(r.output.back() - 1.0) < 1e-3);
}

TEST_CASE("a PI loop rejects a step disturbance at the plant input", "[nonlinear]") {
  // Common practice: integral action removes the steady-state error of a constant load.
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pi, {1.5, 0.8}, 10.0);
  LoopOptions opt;
  opt.horizon_s = 60.0;
  opt.disturbance_time_s = 20.0;
  opt.disturbance_size = 0.5;
  ActuatorModel act;
  act.min = -3.0;
  act.max = 3.0;
  const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  double deviation = 0.0, before = 0.0;
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    if (r.time_s[k] > 20.0) deviation = std::max(deviation, r.output[k] - 1.0);
    if (r.time_s[k] > 15.0 && r.time_s[k] <= 20.0) before = std::max(before, std::abs(r.output[k] - 1.0));
  }
  CHECK(before < 1e-2);     // settled before the disturbance
  CHECK(deviation > 0.05);  // the disturbance is visible...
  CHECK(std::abs(r.output.back() - 1.0) < 1e-4);  // ...and rejected (e^{-σ·40 s} ~ 1e-7 left)
  // Steady state: P(0) = 1, so u + d = y = 1 and the controller settles at u = 0.5.
  CHECK(std::abs(r.control.back() - 0.5) < 1e-4);
}

TEST_CASE("pathological input gives a status or a clear exception, never NaN", "[nonlinear]") {
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pi, {1.5, 0.8}, 10.0);
  LoopOptions opt;
  opt.horizon_s = 20.0;
  ActuatorModel act;
  SECTION("step budget exhausted") {
    opt.max_steps = 10;
    const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
    CHECK(r.status == NonlinearStatus::step_limit);
    CHECK(status_name(r.status) == "step_limit");
    CHECK(r.time_s.size() < 4001);
    CHECK(all_finite(r.output));
    CHECK(all_finite(r.control));
    REQUIRE_FALSE(r.notes.empty());
    CHECK_THAT(r.notes.back(), Contains("max_steps"));
  }
  SECTION("a loop that diverges to overflow reports non_finite or step_limit") {
    // Strongly unstable plant 1/(s − 40): e^{40·20} overflows double.
    const NonlinearResult r = simulate_nonlinear(plant_of({1.0}, {1.0, -40.0}), c, act, opt, 1.0, 0.02);
    CHECK(r.status != NonlinearStatus::ok);
    CHECK(all_finite(r.output));
  }
  SECTION("malformed actuator and options are rejected, naming the field") {
    act.min = 1.0;
    act.max = -1.0;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, c, act, opt, 1.0, 0.02), Contains("min < max"));
    act = ActuatorModel{};
    act.rate_max = -1.0;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, c, act, opt, 1.0, 0.02), Contains("rate_max"));
    act = ActuatorModel{};
    opt.max_steps = 0;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, c, act, opt, 1.0, 0.02), Contains("max_steps"));
    opt.max_steps = 1000;
    CHECK_THROWS_WITH(simulate_nonlinear(plant_of({1.0, 0.0}, {1.0, 1.0}), c, act, opt, 1.0, 0.02),
                      Contains("strictly proper"));
  }
}

TEST_CASE("anti-windup names round-trip", "[nonlinear]") {
  for (const std::string& name : anti_windup_names()) {
    const auto a = parse_anti_windup(name);
    REQUIRE(a);
    CHECK(anti_windup_name(*a) == name);
  }
  CHECK_FALSE(parse_anti_windup("back_calculation"));
}

// ---- Transport delay and sampled controller -------------------------------------------------

namespace {

// Samples k/256 s (exact in binary) up to `horizon`, so that t − L lands exactly on an earlier
// sample when L is a multiple of 1/256.
std::vector<double> binary_grid(double horizon) {
  std::vector<double> t;
  for (int k = 0; k / 256.0 <= horizon; ++k) t.push_back(k / 256.0);
  return t;
}

std::complex<double> eval_w(const std::vector<double>& p, std::complex<double> w) {  // Σ p[i]·w^i
  std::complex<double> v = 0.0, wp = 1.0;
  for (double c : p) {
    v += c * wp;
    wp *= w;
  }
  return v;
}

}  // namespace

TEST_CASE("a transport delay feeds the plant the applied control shifted by exactly L", "[nonlinear][delay]") {
  // Definition of a transport delay: u_plant(t) = u(t − L), 0 before L. L = 0.5 s = 128/256 s,
  // so sample k − 128 is exactly t − L. Tolerance 1e-12·max|u|: both values come from the same
  // dense-output polynomial (the delay line interpolates it through six points, exact for its
  // degree), so only rounding separates them.
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pi, {1.5, 0.8}, 10.0);
  ActuatorModel act;
  act.min = -1.2;
  act.max = 1.2;  // the kick asks for 1.5: the saturation switch must be located
  LoopOptions opt;
  opt.delay_s = 0.5;
  opt.horizon_s = 20.0;
  opt.sample_times_s = binary_grid(20.0);
  SECTION("saturation") {}
  SECTION("saturation and rate limit") { act.rate_max = 2.0; }
  const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  REQUIRE(r.plant_input.size() == r.control.size());
  CHECK_FALSE(r.difference_equation);
  CHECK(r.switches >= 1);
  CHECK(all_finite(r.output));
  double umax = 0.0, worst = 0.0;
  for (double u : r.control) umax = std::max(umax, std::abs(u));
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    if (k < 128) CHECK(r.plant_input[k] == 0.0);
    else worst = std::max(worst, std::abs(r.plant_input[k] - r.control[k - 128]));
  }
  CHECK(worst <= 1e-12 * umax);
  CHECK(*std::max_element(r.control.begin(), r.control.end()) <= act.max);
  // Nothing reaches the output before the delay (plant at rest).
  for (std::size_t k = 0; k <= 128; ++k) CHECK(r.output[k] == 0.0);
  CHECK(std::abs(r.output.back() - 1.0) < 1e-3);  // integral action still settles (stable delayed loop)
}

TEST_CASE("delayed proportional loop on a first-order plant follows the method-of-steps closed form", "[nonlinear][delay]") {
  // P = 1/(s + 1), u = K·(r − y), plant input u(t − L), r = 1, K = 0.8, L = 0.4. Closed form by
  // the method of steps (derived by hand; El'sgol'ts & Norkin, Introduction to the Theory and
  // Application of Differential Equations with Deviating Arguments, 1973, method of steps):
  //   t ≤ L:       y = 0
  //   L ≤ t ≤ 2L:  y = K·r·(1 − e^{−(t−L)})
  //   2L ≤ t ≤ 3L: with s = t − 2L, y' + y = a + b·e^{−s}, a = K·r·(1 − K), b = K²·r:
  //                y = a + (y(2L) − a)·e^{−s} + b·s·e^{−s}.
  // Tolerance 1e-8 absolute: the integrator's own error at rtol 1e-8 (measured ~4e-10); a
  // delayed input interpolated linearly instead of by the dense output costs ~1e-4.
  const double K = 0.8, L = 0.4, r0 = 1.0;
  LoopOptions opt;
  opt.delay_s = L;
  opt.horizon_s = 3.0 * L;
  opt.output_step_s = L / 200.0;
  const NonlinearResult r =
      simulate_nonlinear(plant_of({1.0}, {1.0, 1.0}), make_controller(Structure::p, {K}, 10.0), ActuatorModel{}, opt, r0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  const double y2 = K * r0 * (1.0 - std::exp(-L)), a = K * r0 * (1.0 - K), b = K * K * r0;
  double worst = 0.0;
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    const double t = r.time_s[k];
    double y = 0.0;
    if (t > 2.0 * L) {
      const double s = t - 2.0 * L;
      y = a + (y2 - a) * std::exp(-s) + b * s * std::exp(-s);
    } else if (t > L) {
      y = K * r0 * (1.0 - std::exp(-(t - L)));
    }
    worst = std::max(worst, std::abs(r.output[k] - y));
  }
  CHECK(worst < 1e-8);
}

TEST_CASE("sampled PI: Tustin coefficients and the recursion the loop runs", "[nonlinear][sampled]") {
  // Bilinear (Tustin) transform of Kp + Ki/s: Kp + Ki·Ts/2·(z + 1)/(z − 1) (Franklin, Powell &
  // Workman, Digital Control of Dynamic Systems, bilinear transformation section; formula), i.e.
  // u[k] = u[k−1] + (Kp + Ki·Ts/2)·e[k] + (−Kp + Ki·Ts/2)·e[k−1].
  const Controller c = make_controller(Structure::pi, {1.5, 0.8}, 10.0);  // Kp = 1.5, Ki = 1.2
  const double kp = c.parallel->kp, ki = c.parallel->ki, ts = 0.05;
  LoopOptions opt;
  opt.sample_time_s = ts;
  opt.horizon_s = 10.0;
  for (int k = 0; k <= 200; ++k) opt.sample_times_s.push_back(k * ts);  // the controller's own instants
  const NonlinearResult r = simulate_nonlinear(lag_plant(), c, ActuatorModel{}, opt, 1.0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  REQUIRE(r.difference_equation);
  const DifferenceEquation& d = *r.difference_equation;
  CHECK(d.sample_time_s == ts);
  CHECK_THAT(d.method, Contains("Tustin"));
  // Coefficients: rounding only (1e-14 relative).
  REQUIRE(d.denominator.size() == 2);
  REQUIRE(d.reference_numerator.size() == 2);
  REQUIRE(d.measurement_numerator.size() == 2);
  CHECK(d.denominator[0] == 1.0);
  CHECK(d.denominator[1] == -1.0);
  for (const auto* n : {&d.reference_numerator, &d.measurement_numerator}) {
    CHECK(std::abs((*n)[0] - (kp + ki * ts / 2.0)) < 1e-14 * kp);
    CHECK(std::abs((*n)[1] - (-kp + ki * ts / 2.0)) < 1e-14 * kp);
  }
  // The simulated commands obey the textbook recursion with e[k] = 1 − y(k·Ts) (e[−1] = 0, u[−1] = 0).
  // Tolerance 1e-12: rounding of the recursion only.
  double u_prev = 0.0, e_prev = 0.0, worst = 0.0;
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    const double e = 1.0 - r.output[k];
    const double u = u_prev + (kp + ki * ts / 2.0) * e + (-kp + ki * ts / 2.0) * e_prev;
    worst = std::max(worst, std::abs(u - r.command[k]));
    u_prev = r.command[k];
    e_prev = e;
  }
  CHECK(worst < 1e-12);
  // Zero-order hold: the applied u equals the command at the instant and is held; the plant
  // input is the applied u (no delay here).
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    CHECK(r.control[k] == r.command[k]);
    CHECK(r.plant_input[k] == r.control[k]);
  }
}

TEST_CASE("sampled PID and lead: the difference equations are the documented discretizations", "[nonlinear][sampled]") {
  // Checked as transfer functions of w = z⁻¹ at points on the unit circle, z = e^{jθ}:
  //   PID: Kp·b + Ki·Ts/2·(1 + w)/(1 − w) + Kd/(Tf + Ts)·c·(1 − w)/(1 − Tf/(Tf + Ts)·w)
  //        (Tustin integral; backward difference s ≈ (1 − w)/Ts in Kd·s/(Tf·s + 1));
  //   lead: C(s) at s = (2/Ts)·(1 − w)/(1 + w) (Franklin, Powell & Workman, bilinear
  //        transformation section; formula).
  // Tolerance 1e-10 relative: polynomial algebra in double precision.
  const double ts = 0.02;
  LoopOptions opt;
  opt.sample_time_s = ts;
  opt.horizon_s = 5.0;
  opt.setpoint_weight = 0.6;
  opt.derivative_weight = 0.0;
  const std::vector<double> thetas{0.1, 0.7, 2.0, 3.0};
  SECTION("PID with set-point weights") {
    const Controller c = make_controller(Structure::pid, {2.0, 1.2, 0.7}, 10.0);
    const ParallelGains g = *c.parallel;
    const NonlinearResult r = simulate_nonlinear(lag_plant(), c, ActuatorModel{}, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    REQUIRE(r.difference_equation);
    const DifferenceEquation& d = *r.difference_equation;
    CHECK(d.denominator[0] == 1.0);
    for (double th : thetas) {
      const std::complex<double> w = std::exp(std::complex<double>(0.0, -th));
      const auto integ = g.ki * ts / 2.0 * (1.0 + w) / (1.0 - w);
      const auto deriv = g.kd / (g.filter_time + ts) * (1.0 - w) / (1.0 - g.filter_time / (g.filter_time + ts) * w);
      const auto want_r = g.kp * 0.6 + integ + 0.0 * deriv, want_y = g.kp + integ + deriv;
      const auto got_r = eval_w(d.reference_numerator, w) / eval_w(d.denominator, w);
      const auto got_y = eval_w(d.measurement_numerator, w) / eval_w(d.denominator, w);
      CHECK(std::abs(got_r - want_r) < 1e-10 * std::abs(want_r));
      CHECK(std::abs(got_y - want_y) < 1e-10 * std::abs(want_y));
    }
  }
  SECTION("lead (Tustin of the whole C(s))") {
    const Controller c = make_controller(Structure::lead, {4.0, 1.5, 5.0}, 10.0);
    const NonlinearResult r = simulate_nonlinear(plant_of({1.0}, {1.0, 2.0, 0.0}), c, ActuatorModel{}, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    REQUIRE(r.difference_equation);
    const DifferenceEquation& d = *r.difference_equation;
    CHECK(d.denominator[0] == 1.0);
    CHECK(d.reference_numerator == d.measurement_numerator);  // acts on e = r − y
    for (double th : thetas) {
      const std::complex<double> w = std::exp(std::complex<double>(0.0, -th));
      const std::complex<double> want = c.transfer(2.0 / ts * (1.0 - w) / (1.0 + w));
      const auto got = eval_w(d.reference_numerator, w) / eval_w(d.denominator, w);
      CHECK(std::abs(got - want) < 1e-10 * std::abs(want));
    }
  }
}

TEST_CASE("the sampled loop converges to the continuous one as the period shrinks", "[nonlinear][sampled]") {
  // Common practice: a sampled controller with zero-order hold approaches the continuous one as
  // Ts → 0, the error shrinking about linearly (the hold acts like a Ts/2 delay). Dominant time
  // constant of the lag plant: 1 s; Ts = 0.1, 0.03, 0.01 s. Checks: each error at most 0.6× the
  // previous (first order would give 0.3 and 0.33), the last below 1e-2 of the unit step.
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pid, {2.0, 1.2, 0.7}, 10.0);
  ActuatorModel act;
  act.min = -4.0;
  act.max = 4.0;
  LoopOptions opt;
  opt.horizon_s = 15.0;
  opt.output_step_s = 0.01;
  opt.derivative_weight = 0.0;  // derivative on the measurement: no kick, whose spike of width Tf
                                // a sampled derivative only resolves once Ts << Tf
  const NonlinearResult cont = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
  REQUIRE(cont.status == NonlinearStatus::ok);
  std::vector<double> errors;
  for (double ts : {0.1, 0.03, 0.01}) {
    opt.sample_time_s = ts;
    const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    REQUIRE(r.output.size() == cont.output.size());
    double e = 0.0;
    for (std::size_t k = 0; k < r.output.size(); ++k) e = std::max(e, std::abs(r.output[k] - cont.output[k]));
    errors.push_back(e);
  }
  INFO("errors " << errors[0] << ", " << errors[1] << ", " << errors[2]);
  CHECK(errors[1] < 0.6 * errors[0]);
  CHECK(errors[2] < 0.6 * errors[1]);
  CHECK(errors[2] < 1e-2);
}

TEST_CASE("sampled loop: saturation, rate limit and anti-windup at the samples", "[nonlinear][sampled]") {
  const StateSpace plant = lag_plant();
  LoopOptions opt;
  opt.sample_time_s = 0.05;
  opt.delay_s = 0.12;  // not a multiple of Ts: shifts the hold's switching instants only
  SECTION("windup: no anti-windup overshoots more than clamping and back-calculation") {
    // Property (Åström & Hägglund, Advanced PID Control, 2006, integrator windup), as in the
    // continuous test above.
    const Controller c = make_controller(Structure::pi, {3.0, 1.5}, 10.0);
    ActuatorModel act;
    act.min = -1.3;
    act.max = 1.3;
    opt.horizon_s = 40.0;
    auto run = [&](AntiWindup a) {
      opt.anti_windup = a;
      const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
      REQUIRE(r.status == NonlinearStatus::ok);
      CHECK(r.saturated_fraction > 0.0);
      CHECK(*std::max_element(r.control.begin(), r.control.end()) <= act.max);
      CHECK(*std::max_element(r.plant_input.begin(), r.plant_input.end()) <= act.max);
      CHECK(std::abs(r.output.back() - 1.0) < 1e-3);
      return r.metrics.overshoot_pct;
    };
    const double none = run(AntiWindup::none);
    CHECK(none > run(AntiWindup::conditional_integration) + 1.0);
    CHECK(none > run(AntiWindup::back_calculation) + 1.0);
  }
  SECTION("the rate limit bounds the slope of the applied control between samples") {
    const Controller c = make_controller(Structure::pid, {2.0, 1.2, 0.7}, 10.0);
    ActuatorModel act;
    act.min = -2.0;
    act.max = 2.0;
    act.rate_max = 0.8;
    opt.horizon_s = 25.0;
    opt.output_step_s = 0.005;
    const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    double steepest = 0.0;
    for (std::size_t k = 1; k < r.time_s.size(); ++k)
      steepest = std::max(steepest, std::abs(r.control[k] - r.control[k - 1]) / (r.time_s[k] - r.time_s[k - 1]));
    // Tolerance 1e-9 relative: the slew is a straight line evaluated in double precision.
    CHECK(steepest <= 0.8 * (1.0 + 1e-9));
    CHECK(steepest >= 0.8 * (1.0 - 1e-9));  // the limit is active (the PID kick is a jump)
    CHECK(r.control.front() == 0.0);          // starts at rest and slews
    CHECK(std::abs(r.output.back() - 1.0) < 1e-3);
    // The delay shifts the (continuous, piecewise-linear) applied u by L = 0.12 s = 24 samples.
    // Tolerance 1e-9: the sample times carry rounding (~1e-15 s) times the slope (<= 0.8).
    double worst = 0.0;
    for (std::size_t k = 24; k < r.time_s.size(); ++k) worst = std::max(worst, std::abs(r.plant_input[k] - r.control[k - 24]));
    CHECK(worst < 1e-9);
    for (std::size_t k = 0; k < 24; ++k) CHECK(r.plant_input[k] == 0.0);
  }
}

TEST_CASE("delay and sample time: malformed values are rejected, naming the field", "[nonlinear]") {
  const StateSpace plant = lag_plant();
  const Controller c = make_controller(Structure::pi, {1.5, 0.8}, 10.0);
  LoopOptions opt;
  opt.horizon_s = 5.0;
  const double nan = std::numeric_limits<double>::quiet_NaN(), inf = std::numeric_limits<double>::infinity();
  for (double bad : {-0.1, nan, inf}) {
    LoopOptions o = opt;
    o.delay_s = bad;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, c, ActuatorModel{}, o, 1.0, 0.02), Contains("delay_s"));
    o = opt;
    o.sample_time_s = bad;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, c, ActuatorModel{}, o, 1.0, 0.02), Contains("sample_time_s"));
  }
  SECTION("a tiny delay exhausts the step budget as a status, not a hang or NaN") {
    LoopOptions o = opt;
    o.delay_s = 1e-9;  // the method of steps caps every step at L
    o.max_steps = 2000;
    const NonlinearResult r = simulate_nonlinear(plant, c, ActuatorModel{}, o, 1.0, 0.02);
    CHECK(r.status == NonlinearStatus::step_limit);
    CHECK(all_finite(r.output));
  }
}
