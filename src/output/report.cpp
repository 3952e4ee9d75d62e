// The design report (report.hpp): the figures' data from the design layer's traces, then the CSV
// series, the gnuplot scripts and the HTML and Markdown pages, written through a staging folder.
// The pieces live in report_figures.cpp, report_series.cpp, report_tables.cpp and
// report_sections.cpp (report_parts.hpp).
#include "specloop/output/report.hpp"

#include <algorithm>
#include <cmath>
#include <fmt/format.h>

#include "output/page_kit.hpp"
#include "output/report_parts.hpp"
#include "specloop/output/json_io.hpp"

namespace specloop {

namespace fs = std::filesystem;
using namespace page;

std::string shown_unit(std::string_view unit, const UnitsSpec& units) {
  if (unit == "s") return units.time;
  if (unit == "1/s") return fmt::format("1/{}", units.time);
  if (unit == "rad/s") return fmt::format("rad/{}", units.time);
  if (unit == "controller units") return fmt::format("{} per {}", units.input, units.output);
  return std::string(unit);
}

std::string requirement_unit(const Requirement& r, const UnitsSpec& units) {
  return r.entry ? requirement_unit_name(r.entry->unit, units) : shown_unit(r.unit, units);
}

std::string controller_action(const DesignRun& run) { return run.problem.action < 0.0 ? "reverse" : "direct"; }

namespace design_report {

namespace {

// After a response has settled, the time axis runs a quarter of its settling time further.
constexpr double kRoomAfterSettling = 1.25;

}  // namespace

ReportData report_data(const DesignRun& run) {
  const Problem& problem = run.problem;
  const Spec& spec = problem.spec;
  ReportData data;
  data.traces = design_traces(run);
  // Until when each plotted response must be in view: its reported settling time with room
  // after it, or its whole trace when it does not settle.
  std::vector<std::pair<double, double>> wanted;  // (settled or end, trace end)
  auto want = [&](const std::optional<double>& settled, double end) {
    wanted.emplace_back(settled ? std::max(*settled, std::min(end, kRoomAfterSettling * *settled)) : end, end);
  };
  for (const ResponseTrace& t : data.traces.responses) {
    const Design* d = run.find(t.design);
    const double end = t.time_s.back();
    if (!t.nonlinear) {
      if (plotted(t)) want(d->simulated.settling_time_s, end);
      continue;
    }
    // The recommended design on the nonlinear loop: the settling time its confirmation reported.
    const std::optional<double> reported =
        d->nonlinear && d->nonlinear->status == NonlinearStatus::ok ? d->nonlinear->simulated.settling_time_s : std::nullopt;
    want(reported, end);
    if (spec.disturbance.size != 0.0) want(std::nullopt, std::min(end, 2.0 * spec.disturbance.time_s));
  }
  double horizon = 0.0;
  for (const auto& [until, end] : wanted) horizon = std::max(horizon, until);
  // The requirement envelope in view too (settling limit, peak-time limit), within the data.
  double data_end = 0.0;
  for (const auto& [until, end] : wanted) data_end = std::max(data_end, end);
  std::optional<double> tp_limit = spec.requirements.peak_time_max_s;
  if (spec.requirements.peak_time_ratio && problem.reference_peak_time_s) {
    const double v = *spec.requirements.peak_time_ratio * *problem.reference_peak_time_s;
    tp_limit = tp_limit ? std::min(*tp_limit, v) : v;
  }
  for (const auto& limit : {spec.requirements.settling_time_max_s, tp_limit})
    if (limit) horizon = std::max(horizon, std::min(data_end, 1.1 * *limit));
  data.peak_time_limit_s = tp_limit;
  data.plot_horizon_s = horizon > 0.0 && std::isfinite(horizon) ? horizon : 1.0;
  return data;
}

}  // namespace design_report

ReportOutcome write_design_outputs(const DesignRun& run, const fs::path& dir, const ReportOptions& options) {
  using namespace design_report;
  const ReportData data = report_data(run);
  ReportOutcome outcome;
  write_staged(dir, {"series", "plots", "report.md", "report.html", "result.json"}, [&](const fs::path& staging) {
    write_text(staging / "result.json", result_json(run).dump(2) + "\n");
    const SplaneView view = write_series(run, data, staging / "series");
    const double zeta = run.characterization.damping_ratio;
    std::vector<std::pair<std::string, std::string>> scripts{{"step", step_script(run, data, false)},
                                                             {"effort", step_script(run, data, true)},
                                                             {"splane", splane_script(run, data, zeta, view)},
                                                             {"frequency", frequency_script(run, data)}};
    if (run.robust) scripts.emplace_back("envelope", envelope_script(run, data));
    if (run.problem.needs_load) {
      write_load_series(run, data, staging / "series");
      scripts.emplace_back("load", load_script(run, data));
    }
    const RenderedFigures figures = write_and_render(staging / "plots", scripts, options.render_figures);
    outcome.figures_note = figures.note;
    outcome.figures_rendered = figures.rendered;
    const Spec& spec = run.problem.spec;
    const bool good = run.met && recommended_design(run) && recommended_design(run)->nonlinear &&
                      recommended_design(run)->nonlinear->confirmed;
    write_pages(staging, spec.title.empty() ? spec.name : spec.title, "specloop report", verdict_line(run), good,
                sections(run, data, outcome, figures.svgs), fmt::format("specloop {} — spec {}", SPECLOOP_VERSION, spec.path));
  });
  const fs::path target = dir.empty() ? fs::path(".") : dir;
  outcome.result = target / "result.json";
  outcome.html = target / "report.html";
  outcome.markdown = target / "report.md";
  return outcome;
}

}  // namespace specloop
