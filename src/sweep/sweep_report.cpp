// The sweep report (sweep_report.hpp): reads the stored design summaries, slices the grid for the
// maps, extracts the Pareto front, and writes CSV files, gnuplot scripts and the two pages.
#include "specloop/sweep/sweep_report.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <set>

#include "output/page_kit.hpp"
#include "specloop/output/report.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

namespace fs = std::filesystem;
using nlohmann::json;
using namespace page;

std::vector<OutlineSegment> outline_cells(const std::vector<bool>& flagged, std::size_t nx, std::size_t ny) {
  if (flagged.size() != nx * ny) throw std::invalid_argument("outline_cells: flags do not match the grid");
  const auto at = [&](std::ptrdiff_t i, std::ptrdiff_t j) {
    if (i < 0 || j < 0 || i >= static_cast<std::ptrdiff_t>(nx) || j >= static_cast<std::ptrdiff_t>(ny)) return false;
    return static_cast<bool>(flagged[static_cast<std::size_t>(j) * nx + static_cast<std::size_t>(i)]);
  };
  std::vector<OutlineSegment> out;
  for (std::ptrdiff_t j = 0; j < static_cast<std::ptrdiff_t>(ny); ++j)
    for (std::ptrdiff_t i = 0; i < static_cast<std::ptrdiff_t>(nx); ++i) {
      if (!at(i, j)) continue;
      const double x = static_cast<double>(i), y = static_cast<double>(j);
      if (!at(i - 1, j)) out.push_back({x - 0.5, y - 0.5, x - 0.5, y + 0.5});
      if (!at(i + 1, j)) out.push_back({x + 0.5, y - 0.5, x + 0.5, y + 0.5});
      if (!at(i, j - 1)) out.push_back({x - 0.5, y - 0.5, x + 0.5, y - 0.5});
      if (!at(i, j + 1)) out.push_back({x - 0.5, y + 0.5, x + 0.5, y + 0.5});
    }
  return out;
}

fs::path default_sweep_report_dir(const std::string& store_path) {
  fs::path p(store_path);
  std::string stem = p.filename().string();
  if (stem.ends_with(".sqlite")) stem.resize(stem.size() - 7);
  return p.parent_path() / (stem + "-report");
}

