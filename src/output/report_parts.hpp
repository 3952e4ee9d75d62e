// Internal: the pieces of the design report (report.hpp) — what the figures show (ReportData), the
// gnuplot scripts (report_figures.cpp), the CSV series (report_series.cpp), the tables
// (report_tables.cpp) and the page sections (report_sections.cpp).
#pragma once

#include <filesystem>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "output/page_kit.hpp"
#include "specloop/design/design.hpp"
#include "specloop/output/report.hpp"

namespace specloop::design_report {

namespace fs = std::filesystem;

/// Everything the figures draw: the design layer's traces, and the time axis they share.
struct ReportData {
  DesignTraces traces;
  /// Time axis of the step and effort figures: it covers every plotted response's reported
  /// settling time with room after it (or the whole response when it does not settle), and the
  /// settling and peak-time limits where the data reach them. Plotted traces end there.
  double plot_horizon_s = 0.0;
  std::optional<double> peak_time_limit_s;  // the tighter of peak_time_max and peak_time_ratio × reference
};

/// The traces of the run (design_traces) and the figures' time axis.
ReportData report_data(const DesignRun& run);

/// A role's name as the report writes it (role_name).
inline std::string name_of(DesignRole role) { return std::string(role_name(role)); }

// ---- figures (report_figures.cpp) ----------------------------------------------------------------

/// The step figure's designs: all but the ultimate-gain one (its trace is in the CSV only).
bool plotted(const ResponseTrace& t);
/// The designs whose closed-loop poles the s-plane marks: reference, classical, optimized (the
/// ultimate-gain and published-rule designs are in result.json only).
bool on_splane(DesignRole role);
/// The CSV file of a trace: step_<design>[_nonlinear].csv.
std::string trace_file(const ResponseTrace& t);
/// A design's colour in every figure (the nonlinear loop's is its own).
const char* colour_of(DesignRole design, bool nonlinear);

/// The s-plane view: real axis from −left to right (a quarter of left, or beyond the rightmost
/// marked point), imaginary axis ±im.
struct SplaneView {
  double left = 1.0, right = 0.25, im = 0.6;
};

/// The gnuplot scripts of the step (or effort) figure, the s-plane and the loop frequency response.
std::string step_script(const DesignRun& run, const ReportData& data, bool effort);
std::string splane_script(const DesignRun& run, const ReportData& data, double zeta, const SplaneView& view);
std::string frequency_script(const DesignRun& run, const ReportData& data);
/// With [uncertainty]: the recommended design's step response on every plant of the scenario set,
/// the nominal and each requirement's worst plant drawn and named, with the requirement envelope.
std::string envelope_script(const DesignRun& run, const ReportData& data);
/// With a load requirement or the load_iae objective (report_load.cpp): each design's load
/// response with the load_peak_max limit and the recovery band and time; its CSVs (load_<design>.csv).
std::string load_script(const DesignRun& run, const ReportData& data);
void write_load_series(const DesignRun& run, const ReportData& data, const fs::path& dir);
std::string load_file(const ResponseTrace& t);
/// The section over [uncertainty] (report_robust.cpp), with the envelope figure from `figures`.
page::Section robust_section(const DesignRun& run, const std::vector<std::pair<std::string, std::string>>& figures);

// ---- series (report_series.cpp) ------------------------------------------------------------------

/// Writes the CSV series into `dir`; returns the s-plane view that holds every marked point.
SplaneView write_series(const DesignRun& run, const ReportData& data, const fs::path& dir);

// ---- tables (report_tables.cpp) ------------------------------------------------------------------

std::string with_unit(double v, const std::string& unit);
/// data-value="…" (17 digits) or data-value="none".
std::string value_attribute(const std::optional<double>& v);
/// Requirements × designs, with the optimized design's slack, the lower gain margins and the
/// nonlinear verdicts.
page::Table requirement_table(const DesignRun& run);
/// Each design's second-order prediction against its simulated response.
page::Table approximation_table(const DesignRun& run);
/// The recommended controller's forms (series, parallel, standard, C(s), difference equation).
std::string controller_lines(const Design& d, const UnitsSpec& units);
/// How the recommended controller is wired, one row per field.
page::Table controller_box(const DesignRun& run, const Design& d);
/// The classical and optimized loops' stability margins, under the frequency figure.
page::Table margin_table(const DesignRun& run, const ReportData& data);

// ---- sections (report_sections.cpp) --------------------------------------------------------------

/// The verdict line at the top of both pages.
std::string verdict_line(const DesignRun& run);
/// The page sections in order; `figures`: figure id → inline SVG (may be empty).
std::vector<page::Section> sections(const DesignRun& run, const ReportData& data, const ReportOutcome& outcome,
                                    const std::vector<std::pair<std::string, std::string>>& figures);

}  // namespace specloop::design_report
