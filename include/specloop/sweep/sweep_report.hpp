// The sweep report: what a finished (or part-finished) sweep store says, as maps over two varied
// keys, the Pareto front of the feasible designs, where the second-order approximation breaks
// down, how the optimized gains move, and CSV files of everything.
#pragma once

#include <cstddef>
#include <filesystem>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "specloop/sweep/sweep.hpp"

namespace specloop {

struct SweepReportOptions {
  /// The two axes of the maps (one for a one-axis grid); empty: the grid's first two.
  std::vector<std::string> map_keys;
  /// Values for the axes not on the maps ("KEY=VALUE", a value of that axis); default: each
  /// such axis at its first value.
  std::vector<std::string> at;
  /// Two or three metrics for the Pareto front, each minimized: overshoot_pct, peak_time,
  /// settling_time, rise_time, effort_peak, iae, ise, itae.
  std::vector<std::string> front_metrics{"peak_time", "effort_peak"};
  /// Which loop the front's metrics are read on: "nonlinear" (the confirmation) or "linear".
  std::string front_loop = "nonlinear";
  /// |relative error| of the second-order prediction, %, above which a cell is outlined.
  double approximation_threshold_pct = 10.0;
  bool render_figures = true;
};

/// Where the outline of a set of map cells runs: one unit edge per segment, on the cell grid
/// whose cell (i, j) spans [i − ½, i + ½] × [j − ½, j + ½].
struct OutlineSegment {
  double x0, y0, x1, y1;
};
/// The boundary of the flagged cells of an nx × ny grid (`flagged[j * nx + i]`): every edge between
/// a flagged cell and an unflagged or outside one, each once.
std::vector<OutlineSegment> outline_cells(const std::vector<bool>& flagged, std::size_t nx, std::size_t ny);

struct SweepReportOutcome {
  std::filesystem::path html, markdown, points_csv;
  bool figures_rendered = false;
  std::string figures_note;
  std::size_t finished = 0, met = 0, front_size = 0;
};

/// Writes DIR/report.html, DIR/report.md, DIR/points.csv, DIR/front.csv, DIR/series/*.csv and
/// DIR/plots/ (each figure's gnuplot script, SVG and PNG), staged and moved in like the design
/// report. Throws SweepError for options that do not fit the store (unknown axis or metric, a
/// value not on the grid) and for a store without a finished point.
SweepReportOutcome write_sweep_report(const SweepStoreContents& store, const std::filesystem::path& dir,
                                      const SweepReportOptions& options);

/// The default report folder for a store: beside it, "<store name without .sqlite>-report".
std::filesystem::path default_sweep_report_dir(const std::string& store_path);

}  // namespace specloop