namespace {

// ---- what each point says ------------------------------------------------------------------------

enum class Verdict { met_confirmed, met_linear_only, missed, error, not_run };
constexpr Verdict kVerdicts[] = {Verdict::met_confirmed, Verdict::met_linear_only, Verdict::missed, Verdict::error,
                                 Verdict::not_run};

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

// Short cell labels for the binding map.
std::string requirement_short(const std::string& key) {
  static const std::map<std::string, std::string> names{
      {"overshoot_max_pct", "OS"}, {"undershoot_max_pct", "US"}, {"peak_time_ratio", "tp"}, {"peak_time_max", "tp"},
      {"settling_time_max", "ts"}, {"rise_time_max", "tr"}, {"steady_state_error_max", "ess"}, {"effort_max", "u"},
      {"gain_margin_min_db", "GM"}, {"phase_margin_min_deg", "PM"}, {"sensitivity_peak_max", "Ms"}, {"stability", "unst"}};
  const auto it = names.find(key);
  return it == names.end() ? key : it->second;
}

constexpr const char* kCategoryColours[] = {"#1f5f99", "#c26a1b", "#7b5ea7", "#2e7d32", "#c62828",
                                            "#00838f", "#8d6e63", "#ad1457", "#546e7a", "#9e9d24"};

// The metrics a front may use, each minimized.
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

// A member of a stored JSON object, or null when the object lacks it (a damaged or older row must
// not reach json's unchecked const operator[]).
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

struct PointView {
  const StoredPoint* stored = nullptr;
  Verdict verdict = Verdict::not_run;
  json classical, optimized;  // null when absent
  // The classical design's second-order prediction against its simulated (linear) response.
  std::optional<double> predicted_overshoot, simulated_overshoot, predicted_peak_time, simulated_peak_time;
  std::optional<double> overshoot_error_pct, peak_time_error_pct;  // (simulated − predicted)/predicted·100
};

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
    v.simulated_overshoot = number_at(v.classical, {"linear", "overshoot_pct"});
    v.simulated_peak_time = number_at(v.classical, {"linear", "peak_time"});
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

// A metric of the optimized design on one loop. peak_time reads as the peak-time requirements do
// (effective_peak_time: the visible peak's time, else the final entry into the band).
std::optional<double> optimized_metric(const PointView& v, const std::string& metric, bool nonlinear, double band_pct) {
  if (v.optimized.is_null()) return std::nullopt;
  const json* m = nullptr;
  if (nonlinear) {
    const json& nl = member(v.optimized, "nonlinear");
    if (!nl.is_object() || nl.value("status", std::string()) != "ok") return std::nullopt;
    m = &member(nl, "metrics");
  } else {
    m = &member(v.optimized, "linear");
  }
  if (metric == "peak_time") {  // read as the requirement checks read it (design.hpp)
    StepMetrics sm;
    sm.overshoot_pct = number_at(*m, {"overshoot_pct"}).value_or(0.0);
    sm.peak_time_s = number_at(*m, {"peak_time"});
    sm.settling_time_s = number_at(*m, {"settling_time"});
    sm.post_peak_dip_pct = number_at(*m, {"post_peak_dip_pct"}).value_or(0.0);
    return effective_peak_time(sm, band_pct);
  }
  return number_at(*m, {metric.c_str()});
}

// The controller's gains: the parallel form (kp, ki, kd) when every optimized design has one,
// else the series parameters; gains that are zero everywhere are left out.
struct GainSet {
  std::string form;  // "parallel" or "series"
  std::vector<std::string> names;
};
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
std::optional<double> gain_of(const PointView& v, const GainSet& g, const std::string& name) {
  if (v.optimized.is_null()) return std::nullopt;
  return number_at(member(v.optimized, "controller"), {g.form.c_str(), name.c_str()});
}

// ---- the slice the maps show ---------------------------------------------------------------------

struct Slice {
  std::size_t ax = 0;
  std::optional<std::size_t> ay;  // none for a one-axis grid
  std::vector<std::size_t> fixed_digit;  // per axis (the map axes' entries unused)
  std::size_t nx = 1, ny = 1;
  std::string fixed_text;  // "key = value, …" or ""
  std::size_t index(const SweepGrid& grid, std::size_t i, std::size_t j) const {
    std::size_t idx = 0;
    for (std::size_t a = 0; a < grid.axes.size(); ++a) {
      std::size_t digit = fixed_digit[a];
      if (a == ax) digit = i;
      else if (ay && a == *ay) digit = j;
      idx = idx * grid.axes[a].values.size() + digit;
    }
    return idx;
  }
};

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

// ---- figures -------------------------------------------------------------------------------------

std::string short_number(double v) { return fmt::format("{:.4g}", v); }

// Axis tics at cell indices labelled with the axis values (at most ~12 labels).
std::string index_tics(const char* which, const SweepAxis& axis) {
  const std::size_t n = axis.values.size();
  const std::size_t every = n <= 12 ? 1 : (n + 9) / 10;
  std::vector<std::string> tics;
  for (std::size_t k = 0; k < n; k += every) tics.push_back(fmt::format("{} {}", quoted(short_number(axis.values[k])), k));
  return fmt::format("  set {}tics ({})\n", which, fmt::join(tics, ", "));
}

std::string map_frame(const SweepGrid& grid, const Slice& s, const std::string& title) {
  std::string f;
  f += fmt::format("  set title {} font ',13'\n", quoted(title));
  f += "  unset object; unset arrow; unset label; unset colorbox\n";
  f += "  set key outside right top box opaque font ',10'\n";
  f += "  set grid noxtics noytics\n";
  f += fmt::format("  set xrange [-0.5:{}]\n", csv_number(static_cast<double>(s.nx) - 0.5));
  f += fmt::format("  set yrange [-0.5:{}]\n", csv_number(static_cast<double>(s.ny) - 0.5));
  f += fmt::format("  set xlabel {}\n", quoted(grid.axes[s.ax].key));
  f += index_tics("x", grid.axes[s.ax]);
  if (s.ay) {
    f += fmt::format("  set ylabel {}\n", quoted(grid.axes[*s.ay].key));
    f += index_tics("y", grid.axes[*s.ay]);
  } else {
    f += "  unset ylabel; set ytics ('' 0)\n";
  }
  return f;
}

bool cells_labelled(const Slice& s) { return s.nx <= 14 && s.ny <= 14; }

std::string csv_field(const std::string& text) {
  if (text.find_first_of(",\"\n\r") == std::string::npos) return text;
  std::string out = "\"";
  for (char c : text) out += c == '"' ? std::string("\"\"") : std::string(1, c);
  return out + "\"";
}
std::string csv_optional(const std::optional<double>& v) { return v ? csv_number(*v) : std::string(); }

struct ReportInputs {
  const SweepStoreContents& store;
  const SweepReportOptions& options;
  std::vector<PointView> views;
  Slice slice;
  GainSet gains;
  double band_pct = 2.0;
  bool front_nonlinear = true;
  std::vector<std::size_t> front_candidates;  // point indices with every front metric
  std::vector<std::vector<double>> front_values;  // per candidate
  std::vector<std::size_t> front;             // positions in front_candidates, non-dominated
  std::vector<std::string> binding_keys;      // in order of first appearance
};

std::string binding_of(const PointView& v) { return v.stored->finished && v.stored->status == "ok" ? v.stored->binding : ""; }

std::string feasibility_script(const ReportInputs& in, bool by_binding) {
  const Slice& s = in.slice;
  const SweepGrid& grid = in.store.grid;
  std::string body = map_frame(grid, s, by_binding ? "Binding requirement (missed by the most, or the tightest at the optimum)"
                                                   : "Verdict of each point");
  std::vector<std::string> plots;
  if (!by_binding) {
    for (std::size_t c = 0; c < std::size(kVerdicts); ++c)
      plots.push_back(fmt::format("'../series/map.csv' using 1:($3 == {} ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 "
                                  "border lc rgb 'white' fc rgb '{}' title {}",
                                  c, verdict_colour(kVerdicts[c]), quoted(verdict_name(kVerdicts[c]))));
  } else {
    plots.push_back(fmt::format("'../series/map.csv' using 1:($4 < 0 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 "
                                "border lc rgb 'white' fc rgb '#e3e3e3' title {}",
                                quoted("none (not run, failed, or no requirement)")));
    for (std::size_t k = 0; k < in.binding_keys.size(); ++k)
      plots.push_back(fmt::format("'../series/map.csv' using 1:($4 == {} ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 "
                                  "border lc rgb 'white' fc rgb '{}' title {}",
                                  k, kCategoryColours[k % std::size(kCategoryColours)],
                                  quoted(fmt::format("{} ({})", in.binding_keys[k], requirement_short(in.binding_keys[k])))));
    plots.push_back("'../series/map.csv' using 1:($3 == 2 ? $2 : NaN) with points pt 2 ps 1.2 lc rgb '#222222' "
                    "title 'missed (binding = missed by the most)'");
    if (cells_labelled(s))
      plots.push_back("'../series/map.csv' using 1:($4 >= 0 ? $2 : NaN):5 with labels offset 0,1.0 font ',9' tc rgb '#111111' notitle");
  }
  body += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  return script_frame(by_binding ? "binding" : "feasibility", body, 900, s.ny == 1 ? 300 : std::max<int>(420, static_cast<int>(s.ny) * 28 + 160));
}

std::string approximation_script(const ReportInputs& in, const std::string& which, double extent) {
  const Slice& s = in.slice;
  const std::string name = "approx_" + which;
  const std::string title = which == "overshoot" ? "Classical design: overshoot, simulated vs second-order prediction"
                                                 : "Classical design: peak time, simulated vs second-order prediction";
  std::string body = map_frame(in.store.grid, s, title);
  body += "  set palette defined (-1 '#2166ac', -0.5 '#92c5de', 0 '#f7f7f7', 0.5 '#f4a582', 1 '#b2182b')\n";
  body += fmt::format("  set cbrange [{}:{}]\n", csv_number(-extent), csv_number(extent));
  body += "  set colorbox; set cblabel '(simulated - predicted)/predicted (%)'\n";
  std::vector<std::string> plots{
      fmt::format("'../series/{}.csv' using 1:($4 == 0 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' "
                  "fc rgb '#e3e3e3' title 'no prediction (no classical design or no complex pair)'", name),
      fmt::format("'../series/{}.csv' using 1:($4 == 1 ? $2 : NaN):(0.5):(0.5):(($3 > {e}) ? {e} : (($3 < -{e}) ? -{e} : $3)) "
                  "with boxxyerror fs solid 1.0 border lc rgb 'white' fc palette notitle", name, fmt::arg("e", csv_number(extent))),
      fmt::format("'../series/{}_outline.csv' using 1:2:($3-$1):($4-$2) with vectors nohead lw 3 lc rgb '#111111' title {}",
                  name, quoted(fmt::format("|error| > {:.4g} % (outlined)", in.options.approximation_threshold_pct)))};
  if (which == "peak_time")
    plots.insert(plots.begin() + 1,
                 fmt::format("'../series/{}.csv' using 1:($4 == 2 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border "
                             "lc rgb 'white' fc rgb '#616161' title 'a peak predicted, none simulated (no overshoot)'", name));
  if (cells_labelled(s))
    plots.push_back(fmt::format("'../series/{}.csv' using 1:($4 == 1 ? $2 : NaN):(sprintf('%+.0f', $3)) with labels font ',8' "
                                "tc rgb '#111111' notitle", name));
  body += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  return script_frame(name, body, 900, s.ny == 1 ? 300 : std::max<int>(420, static_cast<int>(s.ny) * 28 + 160));
}

std::string front_script(const ReportInputs& in) {
  const auto& m = in.options.front_metrics;
  std::string body;
  body += fmt::format("  set title {} font ',13'\n",
                      quoted(fmt::format("Trade-off of the feasible designs ({} loop)", in.front_nonlinear ? "nonlinear" : "linear")));
  body += "  unset object; unset arrow; unset label\n";
  body += fmt::format("  set xlabel {}\n  set ylabel {}\n", quoted(metric_label(m[0])), quoted(metric_label(m[1])));
  body += "  set key top right box opaque font ',10'\n";
  std::vector<std::string> plots;
  if (m.size() == 3) {
    body += "  set palette defined (0 '#fde725', 0.5 '#21918c', 1 '#440154')\n";
    body += fmt::format("  set colorbox; set cblabel {}\n", quoted(metric_label(m[2])));
    plots.push_back("'../series/front_all.csv' using 2:3:4 with points pt 7 ps 0.8 lc palette title 'feasible design'");
    plots.push_back("'../series/front.csv' using 2:3 with points pt 6 ps 2.0 lw 1.5 lc rgb '#111111' "
                    "title 'non-dominated (all three metrics)'");
  } else {
    body += "  unset colorbox\n";
    plots.push_back("'../series/front_all.csv' using 2:3 with points pt 7 ps 0.7 lc rgb '#9e9e9e' title 'feasible design'");
    plots.push_back("'../series/front.csv' using 2:3 with steps lw 1.5 lc rgb '#1f5f99' notitle");
    plots.push_back("'../series/front.csv' using 2:3 with points pt 7 ps 1.2 lc rgb '#1f5f99' title 'non-dominated'");
    if (in.front.size() <= 25)
      plots.push_back("'../series/front.csv' using 2:3:(sprintf('#%d', $1)) with labels offset 1.2,0.6 font ',9' "
                      "tc rgb '#1f5f99' notitle");
  }
  body += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  return script_frame("front", body);
}

std::string gains_script(const ReportInputs& in) {
  const Slice& s = in.slice;
  const SweepGrid& grid = in.store.grid;
  const SweepAxis& xa = grid.axes[s.ax];
  const bool xlog = xa.definition.ends_with("log");
  const std::size_t panels = in.gains.names.size();
  std::string body;
  body += "  unset object; unset arrow; unset label\n";
  body += fmt::format("  set multiplot layout {},1 title {} font ',13'\n", panels,
                      quoted(fmt::format("Optimized gains ({} form) across the grid{}", in.gains.form,
                                         s.fixed_text.empty() ? "" : " at " + s.fixed_text)));
  body += fmt::format("  set xlabel {}\n", quoted(xa.key));
  body += xlog ? "  set logscale x\n" : "  unset logscale x\n";
  if (s.ay && s.ny > 1) {
    const SweepAxis& ya = grid.axes[*s.ay];
    body += "  set palette defined (0 '#fde725', 0.5 '#21918c', 1 '#440154')\n";
    body += fmt::format("  set cbrange [{}:{}]\n", csv_number(ya.values.front()), csv_number(ya.values.back()));
    if (ya.values.front() > ya.values.back())
      body += fmt::format("  set cbrange [{}:{}]\n", csv_number(ya.values.back()), csv_number(ya.values.front()));
    if (ya.definition.ends_with("log")) body += "  set logscale cb\n";
    body += fmt::format("  set colorbox; set cblabel {}\n", quoted(ya.key));
    body += "  unset key\n";
  } else {
    body += "  unset colorbox; unset key\n";
  }
  for (std::size_t g = 0; g < panels; ++g) {
    body += fmt::format("  set ylabel {}\n", quoted(in.gains.names[g]));
    const int column = static_cast<int>(g) + 4;
    if (s.ay && s.ny > 1)
      body += fmt::format("  plot for [j=0:{}] '../series/gains.csv' using ($1 == j ? $2 : NaN):{}:3 with linespoints pt 7 ps 0.6 "
                          "lw 1.5 lc palette notitle\n", s.ny - 1, column);
    else
      body += fmt::format("  plot '../series/gains.csv' using 2:{} with linespoints pt 7 ps 0.6 lw 1.5 lc rgb '#1f5f99' notitle\n",
                          column);
  }
  body += "  unset multiplot\n";
  return script_frame("gains", body, 900, static_cast<int>(std::max<std::size_t>(1, panels)) * 230 + 80);
}

// ---- series and exports --------------------------------------------------------------------------

const std::vector<std::string>& metric_columns() {
  static const std::vector<std::string> names{"overshoot_pct", "peak_time", "settling_time", "rise_time", "band_entry_time",
                                              "steady_state_error", "effort_peak", "iae", "ise", "itae"};
  return names;
}

void write_points_csv(const ReportInputs& in, const fs::path& path) {
  const SweepGrid& grid = in.store.grid;
  std::vector<std::string> header{"idx"};
  for (const auto& a : grid.axes) header.push_back(a.key);
  for (const char* c : {"finished", "status", "verdict", "met", "judged_on", "binding", "evaluations", "classical_confirmed",
                        "optimized_confirmed", "classical_predicted_overshoot_pct", "classical_predicted_peak_time",
                        "overshoot_error_pct", "peak_time_error_pct"})
    header.emplace_back(c);
  for (const std::string& m : metric_columns()) header.push_back("classical_" + m);
  for (const std::string& m : metric_columns()) header.push_back("optimized_" + m);
  for (const std::string& m : metric_columns()) header.push_back("optimized_nonlinear_" + m);
  for (const char* f : {"parallel", "standard"})
    for (const char* g : {"kp", "ki", "kd", "filter_time", "ti", "td", "n"}) {
      if (std::string(f) == "parallel" && (std::string(g) == "ti" || std::string(g) == "td" || std::string(g) == "n")) continue;
      if (std::string(f) == "standard" && (std::string(g) == "ki" || std::string(g) == "kd" || std::string(g) == "filter_time")) continue;
      header.push_back(fmt::format("optimized_{}_{}", f, g));
    }
  std::vector<std::string> series_names;
  for (const PointView& v : in.views)
    if (const json& series = member(member(v.optimized, "controller"), "series"); series.is_object())
      for (const auto& [name, value] : series.items())
        if (std::find(series_names.begin(), series_names.end(), name) == series_names.end()) series_names.push_back(name);
  for (const auto& n : series_names) header.push_back("optimized_series_" + n);
  for (const char* c : {"search_wall_time_s", "point_wall_time_s", "error"}) header.emplace_back(c);

  std::string text = fmt::format("{}\n", fmt::join(header, ","));
  for (const PointView& v : in.views) {
    const StoredPoint& p = *v.stored;
    std::vector<std::string> row{fmt::format("{}", p.index)};
    for (double x : p.values) row.push_back(csv_number(x));
    const auto flag = [](const std::optional<bool>& b) { return b ? std::string(*b ? "1" : "0") : std::string(); };
    row.push_back(p.finished ? "1" : "0");
    row.push_back(p.finished ? p.status : "");
    row.push_back(csv_field(verdict_name(v.verdict)));
    row.push_back(p.finished && p.status == "ok" ? (p.met ? "1" : "0") : "");
    row.push_back(p.judged_on);
    row.push_back(p.binding);
    row.push_back(p.finished && p.status == "ok" ? fmt::format("{}", p.evaluations) : "");
    row.push_back(flag(p.classical_confirmed));
    row.push_back(flag(p.optimized_confirmed));
    for (const auto& x : {v.predicted_overshoot, v.predicted_peak_time, v.overshoot_error_pct, v.peak_time_error_pct})
      row.push_back(csv_optional(x));
    for (const std::string& m : metric_columns())
      row.push_back(v.classical.is_null() ? "" : csv_optional(number_at(v.classical, {"linear", m.c_str()})));
    for (const std::string& m : metric_columns())
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"linear", m.c_str()})));
    for (const std::string& m : metric_columns())
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"nonlinear", "metrics", m.c_str()})));
    for (const char* g : {"kp", "ki", "kd", "filter_time"})
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"controller", "parallel", g})));
    for (const char* g : {"kp", "ti", "td", "n"})
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"controller", "standard", g})));
    for (const auto& n : series_names)
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"controller", "series", n.c_str()})));
    row.push_back(p.finished && p.status == "ok" ? csv_number(p.search_wall_time_s) : "");
    row.push_back(p.finished ? csv_number(p.point_wall_time_s) : "");
    row.push_back(csv_field(p.error));
    text += fmt::format("{}\n", fmt::join(row, ","));
  }
  write_text(path, text);
}

