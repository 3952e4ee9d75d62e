// The sweep report's view of a store (report_view.hpp): each point's verdict and stored summaries,
// the classical prediction's errors, the gains shown, the map slice, the front's candidates and the
// non-dominated ones, and the counts over the whole grid.
#include "sweep/report_view.hpp"
#include "specloop/spec/requirement_catalogue.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <set>

#include "specloop/design/design.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop::sweep_report {

// ---- names ---------------------------------------------------------------------------------------

const char* verdict_name(Verdict v) {
  switch (v) {
    case Verdict::met_confirmed: return "met, confirmed";
    case Verdict::met_linear_only: return "met on the linear loop, not confirmed";
    case Verdict::missed: return "missed";
    case Verdict::error: return "failed";
    case Verdict::not_run: return "not run yet";
  }
  return "";
}
const char* verdict_colour(Verdict v) {
  switch (v) {
    case Verdict::met_confirmed: return "#2e7d32";
    case Verdict::met_linear_only: return "#f2b705";
    case Verdict::missed: return "#c62828";
    case Verdict::error: return "#6d4c41";
    case Verdict::not_run: return "#e3e3e3";
  }
  return "#000000";
}

std::string requirement_short(const std::string& key) {
  if (key == "stability") return "unst";  // the binding "requirement" of an unstable optimum
  if (const RequirementEntry* entry = find_requirement(key)) return std::string(entry->label);
  return key;
}

const std::vector<std::string>& front_metric_names() {
  static const std::vector<std::string> names{"overshoot_pct", "peak_time", "settling_time", "rise_time",
                                              "effort_peak",   "iae",       "ise",           "itae"};
  return names;
}
std::string metric_label(const std::string& m) {
  if (m == "overshoot_pct") return "overshoot (%)";
  if (m == "peak_time") return "peak time (s)";
  if (m == "settling_time") return "settling time (s)";
  if (m == "rise_time") return "rise time (s)";
  if (m == "effort_peak") return "effort peak |u|";
  return m;
}

const json& member(const json& j, const char* key) {
  static const json none;
  if (!j.is_object()) return none;
  const auto it = j.find(key);
  return it == j.end() ? none : *it;
}

std::optional<double> number_at(const json& j, std::initializer_list<const char*> path) {
  const json* node = &j;
  for (const char* key : path) {
    if (!node->is_object() || !node->contains(key)) return std::nullopt;
    node = &(*node)[key];
  }
  if (!node->is_number()) return std::nullopt;
  const double v = node->get<double>();
  if (!std::isfinite(v)) return std::nullopt;
  return v;
}

// ---- what each point says ------------------------------------------------------------------------

