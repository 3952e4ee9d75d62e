// The verdict is read on the loop the spec describes: which effects count as active (measured),
// when the search ends on the nonlinear loop, the horizon extended until the response settles,
// stiff loops measured truthfully, attribution one at a time and in combination, saturation of a
// sampled controller counted at the sample, and the sampled loop's exact simulation. Plants and
// controllers are invented for the tests; each external fact is cited beside its check (SciPy
// comparisons of the same cases are in tests/check_scipy_sampled.py and tests/check_verdict.py).
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/design/regulation.hpp"
#include "specloop/sim/nonlinear.hpp"
#include "specloop/sim/sampled_loop.hpp"

using namespace specloop;
using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {

Problem problem_from(const std::string& text) {
  const Spec spec = parse_spec(text, "<test>");
  return make_problem(spec, characterize(spec));
}

StateSpace plant_of(std::vector<double> num, std::vector<double> den) {
  return realize(TransferFunction(Polynomial(std::move(num)), Polynomial(std::move(den))));
}

// An invented winch drive 6/((s + 0.8)(s + 5)) with a PI; `extra` adds sections or keys.
std::string winch(const std::string& actuator, const std::string& controller_keys, const std::string& extra) {
  return "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n" + actuator + "[controller]\nstructure = \"pi\"\n" +
         controller_keys + "[requirements]\novershoot_max_pct = 10.0\n" + extra;
}

std::vector<std::string> active_for(const std::string& text, std::vector<double> series = {2.0, 0.8}) {
  const Problem p = problem_from(text);
  const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, std::move(series), 10.0));
  REQUIRE(d.nonlinear);
  REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
  return d.nonlinear->active_effects;
}

using Effects = std::vector<std::string>;

}  // namespace

TEST_CASE("active effects are measured on the run, not read off the spec", "[verdict]") {
  // Limits present but never reached: the nonlinear loop is the linear one.
  CHECK(active_for(winch("[actuator]\nmin = -100.0\nmax = 100.0\n", "", "")).empty());
  // The same limits made tight: the command (u(0+) = Kp·r = 2) goes beyond them.
  CHECK(active_for(winch("[actuator]\nmin = -0.9\nmax = 0.9\n", "", "")) == Effects{"actuator_limits"});
  // A rate limit the command's step at t = 0 must slew through (limits far away).
  CHECK(active_for(winch("[actuator]\nmin = -100.0\nmax = 100.0\nrate_max = 5.0\n", "", "")) == Effects{"rate_limit"});
  // Structural effects act whenever present.
  CHECK(active_for(winch("", "sample_time = 0.05\n", "")) == Effects{"sampling"});
  CHECK(active_for("[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\ndelay = 0.05\n[controller]\nstructure = \"pi\"\n"
                   "[requirements]\novershoot_max_pct = 10.0\n") == Effects{"delay"});
  CHECK(active_for(winch("", "", "[disturbance]\ntime = 5.0\nsize = 0.2\n")) == Effects{"load_step"});
  CHECK(active_for(winch("", "", "[disturbance]\nnoise_rms = 0.001\n")) == Effects{"measurement_noise"});
  // An invented tank written as expressions (its linearization is what the linear loop has).
  const std::string tank =
      "[plant.nonlinear]\nstates = [\"level\", \"flow\"]\n"
      "derivatives = [\"(flow - orifice*sqrt(level))/area\", \"(pump_flow*u - flow)/spin_up\"]\n"
      "output = \"level\"\nparameters = { area = 0.25, orifice = 0.006, pump_flow = 0.012, spin_up = 6.0 }\n"
      "[plant.nonlinear.operating_point]\nlevel = 0.8\nflow = 0.005\nu = 0.5\n"
      "[actuator]\nmin = -20.0\nmax = 20.0\n[controller]\nstructure = \"pi\"\n"
      "[requirements]\novershoot_max_pct = 10.5\n[reference]\namplitude = 0.05\n";
  CHECK(active_for(tank, {2.484, 0.012}) == Effects{"plant_nonlinearity"});
}