void write_front_csv(const ReportInputs& in, const fs::path& path, bool with_axes) {
  std::vector<std::string> header{"idx"};
  for (const auto& m : in.options.front_metrics) header.push_back(m);
  if (with_axes) {
    for (const auto& a : in.store.grid.axes) header.push_back(a.key);
    for (const auto& g : in.gains.names) header.push_back(fmt::format("{}_{}", in.gains.form, g));
  }
  std::string text = fmt::format("{}\n", fmt::join(header, ","));
  std::vector<std::size_t> order = in.front;
  std::sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return in.front_values[a] < in.front_values[b];
  });
  for (std::size_t k : order) {
    const PointView& v = in.views[in.front_candidates[k]];
    std::vector<std::string> row{fmt::format("{}", v.stored->index)};
    for (double x : in.front_values[k]) row.push_back(csv_number(x));
    if (with_axes) {
      for (double x : v.stored->values) row.push_back(csv_number(x));
      for (const auto& g : in.gains.names) row.push_back(csv_optional(gain_of(v, in.gains, g)));
    }
    text += fmt::format("{}\n", fmt::join(row, ","));
  }
  write_text(path, text);
}

// Figure series (gnuplot reads them; every row complete).
void write_figure_series(const ReportInputs& in, const fs::path& dir, double& approx_extent) {
  fs::create_directories(dir);
  const Slice& s = in.slice;
  const SweepGrid& grid = in.store.grid;
  {  // map.csv: ix, iy, verdict code, binding code (−1 none), binding label, idx
    std::string text = "ix,iy,verdict,binding,label,idx\n";
    for (std::size_t j = 0; j < s.ny; ++j)
      for (std::size_t i = 0; i < s.nx; ++i) {
        const PointView& v = in.views[s.index(grid, i, j)];
        const std::string b = binding_of(v);
        const auto it = std::find(in.binding_keys.begin(), in.binding_keys.end(), b);
        const int code = b.empty() || it == in.binding_keys.end() ? -1 : static_cast<int>(it - in.binding_keys.begin());
        text += fmt::format("{},{},{},{},{},{}\n", i, j, static_cast<int>(v.verdict), code,
                            b.empty() ? "-" : requirement_short(b), v.stored->index);
      }
    write_text(dir / "map.csv", text);
  }
  approx_extent = in.options.approximation_threshold_pct * 2.0;
  for (const std::string which : {"overshoot", "peak_time"}) {
    std::string text = "ix,iy,error_pct,has_value,idx\n";
    std::vector<bool> flagged(s.nx * s.ny, false);
    for (std::size_t j = 0; j < s.ny; ++j)
      for (std::size_t i = 0; i < s.nx; ++i) {
        const PointView& v = in.views[s.index(grid, i, j)];
        const auto e = which == "overshoot" ? v.overshoot_error_pct : v.peak_time_error_pct;
        // A predicted peak that the simulated response does not have: the prediction fails outright.
        const bool peak_missing = which == "peak_time" && v.predicted_peak_time && !v.simulated_peak_time;
        if (e) {
          flagged[j * s.nx + i] = std::abs(*e) > in.options.approximation_threshold_pct;
          approx_extent = std::max(approx_extent, std::min(std::abs(*e), 100.0));
        }
        if (peak_missing) flagged[j * s.nx + i] = true;
        text += fmt::format("{},{},{},{},{}\n", i, j, e ? csv_number(*e) : "0", e ? 1 : (peak_missing ? 2 : 0), v.stored->index);
      }
    write_text(dir / ("approx_" + which + ".csv"), text);
    std::string outline = "x0,y0,x1,y1\n";
    for (const OutlineSegment& g : outline_cells(flagged, s.nx, s.ny))
      outline += fmt::format("{},{},{},{}\n", g.x0, g.y0, g.x1, g.y1);
    write_text(dir / ("approx_" + which + "_outline.csv"), outline);
  }
  {  // Pareto: every feasible candidate, and the front sorted by the first metric.
    std::string all = "idx";
    for (const auto& m : in.options.front_metrics) all.append(",").append(m);
    all += "\n";
    for (std::size_t k = 0; k < in.front_candidates.size(); ++k) {
      all += fmt::format("{}", in.views[in.front_candidates[k]].stored->index);
      for (double x : in.front_values[k]) all.append(",").append(csv_number(x));
      all += "\n";
    }
    write_text(dir / "front_all.csv", all);
    write_front_csv(in, dir / "front.csv", false);
  }
  {  // gains.csv: iy, x value, y value (or 0), then each gain; rows sorted by iy then ix.
    std::string text = "iy,x,y";
    for (const auto& g : in.gains.names) text.append(",").append(g);
    text += "\n";
    for (std::size_t j = 0; j < s.ny; ++j) {
      for (std::size_t i = 0; i < s.nx; ++i) {
        const PointView& v = in.views[s.index(grid, i, j)];
        std::vector<std::optional<double>> values;
        bool complete = !v.optimized.is_null();
        for (const auto& g : in.gains.names) {
          values.push_back(gain_of(v, in.gains, g));
          complete = complete && values.back().has_value();
        }
        if (!complete) continue;
        text += fmt::format("{},{},{}", j, csv_number(grid.axes[s.ax].values[i]),
                            csv_number(s.ay ? grid.axes[*s.ay].values[j] : 0.0));
        for (const auto& x : values) text.append(",").append(csv_number(*x));
        text += "\n";
      }
      text += "\n";  // a break between the lines of different y values
    }
    write_text(dir / "gains.csv", text);
  }
}

