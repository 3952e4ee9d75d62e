// StepMetrics of the nonlinear loop from its output samples (private to the sim layer;
// sample_metrics.cpp), with y∞ given.
#pragma once

#include <utility>
#include <vector>

#include "specloop/sim/response.hpp"

namespace specloop::nonlinear_loop {

/// The metrics (README.md, "Metric definitions") of the samples t, y, u, relative to y∞ = y_inf,
/// for a step of `amplitude` and a settling band of `band` (a fraction). `exact`: y at times the
/// integrator located (step ends, switches, restarts, y' = 0 inside a step), merged with the
/// samples for the extrema; when empty, extrema between samples come from the parabola through the
/// three samples around each sample extremum that could matter. A hump that leaves the band
/// between two samples inside it comes from that parabola either way; crossings are linearly
/// interpolated, integrals use the trapezoid rule.
StepMetrics metrics_from_samples(const std::vector<double>& t, const std::vector<double>& y, const std::vector<double>& u,
                                 double y_inf, double amplitude, double band,
                                 const std::vector<std::pair<double, double>>& exact);

/// The load response read from samples after the load step at `from_s` (README, "Regulators"; y:
/// the load's effect on the output, y_inf = 0): e = y − y_inf; load_peak = max |e| over the samples and `exact` points at or
/// after from_s; with `settles` (integral action) also load_iae = ∫|e| dt from from_s (trapezoid,
/// each interval split where e changes sign, the first from e(from_s) linearly interpolated) and
/// load_recovery_time_s, the last exit of |e| from `band` (output units; linearly interpolated)
/// minus from_s — 0 when |e| never leaves it, empty when it is outside at the last sample.
void add_load_metrics(const std::vector<double>& t, const std::vector<double>& y, double y_inf, double from_s,
                      double band, bool settles, const std::vector<std::pair<double, double>>& exact, StepMetrics& m);

}  // namespace specloop::nonlinear_loop
