// A fitted model in the spec's plant notation (README "plant.*" keys: zeros, poles, gain, delay)
// with the [uncertainty] ranges its ±2σ intervals give, and plant.toml's text.
#pragma once

#include <string>
#include <vector>

#include "specloop/fit/estimate.hpp"

namespace specloop::fit {

/// One root in the spec's notation: a real number, or the pair re ± j·im (im > 0).
struct SpecRoot {
  double re = 0.0, im = 0.0;
  bool pair = false;
};

/// One [uncertainty] entry: a quoted plant key and its range around the nominal value.
struct KeyRange {
  std::string key;  // "plant.gain", "plant.poles[0]", "plant.poles[0][1]", "plant.delay", …
  double nominal = 0.0, low = 0.0, high = 0.0;
  std::string note;  // how it was clipped, when it was
};

struct PlantForm {
  std::vector<SpecRoot> zeros, poles;
  double gain = 1.0;  // k of k·Π(s − z)/Π(s − p)
  double delay = 0.0;
  std::vector<KeyRange> ranges;
};

/// The smallest nonzero delay written (the spec refuses delays in (0, ≈5.1e-5)): below it, 0.
inline constexpr double kMinSpecDelay = 1e-4;

/// The model in the spec's notation; each key's ±2σ range from the covariance by the delta method
/// (the key as a function of the parameters, its gradient by central differences), clipped to what
/// the spec accepts: a delay's range starts at ≥ 0, a gain's range keeps its sign, a stable real
/// pole's range stays < 0, an imaginary part's stays > 0 (the clip at 1e-3 of the nominal, said
/// in the note). A key whose σ is 0 gets no range. Needs a fit with a covariance.
PlantForm plant_form(const ModelFit& fit);

/// plant.toml: a comment header (source, model, fit quality, the time unit caveat), [plant] and,
/// when any range is left, [uncertainty] (mode worst-case).
std::string plant_toml(const PlantForm& form, const ModelFit& fit, const std::string& source);

}  // namespace specloop::fit
