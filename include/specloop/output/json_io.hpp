// JSON forms of the results (the `--json` output and, later, result.json). Key names are a
// contract read by tests outside the project: extend, don't rename.
#pragma once

#include <nlohmann/json.hpp>

#include "specloop/design/characterize.hpp"
#include "specloop/design/design.hpp"
#include "specloop/output/design_json.hpp"  // design_json: one design, as result.json writes it

namespace specloop {

/// [re, im].
nlohmann::json complex_json(Complex z);
/// A list of [re, im] pairs.
nlohmann::json poles_json(const std::vector<Complex>& poles);
/// A finite number as is; ±infinity as the string "infinite" / "-infinite"; NaN is a bug and throws.
nlohmann::json number_json(double v);
/// Step metrics with the keys overshoot_pct, peak_time, settling_time, rise_time,
/// steady_state_error, effort_peak, undershoot_pct, final_value, iae, ise, itae (null = none).
nlohmann::json metrics_json(const StepMetrics& m);
/// The spec's [units] names: {output, input, time} (the defaults when the spec has none).
nlohmann::json units_json(const UnitsSpec& units);
/// Whether the second-order prediction holds: verdict, reasons, modes with their shares and signed
/// contributions, what the contributions add up to, the cancellation note (or null), errors.
nlohmann::json dominance_json(const DominanceDiagnosis& d);
/// The P gains for which the loop is stable, as action × gain (signed, the gain on the plant as
/// given): {"text", "ranges": [{"low", "high", "state": "stable"|"undamped"|"unstable"}]}, ±∞ as strings.
nlohmann::json stable_gain_set_json(const StableGainSet& set, double action);
/// The whole `analyze --json` object.
nlohmann::json characterization_json(const Spec& spec, const Characterization& ch);

/// For a [plant.nonlinear] spec: the operating point (states, u, y), the Jacobians A, B, C, D at it
/// and a note that the design used this linearization; null for a linear plant.
nlohmann::json linearization_json(const Spec& spec);
/// The spec as normalized (both plant forms, every default filled in).
nlohmann::json spec_json(const Spec& spec);
/// One published rule's outcome: {"applied", "reason" (null when applied), "model": null |
/// {"order", "integrating", "gain", "lag", "second_lag", "delay", "exact", "text", "derivation"},
/// "tau_c", "tau_c_source" (SIMC; null otherwise), "settings" (the formulas with their values)}.
nlohmann::json rule_json(const RuleOutcome& r);
/// The search summary.
nlohmann::json search_json(const SearchSummary& s);
/// The whole result.json (schema "specloop-result-1").
nlohmann::json result_json(const DesignRun& run);

}  // namespace specloop
