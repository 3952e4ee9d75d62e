// Reading a recorded test from CSV and preparing it for fitting (test_data.hpp): the cell and
// time checks, the operating point from the leading steady stretch, the excitation's kind.
#include "specloop/fit/test_data.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <fstream>
#include <sstream>

#include "specloop/core/vocabulary.hpp"

namespace specloop::fit {

namespace {

std::string_view trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t' || s.front() == '\r')) s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t' || s.back() == '\r')) s.remove_suffix(1);
  return s;
}

std::string_view without_comment(std::string_view line) {
  const auto hash = line.find('#');
  return hash == std::string_view::npos ? line : line.substr(0, hash);
}

std::vector<std::string_view> split(std::string_view line, char sep) {
  std::vector<std::string_view> cells;
  std::size_t start = 0;
  while (true) {
    const auto at = line.find(sep, start);
    cells.push_back(trim(line.substr(start, at == std::string_view::npos ? std::string_view::npos : at - start)));
    if (at == std::string_view::npos) break;
    start = at + 1;
  }
  return cells;
}

std::string unquoted(std::string_view s) {
  if (s.size() >= 2 && s.front() == '"' && s.back() == '"') s = s.substr(1, s.size() - 2);
  return std::string(trim(s));
}

// Which header column a name (or, when empty, the default position) selects.
std::size_t pick_column(const std::vector<std::string>& header, const std::string& wanted, std::size_t position,
                        std::string_view role, std::string_view option, const std::string& path, int header_line) {
  if (wanted.empty()) {
    if (position >= header.size())
      throw FitDataError(fmt::format("{}:{}: the header has {} column(s); the {} is column {} by default (or name it with {})",
                                     path, header_line, header.size(), role, position + 1, option));
    return position;
  }
  const auto it = std::find(header.begin(), header.end(), wanted);
  if (it != header.end()) return static_cast<std::size_t>(it - header.begin());
  std::string columns;
  for (const std::string& h : header) columns += (columns.empty() ? "" : ", ") + fmt::format("'{}'", h);
  const auto guess = likely_name(wanted, header);
  throw FitDataError(fmt::format("{}:{}: {} '{}': no such column{}; the header has {}", path, header_line, option, wanted,
                                 guess ? fmt::format(" (did you mean '{}'?)", *guess) : "", columns));
}

// A cell as a finite number; with ';' as separator a decimal comma is accepted.
double cell_value(std::string_view cell, char sep, const std::string& path, int line, std::size_t column,
                  const std::string& name) {
  const auto where = [&] { return fmt::format("{}:{}: column {} ('{}')", path, line, column + 1, name); };
  if (cell.empty()) throw FitDataError(fmt::format("{}: empty cell; every sample needs a number here", where()));
  std::string text(cell);
  if (sep == ';' && text.find('.') == std::string::npos) std::replace(text.begin(), text.end(), ',', '.');
  if (!text.empty() && text.front() == '+') text.erase(0, 1);
  double v = 0.0;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), v);
  if (ec != std::errc() || end != text.data() + text.size())
    throw FitDataError(fmt::format("{}: '{}' is not a number", where(), std::string(cell)));
  if (!std::isfinite(v)) throw FitDataError(fmt::format("{}: '{}' is not a finite number", where(), std::string(cell)));
  return v;
}

double median_of(std::vector<double> v) {
  if (v.empty()) return 0.0;
  const auto mid = v.begin() + static_cast<std::ptrdiff_t>(v.size() / 2);
  std::nth_element(v.begin(), mid, v.end());
  return *mid;
}

}  // namespace

namespace {

// One change: a step. Several steps: at most 10 changes, each level between two changes held
// for at least 10 samples and at least 0.7× the mean of those holds (a test of a few steps holds
// each about equally long). Anything else — a pseudo-random binary sequence, whose runs range
// from one bit to many (half of a maximal-length sequence's runs are one bit long, the mean about
// two), or an arbitrary signal — is "other".
Excitation classify_excitation(const std::vector<double>& t, const std::vector<double>& u, std::size_t changes) {
  if (changes == 1) return Excitation::step;
  if (changes > 10) return Excitation::other;
  std::vector<std::size_t> at;
  for (std::size_t k = 1; k < u.size(); ++k)
    if (u[k] != u[k - 1]) at.push_back(k);
  double shortest = INFINITY, sum = 0.0;
  for (std::size_t i = 1; i < at.size(); ++i) {
    if (at[i] - at[i - 1] < 10) return Excitation::other;
    const double hold = t[at[i]] - t[at[i - 1]];
    shortest = std::min(shortest, hold);
    sum += hold;
  }
  return shortest >= 0.7 * sum / double(at.size() - 1) ? Excitation::steps : Excitation::other;
}

}  // namespace

