// Measurement noise, the stiffness-based choice of the implicit stepper, and the attribution of a
// failed confirmation to the effect that caused it. Plants and controllers are invented for the
// tests; each external fact is cited beside its check.
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/sim/nonlinear.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {

StateSpace plant_of(std::vector<double> num, std::vector<double> den) {
  return realize(TransferFunction(Polynomial(std::move(num)), Polynomial(std::move(den))));
}

// 1/((s + 1)(0.4 s + 1)).
StateSpace lag_plant() { return plant_of({2.5}, {1.0, 3.5, 2.5}); }

double max_difference(const std::vector<double>& a, const std::vector<double>& b) {
  REQUIRE(a.size() == b.size());
  double d = 0.0;
  for (std::size_t k = 0; k < a.size(); ++k) d = std::max(d, std::abs(a[k] - b[k]));
  return d;
}

Problem problem_from(const std::string& text) {
  const Spec spec = parse_spec(text, "<test>");
  return make_problem(spec, characterize(spec));
}

}  // namespace

TEST_CASE("the noise sequence is Gaussian, zero-mean, of the stated rms, and fixed by its seed", "[noise]") {
  constexpr std::size_t n = 200001;  // odd: the Box–Muller pairs are cut
  const double rms = 0.3;
  const std::vector<double> a = gaussian_sequence(rms, 7, n);
  REQUIRE(a.size() == n);
  CHECK(a == gaussian_sequence(rms, 7, n));
  CHECK(a != gaussian_sequence(rms, 8, n));
  double sum = 0.0, squares = 0.0;
  std::size_t within_one = 0;
  for (double v : a) {
    sum += v;
    squares += v * v;
    if (std::abs(v) < rms) ++within_one;
  }
  const double mean = sum / n, sd = std::sqrt(squares / n - mean * mean);
  // Five standard errors: σ/√n for the mean, σ/√(2n) for the standard deviation.
  CHECK(std::abs(mean) < 5.0 * rms / std::sqrt(double(n)));
  CHECK(std::abs(sd - rms) < 5.0 * rms / std::sqrt(2.0 * n));
  // P(|X| < σ) = 0.682689 for a normal variable (Abramowitz & Stegun, Handbook of Mathematical
  // Functions, 1964, table 26.1); binomial standard error √(p(1 − p)/n).
  const double p = 0.682689;
  CHECK(std::abs(double(within_one) / n - p) < 5.0 * std::sqrt(p * (1.0 - p) / n));
}

TEST_CASE("measurement noise enters where the controller reads y", "[noise]") {
  const StateSpace plant = lag_plant();
  const Controller pid = make_controller(Structure::pid, {2.0, 1.2, 0.7}, 10.0);
  ActuatorModel wide;
  LoopOptions opt;
  opt.horizon_s = 12.0;
  const NonlinearResult clean = simulate_nonlinear(plant, pid, wide, opt, 1.0, 0.02);
  REQUIRE(clean.status == NonlinearStatus::ok);

  SECTION("a noise value held over the whole run acts as a shifted reference") {
    // With b = c = 1 the controller sees r − (y + n0) everywhere, so the loop is the noise-free
    // one driven by r − n0 (linearity of the loop).
    opt.noise_rms = 0.2;
    opt.noise_seed = 11;
    opt.noise_period_s = 2.0 * opt.horizon_s;
    const double n0 = gaussian_sequence(0.2, 11, 1).front();
    const NonlinearResult noisy = simulate_nonlinear(plant, pid, wide, opt, 1.0, 0.02);
    opt.noise_rms = 0.0;
    const NonlinearResult shifted = simulate_nonlinear(plant, pid, wide, opt, 1.0 - n0, 0.02);
    REQUIRE(noisy.status == NonlinearStatus::ok);
    REQUIRE(shifted.status == NonlinearStatus::ok);
    CHECK(max_difference(noisy.output, shifted.output) < 1e-7);
    CHECK(max_difference(noisy.control, shifted.control) < 1e-6);
  }

  for (double ts : {0.0, 0.05}) {
    SECTION("superposition: the noise response adds to the step response, sample time " + std::to_string(ts)) {
      // The loop is linear with wide limits: y(2r, n) − y(r, n) = y(r, 0), the noise being the
      // same sequence in both runs (same seed).
      opt.sample_time_s = ts;
      const NonlinearResult base = simulate_nonlinear(plant, pid, wide, opt, 1.0, 0.02);
      opt.noise_rms = 0.05;
      opt.noise_seed = 3;
      opt.noise_period_s = 0.05;
      const NonlinearResult one = simulate_nonlinear(plant, pid, wide, opt, 1.0, 0.02);
      const NonlinearResult two = simulate_nonlinear(plant, pid, wide, opt, 2.0, 0.02);
      REQUIRE(one.status == NonlinearStatus::ok);
      REQUIRE(two.status == NonlinearStatus::ok);
      std::vector<double> diff(one.output.size());
      for (std::size_t k = 0; k < diff.size(); ++k) diff[k] = two.output[k] - one.output[k];
      CHECK(max_difference(diff, base.output) < 1e-7);
      CHECK(max_difference(one.output, base.output) > 1e-3);  // the noise does reach the plant
      // The derivative acts on the noise: each new value kicks u by about (Kp + Kd/Tf)·Δn.
      CHECK(max_difference(one.control, base.control) > 0.05);
    }
  }

  SECTION("bad noise settings are rejected, naming the field") {
    opt.noise_rms = -1.0;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, pid, wide, opt, 1.0, 0.02), Catch::Contains("noise_rms"));
    opt.noise_rms = 0.1;
    opt.noise_period_s = 1e-9;
    CHECK_THROWS_WITH(simulate_nonlinear(plant, pid, wide, opt, 1.0, 0.02), Catch::Contains("noise_period_s"));
  }
}

