// The sweep report's maps (report_sections.hpp): the verdict and binding maps over the slice, and
// the maps of the classical design's second-order prediction error with the cells beyond the
// threshold outlined — each a series, a gnuplot script, and its section of the pages. Cells sit at
// integer indices (boxxyerror, one plot clause per category so each gets a key entry); tics carry
// the axis values, so log and listed axes draw as evenly as linear ones.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>

#include "sweep/report_sections.hpp"

namespace specloop::sweep_report {

using namespace page;

namespace {

constexpr const char* kCategoryColours[] = {"#1f5f99", "#c26a1b", "#7b5ea7", "#2e7d32", "#c62828",
                                            "#00838f", "#8d6e63", "#ad1457", "#546e7a", "#9e9d24"};

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

// A map figure: the frame and settings in `body`, then the plot clauses; its height follows the
// slice's rows.
std::string map_script(const Slice& s, const std::string& name, std::string body, const std::vector<std::string>& plots) {
  body += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  return script_frame(name, body, 900, s.ny == 1 ? 300 : std::max<int>(420, static_cast<int>(s.ny) * 28 + 160));
}

bool cells_labelled(const Slice& s) { return s.nx <= 14 && s.ny <= 14; }

}  // namespace

// ---- verdict and binding -------------------------------------------------------------------------

void write_map_series(const ReportView& in, const fs::path& dir) {
  const Slice& s = in.slice;
  const SweepGrid& grid = in.store.grid;
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

std::string verdict_map_script(const ReportView& in) {
  std::vector<std::string> plots;
  for (std::size_t c = 0; c < std::size(kVerdicts); ++c)
    plots.push_back(fmt::format("'../series/map.csv' using 1:($3 == {} ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 "
                                "border lc rgb 'white' fc rgb '{}' title {}",
                                c, verdict_colour(kVerdicts[c]), quoted(verdict_name(kVerdicts[c]))));
  return map_script(in.slice, "feasibility", map_frame(in.store.grid, in.slice, "Verdict of each point"), plots);
}

std::string binding_map_script(const ReportView& in) {
  std::vector<std::string> plots;
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
  if (cells_labelled(in.slice))
    plots.push_back("'../series/map.csv' using 1:($4 >= 0 ? $2 : NaN):5 with labels offset 0,1.0 font ',9' tc rgb '#111111' notitle");
  return map_script(in.slice, "binding",
                    map_frame(in.store.grid, in.slice,
                              "Binding requirement (missed by the most, or the tightest at the optimum)"),
                    plots);
}

Section feasibility_section(const ReportView& in, const Figures& figures, bool rendered) {
  Section f{"feasibility", "Where the spec can be met", "", ""};
  add_figure(f, "feasibility",
             "Verdict per point: met and confirmed on the nonlinear loop, met on the linear loop only, missed (no design "
             "meets every requirement), failed, or not run yet.", figures, rendered);
  add_figure(f, "binding",
             "The requirement that binds: for a missed point the one missed by the most (marked ×), for a met point the "
             "one with the least room at the optimum.", figures, rendered);
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
  return f;
}

// ---- the classical design's prediction error -----------------------------------------------------

namespace {

std::optional<double> error_of(const PointView& v, const std::string& which) {
  return which == "overshoot" ? v.overshoot_error_pct : v.peak_time_error_pct;
}

}  // namespace

double approximation_extent(const ReportView& in) {
  const Slice& s = in.slice;
  double extent = in.options.approximation_threshold_pct * 2.0;
  for (const std::string which : {"overshoot", "peak_time"})
    for (std::size_t j = 0; j < s.ny; ++j)
      for (std::size_t i = 0; i < s.nx; ++i)
        if (const auto e = error_of(in.views[s.index(in.store.grid, i, j)], which))
          extent = std::max(extent, std::min(std::abs(*e), 100.0));
  return extent;
}

void write_approximation_series(const ReportView& in, const fs::path& dir) {
  const Slice& s = in.slice;
  const SweepGrid& grid = in.store.grid;
  for (const std::string which : {"overshoot", "peak_time"}) {
    std::string text = "ix,iy,error_pct,has_value,idx\n";
    std::vector<bool> flagged(s.nx * s.ny, false);
    for (std::size_t j = 0; j < s.ny; ++j)
      for (std::size_t i = 0; i < s.nx; ++i) {
        const PointView& v = in.views[s.index(grid, i, j)];
        const auto e = error_of(v, which);
        // A predicted peak that the simulated response does not have: the prediction fails outright.
        const bool peak_missing = which == "peak_time" && v.predicted_peak_time && !v.simulated_peak_time;
        if (e) flagged[j * s.nx + i] = std::abs(*e) > in.options.approximation_threshold_pct;
        if (peak_missing) flagged[j * s.nx + i] = true;
        text += fmt::format("{},{},{},{},{}\n", i, j, e ? csv_number(*e) : "0", e ? 1 : (peak_missing ? 2 : 0), v.stored->index);
      }
    write_text(dir / ("approx_" + which + ".csv"), text);
    std::string outline = "x0,y0,x1,y1\n";
    for (const OutlineSegment& g : outline_cells(flagged, s.nx, s.ny))
      outline += fmt::format("{},{},{},{}\n", g.x0, g.y0, g.x1, g.y1);
    write_text(dir / ("approx_" + which + "_outline.csv"), outline);
  }
}

std::string approximation_script(const ReportView& in, const std::string& which, double extent) {
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
  return map_script(s, name, body, plots);
}

Section approximation_section(const ReportView& in, const Figures& figures, bool rendered) {
  const double threshold = in.options.approximation_threshold_pct;
  Section a{"approximation", "Where the second-order approximation breaks down", "", ""};
  std::size_t with_os = 0, above_os = 0, with_tp = 0, above_tp = 0, no_peak = 0;
  for (const PointView& v : in.views) {
    if (v.overshoot_error_pct) {
      ++with_os;
      if (std::abs(*v.overshoot_error_pct) > threshold) ++above_os;
    }
    if (v.peak_time_error_pct) {
      ++with_tp;
      if (std::abs(*v.peak_time_error_pct) > threshold) ++above_tp;
    }
    if (v.predicted_peak_time && !v.simulated_peak_time) ++no_peak;
  }
  const std::string intro = fmt::format(
      "The classical (root-locus) design at each point predicts its overshoot and peak time from the dominant closed-loop "
      "pair; the maps show the error of that prediction against the simulated response, (simulated − predicted)/predicted, "
      "with the cells beyond ±{0:.4g} % outlined. Over the whole grid: overshoot off by more than {0:.4g} % at {1} of {2} "
      "point(s) with a prediction, peak time at {3} of {4}{5}.",
      threshold, above_os, with_os, above_tp, with_tp,
      no_peak ? fmt::format(" ({} point(s) have a predicted peak but no simulated overshoot, so no peak)", no_peak)
              : std::string());
  a.html = paragraph_html(intro);
  a.markdown = escape_md(intro) + "\n\n";
  add_figure(a, "approx_overshoot", "Overshoot: simulated against predicted, relative error %.", figures, rendered);
  add_figure(a, "approx_peak_time", "Peak time: simulated against predicted, relative error %.", figures, rendered);
  return a;
}

}  // namespace specloop::sweep_report