// ---- pages ---------------------------------------------------------------------------------------

Section text_section(std::string id, std::string heading, const std::string& text) {
  return {std::move(id), std::move(heading), paragraph_html(text), escape_md(text) + "\n"};
}

void add_figure(Section& s, const std::string& id, const std::string& caption,
                const std::vector<std::pair<std::string, std::string>>& figures, bool rendered) {
  const auto svg = std::find_if(figures.begin(), figures.end(), [&](const auto& f) { return f.first == id; });
  s.html += fmt::format("<figure id=\"fig-{}\">\n{}<figcaption>{}</figcaption>\n</figure>\n", id,
                        svg != figures.end() && !svg->second.empty() ? svg->second + "\n" : std::string(),
                        escape_html(caption) + fmt::format(" (data: series/, script: plots/{}.gp)", id));
  s.markdown += rendered ? fmt::format("![{}](plots/{}.svg)\n\n*{}*\n\n", id, id, escape_md(caption))
                         : fmt::format("*{}* (script: plots/{}.gp)\n\n", escape_md(caption), id);
}

void add_table(Section& s, const Table& t) {
  s.html += html_table(t);
  s.markdown += md_table(t) + "\n";
}

std::string value_cell(const std::optional<double>& v) { return v ? fmt::format("{:.4g}", *v) : std::string("—"); }
std::string data_value(const std::optional<double>& v) {
  return v ? fmt::format("data-value=\"{:.17g}\"", *v) : std::string("data-value=\"none\"");
}

}  // namespace

