// The design report: result.json, report.html (self-contained), report.md, the series behind every
// figure as CSV, and each figure as a gnuplot script with its SVG and PNG.
#pragma once

#include <filesystem>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/core/locus.hpp"

namespace specloop {

/// One response curve of a design: time, output, applied control (and the command before the
/// actuator, for the nonlinear loop).
struct ResponseTrace {
  std::string design;      // reference, classical, ultimate_gain, optimized
  bool nonlinear = false;  // the nonlinear loop (limits, rate limit, delay, sampling) or the linear one
  std::vector<double> time_s, output, control, command;
};

/// Everything the figures draw, computed from a design run.
struct ReportData {
  std::vector<ResponseTrace> traces;  // linear for every design that simulates, + the recommended one nonlinear
  std::string locus_design;           // whose controller the locus varies (the recommended design)
  TransferFunction locus_loop;        // its C(s)·G(s)
  RootLocus locus;
  std::vector<std::pair<std::string, FrequencySeries>> frequency;  // classical and optimized loops
  /// Time axis of the step and effort figures: it covers every plotted response's reported
  /// settling time with room after it (or the whole response when it does not settle), and the
  /// settling and peak-time limits where the data reach them. Plotted traces end there.
  double plot_horizon_s = 0.0;
  std::optional<double> peak_time_limit_s;  // the tighter of peak_time_max and peak_time_ratio × reference
};

/// A unit as shown with the spec's [units] names: "s" → units.time, "1/s" and "rad/s" per that
/// time unit, "controller units" → "<input> per <output>"; anything else unchanged.
std::string shown_unit(std::string_view unit, const UnitsSpec& units);

/// The unit a requirement's limit and value are shown in (effort_max: the input unit).
std::string requirement_unit(const Requirement& r, const UnitsSpec& units);

/// The controller's action as the report states it: "direct" (u rises while y is below r). The
/// one place that decides it, for every page and the terminal.
std::string controller_action(const DesignRun& run);

/// The design the report recommends: the optimized one, else the classical one, else none.
const Design* recommended_design(const DesignRun& run);

/// Computes the traces (exact linear step simulation; the nonlinear loop as confirmed, 2000
/// samples, longer when the confirmation reports a later settling time), the root locus of the recommended loop for gain multipliers 1e-3 … 1e3 and the
/// classical and optimized loops' frequency responses.
ReportData report_data(const DesignRun& run);

struct ReportOptions {
  bool render_figures = true;  // run gnuplot (when found) to draw plots/*.svg and *.png
};

struct ReportOutcome {
  std::filesystem::path result, html, markdown;
  bool figures_rendered = false;
  std::string figures_note;  // why not, and how to get them
};

/// Writes DIR/result.json, DIR/report.html, DIR/report.md, DIR/series/*.csv and DIR/plots/.
/// Everything is first written to a staging folder beside DIR and then moved in, so an error
/// leaves either the previous outputs or the complete new ones, never a half-written report.
ReportOutcome write_design_outputs(const DesignRun& run, const std::filesystem::path& dir, const ReportOptions& options = {});

/// An output location that cannot be written (a file where a folder is needed, a folder that
/// cannot be created, no permission): bad input, exit 2. The message names the option and path.
class OutputError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// Checks before any work that `dir` can become an output folder written through a staging
/// folder beside it: `dir` is a folder or does not exist, and the nearest existing folder on its
/// path is a writable folder. Throws OutputError ("--out results/x: exists and is a file, not a
/// folder"). `option` names the command-line option ("--out").
void check_output_folder(const std::filesystem::path& dir, std::string_view option);
/// The same for an output file (a sweep store, a merge's OUT): not a folder, and its folder can
/// be created and written.
void check_output_file(const std::filesystem::path& file, std::string_view option);

/// The safety caution every report and the README carry.
extern const char* const kSafetyCaution;

}  // namespace specloop