TEST_CASE("auto runs the nonlinear stage exactly when an effect acts; the verdict is read on the described loop",
          "[verdict][search]") {
  const std::string budget = "[search]\nmax_evaluations = 600\n";  // a nonlinear stage of 60 evaluations
  SECTION("nothing acts: no stage, judged on the linear loop") {
    const DesignRun run = run_design(parse_spec(winch("[actuator]\nmin = -100.0\nmax = 100.0\n", "", budget), "<test>"));
    CHECK(run.search.simulate == "auto");
    CHECK(run.search.active_effects.empty());
    CHECK(run.search.nonlinear_evaluations == 0);
    CHECK_FALSE(run.judged_on_nonlinear);
    CHECK(run.met == run.find(DesignRole::optimized)->meets_all);
  }
  SECTION("the limits act: the stage runs, judged on the nonlinear loop") {
    const DesignRun run = run_design(parse_spec(winch("[actuator]\nmin = -0.9\nmax = 0.9\n", "", budget), "<test>"));
    CHECK(run.search.active_effects == Effects{"actuator_limits"});
    CHECK(run.search.nonlinear_evaluations > 0);
    CHECK(run.search.nonlinear_evaluations <= 60);
    CHECK(run.judged_on_nonlinear);
    const Design* o = run.find(DesignRole::optimized);
    REQUIRE(o->nonlinear);
    CHECK(run.met == (o->nonlinear->status == NonlinearStatus::ok && o->nonlinear->meets_all));
  }
  SECTION("search.simulate = \"nonlinear\" runs the stage with nothing active") {
    const DesignRun run = run_design(parse_spec(
        winch("[actuator]\nmin = -100.0\nmax = 100.0\n", "", "[search]\nmax_evaluations = 600\nsimulate = \"nonlinear\"\n"),
        "<test>"));
    CHECK(run.search.active_effects.empty());
    CHECK(run.search.nonlinear_evaluations > 0);
    CHECK(run.judged_on_nonlinear);
  }
  SECTION("only linear effects act (an exact delay, a load step) and the linear optimum meets everything on both "
          "loops: no stage, still judged on the described loop") {
    const std::string delayed = "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\ndelay = 0.05\n[controller]\nstructure = \"pi\"\n"
                                "[requirements]\novershoot_max_pct = 10.0\n[disturbance]\ntime = 8.0\nsize = 0.2\n" + budget;
    const DesignRun run = run_design(parse_spec(delayed, "<test>"));
    CHECK(run.search.active_effects == Effects{"delay", "load_step"});
    CHECK(run.search.nonlinear_evaluations == 0);
    CHECK_THAT(run.search.nonlinear_stage, Contains("keep the loop linear"));
    CHECK(run.judged_on_nonlinear);
    const Design* o = run.find(DesignRole::optimized);
    REQUIRE(o->nonlinear);
    CHECK(o->meets_all);
    CHECK(o->nonlinear->meets_all);
    CHECK(run.met);
    // Asked for, the stage runs on the same spec.
    const DesignRun forced = run_design(parse_spec(delayed + "simulate = \"nonlinear\"\n", "<test>"));
    CHECK(forced.search.nonlinear_evaluations > 0);
  }
  SECTION("search.simulate = \"linear\" skips the stage but the verdict still reads the described loop") {
    const DesignRun run = run_design(parse_spec(
        winch("[actuator]\nmin = -0.9\nmax = 0.9\n", "", "[search]\nmax_evaluations = 600\nsimulate = \"linear\"\n"),
        "<test>"));
    CHECK(run.search.nonlinear_evaluations == 0);
    CHECK(run.judged_on_nonlinear);
    const Design* o = run.find(DesignRole::optimized);
    CHECK(run.met_on_linear == o->meets_all);
    CHECK(run.met == (o->nonlinear->status == NonlinearStatus::ok && o->nonlinear->meets_all));
  }
}