namespace {

json parse_summary(const std::string& text, const StoredPoint& p, const std::string& store_path) {
  if (text.empty()) return nullptr;
  try {
    return json::parse(text);
  } catch (const json::exception& e) {
    throw SweepError(fmt::format("{}: point {}: a stored design summary is not valid JSON (damaged): {}", store_path,
                                 p.index, e.what()));
  }
}

PointView view_of(const StoredPoint& p, const std::string& store_path) {
  PointView v;
  v.stored = &p;
  if (!p.finished) return v;
  if (p.status != "ok") {
    v.verdict = Verdict::error;
    return v;
  }
  v.classical = parse_summary(p.classical, p, store_path);
  v.optimized = parse_summary(p.optimized, p, store_path);
  if (p.met) {
    v.verdict = p.judged_on == "nonlinear" || p.optimized_confirmed.value_or(false) ? Verdict::met_confirmed
                                                                                     : Verdict::met_linear_only;
  } else {
    v.verdict = Verdict::missed;
  }
  if (!v.classical.is_null()) {
    v.predicted_overshoot = number_at(v.classical, {"second_order", "overshoot_pct"});
    v.predicted_peak_time = number_at(v.classical, {"second_order", "peak_time"});
    v.simulated_overshoot = number_at(v.classical, {"simulated", "overshoot_pct"});
    v.simulated_peak_time = number_at(v.classical, {"simulated", "peak_time"});
    const auto error = [](const std::optional<double>& predicted, const std::optional<double>& simulated) -> std::optional<double> {
      if (!predicted || !simulated || *predicted == 0.0) return std::nullopt;
      return (*simulated - *predicted) / *predicted * 100.0;
    };
    v.overshoot_error_pct = error(v.predicted_overshoot, v.simulated_overshoot);
    // No overshoot in the simulation: no peak, so the prediction of one is off by all of it.
    v.peak_time_error_pct = error(v.predicted_peak_time, v.simulated_peak_time);
  }
  return v;
}

// The time a peak-time requirement reads, from a stored metric object: the requirement check's own
// reading (effective_peak_time, design/requirements.hpp) without the search's margin, as the
// verdict reads it. Without a margin it reads exactly these four metrics (the tied-peak rule is
// already in the stored peak time), so the map's and the front's peak times are the judged ones.
std::optional<double> stored_peak_time(const json& m, double band_pct) {
  StepMetrics sm;
  sm.overshoot_pct = number_at(m, {"overshoot_pct"}).value_or(0.0);
  sm.peak_time_s = number_at(m, {"peak_time"});
  sm.settling_time_s = number_at(m, {"settling_time"});
  sm.post_peak_dip_pct = number_at(m, {"post_peak_dip_pct"}).value_or(0.0);
  return effective_peak_time(sm, band_pct);
}

// A metric of the optimized design on one loop. peak_time reads as the peak-time requirements do
// (stored_peak_time).
std::optional<double> optimized_metric(const PointView& v, const std::string& metric, bool nonlinear, double band_pct) {
  if (v.optimized.is_null()) return std::nullopt;
  const json* m = nullptr;
  if (nonlinear) {
    const json& nl = member(v.optimized, "nonlinear");
    if (!nl.is_object() || nl.value("status", std::string()) != "ok") return std::nullopt;
    m = &member(nl, "simulated");
  } else {
    m = &member(v.optimized, "simulated");
  }
  if (metric == "peak_time") return stored_peak_time(*m, band_pct);
  return number_at(*m, {metric.c_str()});
}

GainSet gain_set(const std::vector<PointView>& views) {
  GainSet g;
  bool all_parallel = true, any = false;
  std::vector<std::string> series_names;
  for (const PointView& v : views) {
    if (v.optimized.is_null()) continue;
    any = true;
    const json& c = member(v.optimized, "controller");
    if (!member(c, "parallel").is_object()) all_parallel = false;
    if (member(c, "series").is_object())
      for (const auto& [name, value] : member(c, "series").items())
        if (std::find(series_names.begin(), series_names.end(), name) == series_names.end()) series_names.push_back(name);
  }
  if (!any) return g;
  g.form = all_parallel ? "parallel" : "series";
  const std::vector<std::string> candidates = all_parallel ? std::vector<std::string>{"kp", "ki", "kd"} : series_names;
  for (const std::string& name : candidates) {
    bool nonzero = false;
    for (const PointView& v : views) {
      if (v.optimized.is_null()) continue;
      const auto value = number_at(member(v.optimized, "controller"), {g.form.c_str(), name.c_str()});
      if (value && *value != 0.0) nonzero = true;
    }
    if (nonzero) g.names.push_back(name);
  }
  return g;
}

}  // namespace

std::optional<double> gain_of(const PointView& v, const GainSet& g, const std::string& name) {
  if (v.optimized.is_null()) return std::nullopt;
  return number_at(member(v.optimized, "controller"), {g.form.c_str(), name.c_str()});
}

std::string binding_of(const PointView& v) { return v.stored->finished && v.stored->status == "ok" ? v.stored->binding : ""; }

// ---- the slice the maps show ---------------------------------------------------------------------

