// The spec's nonlinear loop as the design layer runs it (nonlinear_loop.hpp): its setup, one run,
// and the run extended until the response settles.
#include "specloop/design/nonlinear_loop.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>

#include "specloop/sim/expression_plant.hpp"

namespace specloop {

namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
}  // namespace

NonlinearSetup nonlinear_setup(const Problem& problem, double linear_horizon_s, int samples) {
  const Spec& spec = problem.spec;
  NonlinearSetup setup;
  // A nonlinear plant runs in deviation variables around its operating point: the spec's absolute
  // actuator limits become deviations from u0 (the spec parser checked that they bracket u0).
  const double u0 = spec.plant.nonlinear ? spec.plant.nonlinear->input : 0.0;
  if (spec.actuator.limited) {
    setup.actuator.min = spec.actuator.min - u0;
    setup.actuator.max = spec.actuator.max - u0;
  }
  setup.actuator.rate_max = spec.actuator.rate_max;
  LoopOptions& options = setup.options;
  if (spec.plant.nonlinear) options.plant_model = spec.plant.nonlinear->model;
  options.anti_windup = spec.controller.anti_windup;
  options.setpoint_weight = spec.controller.setpoint_weight;
  options.derivative_weight = spec.controller.derivative_on_measurement ? 0.0 : 1.0;
  options.tracking_time_s = spec.controller.tracking_time_s;
  options.disturbance_time_s = spec.disturbance.time_s;
  options.disturbance_size = spec.disturbance.size;
  options.measure_load = problem.needs_load;
  options.load_band = problem.band_fraction * std::abs(spec.reference.amplitude);
  options.noise_rms = spec.disturbance.noise_rms;
  options.noise_period_s = spec.disturbance.noise_period_s;
  options.noise_seed = spec.disturbance.noise_seed;
  // The linear horizon, stretched so that a disturbance has as long to settle as the step had,
  // and by the delay.
  options.horizon_s = linear_horizon_s;
  if (spec.disturbance.size != 0.0) options.horizon_s = spec.disturbance.time_s + linear_horizon_s;
  options.delay_s = spec.plant.delay_s;
  options.sample_time_s = spec.controller.sample_time_s;
  options.horizon_s += spec.plant.delay_s;
  options.output_step_s = options.horizon_s / samples;
  return setup;
}

NonlinearResult simulate_on_nonlinear_loop(const Problem& problem, const Controller& controller, const NonlinearSetup& setup) {
  const StateSpace& plant = setup.delay_approximant ? problem.plant_realization : problem.delay_free_realization;
  if (controller.setpoint_weight) {
    // A searched set-point weight (search.tune_setpoint_weight) replaces the spec's.
    LoopOptions options = setup.options;
    options.setpoint_weight = *controller.setpoint_weight;
    return simulate_nonlinear(plant, controller, setup.actuator, options, problem.spec.reference.amplitude,
                              problem.band_fraction);
  }
  return simulate_nonlinear(plant, controller, setup.actuator, setup.options, problem.spec.reference.amplitude,
                            problem.band_fraction);
}

LinearGrid linear_grid_of(const TimeGrid& grid) {
  LinearGrid g;
  g.horizon_s = grid.horizon_s();
  if (grid.coarse_intervals > 0) {
    g.fine_step_s = grid.step_s;
    g.fine_until_s = grid.step_s * grid.fine_intervals;
  }
  return g;
}

void set_output_times(NonlinearSetup& setup) {
  LoopOptions& o = setup.options;
  o.sample_times_s.clear();
  if (!(setup.fine_step_s > 0.0) || !(o.output_step_s > 4.0 * setup.fine_step_s)) return;
  const double horizon = o.horizon_s;
  const double count = std::ceil(horizon / o.output_step_s - 1e-9);
  const auto uniform = static_cast<long>(count);
  const double until = std::min(setup.fine_until_s, horizon);
  const auto fine = static_cast<long>(std::floor(until / setup.fine_step_s + 1e-9));
  o.sample_times_s.reserve(static_cast<std::size_t>(uniform + fine + 2));
  long i = 0, j = 0;
  while (i <= uniform || j <= fine) {
    const double a = i <= uniform ? horizon * static_cast<double>(i) / static_cast<double>(uniform) : kInf;
    const double b = j <= fine ? setup.fine_step_s * static_cast<double>(j) : kInf;
    const double next = std::min(a, b);
    if (a == next) ++i;
    if (b == next) ++j;
    if (next > horizon) continue;
    if (!o.sample_times_s.empty() && next <= o.sample_times_s.back() * (1.0 + 1e-12)) continue;
    o.sample_times_s.push_back(next);
  }
  if (o.sample_times_s.back() < horizon) o.sample_times_s.push_back(horizon);
}

NonlinearSetup nonlinear_setup(const Problem& problem, const LinearGrid& grid, int samples) {
  // The load response can be slower than the set point's (a mode the set point's zero nearly
  // cancels is all there after a load): after the load step the run lasts the longer of the two.
  const double horizon =
      problem.spec.disturbance.size != 0.0 ? std::max(grid.horizon_s, grid.load_horizon_s) : grid.horizon_s;
  NonlinearSetup setup = nonlinear_setup(problem, horizon, samples);
  if (grid.fine_step_s > 0.0 && setup.options.output_step_s > 4.0 * grid.fine_step_s) {
    setup.fine_step_s = grid.fine_step_s;
    setup.fine_until_s = grid.fine_until_s;
    setup.options.first_step_s = grid.fine_step_s;
    set_output_times(setup);
  }
  return setup;
}

namespace {
// Settled: within the band for at least the last fifth of the time since the last excitation.
bool settled_in(const NonlinearResult& r, const NonlinearSetup& setup) {
  if (r.status != NonlinearStatus::ok || !r.measured) return true;  // nothing a longer run would change
  const double horizon = setup.options.horizon_s;
  const LoopOptions& o = setup.options;
  const double since = o.disturbance_size != 0.0 && o.disturbance_time_s < horizon ? o.disturbance_time_s : 0.0;
  return r.metrics.settling_time_s && horizon - *r.metrics.settling_time_s >= 0.2 * (horizon - since);
}
}  // namespace

SettledRun simulate_until_settled(const Problem& problem, const Controller& controller, const NonlinearSetup& setup,
                                  double max_factor, double wall_cap_s) {
  const auto started = std::chrono::steady_clock::now();
  const double start_horizon = setup.options.horizon_s;
  const double start_step = setup.options.output_step_s;
  const double start_samples = start_step > 0.0 ? start_horizon / start_step : 4000.0;
  SettledRun run;
  run.setup = setup;
  for (;;) {
    const double spent = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
    run.setup.options.max_wall_time_s = std::max(1e-3, std::min(setup.options.max_wall_time_s, wall_cap_s - spent));
    run.result = simulate_on_nonlinear_loop(problem, controller, run.setup);
    if (settled_in(run.result, run.setup)) return run;
    if (run.setup.options.horizon_s * 2.0 > start_horizon * max_factor * (1.0 + 1e-12)) {
      run.bound_hit = true;
      return run;
    }
    ++run.extensions;
    run.setup.options.horizon_s *= 2.0;
    // The same output step while the samples grow to 4×; then the same count.
    const double samples = std::min(4.0 * start_samples, run.setup.options.horizon_s / start_step);
    run.setup.options.output_step_s = run.setup.options.horizon_s / std::ceil(samples);
    set_output_times(run.setup);
  }
}

}  // namespace specloop