TEST_CASE("the horizon is extended until the nonlinear response has settled, within a bound", "[verdict][horizon]") {
  // Poles −3, −80, gain 15, ±48 V, P at the 8 % overshoot gain, a step of 2: the command stays
  // saturated for about 0.33 s, longer than the linear loop's horizon (SciPy's solve_ivp gives
  // 0.326 s of saturation and settling at 0.333 s: tests/check_verdict.py).
  const Problem p = problem_from("[plant]\npoles = [-3.0, -80.0]\ngain = 15.0\n[actuator]\nmin = -48.0\nmax = 48.0\n"
                                 "[controller]\nstructure = \"p\"\n[requirements]\novershoot_max_pct = 8.0\n"
                                 "settling_time_max = 0.6\n[reference]\namplitude = 2.0\n");
  const Controller c = make_controller(Structure::p, {276.45}, 10.0);
  StepSimulator sim;
  StepMetrics m;
  REQUIRE(sim.simulate(close_loop(p.plant_realization, realize(c.transfer)), 2.0, 0.02, m) == StepStatus::ok);
  const double linear_horizon = sim.grid().horizon_s();
  REQUIRE(linear_horizon < 0.3);  // shorter than the saturation: the old confirmation's cut
  const NonlinearSetup setup = nonlinear_setup(p, linear_horizon, kConfirmationSamples);
  const SettledRun bounded = simulate_until_settled(p, c, setup, 1.0);
  CHECK(bounded.bound_hit);
  CHECK(bounded.extensions == 0);
  CHECK_FALSE(bounded.result.metrics.settling_time_s);
  const SettledRun run = simulate_until_settled(p, c, setup, kMaxHorizonFactor);
  CHECK_FALSE(run.bound_hit);
  CHECK(run.extensions >= 1);
  REQUIRE(run.result.metrics.settling_time_s);
  CHECK_THAT(*run.result.metrics.settling_time_s, WithinAbs(0.333, 0.002));
  // The design's confirmation uses it, says so, and the requirement is met there.
  const Design d = measure_and_confirm(p, DesignRole::optimized, c);
  REQUIRE(d.nonlinear);
  CHECK(d.nonlinear->confirmed);
  CHECK(d.nonlinear->meets_all);
  CHECK(d.nonlinear->horizon_s > linear_horizon);
  CHECK_FALSE(d.nonlinear->horizon_bound_hit);
  CHECK(std::any_of(d.nonlinear->notes.begin(), d.nonlinear->notes.end(),
                    [](const std::string& n) { return n.find("horizon extended") != std::string::npos; }));
}