std::size_t Slice::index(const SweepGrid& grid, std::size_t i, std::size_t j) const {
  std::size_t idx = 0;
  for (std::size_t a = 0; a < grid.axes.size(); ++a) {
    std::size_t digit = fixed_digit[a];
    if (a == ax) digit = i;
    else if (ay && a == *ay) digit = j;
    idx = idx * grid.axes[a].values.size() + digit;
  }
  return idx;
}

namespace {

std::size_t axis_named(const SweepGrid& grid, const std::string& key, const char* option) {
  std::vector<std::string> keys;
  for (std::size_t a = 0; a < grid.axes.size(); ++a) {
    if (grid.axes[a].key == key) return a;
    keys.push_back(grid.axes[a].key);
  }
  throw SweepError(fmt::format("{} '{}': not an axis of this sweep (its axes: {})", option, key, fmt::join(keys, ", ")));
}

Slice make_slice(const SweepGrid& grid, const SweepReportOptions& o) {
  Slice s;
  s.fixed_digit.assign(grid.axes.size(), 0);
  if (o.map_keys.size() > 2) throw SweepError("--map: give one or two axis keys, separated by a comma");
  if (o.map_keys.empty()) {
    s.ax = 0;
    if (grid.axes.size() > 1) s.ay = 1;
  } else {
    s.ax = axis_named(grid, o.map_keys[0], "--map");
    if (o.map_keys.size() == 2) {
      s.ay = axis_named(grid, o.map_keys[1], "--map");
      if (*s.ay == s.ax) throw SweepError(fmt::format("--map: '{}' is given twice; give two different axes", o.map_keys[0]));
    }
  }
  std::set<std::size_t> given;
  for (const std::string& text : o.at) {
    const auto eq = text.find('=');
    if (eq == std::string::npos) throw SweepError(fmt::format("--at '{}': expected KEY=VALUE", text));
    const std::size_t a = axis_named(grid, text.substr(0, eq), "--at");
    if (a == s.ax || (s.ay && a == *s.ay))
      throw SweepError(fmt::format("--at '{}': that axis is on the map; fix only the other axes", text));
    double value = 0.0;
    try {
      std::size_t used = 0;
      value = std::stod(text.substr(eq + 1), &used);
      if (used != text.size() - eq - 1) throw std::invalid_argument("trailing");
    } catch (const std::exception&) {
      throw SweepError(fmt::format("--at '{}': expected a number after '='", text));
    }
    const auto& values = grid.axes[a].values;
    std::optional<std::size_t> digit;
    for (std::size_t k = 0; k < values.size(); ++k)
      if (std::abs(values[k] - value) <= 1e-9 * std::max(1.0, std::abs(values[k]))) digit = k;
    if (!digit) {
      std::vector<std::string> listed;
      for (double v : values) listed.push_back(fmt::format("{}", v));
      throw SweepError(fmt::format("--at '{}': {} is not a value of that axis ({})", text, value, fmt::join(listed, ", ")));
    }
    s.fixed_digit[a] = *digit;
    given.insert(a);
  }
  s.nx = grid.axes[s.ax].values.size();
  s.ny = s.ay ? grid.axes[*s.ay].values.size() : 1;
  std::vector<std::string> fixed;
  for (std::size_t a = 0; a < grid.axes.size(); ++a)
    if (a != s.ax && !(s.ay && a == *s.ay))
      fixed.push_back(fmt::format("{} = {}", grid.axes[a].key, grid.axes[a].values[s.fixed_digit[a]]));
  s.fixed_text = fmt::format("{}", fmt::join(fixed, ", "));
  return s;
}

// The options that do not depend on the axes (those make_slice checks).
void check_options(const SweepReportOptions& options) {
  if (options.front_metrics.size() < 2 || options.front_metrics.size() > 3)
    throw SweepError(fmt::format("--front: give two or three metrics (got {}), from: {}", options.front_metrics.size(),
                                 fmt::join(front_metric_names(), ", ")));
  for (const std::string& m : options.front_metrics)
    if (std::find(front_metric_names().begin(), front_metric_names().end(), m) == front_metric_names().end())
      throw SweepError(fmt::format("--front: unknown metric '{}'; expected one of: {}", m, fmt::join(front_metric_names(), ", ")));
  if (std::set<std::string>(options.front_metrics.begin(), options.front_metrics.end()).size() != options.front_metrics.size())
    throw SweepError("--front: a metric is given twice");
  if (options.front_loop != "nonlinear" && options.front_loop != "linear")
    throw SweepError(fmt::format("--front-loop: expected linear or nonlinear, got '{}'", options.front_loop));
  if (!(options.approximation_threshold_pct > 0.0) || !std::isfinite(options.approximation_threshold_pct))
    throw SweepError("--threshold: expected a percentage > 0");
}

// Counts the verdicts and collects the front's candidates: the met points with every front metric
// defined on the front's loop (peak time read with the point's own band when an axis varies it).
void collect_verdicts_and_front(ReportView& in) {
  const SweepStoreContents& store = in.store;
  std::optional<std::size_t> band_axis;
  for (std::size_t a = 0; a < store.grid.axes.size(); ++a)
    if (store.grid.axes[a].key == "requirements.settling_band_pct") band_axis = a;
  for (std::size_t k = 0; k < in.views.size(); ++k) {
    const PointView& v = in.views[k];
    if (v.verdict == Verdict::met_confirmed || v.verdict == Verdict::met_linear_only) {
      ++in.met;
      if (v.verdict == Verdict::met_confirmed) ++in.confirmed;
      const double band = band_axis ? v.stored->values[*band_axis] : in.band_pct;
      std::vector<double> values;
      for (const std::string& m : in.options.front_metrics) {
        const auto x = optimized_metric(v, m, in.front_nonlinear, band);
        if (!x) break;
        values.push_back(*x);
      }
      if (values.size() == in.options.front_metrics.size()) {
        in.front_candidates.push_back(k);
        in.front_values.push_back(std::move(values));
      } else {
        ++in.dropped_from_front;
      }
    }
    if (v.verdict == Verdict::missed) ++in.missed;
    if (v.verdict == Verdict::error) ++in.failed;
  }
  in.front = non_dominated(in.front_values);
}

}  // namespace

