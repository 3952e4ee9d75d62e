// The spec's nonlinear loop as the design layer runs it: its setup from the problem and the
// linear loop's time grid, one run of a controller through it, and the run repeated with a longer
// horizon until the response settles (the confirmation, the search's nonlinear stage and the
// report's traces all run it this way).
#pragma once

#include "specloop/core/compensator.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/sim/nonlinear.hpp"
#include "specloop/sim/response.hpp"

namespace specloop {

/// The spec's nonlinear loop: actuator, anti-windup, weights, disturbance, delay, sampling; the
/// horizon from the linear loop's (stretched by a disturbance and the delay), `samples` outputs.
struct NonlinearSetup {
  ActuatorModel actuator;
  LoopOptions options;
  bool delay_approximant = false;  // the delay as the linear loop has it (Padé), not exact (attribution)
  double fine_step_s = 0.0;        // > 0: also sample at this step on [0, fine_until_s] (see LinearGrid)
  double fine_until_s = 0.0;
};
NonlinearSetup nonlinear_setup(const Problem& problem, double linear_horizon_s, int samples);

/// What the linear loop's time grid knew about the response's time scales: its horizon and, when
/// its first segment is much finer than the rest (fast modes alive at the start, e.g. a stiff
/// loop), that segment's step and extent.
struct LinearGrid {
  double horizon_s = 0.0;
  double fine_step_s = 0.0;   // 0: one uniform resolution is enough
  double fine_until_s = 0.0;
  double load_horizon_s = 0.0;  // the load response's horizon (Problem::needs_load; 0: none): a load
                                // step gets at least this long to settle on the nonlinear loop
};
/// The linear grid of the last call of either simulator.
LinearGrid linear_grid_of(const TimeGrid& grid);
/// nonlinear_setup on that grid: the output samples are the uniform ones plus, when the grid's
/// first segment is more than 4× finer than them, that segment's (so that a fast start is
/// measured, not stepped over), and the integrator's first step is at most the fine step.
NonlinearSetup nonlinear_setup(const Problem& problem, const LinearGrid& grid, int samples);
/// Fills setup.options.sample_times_s for its horizon and output step (and fine segment).
void set_output_times(NonlinearSetup& setup);
/// The step of the spec's reference through that loop with `controller` (the spec's plant).
NonlinearResult simulate_on_nonlinear_loop(const Problem& problem, const Controller& controller, const NonlinearSetup& setup);
/// Output samples of the confirmation run (and of the report's nonlinear traces).
inline constexpr int kConfirmationSamples = 20000;
/// How far the nonlinear run's horizon may be extended (a multiple of the starting horizon).
inline constexpr double kMaxHorizonFactor = 16.0;

/// A nonlinear run long enough to see the response settle.
struct SettledRun {
  NonlinearResult result;
  NonlinearSetup setup;     // as finally run (its horizon)
  int extensions = 0;       // horizon doublings
  bool bound_hit = false;   // still not settled at max_factor × the starting horizon
};
/// Runs `setup`; while the response is not settled — it must stay within the band for the last
/// fifth of the time since the last excitation (the step, or the load step) — doubles the horizon
/// (the output step kept, up to 4× the samples) and runs again, up to `max_factor` × the starting
/// horizon. A run that stops (status) or cannot be measured is returned as it is. `wall_cap_s`
/// bounds the wall time of all runs together (the last one's status says when it was reached).
SettledRun simulate_until_settled(const Problem& problem, const Controller& controller, const NonlinearSetup& setup,
                                  double max_factor, double wall_cap_s = 60.0);

}  // namespace specloop
