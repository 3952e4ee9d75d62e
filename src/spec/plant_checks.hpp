// The plant's refusals (private to the spec layer): what the numerics cannot honour, checked once
// both plant forms are known — after reading for a linear plant, after modelling for a nonlinear
// one; the cross-section check of a zero steady-state error; and the polynomial helpers both the
// reader and the modelling step use.
#pragma once

#include <complex>
#include <string>
#include <vector>

#include "spec/reader_core.hpp"

namespace specloop::reading {

/// Refuses a plant whose pole in the closed right half plane a zero cancels (a hidden mode no
/// controller can reach), a nonzero pole or zero magnitude outside [kMinRate, kMaxRate] (the
/// delay's approximant included), a spread beyond kMaxSpread and a gain scale outside
/// [kMinGainScale, kMaxGainScale] (README, "Spec file reference"), blaming where `where` says the
/// part was written. Returns the controller and noise times' rule: the largest nonzero pole or
/// zero magnitude (the delay's approximant left out; 0 when there is none).
TimeRule check_plant_numerics(const std::string& path, const PlantSpec& plant, const PlantSources& where);

/// A pending time (read before the plant was modelled) against `rule`, with the reader's message.
void check_pending_time(const std::string& path, const PendingTime& time, const TimeRule& rule);

/// requirements.steady_state_error_max = 0 needs an integrator in the loop: in the plant (a net
/// pole at s = 0) or in the structure.
void check_zero_error_integrator(const std::string& path, const Spec& spec, const SpecSources& sources);

/// The refusal of a biproper plant; it follows "as many zeros as poles: " and the like.
std::string biproper_refusal();

/// Roots of a polynomial (highest power first, leading coefficient nonzero). Roots at s = 0
/// (trailing zero coefficients) are returned exactly. Order: real part descending, then
/// |imaginary part| ascending, each conjugate pair as (+im, −im).
std::vector<std::complex<double>> polynomial_roots(const std::vector<double>& highest_first);

/// How many trailing coefficients are zero (roots at s = 0).
std::size_t trailing_zero_count(const std::vector<double>& highest_first);

}  // namespace specloop::reading