ReportView make_view(const SweepStoreContents& store, const SweepReportOptions& options) {
  ReportView in{store, options, {}, {}, {}, 2.0, true, {}, {}, {}, {}};
  if (store.grid.axes.empty()) throw SweepError(fmt::format("{}: the store has no axes (damaged)", store.path));
  if (store.finished() == 0)
    throw SweepError(fmt::format("{}: no point is finished yet; run the sweep first (specloop sweep …)", store.path));
  check_options(options);
  in.front_nonlinear = options.front_loop == "nonlinear";
  in.slice = make_slice(store.grid, options);

  // The settling band (for the peak-time rule), from the stored spec text or the axis varying it.
  try {
    in.band_pct = parse_spec(store.spec_text, store.path).requirements.settling_band_pct;
  } catch (const SpecError& e) {
    throw SweepError(fmt::format("{}: the stored spec text does not parse (damaged): {}", store.path, e.what()));
  }
  for (const StoredPoint& p : store.points) in.views.push_back(view_of(p, store.path));
  in.gains = gain_set(in.views);
  for (const PointView& v : in.views) {
    const std::string b = binding_of(v);
    if (!b.empty() && std::find(in.binding_keys.begin(), in.binding_keys.end(), b) == in.binding_keys.end())
      in.binding_keys.push_back(b);
  }
  collect_verdicts_and_front(in);
  return in;
}

std::vector<std::size_t> front_in_order(const ReportView& in) {
  std::vector<std::size_t> order = in.front;
  std::sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return in.front_values[a] < in.front_values[b]; });
  return order;
}

}  // namespace specloop::sweep_report