TEST_CASE("a stiff loop is measured truthfully on the nonlinear loop and its fragility is said", "[verdict][stiff]") {
  // Poles −0.2 and −1e5 (the widest spread the reader accepts is 1e6), gain 1000, PI.
  const std::string text = "[plant]\npoles = [-0.2, -1e5]\ngain = 1000.0\n[controller]\nstructure = \"pi\"\n"
                           "[requirements]\novershoot_max_pct = 10.0\n";
  const Problem p = problem_from(text);
  SECTION("a slow PI zero: closed-loop time scales from 0.003/s to 1e5/s, integrated implicitly and measured") {
    const Controller c = make_controller(Structure::pi, {10.0, 0.01}, 10.0);
    const Design d = measure_and_confirm(p, DesignRole::optimized, c);
    REQUIRE(d.status == StepStatus::ok);
    REQUIRE(d.nonlinear);
    REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
    CHECK(d.nonlinear->stepper == NonlinearStepper::rosenbrock4);
    // An integrating controller: y∞ = r exactly (final-value theorem); u(0+) = Kp·r (the P kick),
    // below the final command r/G(0) = 20.
    CHECK_THAT(d.nonlinear->simulated.final_value, WithinRel(1.0, 1e-12));
    CHECK_THAT(d.nonlinear->simulated.effort_peak, WithinRel(d.simulated.effort_peak, 1e-4));
    // The slow transient is measured, not stepped over: the same overshoot and settling as the linear loop.
    CHECK_THAT(d.nonlinear->simulated.overshoot_pct, WithinAbs(d.simulated.overshoot_pct, 1e-3));
    REQUIRE(d.nonlinear->simulated.settling_time_s);
    CHECK_THAT(*d.nonlinear->simulated.settling_time_s, WithinRel(*d.simulated.settling_time_s, 1e-2));
    CHECK(d.warnings.empty());
  }
  SECTION("the gains an unbounded search reaches: a delay margin of tens of microseconds, said") {
    // The optimum `design` finds for this spec with no actuator limits and no effort_max.
    const Controller c = make_controller(Structure::pi, {4576009.234177442, 3183.9764968630957}, 10.0);
    const Design d = measure_and_confirm(p, DesignRole::optimized, c);
    REQUIRE(d.nonlinear);
    REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
    CHECK_THAT(d.nonlinear->simulated.final_value, WithinRel(1.0, 1e-12));
    CHECK_THAT(d.nonlinear->simulated.effort_peak, WithinRel(d.simulated.effort_peak, 1e-4));
    REQUIRE(d.warnings.size() >= 2);
    CHECK_THAT(d.warnings[0], Contains("delay margin"));
    CHECK_THAT(d.warnings[1], Contains("its final value"));
    // y∞ comes from the loop's DC gains, not from a rank decision on the closed loop's matrix.
    LoopOptions o;
    o.horizon_s = 1e-3;
    const NonlinearResult r = simulate_nonlinear(p.plant_realization, c, ActuatorModel{}, o, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    CHECK(r.measured);
    CHECK_THAT(r.metrics.final_value, WithinRel(1.0, 1e-12));
  }
}

TEST_CASE("the fragility warnings fire only on their conditions", "[verdict][stiff]") {
  const Problem p = problem_from(winch("[actuator]\nmin = -10.0\nmax = 10.0\n", "", ""));
  const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {2.0, 0.8}, 10.0));
  CHECK(d.warnings.empty());
  Design at_bound = d;
  at_bound.controller = make_controller(Structure::pi, {p.bounds[0].second, 0.8}, 10.0);
  const auto w = fragility_warnings(p, at_bound, true);
  REQUIRE(w.size() == 1);
  CHECK_THAT(w[0], Contains("gain = ") && Contains("upper bound"));
}

