// Internal: what the design report and the sweep report share — files, CSV numbers, gnuplot
// scripts and rendering, HTML/Markdown tables, the page style, and the staged output folder.
#pragma once

#include <filesystem>
#include <functional>
#include <string>
#include <utility>
#include <vector>

namespace specloop::page {

namespace fs = std::filesystem;

void write_text(const fs::path& path, const std::string& text);
std::string read_text(const fs::path& path);

/// A finite number with 10 significant digits; throws for NaN or ±∞ (no silent NaN in an output).
std::string csv_number(double v);

/// Columns of equal length under a header row (units in the column names).
void write_csv(const fs::path& path, const std::vector<std::string>& header, const std::vector<const std::vector<double>*>& columns);

/// A gnuplot single-quoted string whose characters stay literal under enhanced text.
std::string quoted(const std::string& s);

/// One gnuplot script drawing NAME.svg and NAME.png from `body` (indented plot commands).
std::string script_frame(const std::string& name, const std::string& body, int width = 900, int height = 520);

/// "  plot a, b, …\n" from the clauses of a figure; with no clause left (every series empty or
/// left out for a non-finite value) an empty frame with `empty_note` across it instead, so that a
/// figure is always drawn and never fails the run. Give empty frames fixed axis ranges.
std::string plot_command(const std::vector<std::string>& clauses, const std::string& empty_note);

bool gnuplot_available();
std::string shell_quoted(const std::string& s);

/// Runs each plots/NAME.gp in `plots_dir`; throws with gnuplot's log when one fails. Returns
/// (name, SVG inlined with ids prefixed "fig-NAME-").
std::vector<std::pair<std::string, std::string>> render_scripts(const fs::path& plots_dir, const std::vector<std::string>& names);

/// Writes each (name, script) as plots_dir/NAME.gp and, when asked and gnuplot is there, renders
/// them. `note` says why there are no figures ("" when rendered).
struct RenderedFigures {
  bool rendered = false;
  std::string note;
  std::vector<std::pair<std::string, std::string>> svgs;  // (name, inline SVG)
};
RenderedFigures write_and_render(const fs::path& plots_dir, const std::vector<std::pair<std::string, std::string>>& scripts,
                                 bool render_requested);

/// The note a page shows when the figures are not drawn, or "" when they can be.
std::string figures_unavailable_note(bool render_requested);

std::string escape_html(const std::string& s);
std::string escape_md(const std::string& s);
std::string paragraph_html(const std::string& text);

struct Cell {
  std::string text;
  std::string attributes;  // e.g. data-value="..."
};
struct Table {
  std::string id;
  std::vector<std::string> header;
  std::vector<std::vector<Cell>> rows;
};
std::string html_table(const Table& t);
std::string md_table(const Table& t);

/// One section of a page, in both forms.
struct Section {
  std::string id, heading, html, markdown;
};

/// Writes DIR/report.html and DIR/report.md: the title, the verdict line (styled as good or bad),
/// the safety caution, the sections in order, and a footer line.
void write_pages(const fs::path& dir, const std::string& title, const std::string& kind, const std::string& verdict, bool good,
                 const std::vector<Section>& sections, const std::string& footer);

/// The SVG as an inline element: no XML prolog, element ids prefixed (one page holds several).
std::string inline_svg(const std::string& svg, const std::string& prefix);

/// The pages' shared style sheet.
extern const char* const kStyle;

/// Writes into a staging folder beside `target` (".NAME.partial-PID"), then moves `entries` (files
/// or folders, relative names) into `target`, replacing older versions; on an exception nothing in
/// `target` changes and the staging folder is removed.
void write_staged(const fs::path& target, const std::vector<std::string>& entries,
                  const std::function<void(const fs::path& staging)>& write);

}  // namespace specloop::page