namespace {
SweepReportOutcome write_report(const SweepStoreContents& store, const fs::path& dir, const SweepReportOptions& options);
}  // namespace

SweepReportOutcome write_sweep_report(const SweepStoreContents& store, const fs::path& dir, const SweepReportOptions& options) {
  try {
    return write_report(store, dir, options);
  } catch (const json::exception& e) {
    throw SweepError(fmt::format("{}: a stored design summary does not have the expected form (damaged, or written by "
                                 "another specloop): {}", store.path, e.what()));
  }
}

namespace {

SweepReportOutcome write_report(const SweepStoreContents& store, const fs::path& dir, const SweepReportOptions& options) {
  ReportInputs in{store, options, {}, {}, {}, 2.0, true, {}, {}, {}, {}};
  if (store.grid.axes.empty()) throw SweepError(fmt::format("{}: the store has no axes (damaged)", store.path));
  if (store.finished() == 0)
    throw SweepError(fmt::format("{}: no point is finished yet; run the sweep first (specloop sweep …)", store.path));
  // Options.
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
  in.front_nonlinear = options.front_loop == "nonlinear";
  in.slice = make_slice(store.grid, options);

  // The settling band (for the peak-time rule), from the stored spec text or the axis varying it.
  try {
    in.band_pct = parse_spec(store.spec_text, store.path).requirements.settling_band_pct;
  } catch (const SpecError& e) {
    throw SweepError(fmt::format("{}: the stored spec text does not parse (damaged): {}", store.path, e.what()));
  }
  std::optional<std::size_t> band_axis;
  for (std::size_t a = 0; a < store.grid.axes.size(); ++a)
    if (store.grid.axes[a].key == "requirements.settling_band_pct") band_axis = a;

  for (const StoredPoint& p : store.points) in.views.push_back(view_of(p, store.path));
  in.gains = gain_set(in.views);
  for (const PointView& v : in.views) {
    const std::string b = binding_of(v);
    if (!b.empty() && std::find(in.binding_keys.begin(), in.binding_keys.end(), b) == in.binding_keys.end())
      in.binding_keys.push_back(b);
  }
  std::size_t met = 0, confirmed = 0, missed = 0, failed = 0, dropped_from_front = 0;
  for (std::size_t k = 0; k < in.views.size(); ++k) {
    const PointView& v = in.views[k];
    if (v.verdict == Verdict::met_confirmed || v.verdict == Verdict::met_linear_only) {
      ++met;
      if (v.verdict == Verdict::met_confirmed) ++confirmed;
      const double band = band_axis ? v.stored->values[*band_axis] : in.band_pct;
      std::vector<double> values;
      for (const std::string& m : options.front_metrics) {
        const auto x = optimized_metric(v, m, in.front_nonlinear, band);
        if (!x) break;
        values.push_back(*x);
      }
      if (values.size() == options.front_metrics.size()) {
        in.front_candidates.push_back(k);
        in.front_values.push_back(std::move(values));
      } else {
        ++dropped_from_front;
      }
    }
    if (v.verdict == Verdict::missed) ++missed;
    if (v.verdict == Verdict::error) ++failed;
  }
  in.front = non_dominated(in.front_values);

  SweepReportOutcome outcome;
  outcome.finished = store.finished();
  outcome.met = met;
  outcome.front_size = in.front.size();
  const std::vector<std::string> entries{"series", "plots", "points.csv", "front.csv", "report.md", "report.html"};
  write_staged(dir, entries, [&](const fs::path& staging) {
    double approx_extent = 0.0;
    write_figure_series(in, staging / "series", approx_extent);
    write_points_csv(in, staging / "points.csv");
    write_front_csv(in, staging / "front.csv", true);
    std::vector<std::pair<std::string, std::string>> scripts{
        {"feasibility", feasibility_script(in, false)},
        {"binding", feasibility_script(in, true)},
        {"approx_overshoot", approximation_script(in, "overshoot", approx_extent)},
        {"approx_peak_time", approximation_script(in, "peak_time", approx_extent)}};
    if (!in.front.empty()) scripts.emplace_back("front", front_script(in));
    if (!in.gains.names.empty()) scripts.emplace_back("gains", gains_script(in));
    const RenderedFigures rendered = write_and_render(staging / "plots", scripts, options.render_figures);
    outcome.figures_note = rendered.note;
    outcome.figures_rendered = rendered.rendered;
    const auto& figures = rendered.svgs;

    const SweepGrid& grid = store.grid;
    const Slice& s = in.slice;
    std::vector<Section> parts;
    const std::string summary = fmt::format(
        "{} of {} point(s) finished: {} met ({} confirmed on the nonlinear loop), {} missed, {} failed{}.", outcome.finished,
        store.points.size(), met, confirmed, missed, failed,
        outcome.finished < store.points.size() ? "; the rest are not run yet (rerun the sweep to continue)" : "");
    {  // The grid.
      Section g{"grid", "The grid", "", ""};
      Table t{"axes", {"axis", "key", "definition", "values"}, {}};
      for (std::size_t a = 0; a < grid.axes.size(); ++a) {
        std::vector<std::string> values;
        for (double x : grid.axes[a].values) values.push_back(short_number(x));
        t.rows.push_back({{fmt::format("{}", a + 1), ""}, {grid.axes[a].key, ""}, {grid.axes[a].definition, ""},
                          {fmt::format("{}", fmt::join(values, ", ")), ""}});
      }
      const std::string intro = fmt::format(
          "Store {} (spec {}, hash {}, shard {}, written by specloop {}). The maps show {}{}{}.", store.path, store.spec_name,
          store.spec_hash, store.shard, store.tool_version, grid.axes[s.ax].key,
          s.ay ? " × " + grid.axes[*s.ay].key : std::string(), s.fixed_text.empty() ? "" : " at " + s.fixed_text);
      g.html = paragraph_html(intro);
      g.markdown = escape_md(intro) + "\n\n";
      add_table(g, t);
      parts.push_back(std::move(g));
    }
    {  // Feasibility.
      Section f{"feasibility", "Where the spec can be met", "", ""};
      add_figure(f, "feasibility",
                 "Verdict per point: met and confirmed on the nonlinear loop, met on the linear loop only, missed (no design "
                 "meets every requirement), failed, or not run yet.", figures, outcome.figures_rendered);
      add_figure(f, "binding",
                 "The requirement that binds: for a missed point the one missed by the most (marked ×), for a met point the "
                 "one with the least room at the optimum.", figures, outcome.figures_rendered);
      Table t{"binding-counts", {"binding requirement", "met points", "missed points"}, {}};
      for (const std::string& b : in.binding_keys) {
        std::size_t m = 0, x = 0;
        for (const PointView& v : in.views) {
          if (binding_of(v) != b) continue;
          if (v.verdict == Verdict::missed) ++x;
          else if (v.verdict == Verdict::met_confirmed || v.verdict == Verdict::met_linear_only) ++m;
        }
        t.rows.push_back({{b, ""}, {fmt::format("{}", m), fmt::format("data-value=\"{}\"", m)},
                          {fmt::format("{}", x), fmt::format("data-value=\"{}\"", x)}});
      }
      const std::string words = "Over the whole grid (all slices):";
      f.html += paragraph_html(words);
      f.markdown += words + "\n\n";
      add_table(f, t);
      parts.push_back(std::move(f));
    }
    {  // Pareto front.
      Section p{"front", "Trade-off: the Pareto front", "", ""};
      const std::string intro = fmt::format(
          "Feasible designs (met points over the whole grid) measured on the {} loop; every metric minimized; a design is "
          "non-dominated when no other is at least as good in every metric and better in one. {} of {} feasible design(s) "
          "are non-dominated{}. Peak time reads as the peak-time requirements do: the time of the peak when the overshoot "
          "exceeds the {:.4g} % band and the response does not fall further below the final value afterwards, else the "
          "final entry into the band (the settling time).",
          options.front_loop, in.front.size(), in.front_candidates.size(),
          dropped_from_front ? fmt::format(" ({} met point(s) left out: a metric undefined on that loop)", dropped_from_front)
                             : std::string(),
          in.band_pct);
      p.html = paragraph_html(intro);
      p.markdown = escape_md(intro) + "\n\n";
      if (in.front.empty()) {
        const std::string none = "No feasible design with every front metric defined: no front to draw.";
        p.html += paragraph_html(none);
        p.markdown += none + "\n\n";
      } else {
        add_figure(p, "front",
                 options.front_metrics.size() == 3
                     ? "The first two metrics against each other, coloured by the third; the non-dominated designs circled."
                     : "Feasible designs, the non-dominated ones joined and numbered by point index.",
                 figures, outcome.figures_rendered);
      }
      Table t{"front-points", {"point"}, {}};
      for (const auto& a : grid.axes) t.header.push_back(a.key);
      for (const auto& m : options.front_metrics) t.header.push_back(m);
      for (const auto& g : in.gains.names) t.header.push_back(g);
      std::vector<std::size_t> order = in.front;
      std::sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return in.front_values[a] < in.front_values[b]; });
      for (std::size_t k : order) {
        const PointView& v = in.views[in.front_candidates[k]];
        std::vector<Cell> row{{fmt::format("{}", v.stored->index), fmt::format("data-idx=\"{}\"", v.stored->index)}};
        for (double x : v.stored->values) row.push_back({short_number(x), data_value(x)});
        for (double x : in.front_values[k]) row.push_back({short_number(x), data_value(x)});
        for (const auto& g : in.gains.names) {
          const auto x = gain_of(v, in.gains, g);
          row.push_back({value_cell(x), data_value(x)});
        }
        t.rows.push_back(std::move(row));
      }
      add_table(p, t);
      parts.push_back(std::move(p));
    }
    {  // The approximation.
      Section a{"approximation", "Where the second-order approximation breaks down", "", ""};
      std::size_t with_os = 0, above_os = 0, with_tp = 0, above_tp = 0, no_peak = 0;
      for (const PointView& v : in.views) {
        if (v.overshoot_error_pct) {
          ++with_os;
          if (std::abs(*v.overshoot_error_pct) > options.approximation_threshold_pct) ++above_os;
        }
        if (v.peak_time_error_pct) {
          ++with_tp;
          if (std::abs(*v.peak_time_error_pct) > options.approximation_threshold_pct) ++above_tp;
        }
        if (v.predicted_peak_time && !v.simulated_peak_time) ++no_peak;
      }
      const std::string intro = fmt::format(
          "The classical (root-locus) design at each point predicts its overshoot and peak time from the dominant closed-loop "
          "pair; the maps show the error of that prediction against the simulated response, (simulated − predicted)/predicted, "
          "with the cells beyond ±{0:.4g} % outlined. Over the whole grid: overshoot off by more than {0:.4g} % at {1} of {2} "
          "point(s) with a prediction, peak time at {3} of {4}{5}.",
          options.approximation_threshold_pct, above_os, with_os, above_tp, with_tp,
          no_peak ? fmt::format(" ({} point(s) have a predicted peak but no simulated overshoot, so no peak)", no_peak)
                  : std::string());
      a.html = paragraph_html(intro);
      a.markdown = escape_md(intro) + "\n\n";
      add_figure(a, "approx_overshoot", "Overshoot: simulated against predicted, relative error %.", figures,
                 outcome.figures_rendered);
      add_figure(a, "approx_peak_time", "Peak time: simulated against predicted, relative error %.", figures,
                 outcome.figures_rendered);
      parts.push_back(std::move(a));
    }
    if (!in.gains.names.empty()) {
      Section g{"gains", "How the optimized controller moves with the spec", "", ""};
      add_figure(g, "gains",
                 fmt::format("Optimized {} gains against {}{}.", in.gains.form, grid.axes[s.ax].key,
                             s.ay ? ", one line per value of " + grid.axes[*s.ay].key : std::string()),
                 figures, outcome.figures_rendered);
      parts.push_back(std::move(g));
    }
    if (failed) {
      Section f{"failures", "Failed points", "", ""};
      Table t{"failed-points", {"point", "error"}, {}};
      for (const PointView& v : in.views)
        if (v.verdict == Verdict::error) t.rows.push_back({{fmt::format("{}", v.stored->index), ""}, {v.stored->error, ""}});
      add_table(f, t);
      parts.push_back(std::move(f));
    }
    parts.push_back(text_section(
        "files", "Files",
        "points.csv: every grid point with its verdict, binding requirement, the classical prediction and errors, every "
        "metric of the classical and optimized designs (linear and nonlinear) and the controller in each form; front.csv: "
        "the non-dominated designs; series/: the data of each figure; plots/: each figure's gnuplot script, SVG and PNG "
        "(re-render: cd plots && gnuplot NAME.gp)."));
    {
      Section sp{"spec", "The spec as stored", "", ""};
      sp.html = "<pre>" + escape_html(store.spec_text) + "</pre>\n";
      sp.markdown = "```toml\n" + store.spec_text + (store.spec_text.ends_with('\n') ? "" : "\n") + "```\n";
      parts.push_back(std::move(sp));
    }
    parts.push_back(text_section("safety", "Safety", kSafetyCaution));

    if (!outcome.figures_rendered) {
      parts.insert(parts.begin() + 1, text_section("figures-note", "Figures", outcome.figures_note));
    }
    write_pages(staging, fmt::format("Sweep of {}", store.spec_name), "specloop sweep report", summary, met > 0, parts,
                fmt::format("specloop {} — store {}", SPECLOOP_VERSION, store.path));
  });
  const fs::path target = dir.empty() ? fs::path(".") : dir;
  outcome.html = target / "report.html";
  outcome.markdown = target / "report.md";
  outcome.points_csv = target / "points.csv";
  return outcome;
}

}  // namespace

}  // namespace specloop