TEST_CASE("attribution takes effects out one at a time and in combination", "[verdict][attribution]") {
  SECTION("saturation and the rate limit together, neither alone") {
    // Invented: 40/((s + 2)(s + 10)), PI K = 1.5, zero 2, no anti-windup, ±2.5 and 40/s, a step of
    // 2. Overshoot: 7.03 % linear, 13.8 % with both, 11.7 % rate limit only, 9.6 % limits only.
    const Problem p = problem_from(
        "[plant]\npoles = [-2.0, -10.0]\ngain = 40.0\n[actuator]\nmin = -2.5\nmax = 2.5\nrate_max = 40.0\n"
        "[controller]\nstructure = \"pi\"\nanti_windup = \"none\"\n[requirements]\novershoot_max_pct = 8.0\n"
        "[reference]\namplitude = 2.0\n");
    const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {1.5, 2.0}, 10.0));
    REQUIRE(d.checks.front().met);
    REQUIRE(d.nonlinear);
    REQUIRE_FALSE(d.nonlinear->confirmed);
    const auto& trials = d.nonlinear->attribution;
    REQUIRE(trials.size() == 3);
    CHECK(trials[0].factors == std::vector<std::string>{"saturation"});
    CHECK_FALSE(trials[0].restores);
    CHECK(trials[1].factors == std::vector<std::string>{"rate limit"});
    CHECK_FALSE(trials[1].restores);
    CHECK(trials[2].factors == std::vector<std::string>{"saturation", "rate limit"});
    CHECK(trials[2].factor == "saturation + rate limit");
    CHECK(trials[2].restores);
    CHECK_THAT(trials[2].checks.front().value.value(), WithinAbs(d.simulated.overshoot_pct, 0.01));
    CHECK_THAT(d.nonlinear->verdict, Contains("restored by taking out saturation + rate limit") &&
                                         Contains("not by taking out saturation"));
  }
  SECTION("the conditional integration named beside the limits") {
    // Invented: 40/((s + 2)(s + 10)), PI Kp = 2, Ki = 1, ±48, a step of 60: the integrator is held
    // while saturated and creeps up afterwards. Settling: 5.05 s linear, 5.91 s here, 4.06 s with
    // the integrator free (no anti-windup) — either change restores settling ≤ 5.5 s.
    const Problem p = problem_from(
        "[plant]\npoles = [-2.0, -10.0]\ngain = 40.0\n[actuator]\nmin = -48.0\nmax = 48.0\n"
        "[controller]\nstructure = \"pi\"\n[requirements]\novershoot_max_pct = 10.0\nsettling_time_max = 5.5\n"
        "[reference]\namplitude = 60.0\n");
    const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {2.0, 0.5}, 10.0));
    REQUIRE(d.checks.back().met);
    REQUIRE(d.nonlinear);
    REQUIRE_FALSE(d.nonlinear->confirmed);
    CHECK(d.nonlinear->integrator_held_fraction > 0.0);
    const auto& trials = d.nonlinear->attribution;
    REQUIRE(trials.size() == 2);  // both restore on their own: no combination tried
    CHECK(trials[0].factor == "saturation");
    CHECK(trials[0].restores);
    CHECK(trials[1].factor == "anti-windup");
    CHECK(trials[1].restores);
    CHECK_THAT(d.nonlinear->verdict, Contains("taking out saturation") && Contains("; or anti-windup"));
  }
}

