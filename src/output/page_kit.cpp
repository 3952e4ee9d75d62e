// Internal helpers shared by the design report and the sweep report (page_kit.hpp).
#include "output/page_kit.hpp"

#include "specloop/output/caution.hpp"
#include "specloop/output/output_folder.hpp"

#include <cmath>
#include <cstdlib>
#include <fmt/format.h>
#include <fstream>
#include <sstream>
#include <stdexcept>
#include <string_view>
#include <sched.h>
#include <unistd.h>

#include <algorithm>

namespace specloop::page {

void write_text(const fs::path& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out << text;
  if (!out) throw std::runtime_error("cannot write " + path.string());
}

std::string read_text(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

std::string csv_number(double v) {
  if (!std::isfinite(v)) throw std::runtime_error("report: a non-finite value in a series");
  return fmt::format("{:.10g}", v);
}

void write_csv(const fs::path& path, const std::vector<std::string>& header, const std::vector<const std::vector<double>*>& columns) {
  std::string text = fmt::format("{}\n", fmt::join(header, ","));
  const std::size_t n = columns.empty() ? 0 : columns.front()->size();
  for (std::size_t i = 0; i < n; ++i) {
    for (std::size_t c = 0; c < columns.size(); ++c) {
      if (c) text += ',';
      text += csv_number((*columns[c])[i]);
    }
    text += '\n';
  }
  write_text(path, text);
}

std::string quoted(const std::string& s) {
  std::string out = "'";
  for (char c : s) {
    if (c == '\'') out += "''";
    else if (std::string_view("_^{}@&~").find(c) != std::string_view::npos) out += std::string("\\") + c;
    else out += c;
  }
  return out + "'";
}

// Both terminals from one script: the SVG for the pages, the PNG for anything else. A stable look
// of our own: thin grid, muted borders, sans-serif.
std::string script_frame(const std::string& name, const std::string& body, int width, int height) {
  return fmt::format(
      "# {0}: drawn by specloop from the CSV files in ../series (re-run: gnuplot {0}.gp)\n"
      "set datafile separator ','\n"
      "set key top right box opaque font ',10'\n"
      "set grid lc rgb '#dddddd' lw 1\n"
      "set border lc rgb '#555555'\n"
      "set tics textcolor rgb '#333333'\n"
      "do for [term in 'svg png'] {{\n"
      "  if (term eq 'svg') {{ set terminal svg size {2},{3} dynamic font 'Helvetica,12' background rgb 'white'; set output '{0}.svg' }} "
      "else {{ set terminal pngcairo size {4},{5} font 'Helvetica,12' background rgb 'white'; set output '{0}.png' }}\n"
      "{1}"
      "  unset output\n"
      "}}\n",
      name, body, width, height, width * 4 / 3, height * 4 / 3);
}

std::string plot_command(const std::vector<std::string>& clauses, const std::string& empty_note) {
  if (!clauses.empty()) return fmt::format("  plot {}\n", fmt::join(clauses, ", \\\n       "));
  // gnuplot needs something to plot; NaN draws nothing, and fixed ranges keep it from failing on
  // an empty autoscale.
  return fmt::format("  set label {} at graph 0.5,0.5 center font ',12' textcolor rgb '#555555'\n"
                     "  set yrange [-1:1]\n"
                     "  plot NaN notitle\n",
                     quoted(empty_note));
}

bool gnuplot_available() { return std::system("command -v gnuplot >/dev/null 2>&1") == 0; }

std::string shell_quoted(const std::string& s) {
  std::string out = "'";
  for (char c : s) out += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return out + "'";
}

namespace {

// The processors this process may run on (its affinity mask; a process pinned to one core gets 1).
std::size_t usable_cores() {
  cpu_set_t set;
  CPU_ZERO(&set);
  if (sched_getaffinity(0, sizeof(set), &set) == 0) return static_cast<std::size_t>(std::max(1, CPU_COUNT(&set)));
  return 1;
}

// The shell command running `groups`, each group one gnuplot process that runs its scripts in
// turn (`reset session` between them, so each starts from gnuplot's defaults as in a fresh
// process; gnuplot stops at the first script that fails), the groups at once; each group leaves
// its exit status in _groupN.rc and its messages in _groupN.log.
std::string group_command(const fs::path& plots_dir, const std::vector<std::vector<std::string>>& groups) {
  std::string command = fmt::format("cd {} && {{", shell_quoted(plots_dir.string()));
  for (std::size_t g = 0; g < groups.size(); ++g) {
    std::string files;
    for (const std::string& name : groups[g])
      files += fmt::format("{}{}", files.empty() ? "" : " -e 'reset session' ", shell_quoted(name + ".gp"));
    command += fmt::format(" (gnuplot {0} > _group{1}.log 2>&1; echo $? > _group{1}.rc) &", files, g);
  }
  return command + " wait; }";
}

// Whether group g ran to its end (exit 0); removes its status file, and its log unless asked for it.
bool group_ran(const fs::path& plots_dir, std::size_t g, int shell_status, std::string* log) {
  const fs::path rc = plots_dir / fmt::format("_group{}.rc", g), lg = plots_dir / fmt::format("_group{}.log", g);
  const bool ran = shell_status == 0 && fs::exists(rc) && read_text(rc).starts_with("0");
  if (log) *log = fs::exists(lg) ? read_text(lg) : "(no log)";
  fs::remove(rc);
  fs::remove(lg);
  return ran;
}

}  // namespace

std::vector<std::pair<std::string, std::string>> render_scripts(const fs::path& plots_dir, const std::vector<std::string>& names) {
  // Rendering the PNGs is most of a design's wall time. The figures are independent: one gnuplot
  // per usable core, each running its share of the scripts in turn (a gnuplot's start-up, its
  // fonts, costs about as much as a small figure: one process per figure made pump_pressure's
  // design 0.55 s on one core, 0.475 s this way). A group that fails is run again one script
  // per process, so that the message names the figure and carries gnuplot's words.
  const std::size_t cores = std::min(usable_cores(), std::max<std::size_t>(1, names.size()));
  std::vector<std::vector<std::string>> groups(cores);
  for (std::size_t i = 0; i < names.size(); ++i) groups[i % cores].push_back(names[i]);
  const int shell_status = std::system(group_command(plots_dir, groups).c_str());
  std::vector<std::vector<std::string>> retry;
  for (std::size_t g = 0; g < groups.size(); ++g)
    if (!group_ran(plots_dir, g, shell_status, nullptr))
      for (const std::string& name : groups[g]) retry.push_back({name});
  if (!retry.empty()) {
    const int retry_status = std::system(group_command(plots_dir, retry).c_str());
    std::string failure;
    for (std::size_t g = 0; g < retry.size(); ++g) {
      std::string log;
      if (!group_ran(plots_dir, g, retry_status, &log) && failure.empty())
        failure = fmt::format("gnuplot failed on plots/{}.gp: {}", retry[g].front(), log);
    }
    if (!failure.empty()) throw std::runtime_error(failure);
  }
  std::vector<std::pair<std::string, std::string>> figures;
  for (const std::string& name : names) {
    const fs::path svg = plots_dir / (name + ".svg");
    if (!fs::exists(svg) || !fs::exists(plots_dir / (name + ".png")))
      throw std::runtime_error(fmt::format("gnuplot failed on plots/{}.gp: it wrote no {}.svg and {}.png", name, name, name));
    figures.emplace_back(name, inline_svg(read_text(svg), "fig-" + name + "-"));
  }
  return figures;
}

RenderedFigures write_and_render(const fs::path& plots_dir, const std::vector<std::pair<std::string, std::string>>& scripts,
                                 bool render_requested) {
  fs::create_directories(plots_dir);
  std::vector<std::string> names;
  for (const auto& [name, text] : scripts) {
    write_text(plots_dir / (name + ".gp"), text);
    names.push_back(name);
  }
  RenderedFigures out;
  out.note = figures_unavailable_note(render_requested);
  out.rendered = out.note.empty();
  if (out.rendered) out.svgs = render_scripts(plots_dir, names);
  return out;
}

void write_pages(const fs::path& dir, const std::string& title, const std::string& kind, const std::string& verdict, bool good,
                 const std::vector<Section>& sections, const std::string& footer) {
  std::string html = fmt::format(
      "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{0} — {5}</title>\n"
      "<style>{1}</style>\n</head>\n<body>\n<h1>{0}</h1>\n<p class=\"verdict{2}\" id=\"verdict\">{3}</p>\n"
      "<p class=\"caution\">{4}</p>\n",
      escape_html(title), kStyle, good ? "" : " bad", escape_html(verdict), escape_html(kSafetyCaution), kind);
  std::string md = fmt::format("# {}\n\n**{}**\n\n> {}\n\n", title, verdict, kSafetyCaution);
  for (const Section& s : sections) {
    html += fmt::format("<section id=\"{}\">\n<h2>{}</h2>\n{}</section>\n", s.id, escape_html(s.heading), s.html);
    md += fmt::format("## {}\n\n{}\n", s.heading, s.markdown);
  }
  html += fmt::format("<footer><p>{}</p></footer>\n</body>\n</html>\n", escape_html(footer));
  write_text(dir / "report.html", html);
  write_text(dir / "report.md", md);
}

std::string figures_unavailable_note(bool render_requested) {
  if (!render_requested) return "Figures not drawn (rendering switched off); render them with: cd plots && gnuplot *.gp";
  if (!gnuplot_available())
    return "Figures not drawn: gnuplot was not found. Install it (Debian: apt-get install gnuplot-nox) and re-run, or "
           "render the scripts yourself: cd plots && for f in *.gp; do gnuplot \"$f\"; done";
  return "";
}

std::string escape_html(const std::string& s) {
  std::string out;
  for (char c : s) {
    switch (c) {
      case '&': out += "&amp;"; break;
      case '<': out += "&lt;"; break;
      case '>': out += "&gt;"; break;
      case '"': out += "&quot;"; break;
      default: out += c;
    }
  }
  return out;
}

std::string escape_md(const std::string& s) {
  std::string out;
  for (char c : s) {
    if (c == '|' || c == '*' || c == '_' || c == '`') out += '\\';
    out += c;
  }
  return out;
}

std::string paragraph_html(const std::string& text) { return "<p>" + escape_html(text) + "</p>\n"; }

std::string html_table(const Table& t) {
  std::string s = fmt::format("<table id=\"{}\">\n<thead><tr>", t.id);
  for (const auto& h : t.header) s += "<th>" + escape_html(h) + "</th>";
  s += "</tr></thead>\n<tbody>\n";
  for (const auto& row : t.rows) {
    s += "<tr>";
    for (const Cell& c : row) s += "<td" + (c.attributes.empty() ? "" : " " + c.attributes) + ">" + escape_html(c.text) + "</td>";
    s += "</tr>\n";
  }
  return s + "</tbody></table>\n";
}

std::string md_table(const Table& t) {
  std::string s = "|";
  for (const std::string& h : t.header) s.append(" ").append(escape_md(h)).append(" |");
  s += "\n|";
  for (std::size_t i = 0; i < t.header.size(); ++i) s += i ? " ---: |" : " --- |";
  s += "\n";
  for (const auto& row : t.rows) {
    s += "|";
    for (const Cell& c : row) s.append(" ").append(escape_md(c.text)).append(" |");
    s += "\n";
  }
  return s;
}

std::string inline_svg(const std::string& svg, const std::string& prefix) {
  const auto start = svg.find("<svg");
  if (start == std::string::npos) return {};
  std::string out = svg.substr(start);
  // gnuplot names its symbols and clips alike in each figure: prefix every id and reference.
  for (const std::string pattern : {"id='", "id=\"", "href='#", "href=\"#", "url(#"}) {
    const std::string replacement = pattern + prefix;
    for (std::size_t at = out.find(pattern); at != std::string::npos; at = out.find(pattern, at + replacement.size()))
      out.replace(at, pattern.size(), replacement);
  }
  return out;
}

const char* const kStyle = R"(body{font-family:Helvetica,Arial,sans-serif;max-width:1000px;margin:2em auto;padding:0 1em;color:#222;line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em}h2{font-size:1.2em;border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.8em}
.verdict{font-size:1.1em;padding:.6em .8em;border-left:5px solid #1f5f99;background:#eef3f8}
.verdict.bad{border-color:#c62828;background:#fbeeee}
table{border-collapse:collapse;margin:.6em 0;font-size:.92em}th,td{border:1px solid #ccc;padding:.25em .6em;text-align:right}
th:first-child,td:first-child{text-align:left}thead th{background:#f2f2f2}td.met{color:#1b5e20}td.missed{color:#b71c1c;font-weight:bold}
pre{background:#f6f6f6;padding:.7em;overflow-x:auto;font-size:.85em}figure{margin:1.2em 0}figure svg{max-width:100%;height:auto}
figcaption{font-size:.9em;color:#444}.caution{border:1px solid #c62828;padding:.6em .8em;background:#fff8f8})";

void write_staged(const fs::path& target_in, const std::vector<std::string>& entries,
                  const std::function<void(const fs::path& staging)>& write) {
  const fs::path target = target_in.empty() ? fs::path(".") : target_in;
  const fs::path staging = target.parent_path() / fmt::format(".{}.partial-{}", target.filename().string(), ::getpid());
  try {
    // Where the output goes is the user's choice: a failure here is bad input, not a bug.
    if (fs::exists(target) && !fs::is_directory(target))
      throw OutputError(fmt::format("{}: exists and is not a folder; choose another output folder", target.string()));
    fs::create_directories(target.parent_path().empty() ? fs::path(".") : target.parent_path());
    fs::remove_all(staging);
    fs::create_directories(staging);
  } catch (const fs::filesystem_error& e) {
    throw OutputError(fmt::format("{}: cannot create the output folder: {}", target.string(), e.code().message()));
  }
  try {
    write(staging);
    // Move everything in: files replace their old versions, folders are swapped whole.
    try {
      fs::create_directories(target);
    } catch (const fs::filesystem_error& e) {
      throw OutputError(fmt::format("{}: cannot create the output folder: {}", target.string(), e.code().message()));
    }
    for (const std::string& entry : entries) {
      if (fs::is_directory(staging / entry)) fs::remove_all(target / entry);
      fs::rename(staging / entry, target / entry);
    }
    fs::remove_all(staging);
  } catch (...) {
    std::error_code ignored;
    fs::remove_all(staging, ignored);
    throw;
  }
}

}  // namespace specloop::page

namespace specloop {

namespace {
namespace fs = std::filesystem;

// The nearest existing folder on the way to `path` must be a writable folder.
void check_creatable(const fs::path& path, std::string_view option, const fs::path& shown) {
  fs::path probe = fs::absolute(path).lexically_normal();
  std::error_code error;
  while (!probe.empty() && !fs::exists(probe, error)) {
    if (probe == probe.parent_path()) break;
    probe = probe.parent_path();
  }
  if (!fs::is_directory(probe, error))
    throw OutputError(fmt::format("{} {}: cannot be created: {} is a file, not a folder", option, shown.string(),
                                  probe.string()));
  if (::access(probe.c_str(), W_OK | X_OK) != 0)
    throw OutputError(fmt::format("{} {}: cannot be written: no permission to write in {}", option, shown.string(),
                                  probe.string()));
}
}  // namespace

void check_output_folder(const fs::path& dir_in, std::string_view option) {
  const fs::path dir = dir_in.empty() ? fs::path(".") : dir_in;
  std::error_code error;
  if (fs::exists(dir, error) && !fs::is_directory(dir, error))
    throw OutputError(fmt::format("{} {}: exists and is a file, not a folder; choose a folder for the outputs", option,
                                  dir.string()));
  // The staging folder goes beside `dir`, so its parent must be writable too.
  check_creatable(fs::absolute(dir).lexically_normal().parent_path(), option, dir);
  if (fs::is_directory(dir, error) && ::access(dir.c_str(), W_OK | X_OK) != 0)
    throw OutputError(fmt::format("{} {}: cannot be written: no permission", option, dir.string()));
}

void check_output_file(const fs::path& file, std::string_view option) {
  std::error_code error;
  if (fs::is_directory(file, error))
    throw OutputError(fmt::format("{} {}: is a folder; give a file name", option, file.string()));
  check_creatable(fs::absolute(file).lexically_normal().parent_path(), option, file);
}

}  // namespace specloop
