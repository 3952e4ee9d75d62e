// Characterization of the uncompensated (P-only) loop K·G against the overshoot requirement:
// the ζ-line crossings of the root locus, the dominant crossing, the second-order predictions
// beside the simulated response, the reference P gain, and a dominance diagnosis.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/lti.hpp"
#include "specloop/core/margins.hpp"
#include "specloop/sim/response.hpp"
#include "specloop/core/second_order.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

/// Root-locus asymptotes of K·G for K > 0 (standard root-locus rules: centroid
/// (Σp − Σz)/(n − m), angles (2q + 1)·180°/(n − m)).
struct Asymptotes {
  double centroid = 0.0;
  std::vector<double> angles_deg;  // empty when n == m
};
Asymptotes locus_asymptotes(const TransferFunction& g);

/// Real points of the locus (K > 0) where branches meet or leave the real axis: real roots of
/// N·D' − N'·D = 0 (i.e. dK/ds = 0) with K = −D/N > 0.
std::vector<double> locus_breakaway_points(const TransferFunction& g);

/// A gain at which a root-locus branch of K·G crosses the ζ-line (the ray at angle
/// arccos ζ from the negative real axis).
struct LocusCrossing {
  double gain = 0.0;
  Complex pair_pole;                  // the crossing point (upper half plane)
  std::vector<Complex> poles;         // all closed-loop poles at this gain
  bool stable = false;
  double decay_ratio = 0.0;           // slowest other pole's |Re| ÷ the pair's σ (inf: none)
};

/// Every crossing of the ζ-line by K·G, K > 0, in increasing gain. The angle condition
/// ∠G(s) = 180° on s = r·e^{j(π − arccos ζ)} becomes Im(D(s)·conj(N(s))) = 0, a real
/// polynomial in r; its positive roots with K = −D/N > 0 are the crossings.
std::vector<LocusCrossing> damping_line_crossings(const TransferFunction& g, double zeta);

/// The crossing to design at: the lowest-gain stable crossing where no slower mode carries more
/// than 5 % of the step response, else the stable one whose other poles are farthest left
/// relative to the pair; std::nullopt when none is stable. `why` says which rule chose it.
std::optional<std::size_t> dominant_crossing(const TransferFunction& plant,
                                             const std::vector<LocusCrossing>& crossings, std::string& why);

/// One closed-loop mode of the step response y(t) = y∞ + Σ (term of each mode), a conjugate pair
/// counted once (both members together).
///  - share: the term's size, |residue of T(s)/s at the pole| ÷ |y∞| (×2 for a pair: its
///    oscillation amplitude), what decides whether a mode is significant;
///  - contribution: signed, −(the term at t = 0⁺) ÷ y∞ — the part of the final value the mode
///    still has to supply at the start (positive: its term starts below y∞ and decays away). The
///    contributions add up to contribution_total(T) (1 for a strictly proper loop); sizes far
///    above their sum mean modes that cancel one another (cancellation_note).
struct ModeShare {
  Complex pole;
  std::optional<double> share;         // empty for a repeated pole (no simple residue)
  std::optional<double> contribution;  // empty for a repeated pole, unless it is the only one
                                       // without a residue (it then holds the rest of the sum)
};
/// Residue shares and signed contributions of the closed-loop modes of T(s) for a step.
std::vector<ModeShare> mode_shares(const TransferFunction& closed_loop);

/// What the modes' contributions add up to: 1 − y(0⁺)/y∞ (1 unless T has a direct feedthrough).
double contribution_total(const TransferFunction& closed_loop);

/// When the contributions' sizes add up to more than 2× their sum (`total`), one sentence
/// saying that the modes cancel one another; otherwise none.
std::optional<std::string> cancellation_note(const std::vector<ModeShare>& modes, double total);

/// "contributes +66 % of the step's final value" (with the amplitude for a pair), for sentences.
std::string contribution_words(const ModeShare& mode);

struct DominanceDiagnosis {
  bool holds = false;
  std::string verdict;               // one plain sentence
  std::vector<std::string> reasons;  // what breaks it (or why it holds), with numbers
  std::vector<Complex> slow_poles;   // the closed-loop poles named in `reasons` (upper members)
  std::vector<Complex> near_zeros;   // the closed-loop zeros named in `reasons` (upper members)
  std::vector<ModeShare> modes;
  double contribution_sum = 1.0;            // what the modes' contributions add up to (contribution_total)
  std::optional<std::string> cancellation;  // cancellation_note(modes, contribution_sum)
  double overshoot_error_pct = 0.0;  // (simulated − predicted)/predicted·100
  std::optional<double> peak_time_error_pct;
  std::optional<double> settling_time_error_pct;
};

/// Does the second-order approximation from `pair_pole` (upper member of the closed-loop pair)
/// describe the closed loop `t`? Names every other pole slower than 5× the pair's decay that
/// carries more than 5 % of the step response, and every zero within 5× the pair's σ of the
/// imaginary axis with no pole to cancel it; compares the prediction with the simulated metrics
/// (agreement: overshoot and peak time within 10 %).
DominanceDiagnosis diagnose_dominance(const TransferFunction& t, Complex pair_pole, const SecondOrderPrediction& pred,
                                      const StepMetrics& sim);

/// A P gain with its closed-loop poles and simulated step metrics.
struct GainPoint {
  double gain = 0.0;
  std::vector<Complex> poles;
  StepMetrics simulated;
  ErrorConstants constants;   // of the loop K·G
};

struct Characterization {
  /// +1 direct, −1 reverse action (loop_action of the linear plant). Every gain below (crossings,
  /// dominant, reference, the stable set) is computed on the plant with direct action, action·G, and
  /// is a magnitude; the controller gain on the plant as given is action × gain (what analyze prints).
  double action = 1.0;
  StableGainSet p_stability;         // the P gains K > 0 for which K·(action·G) in unity feedback is stable
  double damping_ratio = 0.0;        // from overshoot_max_pct
  double band_fraction = 0.02;
  std::vector<LocusCrossing> crossings;
  std::optional<std::size_t> dominant_index;
  std::string dominant_reason;       // why that crossing (or why none)
  std::optional<GainPoint> dominant;
  std::optional<SecondOrderPrediction> second_order;
  std::optional<GainPoint> reference;
  std::string reference_note;        // why there is no reference, when there is none
  std::optional<DominanceDiagnosis> dominance;
  std::vector<std::string> notes;    // e.g. the plant delay is not part of this analysis
};

/// The plant as the linear computations see it: G(s), times the delay approximant when
/// plant.delay > 0.
TransferFunction linear_plant(const Spec& spec);

/// The plant moved by ±`relative` (1e-6: the project's knife-edge test) in its gain and in each
/// pole (a conjugate pair moves together), 2·(distinct poles + 1) plants. A verdict that one of
/// them turns is on the limit, not met (measure_design); the reference P design aims inside by
/// what they shift its overshoot.
std::vector<TransferFunction> knife_edge_plants(const TransferFunction& plant, double relative = 1e-6);

/// Runs the whole characterization for the spec's plant. Throws SpecError when the spec lacks
/// what this needs (an overshoot limit).
Characterization characterize(const Spec& spec);

/// The P-gain loop K·G measured by exact simulation; std::nullopt when unstable.
std::optional<GainPoint> measure_gain(const TransferFunction& plant, double gain, double amplitude,
                                      double band_fraction, StepSimulator& simulator);

}  // namespace specloop
