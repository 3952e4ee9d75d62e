// Internal: the sweep report's sections, each written from the view (report_view.hpp) — its
// series (series/*.csv), its gnuplot script and its part of the pages — and the exports.
//   report_maps.cpp    the verdict map, the binding map, the classical-error maps
//   report_front.cpp   the Pareto front (and front.csv)
//   report_gains.cpp   the optimized gains across the grid
//   report_tables.cpp  points.csv, the grid, failed points, files, the stored spec; page helpers
#pragma once

#include <filesystem>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "output/page_kit.hpp"
#include "sweep/report_view.hpp"

namespace specloop::sweep_report {

namespace fs = std::filesystem;

/// Rendered figures: (name, inline SVG), as page::write_and_render returns them.
using Figures = std::vector<std::pair<std::string, std::string>>;

// ---- page and CSV helpers (report_tables.cpp) ----------------------------------------------------

std::string short_number(double v);                          // 4 significant digits
std::string csv_field(const std::string& text);               // quoted when it holds , " or a newline
std::string csv_optional(const std::optional<double>& v);     // "" for none
std::string value_cell(const std::optional<double>& v);       // 4 significant digits, "—" for none
std::string data_value(const std::optional<double>& v);       // the data-value attribute of a cell
page::Section text_section(std::string id, std::string heading, const std::string& text);
void add_figure(page::Section& s, const std::string& id, const std::string& caption, const Figures& figures,
                bool rendered);
void add_table(page::Section& s, const page::Table& t);

// ---- verdict and binding maps, classical-error maps (report_maps.cpp) ----------------------------

/// series/map.csv: ix, iy, verdict code, binding code (−1 none), binding label, idx.
void write_map_series(const ReportView& in, const fs::path& series_dir);
std::string verdict_map_script(const ReportView& in);
std::string binding_map_script(const ReportView& in);
/// "Where the spec can be met": both maps and the binding counts over the whole grid.
page::Section feasibility_section(const ReportView& in, const Figures& figures, bool rendered);

/// The colour scale's extent of the error maps: twice the threshold, widened to the largest
/// |error| in the slice (at most 100 %).
double approximation_extent(const ReportView& in);
/// series/approx_{overshoot,peak_time}.csv and their outlines (the cells beyond the threshold).
void write_approximation_series(const ReportView& in, const fs::path& series_dir);
/// `which`: "overshoot" or "peak_time".
std::string approximation_script(const ReportView& in, const std::string& which, double extent);
page::Section approximation_section(const ReportView& in, const Figures& figures, bool rendered);

// ---- the Pareto front (report_front.cpp) ---------------------------------------------------------

/// The non-dominated designs sorted by their metrics; with_axes adds the axis values and the gains
/// (DIR/front.csv), without them it is the figure's series/front.csv.
void write_front_csv(const ReportView& in, const fs::path& path, bool with_axes);
/// series/front_all.csv (every feasible candidate) and series/front.csv.
void write_front_series(const ReportView& in, const fs::path& series_dir);
std::string front_script(const ReportView& in);
page::Section front_section(const ReportView& in, const Figures& figures, bool rendered);

// ---- the gains (report_gains.cpp) ----------------------------------------------------------------

/// series/gains.csv: iy, x value, y value (or 0), then each gain; rows sorted by iy then ix.
void write_gains_series(const ReportView& in, const fs::path& series_dir);
std::string gains_script(const ReportView& in);
page::Section gains_section(const ReportView& in, const Figures& figures, bool rendered);

// ---- tables and text (report_tables.cpp) ---------------------------------------------------------

/// DIR/points.csv: every grid point with its verdict, metrics and controller.
void write_points_csv(const ReportView& in, const fs::path& path);
page::Section grid_section(const ReportView& in);
page::Section failures_section(const ReportView& in);
page::Section files_section();
page::Section spec_section(const ReportView& in);

}  // namespace specloop::sweep_report