std::string_view excitation_name(Excitation e) {
  switch (e) {
    case Excitation::step: return "step";
    case Excitation::steps: return "steps";
    case Excitation::other: return "other";
  }
  return "other";
}

TestRecord parse_test_csv(std::string_view text, const std::string& path, const ColumnChoice& choice) {
  TestRecord r;
  r.file = path;
  std::vector<std::string> header;
  char sep = ',';
  int header_line = 0;
  std::size_t ct = 0, cu = 0, cy = 0;
  int line_no = 0;
  std::size_t pos = 0;
  while (pos <= text.size()) {
    const auto nl = text.find('\n', pos);
    const std::string_view raw = text.substr(pos, nl == std::string_view::npos ? std::string_view::npos : nl - pos);
    pos = nl == std::string_view::npos ? text.size() + 1 : nl + 1;
    ++line_no;
    const std::string_view line = trim(without_comment(raw));
    if (line.empty()) continue;
    if (header.empty()) {
      sep = line.find(';') != std::string_view::npos ? ';' : ',';
      for (std::string_view c : split(line, sep)) header.push_back(unquoted(c));
      header_line = line_no;
      for (std::size_t i = 0; i < header.size(); ++i) {
        if (header[i].empty())
          throw FitDataError(fmt::format("{}:{}: column {} of the header row has no name", path, line_no, i + 1));
        double ignored = 0.0;
        const auto [end, ec] = std::from_chars(header[i].data(), header[i].data() + header[i].size(), ignored);
        if (ec == std::errc() && end == header[i].data() + header[i].size())
          throw FitDataError(fmt::format("{}:{}: the first row must be the header (column names); column {} is the number {}",
                                         path, line_no, i + 1, header[i]));
      }
      ct = pick_column(header, choice.time, 0, "time", "--time", path, header_line);
      cu = pick_column(header, choice.input, 1, "input", "--input", path, header_line);
      cy = pick_column(header, choice.output, 2, "output", "--output", path, header_line);
      if (ct == cu || ct == cy || cu == cy)
        throw FitDataError(fmt::format("{}:{}: time, input and output must be three different columns (got '{}', '{}', '{}')",
                                       path, header_line, header[ct], header[cu], header[cy]));
      r.time_column = header[ct];
      r.input_column = header[cu];
      r.output_column = header[cy];
      continue;
    }
    const auto cells = split(line, sep);
    const std::size_t need = std::max({ct, cu, cy}) + 1;
    if (cells.size() < need) {
      const std::size_t missing = ct >= cells.size() ? ct : cu >= cells.size() ? cu : cy;
      throw FitDataError(fmt::format("{}:{}: column {} ('{}'): missing; the row has {} cell(s), the header {}", path, line_no,
                                     missing + 1, header[missing], cells.size(), header.size()));
    }
    const double t = cell_value(cells[ct], sep, path, line_no, ct, header[ct]);
    const double u = cell_value(cells[cu], sep, path, line_no, cu, header[cu]);
    const double y = cell_value(cells[cy], sep, path, line_no, cy, header[cy]);
    if (!r.t.empty() && !(t > r.t.back()))
      throw FitDataError(fmt::format("{}:{}: column {} ('{}'): time {} {} the previous sample's {} (line {}); time must "
                                     "increase strictly", path, line_no, ct + 1, header[ct], t,
                                     t == r.t.back() ? "repeats" : "is before", r.t.back(), r.line.back()));
    r.t.push_back(t);
    r.u.push_back(u);
    r.y.push_back(y);
    r.line.push_back(line_no);
  }
  if (header.empty()) throw FitDataError(fmt::format("{}: no header row and no data", path));
  if (r.t.size() < kMinSamples)
    throw FitDataError(fmt::format("{}:{}: {} sample(s); a fit needs at least {}", path, r.line.empty() ? header_line : r.line.back(),
                                   r.t.size(), kMinSamples));
  return r;
}

TestRecord read_test_csv(const std::string& path, const ColumnChoice& columns) {
  std::ifstream file(path, std::ios::binary);
  if (!file) throw FitDataError(fmt::format("{}: cannot read file", path));
  std::ostringstream contents;
  contents << file.rdbuf();
  if (file.bad()) throw FitDataError(fmt::format("{}: cannot read file: read error", path));
  return parse_test_csv(contents.str(), path, columns);
}

