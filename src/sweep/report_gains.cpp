// The sweep report's gains (report_sections.hpp): how the optimized controller moves across the
// map slice — one panel per gain against the first map axis, one line per value of the second.
#include <fmt/format.h>

#include <algorithm>

#include "sweep/report_sections.hpp"

namespace specloop::sweep_report {

using namespace page;

void write_gains_series(const ReportView& in, const fs::path& dir) {
  const Slice& s = in.slice;
  const SweepGrid& grid = in.store.grid;
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

std::string gains_script(const ReportView& in) {
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

Section gains_section(const ReportView& in, const Figures& figures, bool rendered) {
  const SweepGrid& grid = in.store.grid;
  const Slice& s = in.slice;
  Section g{"gains", "How the optimized controller moves with the spec", "", ""};
  add_figure(g, "gains",
             fmt::format("Optimized {} gains against {}{}.", in.gains.form, grid.axes[s.ax].key,
                         s.ay ? ", one line per value of " + grid.axes[*s.ay].key : std::string()),
             figures, rendered);
  return g;
}

}  // namespace specloop::sweep_report
