// The nonlinear-loop simulator (saturation, rate limit, anti-windup) against the exact linear
// step simulation, a closed-form saturated first-order loop, and properties of windup and rate
// limiting. Plants and controllers are invented for the tests.
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <string>

#include "specloop/nonlinear.hpp"

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
  const double clamp = run(AntiWindup::clamping);
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
