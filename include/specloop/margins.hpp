// Loop frequency-response margins of L(s) = C(s)·G(s), found exactly as roots of polynomials in ω²
// rather than on a frequency grid: gain and phase margins with their crossover frequencies, the
// sensitivity peak Ms = max |1/(1 + L(jω))|, and the delay margin.
#pragma once

#include <optional>
#include <string>
#include <vector>

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
  /// How far (dB) the gain may DROP before a conditionally stable loop turns unstable, and the
  /// frequency where a pole then crosses the axis (0: at s = 0); empty for the usual loop that
  /// stays stable at any lower gain (lower_gain_margin).
  std::optional<double> lower_gain_margin_db;
  std::optional<double> lower_phase_crossover_rad_s;
};

/// Margins of a loop whose closed loop is stable (the margins of an unstable loop are not
/// meaningful and the caller should report the instability instead).
Margins loop_margins(const TransferFunction& loop);

/// The closed loop of K·L (unity negative feedback) for every gain multiplier K > 0: (0, ∞) cut
/// at the gains where a closed-loop pole crosses the imaginary axis — at s = 0 (K = −D(0)/N(0)),
/// at s = ±jω (Im D(jω)·N(−jω) = 0 with K = −D(jω)/N(jω) > 0, a polynomial in ω²), or through
/// infinity (a biproper loop whose leading coefficient vanishes) — each piece classified by the
/// roots of D + K·N at its geometric middle: stable, undamped (poles on the axis, none to the
/// right: a loop L with L(s) = L(−s) keeps its poles in ± pairs for every K), or unstable.
struct StableGainSet {
  enum class State { stable, undamped, unstable };
  struct Range {
    double low = 0.0, high = 0.0;  // open interval of K; high may be +∞
    double low_frequency = 0.0;    // rad/s where a pole crosses the axis at K = low (0: at s = 0)
    double high_frequency = 0.0;   // … at K = high
    State state = State::unstable;
  };
  std::vector<Range> ranges;       // increasing, covering (0, ∞), neighbours in different states
  /// The stable range containing K, if any.
  const Range* stable_at(double k) const;
  bool never_stable() const;
  /// In words, for the gains action·K (action ±1: direct or reverse): "stable for every K > 0",
  /// "stable for K in (0.5, 12.3)", "unstable for every K < 0", "undamped …".
  std::string text(double action, const std::string& symbol = "K") const;
};
StableGainSet stable_gain_set(const TransferFunction& loop);

/// The lower gain margin of a stable loop: how far (dB, > 0) the loop gain may drop before the
/// closed loop turns unstable, and where a pole then crosses the axis; empty when any smaller
/// gain keeps it stable (the usual case). A conditionally stable loop has one.
struct LowerGainMargin {
  double db = 0.0;
  double frequency_rad_s = 0.0;
};
std::optional<LowerGainMargin> lower_gain_margin(const TransferFunction& loop);

/// An angle in degrees wrapped to (−180, 180].
double wrap_degrees(double degrees);

/// |P(jω)|² as a polynomial in x = ω² (highest power first).
Polynomial squared_magnitude_in_w2(const Polynomial& p);

}  // namespace specloop
