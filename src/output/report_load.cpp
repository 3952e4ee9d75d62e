// The design report's load-response figure (report_parts.hpp), for a spec that requires the load
// response (README, "Regulators"): each design's response to the step load at the plant input on
// the linear loop, with the load_peak_max limit and the recovery band and time.
#include <algorithm>
#include <cmath>
#include <fmt/format.h>

#include "output/report_parts.hpp"

namespace specloop::design_report {

using namespace page;

namespace {

// The figure's time axis: each plotted design's recovery time with a quarter more (its whole
// response when it has none), and the recovery-time limit; at most the longest trace.
double load_horizon(const DesignRun& run, const ReportData& data) {
  double horizon = 0.0, end = 0.0;
  for (const ResponseTrace& t : data.traces.load) {
    if (!plotted(t)) continue;
    end = std::max(end, t.time_s.back());
    const Design* d = run.find(t.design);
    const std::optional<double> recovered = d ? d->simulated.load_recovery_time_s : std::nullopt;
    horizon = std::max(horizon, recovered && *recovered > 0.0 ? std::min(t.time_s.back(), 1.25 * *recovered) : t.time_s.back());
  }
  if (const auto& limit = run.problem.spec.requirements.load_recovery_time_max_s)
    horizon = std::max(horizon, std::min(end, 1.1 * *limit));
  return horizon > 0.0 && std::isfinite(horizon) ? horizon : 1.0;
}

}  // namespace

std::string load_file(const ResponseTrace& t) { return fmt::format("load_{}.csv", role_name(t.design)); }

void write_load_series(const DesignRun& run, const ReportData& data, const fs::path& dir) {
  const double horizon = load_horizon(run, data);
  for (const ResponseTrace& t : data.traces.load) {
    const auto rows = static_cast<std::size_t>(std::upper_bound(t.time_s.begin(), t.time_s.end(), horizon) - t.time_s.begin());
    const std::size_t stride = std::max<std::size_t>(1, rows / 2000);
    std::vector<double> time, y;
    for (std::size_t k = 0; k < rows; k += stride) {
      time.push_back(t.time_s[k]);
      y.push_back(t.output[k]);
    }
    write_csv(dir / load_file(t), {"time_s", "output"}, {&time, &y});
  }
}

std::string load_script(const DesignRun& run, const ReportData& data) {
  const Problem& problem = run.problem;
  const Spec& spec = problem.spec;
  const Requirements& req = spec.requirements;
  const UnitsSpec& units = spec.units;
  const double band = load_band(problem);
  std::string s;
  s += fmt::format("  set title {} font ',13'\n",
                   quoted(fmt::format("Load response y(t): a step load of {:.4g} {} at the plant input", load_size(spec),
                                      units.input)));
  s += fmt::format("  set xlabel {}\n", quoted(fmt::format("time after the load step ({})", units.time)));
  s += fmt::format("  set ylabel {}\n", quoted(fmt::format("y ({})", units.output)));
  s += fmt::format("  set xrange [0:{}]\n", csv_number(load_horizon(run, data)));
  s += "  set key outside right top vertical Left reverse box opaque font ',10' samplen 2\n";
  s += "  unset object; unset arrow; unset label\n";
  std::vector<std::string> plots;
  if (req.load_peak_max) {
    plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 title {}", csv_number(*req.load_peak_max),
                                quoted(fmt::format("load_peak_max ±{:.4g} {}", *req.load_peak_max, units.output))));
    plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 notitle", csv_number(-*req.load_peak_max)));
  }
  if (req.load_recovery_time_max_s) {
    const double tr = *req.load_recovery_time_max_s;
    for (double edge : {band, -band})
      s += fmt::format("  set arrow from {},{} to graph 1,first {} nohead lc rgb '#6a1b9a' dt 3 lw 1.2\n", csv_number(tr),
                       csv_number(edge), csv_number(edge));
    s += fmt::format("  set arrow from {},graph 0 to {},graph 1 nohead lc rgb '#6a1b9a' dt 3 lw 1\n", csv_number(tr), csv_number(tr));
    // The limit's legend entry (the arrows have none): a line off the axis's range.
    plots.push_back(fmt::format("NaN with lines lc rgb '#6a1b9a' dt 3 lw 1.2 title {}",
                                quoted(fmt::format("recovery {:.4g} {} into ±{:.4g} {}", tr, units.time, band, units.output))));
  }
  for (const ResponseTrace& t : data.traces.load) {
    if (!plotted(t)) continue;
    const std::size_t rows = std::min<std::size_t>(t.time_s.size(), 2000);
    plots.push_back(fmt::format("'../series/{}' every {} using 1:2 with lines lc rgb '{}' lw {} title {}", load_file(t),
                                std::max<std::size_t>(1, rows / 700), colour_of(t.design, false),
                                t.design == DesignRole::reference ? "1.2" : "2",
                                quoted(t.design == DesignRole::reference ? name_of(t.design) + " (P only)" : name_of(t.design))));
  }
  s += plot_command(plots, "no stable design to show");
  return script_frame("load", s);
}

}  // namespace specloop::design_report
