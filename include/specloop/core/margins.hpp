// Loop frequency-response margins of L(s) = C(s)·G(s), found exactly as roots of polynomials in ω²
// rather than on a frequency grid: gain and phase margins with their crossover frequencies, the
// sensitivity peak Ms = max |1/(1 + L(jω))|, and the delay margin.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/lti.hpp"

namespace specloop {

struct Margins {
  /// The gain margins, from the closed loop (README, "Margins"): with the loop gain multiplied by
  /// K, the smallest K > 1 at which a closed-loop pole crosses the imaginary axis, 20·log10(K) dB
  /// (> 0), and the frequency of the crossing (0: at s = 0; +∞: through infinity, a biproper
  /// loop); empty when no K > 1 destabilizes (infinite gain margin). For the usual loop this is
  /// 1/|L| at the phase crossover (∠L = −180°) nearest to instability.
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
  /// The largest K < 1 at which a closed-loop pole crosses the imaginary axis, 20·log10(K) dB
  /// (< 0: how far the gain may DROP before a conditionally stable loop turns unstable), and the
  /// frequency of the crossing (0: at s = 0); empty for the usual loop that stays stable at any
  /// lower gain. Both margins are the ends of stable_gain_set's range that contains K = 1.
  std::optional<double> lower_gain_margin_db;
  std::optional<double> lower_phase_crossover_rad_s;
  /// Filled by add_closed_loop_peaks only (empty otherwise): Mt = max over ω ≥ 0 of |T(jω)|,
  /// T = L/(1 + L), and max over ω ≥ 0 of |C(jω)·S(jω)| = |C/(1 + C·G)| — how much measurement
  /// noise reaches the controller's output u, input units per output unit — each with where it
  /// occurs (+∞ when at ω → ∞).
  std::optional<double> complementary_peak, complementary_peak_rad_s;
  std::optional<double> noise_gain, noise_gain_rad_s;
};

/// Margins of a loop whose closed loop is stable (the margins of an unstable loop are not
/// meaningful and the caller should report the instability instead: both gain margins are then
/// empty).
Margins loop_margins(const TransferFunction& loop);
/// Ms alone: loop_margins(loop) with only sensitivity_peak and its frequency filled (the same
/// numbers, bit for bit), for the search's evaluation when nothing else of the margins is read.
Margins sensitivity_margins(const TransferFunction& loop);
/// Fills m's complementary peak and noise gain for the loop of `controller` and `plant` (which
/// loop_margins(controller·plant) cannot tell apart), exactly, from the stationary points of the
/// squared magnitudes in ω² and the ends ω = 0 and ω → ∞.
void add_closed_loop_peaks(Margins& m, const TransferFunction& controller, const TransferFunction& plant);

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

/// An angle in degrees wrapped to (−180, 180].
double wrap_degrees(double degrees);

/// |P(jω)|² as a polynomial in x = ω² (highest power first).
Polynomial squared_magnitude_in_w2(const Polynomial& p);

}  // namespace specloop
