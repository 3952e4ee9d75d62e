// The standard second-order relations used by the hand method (a standard controls text, e.g.
// Ogata, Modern Control Engineering, section on transient response of second-order systems).
#pragma once

#include "specloop/core/polynomial.hpp"

namespace specloop {

/// ζ giving a percent overshoot: ζ = −ln(M)/√(π² + ln²M), M = overshoot/100, overshoot in (0, 100).
double damping_from_overshoot(double overshoot_pct);
/// Percent overshoot of an underdamped pair: 100·exp(−ζπ/√(1 − ζ²)); 0 for ζ >= 1.
double overshoot_from_damping(double zeta);

/// What the second-order approximation predicts from a dominant pole −σ ± jω_d.
struct SecondOrderPrediction {
  double damping_ratio = 0.0;     // ζ = σ/|p|
  double natural_frequency = 0.0; // ω_n = |p|, rad/s
  double overshoot_pct = 0.0;     // from ζ
  double peak_time_s = 0.0;       // π/ω_d
  double settling_time_s = 0.0;   // envelope into the band: −ln(band)/σ (≈ 4/σ for 2 %)
};
/// `pole` is the upper member of the pair (imag > 0); band_fraction e.g. 0.02.
SecondOrderPrediction predict_second_order(Complex pole, double band_fraction);

}  // namespace specloop
