// The sampled loop's step metrics on the continuous output between the samples (private to the
// sim layer; sampled_metrics.cpp): the cubic Hermite interpolant of the exact values and slopes.
#pragma once

#include <vector>

#include "specloop/sim/response.hpp"

namespace specloop::sampled_step {

/// The recorded output of the sampled loop: sample times, values, and the exact slopes y′ there,
/// the right limit (under the control from that sample on) and the left limit (under the control
/// before it; they differ where u jumps, at a controller sample).
struct OutputSamples {
  const std::vector<double>& t;
  const std::vector<double>& y;
  const std::vector<double>& slope_right;
  const std::vector<double>& slope_left;
};

/// StepMetrics of y relative to y∞ = y_inf with a settling band of `band` (a fraction), on the
/// interpolant (sampled_loop.hpp, "Method"): overshoot, peak times, undershoot, rise time, band
/// entry, settling time, the integrals. final_value, steady_state_error and effort_peak are the
/// caller's.
void measure_interpolant(const OutputSamples& samples, double y_inf, double band, StepMetrics& m);

/// max |y| on the interpolant (the samples and each interval's stationary points).
double peak_magnitude(const OutputSamples& samples);

}  // namespace specloop::sampled_step
