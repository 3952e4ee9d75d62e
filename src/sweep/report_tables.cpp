// The sweep report's tables and text (report_sections.hpp): points.csv, the grid's axes, the failed
// points, the list of files, the stored spec; and the small page and CSV helpers every section uses.
#include <fmt/format.h>

#include <algorithm>

#include "sweep/report_sections.hpp"

namespace specloop::sweep_report {

using namespace page;

// ---- helpers -------------------------------------------------------------------------------------

std::string short_number(double v) { return fmt::format("{:.4g}", v); }

std::string csv_field(const std::string& text) {
  if (text.find_first_of(",\"\n\r") == std::string::npos) return text;
  std::string out = "\"";
  for (char c : text) out += c == '"' ? std::string("\"\"") : std::string(1, c);
  return out + "\"";
}
std::string csv_optional(const std::optional<double>& v) { return v ? csv_number(*v) : std::string(); }

std::string value_cell(const std::optional<double>& v) { return v ? fmt::format("{:.4g}", *v) : std::string("—"); }
std::string data_value(const std::optional<double>& v) {
  return v ? fmt::format("data-value=\"{:.17g}\"", *v) : std::string("data-value=\"none\"");
}

Section text_section(std::string id, std::string heading, const std::string& text) {
  return {std::move(id), std::move(heading), paragraph_html(text), escape_md(text) + "\n"};
}

void add_figure(Section& s, const std::string& id, const std::string& caption, const Figures& figures, bool rendered) {
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

// ---- points.csv ----------------------------------------------------------------------------------

namespace {

const std::vector<std::string>& metric_columns() {
  static const std::vector<std::string> names{"overshoot_pct", "peak_time", "settling_time", "rise_time", "band_entry_time",
                                              "steady_state_error", "effort_peak", "iae", "ise", "itae"};
  return names;
}

}  // namespace

void write_points_csv(const ReportView& in, const fs::path& path) {
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
      row.push_back(v.classical.is_null() ? "" : csv_optional(number_at(v.classical, {"simulated", m.c_str()})));
    for (const std::string& m : metric_columns())
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"simulated", m.c_str()})));
    for (const std::string& m : metric_columns())
      row.push_back(v.optimized.is_null() ? "" : csv_optional(number_at(v.optimized, {"nonlinear", "simulated", m.c_str()})));
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

// ---- sections ------------------------------------------------------------------------------------

Section grid_section(const ReportView& in) {
  const SweepStoreContents& store = in.store;
  const SweepGrid& grid = store.grid;
  const Slice& s = in.slice;
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
  return g;
}

Section failures_section(const ReportView& in) {
  Section f{"failures", "Failed points", "", ""};
  Table t{"failed-points", {"point", "error"}, {}};
  for (const PointView& v : in.views)
    if (v.verdict == Verdict::error) t.rows.push_back({{fmt::format("{}", v.stored->index), ""}, {v.stored->error, ""}});
  add_table(f, t);
  return f;
}

Section files_section() {
  return text_section(
      "files", "Files",
      "points.csv: every grid point with its verdict, binding requirement, the classical prediction and errors, every "
      "metric of the classical and optimized designs (linear and nonlinear) and the controller in each form; front.csv: "
      "the non-dominated designs; series/: the data of each figure; plots/: each figure's gnuplot script, SVG and PNG "
      "(re-render: cd plots && gnuplot NAME.gp).");
}

Section spec_section(const ReportView& in) {
  const std::string& text = in.store.spec_text;
  Section sp{"spec", "The spec as stored", "", ""};
  sp.html = "<pre>" + escape_html(text) + "</pre>\n";
  sp.markdown = "```toml\n" + text + (text.ends_with('\n') ? "" : "\n") + "```\n";
  return sp;
}

}  // namespace specloop::sweep_report