TEST_CASE("a sampled controller's command beyond a limit at one sample is saturation", "[verdict][sampled]") {
  // Invented: 40/((s + 2)(s + 10)), digital PI Kp = 4.78, Ki = 20 at 100 Hz, ±48, a step of 10.
  // At k = 0 the command with its integral increment is 47.8 + 20·0.005·10 = 48.8 (beyond 48);
  // the conditional integration skips the increment, so the command returned is 47.8, inside.
  const StateSpace plant = plant_of({40.0}, {1.0, 12.0, 20.0});
  const Controller c = make_controller(Structure::pi, {4.78, 20.0 / 4.78}, 10.0);
  ActuatorModel act;
  act.min = -48.0;
  act.max = 48.0;
  LoopOptions o;
  o.sample_time_s = 0.01;
  o.horizon_s = 1.0;
  o.output_step_s = 0.01;
  const NonlinearResult r = simulate_nonlinear(plant, c, act, o, 10.0, 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  CHECK_THAT(r.command.front(), WithinRel(47.8, 1e-12));
  CHECK(r.command_excess_max >= 0.8 - 1e-9);  // at k = 0 at least; later samples may reach further
  // Every period whose command lay beyond a limit counts, and here the held ones are the same.
  int held = 0;
  for (double v : r.command) CHECK(std::abs(v) <= 48.0 + 1e-9);
  held = static_cast<int>(std::lround(r.integrator_held_fraction * o.horizon_s / o.sample_time_s));
  CHECK(held >= 1);
  CHECK_THAT(r.saturated_fraction * o.horizon_s / o.sample_time_s, WithinAbs(held, 1e-9));
  CHECK(r.saturated_fraction > 0.0);
}

TEST_CASE("the sampled loop's exact response: a P loop on a first-order plant in closed form", "[verdict][sampled]") {
  // Plant a/(s + a), P gain K, period T, zero-order hold: at the samples
  // x[k+1] = φ·x[k] + (1 − φ)·K·(r − x[k]), φ = e^{−aT} (standard ZOH discretization), so
  // x[k] = y∞·(1 − λ^k), λ = φ − K(1 − φ), y∞ = K/(1 + K)·r. Between samples the output moves
  // monotonically toward K·(r − x[k]), so with λ < 0 the extremes are at samples: the first peak
  // is x[1] = y∞·(1 − λ), the overshoot −λ·100 %.
  const double a = 2.0, k = 3.0, t = 0.3, r = 1.5;
  const double phi = std::exp(-a * t), lambda = phi - k * (1.0 - phi), y_inf = k / (1.0 + k) * r;
  REQUIRE(lambda < 0.0);
  REQUIRE(lambda > -1.0);
  DifferenceEquation eq;
  eq.sample_time_s = t;
  eq.reference_numerator = {k};
  eq.measurement_numerator = {k};
  eq.denominator = {1.0};
  SampledStepSimulator sim;
  StepMetrics m;
  REQUIRE(sim.simulate(plant_of({a}, {1.0, a}), eq, r, 0.02, m) == StepStatus::ok);
  CHECK_THAT(m.final_value, WithinRel(y_inf, 1e-12));
  CHECK_THAT(m.overshoot_pct, WithinAbs(-lambda * 100.0, 1e-9));
  REQUIRE(m.peak_time_s);
  CHECK_THAT(*m.peak_time_s, WithinAbs(t, 1e-9));
  CHECK_THAT(m.effort_peak, WithinRel(k * r, 1e-12));  // u[0] = K·r
  // Settling: the last sample outside the band is the last k with |λ|^k > band; the output
  // leaves the band between it and the next sample, where it crosses the band edge (exactly,
  // from the exponential between samples).
  REQUIRE(m.settling_time_s);
  int last = 0;
  for (int i = 1; i < 100; ++i)
    if (std::pow(std::abs(lambda), i) > 0.02) last = i;
  const double x0 = y_inf * (1.0 - std::pow(lambda, last)), target = k * (r - x0);
  // x(τ) = target + (x0 − target)·e^{−aτ}; the edge on the side x0 is on.
  const double edge = x0 > y_inf ? y_inf * 1.02 : y_inf * 0.98;
  const double tau = -std::log((edge - target) / (x0 - target)) / a;
  // (located on the cubic Hermite interpolant between sub-samples: error O((h·a)⁴), here < 1e-8 s)
  CHECK_THAT(*m.settling_time_s, WithinAbs(last * t + tau, 1e-8));
  // Unstable when |λ| ≥ 1.
  eq.reference_numerator = eq.measurement_numerator = {8.0};
  CHECK(sim.simulate(plant_of({a}, {1.0, a}), eq, r, 0.02, m) == StepStatus::unstable);
  CHECK(sim.instability() > 0.0);
}

TEST_CASE("a short sample period converges to the continuous loop", "[verdict][sampled]") {
  const Spec spec = parse_spec(winch("", "", ""), "<test>");
  const Problem p = make_problem(spec, characterize(spec));
  const Controller c = make_controller(Structure::pi, {2.0, 0.8}, 10.0);
  StepSimulator cont;
  StepMetrics mc;
  REQUIRE(cont.simulate(close_loop(p.plant_realization, realize(c.transfer)), 1.0, 0.02, mc) == StepStatus::ok);
  SampledStepSimulator sim;
  double previous = 1e9;
  for (double ts : {0.04, 0.01, 0.0025}) {
    StepMetrics ms;
    REQUIRE(sim.simulate(p.plant_realization, controller_difference_equation(c, ts, 1.0, 1.0), 1.0, 0.02, ms) ==
            StepStatus::ok);
    // The hold adds about Ts/2 of delay (and Tustin's integral is second order): the overshoot
    // error shrinks at least linearly with Ts, so by at least half for each quarter of it.
    const double error = std::abs(ms.overshoot_pct - mc.overshoot_pct);
    CHECK(error < 0.5 * previous);
    previous = error;
  }
  CHECK(previous < 0.1);
}

TEST_CASE("the sampled loop's load response: exact on a first-order loop, the continuous one as Ts shrinks",
          "[verdict][sampled][load]") {
  // y' = a·(u + d − y) under u[k] = −K·y[k] held over T (invented numbers). At the samples
  // x[k+1] = λ·x[k] + (1 − λp)·d with λp = e^{−aT}, λ = λp − K(1 − λp), so y∞ = d/(1 + K) (the
  // DC gain of G/(1 + K·G), common practice) and y∞ − y[k] = y∞·λ^k. Between samples the held
  // input v = d − K·y[k] gives y(τ) = v + (y[k] − v)·e^{−aτ}; integrating y∞ − y over each period
  // and summing the geometric series: IAE = (d(1 − λp)/a − K·y∞·T)/(1 − λ) while λ ∈ (0, 1).
  const double a = 2.0, t = 0.1, k = 1.5, d = 0.7;
  DifferenceEquation eq;
  eq.sample_time_s = t;
  eq.reference_numerator = {k};
  eq.measurement_numerator = {k};
  eq.denominator = {1.0};
  const double lp = std::exp(-a * t), lambda = lp - k * (1.0 - lp), y_inf = d / (1.0 + k);
  REQUIRE(lambda > 0.0);
  SampledStepSimulator sim;
  StepMetrics m;
  StepTrace trace;
  REQUIRE(sim.simulate_load(plant_of({a}, {1.0, a}), eq, d, 1.0, 0.02, m, &trace) == StepStatus::ok);
  CHECK_THAT(m.final_value, WithinRel(y_inf, 1e-12));
  CHECK_THAT(m.effort_peak, WithinRel(y_inf, 1e-8));  // max |y|: approached from below, at the horizon
  CHECK_THAT(m.iae, WithinRel((d * (1.0 - lp) / a - k * y_inf * t) / (1.0 - lambda), 1e-8));
  // The trace is y itself and starts at rest; the plant's input is u + d.
  REQUIRE(trace.output.size() > 2);
  CHECK(trace.output.front() == 0.0);
  CHECK_THAT(trace.effort.front(), WithinRel(d, 1e-15));

  // A PI on the winch of the tests above: as Ts shrinks the sampled loop's load peak approaches
  // the continuous loop's, the hold's Ts/2 of delay making the error shrink at least linearly (its
  // own accuracy is checked against SciPy in tests/check_scipy_load.py). The IAE hardly moves: a
  // load response that keeps its sign has IAE = ∫y = d/Ki whatever the delay (common practice,
  // Åström–Hägglund), so it stays within rounding of the continuous one.
  const Spec spec = parse_spec(winch("", "", ""), "<test>");
  const Problem p = make_problem(spec, characterize(spec));
  const Controller c = make_controller(Structure::pi, {2.0, 0.8}, 10.0);
  StateSpace loop;
  load_loop_into(p.plant_realization, realize(c.transfer), d, 1.0, loop);
  StepSimulator cont(kLoadGridRules);
  StepMetrics mc;
  REQUIRE(cont.simulate(loop, 1.0, 0.02, mc) == StepStatus::ok);
  double previous = 1e9;
  for (double ts : {0.04, 0.01, 0.0025}) {
    StepMetrics ms;
    REQUIRE(sim.simulate_load(p.plant_realization, controller_difference_equation(c, ts, 1.0, 1.0), d, 1.0, 0.02, ms) ==
            StepStatus::ok);
    CHECK(std::abs(ms.final_value) < 1e-12);  // integral action: no offset
    const double error = std::abs(ms.effort_peak - mc.effort_peak) / mc.effort_peak;
    CHECK(error < 0.5 * previous);
    previous = error;
    CHECK_THAT(ms.iae, WithinRel(mc.iae, 1e-5));
  }
  CHECK(previous < 5e-3);
}

TEST_CASE("a nonlinear loop that cannot be run to its end counts every effect the spec has as active", "[verdict]") {
  // Invented: x' = x² + u − 1 at x = 0 with u = 1 (an integrator when linearized), the input limited
  // to [0, 2]. A step of 2 carries x past 1, where even u = 0 leaves x' = x² − 1 > 0: x escapes to
  // infinity in finite time and the run ends (status not ok), so nothing about the limits can be
  // measured there.
  const std::string escape =
      "[plant.nonlinear]\nstates = [\"x\"]\nderivatives = [\"x*x + u - 1\"]\noutput = \"x\"\n"
      "[plant.nonlinear.operating_point]\nx = 0.0\nu = 1.0\n[actuator]\nmin = 0.0\nmax = 2.0\n"
      "[controller]\nstructure = \"pi\"\n[requirements]\novershoot_max_pct = 10.0\n[reference]\namplitude = 2.0\n"
      "[search]\nmax_evaluations = 200\n";
  const DesignRun run = run_design(parse_spec(escape, "<test>"));
  const Design* best = run.find(DesignRole::optimized);
  REQUIRE(best);
  REQUIRE(best->nonlinear);
  CHECK(best->nonlinear->status != NonlinearStatus::ok);
  CHECK(run.search.active_effects == Effects{"actuator_limits", "plant_nonlinearity"});
  CHECK(run.judged_on_nonlinear);
  CHECK_FALSE(run.met);  // it cannot be confirmed on the loop the spec describes
}

TEST_CASE("a response that never settles on the described loop is said, even with every requirement met", "[verdict]") {
  // Invented: a tank drained through an orifice, h' = u − sqrt(max(h, 0)), at h = 1 with u = 1, the
  // inflow limited to [0, 2]. A step of −1.5 asks for a level of −0.5: the inflow shuts and the
  // tank empties to 0 — no overshoot (met), but the output never arrives.
  const std::string drain =
      "[plant.nonlinear]\nstates = [\"h\"]\nderivatives = [\"u - sqrt(max(h, 0))\"]\noutput = \"h\"\n"
      "[plant.nonlinear.operating_point]\nh = 1.0\nu = 1.0\n[actuator]\nmin = 0.0\nmax = 2.0\n"
      "[controller]\nstructure = \"pi\"\n[requirements]\novershoot_max_pct = 10.0\n[reference]\namplitude = -1.5\n"
      "[search]\nmax_evaluations = 200\n";
  const DesignRun run = run_design(parse_spec(drain, "<test>"));
  const Design* best = run.find(DesignRole::optimized);
  REQUIRE(best);
  REQUIRE(best->nonlinear);
  REQUIRE(best->nonlinear->status == NonlinearStatus::ok);
  CHECK_FALSE(best->nonlinear->simulated.settling_time_s);
  CHECK(std::any_of(best->warnings.begin(), best->warnings.end(),
                    [](const std::string& w) { return w.find("does not settle") != std::string::npos; }));
}

TEST_CASE("a NOT MET reached on the wall-time cap says the search was cut short", "[verdict]") {
  // An overshoot of at most 1 % with a settling time of 0.05 s on a triple lag at 1 rad/s: no PI
  // meets it, and a 1 ms cap stops the global stage long before its budget.
  const std::string plant = "[plant]\npoles = [-1.0, -1.0, -1.0]\ngain = 1.0\n[controller]\nstructure = \"pi\"\n"
                            "[requirements]\novershoot_max_pct = 1.0\nsettling_time_max = 0.05\n";
  const DesignRun capped = run_design(parse_spec(plant + "[search]\nmax_time = 0.001\n", "specs/unit.toml"));
  REQUIRE(capped.infeasibility);
  CHECK(capped.search.time_capped);
  CHECK_THAT(time_cap_advice(capped.search, 0.001), Catch::Matchers::Contains("raise search.max_time"));
  // With a cap far above the budget's need (also in the ~30× slower sanitizer build) the budget
  // ends the search: no advice.
  const DesignRun full = run_design(parse_spec(plant + "[search]\nmax_time = 3600\n", "specs/unit.toml"));
  REQUIRE(full.infeasibility);
  CHECK_FALSE(full.search.time_capped);
  CHECK(time_cap_advice(full.search, 3600.0).empty());
}
