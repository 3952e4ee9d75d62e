// The sweep report (sweep_report.hpp): the view of the store (report_view.cpp), then each section's
// series, figures and part of the pages (report_maps.cpp, report_front.cpp, report_gains.cpp,
// report_tables.cpp), written into a staging folder and moved in; the outline of flagged cells.
#include "specloop/sweep/sweep_report.hpp"

#include <fmt/format.h>

#include "specloop/output/report.hpp"
#include "sweep/report_sections.hpp"

namespace specloop {

namespace fs = std::filesystem;

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

using namespace page;
using namespace sweep_report;

// Every series, points.csv and front.csv; then the figures' scripts, rendered when asked.
RenderedFigures write_data_and_figures(const ReportView& in, const fs::path& staging) {
  const fs::path series = staging / "series";
  fs::create_directories(series);
  write_map_series(in, series);
  write_approximation_series(in, series);
  write_front_series(in, series);
  write_gains_series(in, series);
  write_points_csv(in, staging / "points.csv");
  write_front_csv(in, staging / "front.csv", true);
  const double extent = approximation_extent(in);
  std::vector<std::pair<std::string, std::string>> scripts{
      {"feasibility", verdict_map_script(in)},
      {"binding", binding_map_script(in)},
      {"approx_overshoot", approximation_script(in, "overshoot", extent)},
      {"approx_peak_time", approximation_script(in, "peak_time", extent)}};
  if (!in.front.empty()) scripts.emplace_back("front", front_script(in));
  if (!in.gains.names.empty()) scripts.emplace_back("gains", gains_script(in));
  return write_and_render(staging / "plots", scripts, in.options.render_figures);
}

// The pages' sections, in order.
std::vector<Section> sections(const ReportView& in, const RenderedFigures& rendered) {
  const Figures& figures = rendered.svgs;
  std::vector<Section> parts;
  parts.push_back(grid_section(in));
  parts.push_back(feasibility_section(in, figures, rendered.rendered));
  parts.push_back(front_section(in, figures, rendered.rendered));
  parts.push_back(approximation_section(in, figures, rendered.rendered));
  if (!in.gains.names.empty()) parts.push_back(gains_section(in, figures, rendered.rendered));
  if (in.failed) parts.push_back(failures_section(in));
  parts.push_back(files_section());
  parts.push_back(spec_section(in));
  parts.push_back(text_section("safety", "Safety", kSafetyCaution));
  if (!rendered.rendered) parts.insert(parts.begin() + 1, text_section("figures-note", "Figures", rendered.note));
  return parts;
}

SweepReportOutcome write_report(const SweepStoreContents& store, const fs::path& dir, const SweepReportOptions& options) {
  const ReportView in = make_view(store, options);
  SweepReportOutcome outcome;
  outcome.finished = store.finished();
  outcome.met = in.met;
  outcome.front_size = in.front.size();
  const std::vector<std::string> entries{"series", "plots", "points.csv", "front.csv", "report.md", "report.html"};
  write_staged(dir, entries, [&](const fs::path& staging) {
    const RenderedFigures rendered = write_data_and_figures(in, staging);
    outcome.figures_note = rendered.note;
    outcome.figures_rendered = rendered.rendered;
    const std::string summary = fmt::format(
        "{} of {} point(s) finished: {} met ({} confirmed on the nonlinear loop), {} missed, {} failed{}.", outcome.finished,
        store.points.size(), in.met, in.confirmed, in.missed, in.failed,
        outcome.finished < store.points.size() ? "; the rest are not run yet (rerun the sweep to continue)" : "");
    write_pages(staging, fmt::format("Sweep of {}", store.spec_name), "specloop sweep report", summary, in.met > 0,
                sections(in, rendered), fmt::format("specloop {} — store {}", SPECLOOP_VERSION, store.path));
  });
  const fs::path target = dir.empty() ? fs::path(".") : dir;
  outcome.html = target / "report.html";
  outcome.markdown = target / "report.md";
  outcome.points_csv = target / "points.csv";
  return outcome;
}

}  // namespace

SweepReportOutcome write_sweep_report(const SweepStoreContents& store, const fs::path& dir, const SweepReportOptions& options) {
  try {
    return write_report(store, dir, options);
  } catch (const nlohmann::json::exception& e) {
    throw SweepError(fmt::format("{}: a stored design summary does not have the expected form (damaged, or written by "
                                 "another specloop): {}", store.path, e.what()));
  }
}

}  // namespace specloop
