// Benchmark (not a test): the nonlinear confirmation of one demo design. Runs the design pipeline
// once on a spec, takes the optimized design (the classical one when there is none), rebuilds
// the ActuatorModel and LoopOptions exactly as the pipeline's confirmation step does (design.cpp,
// confirm_nonlinear: the linear loop's horizon, 20000 output samples, the spec's limits, rate limit,
// anti-windup, weights, disturbance, delay) and times simulate_nonlinear alone, many repetitions.
// Prints median/p10/p90 in ms, the accepted steps and located switches. With --dump FILE, writes
// the loop description and the sampled output as JSON (read by bench/scipy_confirm.py).
//
// With --stepper-sweep: the stiffness sweep below instead (dopri5 against Rosenbrock).
//
// Usage: specloop_bench_confirm [spec.toml] [--repeats N] [--dump FILE] [--stepper-sweep]
#include <algorithm>
#include <chrono>
#include <cstring>
#include <fmt/format.h>
#include <fstream>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/sim/response.hpp"

using namespace specloop;

namespace {

constexpr int kSamples = kConfirmationSamples;

double percentile(const std::vector<double>& sorted, double q) {
  const double pos = q * static_cast<double>(sorted.size() - 1);
  const auto i = static_cast<std::size_t>(pos);
  const double f = pos - static_cast<double>(i);
  return i + 1 < sorted.size() ? sorted[i] * (1.0 - f) + sorted[i + 1] * f : sorted[i];
}

nlohmann::json finite_or_null(double v) { return std::isfinite(v) ? nlohmann::json(v) : nlohmann::json(nullptr); }

}  // namespace

// The stiffness sweep behind kStiffStepThreshold: a saturated PI loop on a lag at 1 rad/s behind
// a fast lag at p rad/s, 1/((s + 1)(s/p + 1)), integrated with each stepper; prints the explicit
// step estimate horizon·ρ/3.3 and both medians, so the crossover can be read off one run.
int stepper_sweep(int repeats) {
  const Controller pi = make_controller(Structure::pi, {2.0, 1.5}, 10.0);
  ActuatorModel act;
  act.min = -1.5;
  act.max = 1.5;
  for (double p : {1e2, 1e3, 3e3, 1e4, 3e4, 1e5, 3e5}) {
    const StateSpace plant = realize(TransferFunction(Polynomial({p}), Polynomial({1.0, 1.0 + p, p})));
    LoopOptions opt;
    opt.horizon_s = 8.0;
    opt.output_step_s = opt.horizon_s / kSamples;
    opt.anti_windup = AntiWindup::back_calculation;
    std::string line = fmt::format("stiffness fast_pole {:.0e}", p);
    double medians[2] = {0.0, 0.0};
    for (NonlinearStepper st : {NonlinearStepper::dopri5, NonlinearStepper::rosenbrock4}) {
      opt.stepper = st;
      NonlinearResult r = simulate_nonlinear(plant, pi, act, opt, 1.0, 0.02);
      std::vector<double> ms;
      for (int k = 0; k < repeats; ++k) {
        const auto t0 = std::chrono::steady_clock::now();
        r = simulate_nonlinear(plant, pi, act, opt, 1.0, 0.02);
        ms.push_back(std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - t0).count());
      }
      std::sort(ms.begin(), ms.end());
      medians[st == NonlinearStepper::rosenbrock4] = percentile(ms, 0.5);
      if (st == NonlinearStepper::dopri5) line += fmt::format(" explicit_steps_estimate {:.0f}", r.explicit_steps_estimate);
      line += fmt::format(" {}_ms {:.3f} {}_steps {} {}_status {}", stepper_name(st), percentile(ms, 0.5), stepper_name(st),
                          r.steps, stepper_name(st), status_name(r.status));
    }
    opt.stepper.reset();
    const NonlinearResult chosen = simulate_nonlinear(plant, pi, act, opt, 1.0, 0.02);
    fmt::print("{} faster {} chosen {}\n", line, medians[0] <= medians[1] ? "dopri5" : "rosenbrock4",
               stepper_name(chosen.stepper));
  }
  return 0;
}

