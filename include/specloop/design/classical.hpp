// The designs by rule: the root-locus (hand) design at a target dominant pole, and the
// ultimate-gain baseline by the Ziegler–Nichols closed-loop rules.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/design/characterize.hpp"
#include "specloop/design/problem.hpp"

namespace specloop {

// ---- classical design -------------------------------------------------------------------------

/// The desired dominant pole −σ + jω_d from the requirements, and how it was derived.
struct DesiredPole {
  Complex pole;
  std::string derivation;
};
/// ζ from the overshoot limit (0.7071 when there is none, common practice); ω_d from the target
/// peak time (peak_time_ratio × reference peak time, or peak_time_max, the smaller), else σ from
/// settling_time_max; else the P-only dominant crossing's pole.
std::optional<DesiredPole> desired_pole(const Problem& problem, const Characterization& ch);

/// The root-locus design (direct action: give it Problem::normalized_plant, then apply the action
/// with make_controller) of `structure` placing a closed-loop pole at `target` where the
/// structure can (pd, pid, lead, lead-lag: angle condition; lead pole by the bisector rule;
/// PI/lag zero at a tenth of σ), or at the dominant ζ-line crossing of the compensated locus
/// where it cannot (p, pi, lag). Gain from the magnitude condition. `notes` says what was done;
/// when a step cannot be done the result is empty, the last note says why, and `failed_step`
/// (when given) receives the step's name ("angle condition", "lead angle", ...).
std::optional<Controller> classical_controller(const TransferFunction& plant, Structure structure,
                                               double derivative_filter, Complex target, double zeta,
                                               std::optional<double> steady_state_error_max,
                                               std::vector<std::string>& notes, std::string* failed_step = nullptr);

// ---- ultimate-gain baseline ---------------------------------------------------------------------

/// Ultimate gain Ku and period Tu: the P gain at which K·G reaches the imaginary axis (direct
/// action: give it Problem::normalized_plant).
struct UltimatePoint {
  double gain = 0.0;
  double period_s = 0.0;
  double frequency_rad_s = 0.0;
};
std::optional<UltimatePoint> ultimate_point(const TransferFunction& plant);
/// Ziegler–Nichols (1942) closed-loop rules: P Kp = 0.5Ku; PI Kp = 0.45Ku, Ti = Tu/1.2;
/// PID Kp = 0.6Ku, Ti = Tu/2, Td = Tu/8; PD (common practice) Kp = 0.8Ku, Td = Tu/8.
/// std::nullopt for structures the rules do not cover (lead, lag, lead-lag).
std::optional<StandardForm> ziegler_nichols(Structure s, const UltimatePoint& u, double derivative_filter);
/// Series parameters from a standard form (the inverse of make_controller's conversion).
std::optional<std::vector<double>> series_from_standard(Structure s, const StandardForm& f);

}  // namespace specloop
