// Loop frequency-response margins of L(s) = C(s)·G(s), found exactly as roots of polynomials in ω²
// rather than on a frequency grid: gain and phase margins with their crossover frequencies, the
// sensitivity peak Ms = max |1/(1 + L(jω))|, and the delay margin.
#pragma once

#include <optional>

#include "specloop/lti.hpp"

namespace specloop {

struct Margins {
  /// 20·log10(1/|L(jω_pc)|) at the phase crossover (∠L = −180°) with the smallest margin;
  /// empty when the phase never crosses −180° (infinite gain margin).
  std::optional<double> gain_margin_db;
  std::optional<double> phase_crossover_rad_s;
  /// 180° + ∠L(jω_gc) at the gain crossover (|L| = 1) with the smallest margin; empty when |L|
  /// never crosses 1.
  std::optional<double> phase_margin_deg;
  std::optional<double> gain_crossover_rad_s;
  /// Ms = max over ω ≥ 0 of |S(jω)|, S = 1/(1 + L), and where it occurs (∞ when at ω → ∞).
  double sensitivity_peak = 1.0;
  double sensitivity_peak_rad_s = 0.0;
  /// Smallest extra loop delay that destabilizes: min over gain crossovers of PM/ω_gc (s);
  /// empty when there is no gain crossover.
  std::optional<double> delay_margin_s;
};

/// Margins of a loop whose closed loop is stable (the margins of an unstable loop are not
/// meaningful and the caller should report the instability instead).
Margins loop_margins(const TransferFunction& loop);

/// An angle in degrees wrapped to (−180, 180].
double wrap_degrees(double degrees);

/// |P(jω)|² as a polynomial in x = ω² (highest power first).
Polynomial squared_magnitude_in_w2(const Polynomial& p);

}  // namespace specloop
