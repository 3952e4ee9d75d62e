// Sweep axes: their syntax, the Cartesian product's numbering, shards.
#include <fmt/format.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <limits>
#include <optional>

#include "specloop/spec/axes.hpp"

namespace specloop {

namespace {

std::string_view trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t')) s.remove_suffix(1);
  return s;
}

std::optional<double> to_number(std::string_view s) {
  s = trim(s);
  if (!s.empty() && s.front() == '+') s.remove_prefix(1);
  double v = 0.0;
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (ec != std::errc() || end != s.data() + s.size() || s.empty() || !std::isfinite(v)) return std::nullopt;
  return v;
}

std::optional<long> to_count(std::string_view s) {
  s = trim(s);
  long v = 0;
  const auto [end, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  if (ec != std::errc() || end != s.data() + s.size() || s.empty()) return std::nullopt;
  return v;
}

bool valid_key_char(char c) {
  return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '_' || c == '-' ||
         c == '.' || c == '[' || c == ']';
}

}  // namespace

SweepAxis parse_sweep_axis(std::string_view text) {
  const auto fail = [&](std::string_view what) -> SweepAxis {
    throw SweepError(fmt::format("--vary '{}': {}", text, what));
  };
  const auto eq = text.find('=');
  if (eq == std::string_view::npos) return fail("expected KEY=FROM:TO:COUNT, KEY=FROM:TO:COUNTlog or KEY=a,b,c");
  SweepAxis axis;
  axis.key = std::string(trim(text.substr(0, eq)));
  axis.definition = std::string(trim(text.substr(eq + 1)));
  if (axis.key.empty()) return fail("expected a spec key before '='");
  for (char c : axis.key)
    if (!valid_key_char(c)) return fail(fmt::format("'{}' is not a dotted spec key (e.g. plant.poles[0])", axis.key));
  const std::string_view def = axis.definition;
  if (def.empty()) return fail("expected values after '='");
  if (def.find(':') != std::string_view::npos) {
    // FROM:TO:COUNT, optional "log" suffix on COUNT.
    const auto c1 = def.find(':');
    const auto c2 = def.find(':', c1 + 1);
    if (c2 == std::string_view::npos || def.find(':', c2 + 1) != std::string_view::npos)
      return fail("expected FROM:TO:COUNT (three fields)");
    std::string_view count_text = trim(def.substr(c2 + 1));
    bool geometric = false;
    if (count_text.size() > 3 && count_text.substr(count_text.size() - 3) == "log") {
      geometric = true;
      count_text.remove_suffix(3);
    }
    const auto from = to_number(def.substr(0, c1));
    const auto to = to_number(def.substr(c1 + 1, c2 - c1 - 1));
    const auto count = to_count(count_text);
    if (!from) return fail(fmt::format("FROM '{}' is not a finite number", trim(def.substr(0, c1))));
    if (!to) return fail(fmt::format("TO '{}' is not a finite number", trim(def.substr(c1 + 1, c2 - c1 - 1))));
    if (!count || *count < 1) return fail(fmt::format("COUNT '{}' must be an integer >= 1", count_text));
    if (*count > 1000000) return fail(fmt::format("COUNT {} is too large (at most 1000000)", *count));
    if (*count == 1 && *from != *to) return fail("COUNT 1 needs FROM equal to TO (or give a single value)");
    if (geometric && (*from <= 0.0 || *to <= 0.0))
      return fail("a log range needs FROM > 0 and TO > 0");
    const long n = *count;
    // TO − FROM and TO/FROM can leave the double range (−1e308:1e308, 1e-300:1e300log); then the
    // values are weighted means of the ends (or of their logarithms), which cannot overflow. The
    // usual formulas are kept otherwise, so the values of every other range stay bit for bit.
    const double span = *to - *from, ratio = *to / *from;
    const bool span_ok = std::isfinite(span), ratio_ok = std::isnormal(ratio);
    for (long j = 0; j < n; ++j) {
      const double t = static_cast<double>(j) / static_cast<double>(n - 1);
      double v = 0.0;
      if (j == 0) v = *from;
      else if (j == n - 1) v = *to;
      else if (geometric && ratio_ok) v = *from * std::pow(ratio, t);
      else if (geometric) v = std::exp(std::log(*from) * (1.0 - t) + std::log(*to) * t);
      else if (span_ok) v = *from + span * t;
      else v = *from * (1.0 - t) + *to * t;
      if ((geometric && !ratio_ok) || (!geometric && !span_ok))
        v = std::clamp(v, std::min(*from, *to), std::max(*from, *to));  // rounding stays inside the range
      axis.values.push_back(v);
    }
    return axis;
  }
  std::size_t start = 0;
  while (true) {
    const auto comma = def.find(',', start);
    const std::string_view item = def.substr(start, comma == std::string_view::npos ? std::string_view::npos : comma - start);
    const auto v = to_number(item);
    if (!v) return fail(fmt::format("list item '{}' is not a finite number", trim(item)));
    axis.values.push_back(*v);
    if (comma == std::string_view::npos) break;
    start = comma + 1;
  }
  return axis;
}

std::size_t SweepGrid::size() const {
  std::size_t n = 1;
  for (const auto& a : axes) {
    const std::size_t m = a.values.size();
    if (m != 0 && n > kMaxGridPoints / m) {
      std::string lengths;
      for (const auto& b : axes) lengths += fmt::format("{}{}", lengths.empty() ? "" : " × ", b.values.size());
      throw SweepError(fmt::format("the grid of {} values has more than {} points, the most one sweep runs; "
                                   "use fewer values (or split the sweep into several)",
                                   lengths, kMaxGridPoints));
    }
    n *= m;
  }
  return n;
}

std::vector<double> SweepGrid::point(std::size_t index) const {
  std::vector<double> values(axes.size());
  for (std::size_t a = axes.size(); a-- > 0;) {  // last axis varies fastest
    const std::size_t n = axes[a].values.size();
    values[a] = axes[a].values[index % n];
    index /= n;
  }
  return values;
}

std::string SweepGrid::canonical() const {
  std::string out;
  for (const auto& a : axes) {
    if (!out.empty()) out += ';';
    out += a.key + '=';
    for (std::size_t j = 0; j < a.values.size(); ++j) out += fmt::format("{}{}", j ? "," : "", a.values[j]);
  }
  return out;
}

std::string Shard::text() const { return fmt::format("{}/{}", k, n); }

Shard parse_shard(std::string_view text) {
  const auto slash = text.find('/');
  const auto bad = [&](std::string_view what) -> Shard {
    throw SweepError(fmt::format("--shard '{}': {}", text, what));
  };
  if (slash == std::string_view::npos) return bad("expected K/N with 1 <= K <= N");
  const auto k = to_count(text.substr(0, slash));
  const auto n = to_count(text.substr(slash + 1));
  if (!k || !n) return bad("expected K/N with integers 1 <= K <= N");
  if (*n < 1 || *k < 1 || *k > *n) return bad("expected 1 <= K <= N");
  if (*n > 100000) return bad("N is too large (at most 100000)");
  return Shard{static_cast<int>(*k), static_cast<int>(*n)};
}

std::vector<std::size_t> shard_points(std::size_t grid_size, const Shard& shard) {
  std::vector<std::size_t> out;
  for (std::size_t i = static_cast<std::size_t>(shard.k - 1); i < grid_size; i += static_cast<std::size_t>(shard.n))
    out.push_back(i);
  return out;
}

}  // namespace specloop
