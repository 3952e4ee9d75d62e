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

}  // namespace specloop::nonlinear_loop