TEST_CASE("a stiff loop is integrated implicitly, and both steppers agree", "[stiff]") {
  // A lag at 1 rad/s behind a fast sensor/actuator lag at 2·10⁴ rad/s: 1/((s + 1)(s/2e4 + 1)).
  const StateSpace stiff = plant_of({2e4}, {1.0, 20001.0, 2e4});
  const Controller pi = make_controller(Structure::pi, {2.0, 1.5}, 10.0);
  ActuatorModel act;
  act.min = -1.5;
  act.max = 1.5;
  LoopOptions opt;
  opt.horizon_s = 8.0;
  opt.anti_windup = AntiWindup::back_calculation;
  // The automatic choice and a forced dopri5 run on the same loop.
  auto both = [&](LoopOptions o) {
    o.stepper.reset();
    const NonlinearResult chosen = simulate_nonlinear(stiff, pi, act, o, 1.0, 0.02);
    o.stepper = NonlinearStepper::dopri5;
    const NonlinearResult explicit_run = simulate_nonlinear(stiff, pi, act, o, 1.0, 0.02);
    REQUIRE(chosen.status == NonlinearStatus::ok);
    REQUIRE(explicit_run.status == NonlinearStatus::ok);
    CHECK(chosen.stepper == NonlinearStepper::rosenbrock4);
    // Both at rtol 1e-8: the outputs agree far below any metric's resolution.
    CHECK(max_difference(chosen.output, explicit_run.output) < 1e-5);
    return std::pair{chosen, explicit_run};
  };
  const auto [automatic, explicit_run] = both(opt);
  CHECK(automatic.explicit_steps_estimate > kStiffStepThreshold);
  CHECK(automatic.saturated_fraction > 0.0);
  CHECK_THAT(automatic.metrics.overshoot_pct, WithinAbs(explicit_run.metrics.overshoot_pct, 1e-3));
  CHECK_THAT(automatic.saturated_fraction, WithinAbs(explicit_run.saturated_fraction, 1e-4));
  // The point of the choice: the explicit stepper is held to h ≲ 3.3/ρ by stability.
  CHECK(automatic.steps * 10 < explicit_run.steps);

  SECTION("with a transport delay (∂f/∂t through the delayed input)") {
    opt.delay_s = 0.05;
    opt.horizon_s = 10.0;
    both(opt);
  }

  SECTION("with a sampled controller (the plant between the hold's switches)") {
    opt.sample_time_s = 0.01;
    const auto [implicit_sampled, explicit_sampled] = both(opt);
    CHECK(implicit_sampled.steps < explicit_sampled.steps);
  }

  SECTION("a loop that is not stiff stays explicit") {
    opt.stepper.reset();
    const NonlinearResult r = simulate_nonlinear(lag_plant(), pi, act, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    CHECK(r.stepper == NonlinearStepper::dopri5);
    CHECK(r.explicit_steps_estimate < kStiffStepThreshold);
  }
}

TEST_CASE("rate-limited time and command excess are measured", "[nonlinear]") {
  const StateSpace plant = lag_plant();
  const Controller pi = make_controller(Structure::pi, {3.0, 1.5}, 10.0);
  ActuatorModel act;
  act.min = -1.3;
  act.max = 1.3;
  LoopOptions opt;
  opt.horizon_s = 30.0;
  opt.anti_windup = AntiWindup::none;
  const NonlinearResult none = simulate_nonlinear(plant, pi, act, opt, 1.0, 0.02);
  opt.anti_windup = AntiWindup::conditional_integration;
  const NonlinearResult clamped = simulate_nonlinear(plant, pi, act, opt, 1.0, 0.02);
  REQUIRE(none.status == NonlinearStatus::ok);
  REQUIRE(clamped.status == NonlinearStatus::ok);
  // u_c(0+) = Kp·r = 3 against a limit of 1.3: at least 1.7 beyond it. Without anti-windup the
  // integrator adds to that while saturated; clamping stops it (the property, not a number).
  CHECK(none.command_excess_max >= 1.7 - 1e-9);
  CHECK(clamped.command_excess_max >= 1.7 - 1e-9);
  CHECK(none.command_excess_max > clamped.command_excess_max);
  CHECK(none.rate_limited_fraction == 0.0);

  act.rate_max = 0.5;
  for (double ts : {0.0, 0.1}) {
    opt.sample_time_s = ts;
    const NonlinearResult slewing = simulate_nonlinear(plant, pi, act, opt, 1.0, 0.02);
    REQUIRE(slewing.status == NonlinearStatus::ok);
    // The applied u starts at 0 and must slew at 0.5/s to the limit 1.3: at least 2.6 s.
    CHECK(slewing.rate_limited_fraction * opt.horizon_s >= 2.6 - 1e-6);
    CHECK(slewing.rate_limited_fraction < 1.0);
  }
}

TEST_CASE("a failed confirmation names the effect that caused it", "[confirmation]") {
  SECTION("windup: without the limits the overshoot is met again") {
    const Problem p = problem_from(
        "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -0.9\nmax = 0.9\n"
        "[controller]\nstructure = \"pi\"\nanti_windup = \"none\"\n"
        "[requirements]\novershoot_max_pct = 10.0\n");
    const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {2.0, 0.8}, 10.0));
    REQUIRE(d.nonlinear);
    REQUIRE_FALSE(d.nonlinear->confirmed);
    REQUIRE(d.nonlinear->attribution.size() == 1);  // saturation is the only effect in the loop
    const CauseTrial& t = d.nonlinear->attribution.front();
    CHECK(t.factor == "saturation");
    CHECK(t.restores);
    REQUIRE(t.checks.size() == 1);
    CHECK(t.checks.front().requirement.key == "overshoot_max_pct");
    CHECK(d.nonlinear->verdict.find("restored by taking out saturation") != std::string::npos);
    CHECK(d.nonlinear->command_excess_max > 0.0);
  }
  SECTION("a large step on an expression plant: its nonlinearity, not its limits, costs the overshoot") {
    // An invented tank with square-root outflow and a pump lag, asked for 0.9 m above its 1 m
    // operating level (the linearization holds for small steps only); the limits are far away.
    const Problem p = problem_from(
        "[plant.nonlinear]\nstates = [\"level\", \"flow\"]\n"
        "derivatives = [\"(flow - orifice*sqrt(level))/area\", \"(pump_flow*u - flow)/spin_up\"]\n"
        "output = \"level\"\nparameters = { area = 0.25, orifice = 0.006, pump_flow = 0.012, spin_up = 6.0 }\n"
        "[plant.nonlinear.operating_point]\nlevel = 0.8\nflow = 0.005\nu = 0.5\n"
        "[actuator]\nmin = -20.0\nmax = 20.0\n[controller]\nstructure = \"pi\"\n"
        "[requirements]\novershoot_max_pct = 10.5\n[reference]\namplitude = 0.9\n");
    const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {2.484, 0.012}, 10.0));
    REQUIRE(d.checks.front().met);  // about 10.0 % on the linearization
    REQUIRE(d.nonlinear);
    REQUIRE_FALSE(d.nonlinear->confirmed);  // about 11.8 % on the expressions
    REQUIRE(d.nonlinear->attribution.size() == 1);
    CHECK(d.nonlinear->attribution.front().factor == "plant nonlinearity");
    CHECK(d.nonlinear->attribution.front().restores);
  }
  SECTION("a load step and noise: only the load step explains the settling miss") {
    const Problem p = problem_from(
        "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -50.0\nmax = 50.0\n"
        "[controller]\nstructure = \"pi\"\n[requirements]\novershoot_max_pct = 10.0\nsettling_time_max = 20.0\n"
        "[disturbance]\ntime = 15.0\nsize = 0.5\nnoise_rms = 0.0005\nseed = 4\n");
    const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {1.2, 0.6}, 10.0));
    REQUIRE(d.checks.back().met);  // the linear loop settles in time
    REQUIRE(d.nonlinear);
    REQUIRE_FALSE(d.nonlinear->confirmed);  // the load step at 15 s upsets the band after it
    std::vector<std::string> factors;
    for (const CauseTrial& t : d.nonlinear->attribution) {
      factors.push_back(t.factor);
      if (t.factor == "load step") CHECK(t.restores);
      if (t.factor == "measurement noise") CHECK_FALSE(t.restores);
    }
    CHECK(factors == std::vector<std::string>{"load step", "measurement noise"});
  }
}
