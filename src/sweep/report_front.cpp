// The sweep report's Pareto front (report_sections.hpp): the feasible designs measured on one loop,
// the non-dominated ones among them (report_view.cpp), as series, a figure (two metrics against
// each other, a third as colour), front.csv and the section's table.
#include <fmt/format.h>

#include <algorithm>

#include "sweep/report_sections.hpp"

namespace specloop::sweep_report {

using namespace page;

std::string front_script(const ReportView& in) {
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

void write_front_csv(const ReportView& in, const fs::path& path, bool with_axes) {
  std::vector<std::string> header{"idx"};
  for (const auto& m : in.options.front_metrics) header.push_back(m);
  if (with_axes) {
    for (const auto& a : in.store.grid.axes) header.push_back(a.key);
    for (const auto& g : in.gains.names) header.push_back(fmt::format("{}_{}", in.gains.form, g));
  }
  std::string text = fmt::format("{}\n", fmt::join(header, ","));
  for (std::size_t k : front_in_order(in)) {
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

void write_front_series(const ReportView& in, const fs::path& dir) {
  // Every feasible candidate, and the front sorted by its metrics.
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

Section front_section(const ReportView& in, const Figures& figures, bool rendered) {
  const SweepReportOptions& options = in.options;
  Section p{"front", "Trade-off: the Pareto front", "", ""};
  const std::string intro = fmt::format(
      "Feasible designs (met points over the whole grid) measured on the {} loop; every metric minimized; a design is "
      "non-dominated when no other is at least as good in every metric and better in one. {} of {} feasible design(s) "
      "are non-dominated{}. Peak time reads as the peak-time requirements do: the time of the peak when the overshoot "
      "exceeds the {:.4g} % band and the response does not fall further below the final value afterwards, else the "
      "final entry into the band (the settling time).",
      options.front_loop, in.front.size(), in.front_candidates.size(),
      in.dropped_from_front ? fmt::format(" ({} met point(s) left out: a metric undefined on that loop)", in.dropped_from_front)
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
               figures, rendered);
  }
  Table t{"front-points", {"point"}, {}};
  for (const auto& a : in.store.grid.axes) t.header.push_back(a.key);
  for (const auto& m : options.front_metrics) t.header.push_back(m);
  for (const auto& g : in.gains.names) t.header.push_back(g);
  for (std::size_t k : front_in_order(in)) {
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
  return p;
}

}  // namespace specloop::sweep_report
