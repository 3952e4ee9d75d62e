// Internal: the sweep report's view of a store — what each point says (verdict, the stored design
// summaries, the classical prediction's errors), the map slice, the gains shown, and the Pareto
// front — computed once from the store, read by every section (report_sections.hpp).
#pragma once

#include <cstddef>
#include <initializer_list>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "specloop/sweep/sweep_report.hpp"

namespace specloop::sweep_report {

using nlohmann::json;

enum class Verdict { met_confirmed, met_linear_only, missed, error, not_run };
inline constexpr Verdict kVerdicts[] = {Verdict::met_confirmed, Verdict::met_linear_only, Verdict::missed,
                                        Verdict::error, Verdict::not_run};
const char* verdict_name(Verdict v);
const char* verdict_colour(Verdict v);

/// Short cell labels for the binding map (the key itself when it has none).
std::string requirement_short(const std::string& key);
/// The metrics a front may use, each minimized.
const std::vector<std::string>& front_metric_names();
std::string metric_label(const std::string& m);

/// A member of a stored JSON object, or null when the object lacks it (a damaged or older row must
/// not reach json's unchecked const operator[]).
const json& member(const json& j, const char* key);
/// The finite number at `path` in a stored object, or none.
std::optional<double> number_at(const json& j, std::initializer_list<const char*> path);

/// What one point says.
struct PointView {
  const StoredPoint* stored = nullptr;
  Verdict verdict = Verdict::not_run;
  json classical, optimized;  // design_summary objects; null when absent
  // The classical design's second-order prediction against its simulated (linear) response.
  std::optional<double> predicted_overshoot, simulated_overshoot, predicted_peak_time, simulated_peak_time;
  std::optional<double> overshoot_error_pct, peak_time_error_pct;  // (simulated − predicted)/predicted·100
};
/// The binding requirement of a finished ok point, else "".
std::string binding_of(const PointView& v);

/// The controller's gains: the parallel form (kp, ki, kd) when every optimized design has one,
/// else the series parameters; gains that are zero everywhere are left out.
struct GainSet {
  std::string form;  // "parallel" or "series"
  std::vector<std::string> names;
};
std::optional<double> gain_of(const PointView& v, const GainSet& g, const std::string& name);

/// The slice the maps show: two axes (one for a one-axis grid), the others at fixed values.
struct Slice {
  std::size_t ax = 0;
  std::optional<std::size_t> ay;  // none for a one-axis grid
  std::vector<std::size_t> fixed_digit;  // per axis (the map axes' entries unused)
  std::size_t nx = 1, ny = 1;
  std::string fixed_text;  // "key = value, …" or ""
  /// The grid index of map cell (i, j).
  std::size_t index(const SweepGrid& grid, std::size_t i, std::size_t j) const;
};

/// Everything the sections read.
struct ReportView {
  const SweepStoreContents& store;
  const SweepReportOptions& options;
  std::vector<PointView> views;               // one per grid point, by index
  Slice slice;
  GainSet gains;
  double band_pct = 2.0;                      // the stored spec's settling band
  bool front_nonlinear = true;
  std::vector<std::size_t> front_candidates;  // point indices with every front metric
  std::vector<std::vector<double>> front_values;  // per candidate
  std::vector<std::size_t> front;             // positions in front_candidates, non-dominated
  std::vector<std::string> binding_keys;      // in order of first appearance
  // Over the whole grid.
  std::size_t met = 0, confirmed = 0, missed = 0, failed = 0, dropped_from_front = 0;
};

/// Checks the options against the store (SweepError: unknown axis or metric, a value not on the
/// grid, no finished point) and computes the view.
ReportView make_view(const SweepStoreContents& store, const SweepReportOptions& options);

/// The front's positions (into front_candidates) sorted by their metric values.
std::vector<std::size_t> front_in_order(const ReportView& in);

}  // namespace specloop::sweep_report