PreparedData prepare_test_data(TestRecord record, std::optional<double> u0, std::optional<double> y0) {
  PreparedData d;
  const std::size_t n = record.t.size();
  const auto& u = record.u;
  const auto& y = record.y;
  const std::string& file = record.file;

  // The input as applied: a change is any difference from the sample before.
  std::size_t first_change = n;
  for (std::size_t k = 1; k < n; ++k) {
    if (u[k] != u[k - 1]) {
      ++d.input_changes;
      if (first_change == n) first_change = k;
    }
  }
  if (d.input_changes == 0)
    throw FitDataError(fmt::format("{}:{}: column '{}': the input never changes (constant {} from line {} to line {}): no "
                                   "excitation to fit a model to", file, record.line.front(), record.input_column, u[0],
                                   record.line.front(), record.line.back()));
  d.first_change = first_change;

  // The output's range inside the leading stretch (noise) and after it (the response).
  const auto range = [&](std::size_t a, std::size_t b) {
    if (a >= b) return 0.0;
    const auto [lo, hi] = std::minmax_element(y.begin() + static_cast<std::ptrdiff_t>(a), y.begin() + static_cast<std::ptrdiff_t>(b));
    return *hi - *lo;
  };
  const double whole = range(0, n);
  const double before = range(0, first_change);
  const double after = range(first_change, n);
  if (whole <= 1e-12 * std::max(1.0, std::abs(y[0])) || (first_change >= kMinSteadySamples && after <= 2.0 * before))
    throw FitDataError(fmt::format("{}:{}: column '{}': the output does not respond to the input (its range after the input "
                                   "first changes, line {}, is {:.4g}; before it, {:.4g}): nothing to fit", file,
                                   record.line[first_change], record.output_column, record.line[first_change], after, before));

  d.steady_samples = (u0 && y0) ? 0 : first_change;
  if (!(u0 && y0)) {
    if (first_change < kMinSteadySamples)
      throw FitDataError(fmt::format("{}:{}: no leading steady stretch: the input changes at line {}, after {} sample(s) (at least "
                                     "{} needed); give the operating point with --u0 and --y0", file, record.line[first_change],
                                     record.line[first_change], first_change, kMinSteadySamples));
    // No trend over the stretch: a line fit's change across it within its noise.
    const std::size_t m = first_change;
    double st = 0, sy = 0, stt = 0, sty = 0;
    for (std::size_t k = 0; k < m; ++k) {
      st += record.t[k];
      sy += y[k];
    }
    const double tm = st / double(m), ym = sy / double(m);
    for (std::size_t k = 0; k < m; ++k) {
      stt += (record.t[k] - tm) * (record.t[k] - tm);
      sty += (record.t[k] - tm) * (y[k] - ym);
    }
    const double slope = stt > 0 ? sty / stt : 0.0;
    double ssr = 0;
    for (std::size_t k = 0; k < m; ++k) {
      const double e = y[k] - ym - slope * (record.t[k] - tm);
      ssr += e * e;
    }
    const double slope_se = (m > 2 && stt > 0) ? std::sqrt(ssr / double(m - 2) / stt) : 0.0;
    const double span = record.t[m - 1] - record.t[0];
    const double change = std::abs(slope) * span;
    if (change > 4.0 * slope_se * span && change > 0.01 * whole && !y0)
      throw FitDataError(fmt::format("{}:{}: column '{}': the output drifts over the leading stretch of constant input (lines "
                                     "{}–{}: by {:.4g}, {:.1f} % of its range): not a steady operating point; give --y0 (and --u0)",
                                     file, record.line[0], record.output_column, record.line[0], record.line[m - 1], change,
                                     100.0 * change / whole));
    d.u0 = u0 ? *u0 : u[0];
    d.y0 = y0 ? *y0 : ym;
  } else {
    d.u0 = *u0;
    d.y0 = *y0;
  }
  d.u0_given = u0.has_value();
  d.y0_given = y0.has_value();

  std::vector<double> dts(n - 1);
  for (std::size_t k = 1; k < n; ++k) dts[k - 1] = record.t[k] - record.t[k - 1];
  d.median_dt = median_of(dts);
  d.excitation = classify_excitation(record.t, u, d.input_changes);

  // Noise scale from second differences (a smooth response contributes little to them):
  // σ ≈ 1.4826·MAD(Δ²y)/√6 (common practice: MAD scaled to σ under Gaussian noise).
  if (n >= 3) {
    std::vector<double> d2(n - 2);
    for (std::size_t k = 2; k < n; ++k) d2[k - 2] = y[k] - 2.0 * y[k - 1] + y[k - 2];
    const double med = median_of(d2);
    for (double& v : d2) v = std::abs(v - med);
    d.noise_sigma = 1.4826 * median_of(d2) / std::sqrt(6.0);
  }
  d.du.resize(n);
  d.dy.resize(n);
  for (std::size_t k = 0; k < n; ++k) {
    d.du[k] = u[k] - d.u0;
    d.dy[k] = y[k] - d.y0;
  }
  d.record = std::move(record);
  return d;
}

}  // namespace specloop::fit
