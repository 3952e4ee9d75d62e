// JSON output of the characterization.
#include "specloop/json_io.hpp"

#include <cmath>
#include <stdexcept>

namespace specloop {

using nlohmann::json;

json number_json(double v) {
  if (std::isnan(v)) throw std::logic_error("a NaN reached the JSON writer; the computation upstream must report a status instead");
  if (std::isinf(v)) return v > 0 ? "infinite" : "-infinite";
  return v;
}

json complex_json(Complex z) { return json::array({number_json(z.real()), number_json(z.imag())}); }

json poles_json(const std::vector<Complex>& poles) {
  json out = json::array();
  for (const Complex& p : poles) out.push_back(complex_json(p));
  return out;
}

namespace {
json optional_json(const std::optional<double>& v) { return v ? number_json(*v) : json(nullptr); }

json gain_point_json(const GainPoint& p) {
  return {{"gain", number_json(p.gain)},
          {"poles", poles_json(p.poles)},
          {"simulated", metrics_json(p.simulated)},
          {"error_constants",
           {{"position", number_json(p.constants.position)},
            {"velocity", number_json(p.constants.velocity)},
            {"acceleration", number_json(p.constants.acceleration)}}}};
}
}  // namespace

json metrics_json(const StepMetrics& m) {
  return {{"final_value", number_json(m.final_value)},
          {"overshoot_pct", number_json(m.overshoot_pct)},
          {"peak_time", optional_json(m.peak_time_s)},
          {"undershoot_pct", number_json(m.undershoot_pct)},
          {"settling_time", optional_json(m.settling_time_s)},
          {"rise_time", optional_json(m.rise_time_s)},
          {"steady_state_error", number_json(m.steady_state_error)},
          {"effort_peak", number_json(m.effort_peak)},
          {"iae", number_json(m.iae)},
          {"ise", number_json(m.ise)},
          {"itae", number_json(m.itae)}};
}

json characterization_json(const Spec& spec, const Characterization& ch) {
  json out;
  out["spec"] = spec.path;
  out["title"] = spec.title;
  out["overshoot_max_pct"] = number_json(*spec.requirements.overshoot_max_pct);
  out["damping_ratio"] = number_json(ch.damping_ratio);
  out["settling_band_pct"] = number_json(ch.band_fraction * 100.0);
  json crossings = json::array();
  for (const auto& c : ch.crossings)
    crossings.push_back({{"gain", number_json(c.gain)},
                         {"pair", complex_json(c.pair_pole)},
                         {"poles", poles_json(c.poles)},
                         {"stable", c.stable},
                         {"decay_ratio", number_json(c.decay_ratio)}});
  out["crossings"] = crossings;
  if (ch.dominant && ch.second_order) {
    json d = gain_point_json(*ch.dominant);
    d["index"] = *ch.dominant_index;
    d["pair"] = complex_json(ch.crossings[*ch.dominant_index].pair_pole);
    d["why"] = ch.dominant_reason;
    d["second_order"] = {{"overshoot_pct", number_json(ch.second_order->overshoot_pct)},
                         {"peak_time", number_json(ch.second_order->peak_time_s)},
                         {"settling_time", number_json(ch.second_order->settling_time_s)},
                         {"damping_ratio", number_json(ch.second_order->damping_ratio)},
                         {"natural_frequency", number_json(ch.second_order->natural_frequency)}};
    out["dominant"] = d;
  } else {
    out["dominant"] = nullptr;
    out["dominant_note"] = ch.dominant_reason;
  }
  if (ch.reference) {
    out["reference"] = gain_point_json(*ch.reference);
  } else {
    out["reference"] = nullptr;
    out["reference_note"] = ch.reference_note;
  }
  if (ch.dominance) {
    const auto& d = *ch.dominance;
    json modes = json::array();
    for (const auto& m : d.modes) modes.push_back({{"pole", complex_json(m.pole)}, {"share", optional_json(m.share)}});
    out["dominance"] = {{"verdict", d.verdict},
                        {"holds", d.holds},
                        {"reasons", d.reasons},
                        {"modes", modes},
                        {"overshoot_error_pct", number_json(d.overshoot_error_pct)},
                        {"peak_time_error_pct", optional_json(d.peak_time_error_pct)},
                        {"settling_time_error_pct", optional_json(d.settling_time_error_pct)}};
  } else {
    out["dominance"] = {{"verdict", "no dominant crossing: nothing to compare"}, {"holds", false},
                        {"reasons", json::array({ch.dominant_reason})}};
  }
  out["notes"] = ch.notes;
  return out;
}

}  // namespace specloop
