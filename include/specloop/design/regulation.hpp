// What a regulator is judged on (README, "Regulators"): the linear loop's response to a step load
// at the plant input, y_d = G/(1 + C·G)·d, simulated exactly by the step simulator, and the loop's
// closed-loop peaks (noise gain, Mt). Only computed for a spec that requires them, so set-point
// specs cost nothing more.
#pragma once

#include "specloop/core/compensator.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/core/margins.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/sim/response.hpp"

namespace specloop {

/// The load step's size: disturbance.size, or 1 (a unit load) when the spec gives none.
double load_size(const Spec& spec);

/// The regulator's band half-width in output units: settling_band_pct of |reference.amplitude|
/// (README, "Metric definitions": the band the set-point step settles into, fixed by the spec and
/// the same for every design). It is also the offset load_loop_into adds to y for the simulation.
double load_band(const Problem& problem);

/// Copies the load metrics out of `load_run`, a simulation of load_loop_into(…, load_size,
/// |reference.amplitude|) with the problem's band fraction: the peak |y| (its effort peak) always,
/// the IAE and the recovery time (its settling time) when the controller `integrates` (C(s) has a
/// pole at s = 0, so the load's final value is 0); writes them into `m`'s load_* fields.
void take_load_metrics(const StepMetrics& load_run, bool integrates, StepMetrics& m);

/// The load response's time grid: the set point's rules with the slowest mode decayed to 1e-9
/// instead of 1e-4, so that the IAE, an integral to infinity, is not truncated where a limit
/// could tell (at 1e-4 the tail left out was up to 2e-4 of the IAE, seen by SciPy).
inline constexpr TimeGridRules kLoadGridRules{1e-9, 2000, 20000, 0.5};

/// How long the load response takes to settle as the set point's horizon counts it (its slowest
/// mode decayed to 1e-4, TimeGridRules' default), from the horizon of its own grid
/// (kLoadGridRules): what the nonlinear loop gives a load step (LinearGrid::load_horizon_s).
double load_settle_horizon(double load_grid_horizon_s);

/// Simulates the load response of `controller` on the loop with `plant_realization` (the
/// linear loop: the sampled one, through the controller's difference equation, when
/// Problem::sampled) and fills m's load_* fields; `trace`, when given, receives t and y (in
/// `output`, without the offset). Returns the simulation's status (the loop's poles are the
/// set-point loop's, so it is ok whenever that loop was).
/// `horizon_s`, when given, receives load_settle_horizon of the simulation's horizon.
StepStatus measure_load(const Problem& problem, const StateSpace& plant_realization, const Controller& controller,
                        StepMetrics& m, StepTrace* trace = nullptr, double* horizon_s = nullptr);

/// The margins of `controller` on `plant` as every design's measurement computes them: loop_margins
/// of C·G, with the closed-loop peaks when the problem requires one (Problem::needs_peaks).
Margins design_margins(const Problem& problem, const TransferFunction& controller, const TransferFunction& plant);

/// Where a nonlinear run has no load step (disturbance.size = 0) its metrics carry no load
/// response: the load requirements then read the linear loop's (copied from `linear`).
void fill_missing_load(StepMetrics& nonlinear, const StepMetrics& linear);

}  // namespace specloop