int main(int argc, char** argv) {
  std::string spec_path = "specs/conveyor_speed.toml", dump;
  int repeats = 200;
  bool sweep = false;
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--stepper-sweep") == 0) sweep = true;
    else if (std::strcmp(argv[i], "--dump") == 0 && i + 1 < argc) dump = argv[++i];
    else if (std::strcmp(argv[i], "--repeats") == 0 && i + 1 < argc) repeats = std::max(1, std::stoi(argv[++i]));
    else spec_path = argv[i];
  }
  if (sweep) return stepper_sweep(std::min(repeats, 20));
  const Spec spec = load_spec(spec_path);
  const DesignRun run = run_design(spec);
  const Design* d = run.find(DesignRole::optimized);
  if (!d) d = run.find(DesignRole::classical);
  if (!d) {
    fmt::print("confirm {} : no optimized or classical design\n", spec.name);
    return 1;
  }
  const Problem& problem = run.problem;

  // The linear horizon, as measure_design obtains it.
  const ControllerSpec& cs = spec.controller;
  const TransferFunction ref = reference_path(d->controller, cs.setpoint_weight, cs.derivative_on_measurement ? 0.0 : 1.0);
  const StateSpace loop = close_loop(problem.plant_realization, d->controller.transfer, ref);
  StepSimulator sim;
  StepMetrics linear_metrics;
  sim.simulate(loop, spec.reference.amplitude, problem.band_fraction, linear_metrics);
  const double linear_horizon_s = sim.grid().horizon_s();

  // ActuatorModel and LoopOptions, as confirm_nonlinear builds them (for an expression plant:
  // limits as deviations from the operating input, and the plant model itself).
  const NonlinearSetup setup = nonlinear_setup(problem, linear_horizon_s, kSamples);
  const ActuatorModel& actuator = setup.actuator;
  const LoopOptions& options = setup.options;

  const double amplitude = spec.reference.amplitude;
  NonlinearResult r = simulate_on_nonlinear_loop(problem, d->controller, setup);  // warm-up, and the result reported
  std::vector<double> ms;
  ms.reserve(static_cast<std::size_t>(repeats));
  double sink = 0.0;
  for (int k = 0; k < repeats; ++k) {
    const auto t0 = std::chrono::steady_clock::now();
    const NonlinearResult q = simulate_on_nonlinear_loop(problem, d->controller, setup);
    ms.push_back(std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() - t0).count());
    sink += q.output.back();
  }
  std::sort(ms.begin(), ms.end());
  fmt::print(
      "confirm {} design {} status {} median_ms {:.3f} p10_ms {:.3f} p90_ms {:.3f} repeats {} steps {} switches {} "
      "samples {} saturated_fraction {:.4f} horizon_s {:.6g} stepper {} explicit_steps_estimate {:.0f}{}\n",
      spec.name, role_name(d->role), status_name(r.status), percentile(ms, 0.5), percentile(ms, 0.1), percentile(ms, 0.9), repeats,
      r.steps, r.switches, r.output.size(), r.saturated_fraction, options.horizon_s, stepper_name(r.stepper),
      r.explicit_steps_estimate, sink == 0.12345 ? " " : "");

  if (!dump.empty() && spec.plant.nonlinear) {
    // The dump describes a linear plant for bench/scipy_confirm.py; an expression plant's loop is
    // checked against SciPy by tests/check_scipy_nonlinear.py instead.
    fmt::print(stderr, "--dump: {} has an expression plant; not dumped\n", spec.name);
  } else if (!dump.empty()) {
    nlohmann::json j;
    j["spec"] = spec.name;
    j["design"] = std::string(role_name(d->role));
    j["timed_call"] = "simulate_nonlinear as confirm_nonlinear calls it (linear part not timed)";
    j["plant"] = {{"numerator", problem.plant.numerator.coefficients},
                  {"denominator", problem.plant.denominator.coefficients},
                  {"delay_s", spec.plant.delay_s}};
    j["controller"]["structure_series"] = d->controller.series;
    if (d->controller.parallel) {
      const ParallelGains& g = *d->controller.parallel;
      j["controller"]["parallel"] = {{"kp", g.kp}, {"ki", g.ki}, {"kd", g.kd}, {"filter_time", g.filter_time}};
    }
    j["controller"]["numerator"] = d->controller.transfer.numerator.coefficients;
    j["controller"]["denominator"] = d->controller.transfer.denominator.coefficients;
    j["actuator"] = {{"min", finite_or_null(actuator.min)}, {"max", finite_or_null(actuator.max)},
                     {"rate_max", actuator.rate_max ? nlohmann::json(*actuator.rate_max) : nlohmann::json(nullptr)}};
    j["options"] = {{"anti_windup", std::string(anti_windup_name(options.anti_windup))},
                    {"setpoint_weight", options.setpoint_weight},
                    {"derivative_weight", options.derivative_weight},
                    {"disturbance_time_s", options.disturbance_time_s},
                    {"disturbance_size", options.disturbance_size},
                    {"horizon_s", options.horizon_s},
                    {"output_step_s", options.output_step_s},
                    {"sample_time_s", options.sample_time_s},
                    {"relative_tolerance", options.relative_tolerance},
                    {"absolute_tolerance", options.absolute_tolerance}};
    j["samples"] = kSamples;
    j["amplitude"] = amplitude;
    j["result"] = {{"status", std::string(status_name(r.status))},
                   {"median_ms", percentile(ms, 0.5)},
                   {"steps", r.steps},
                   {"switches", r.switches},
                   {"saturated_fraction", r.saturated_fraction},
                   {"time_s", r.time_s},
                   {"output", r.output},
                   {"control", r.control}};
    std::ofstream(dump) << j.dump() << '\n';
  }
  return 0;
}
