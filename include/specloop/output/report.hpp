// The design report: result.json, report.html (self-contained), report.md, the series behind every
// figure as CSV, and each figure as a gnuplot script with its SVG and PNG. The curves come from the
// design layer (design/traces.hpp); the report formats and draws them.
#pragma once

#include <filesystem>
#include <string>
#include <string_view>

#include "specloop/design/design.hpp"
#include "specloop/output/caution.hpp"
#include "specloop/output/output_folder.hpp"

namespace specloop {

/// A unit as shown with the spec's [units] names: "s" → units.time, "1/s" and "rad/s" per that
/// time unit, "controller units" → "<input> per <output>"; anything else unchanged.
std::string shown_unit(std::string_view unit, const UnitsSpec& units);

/// The unit a requirement's limit and value are shown in (effort_max: the input unit).
std::string requirement_unit(const Requirement& r, const UnitsSpec& units);

/// The controller's action as the report states it: "direct" (u rises while y is below r). The
/// one place that decides it, for every page and the terminal.
std::string controller_action(const DesignRun& run);

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

}  // namespace specloop
