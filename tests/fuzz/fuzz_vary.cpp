// libFuzzer harness: the `--vary` axis syntax and the grid (sweep_grid.cpp), then the point texts a
// sweep writes from them (SweepSpec::check_keys, point_text) read back by the spec reader. The
// input is text, one item per line: "KEY=DEFINITION" lines are axes; a line "#K/N" is a shard; a
// first line "nonlinear" picks the expression-plant spec instead of the linear one.
// Allowed outcomes: SweepError (axis, shard, key) and SpecError (a point that is not a valid spec).
// Invariants: every value is finite; a range's values lie between its first and last, a log
// range's above 0; the values survive the round trip through their shortest spelling (the
// store's canonical grid relies on it); the grid size is the exact product of the axis lengths up
// to kMaxGridPoints and a SweepError above, never a wrapped number; a point's values come from its
// axes.
#include <unistd.h>

#include <algorithm>
#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include <fmt/format.h>

#include "fuzz_common.hpp"
#include "specloop/spec/spec.hpp"
#include "specloop/sweep/sweep.hpp"

namespace {

using specloop_fuzz::finite;
constexpr std::string_view kHarness = "fuzz_vary";

#define CHECK(condition, ...) SPECLOOP_FUZZ_CHECK(kHarness, condition, __VA_ARGS__)

// Two spec files every numeric kind of key can be varied in (invented values, fuzzing only).
constexpr const char* kLinearSpec = R"(title = "fuzz: linear plant"
[plant]
zeros = [-3.0]
poles = [-1, [-2.0, 4.0], 0]
gain = 5
delay = 0.05
[actuator]
min = -10
max = 10
rate_max = 50
[controller]
structure = "pid"
derivative_filter = 8
setpoint_weight = 0.5
[requirements]
overshoot_max_pct = 10
settling_time_max = 4.0
settling_band_pct = 2
phase_margin_min_deg = 40
[reference]
amplitude = 1
[search]
max_evaluations = 200
bounds.gain = [0.01, 100]
[disturbance]
time = 5
size = -0.5
)";

constexpr const char* kNonlinearSpec = R"(title = "fuzz: expression plant"
[plant.nonlinear]
states = ["level"]
derivatives = ["(k_in*u - k_out*sqrt(level))/area"]
output = "level"
parameters = { area = 2.0, k_in = 0.5, k_out = 0.3 }
operating_point = { u = 1.2, level = 3.0 }
[actuator]
min = 0
max = 4
[requirements]
overshoot_max_pct = 5
)";

struct SpecFiles {
  std::string linear, nonlinear;
  std::unique_ptr<specloop::SweepSpec> linear_spec, nonlinear_spec;
};

std::string write_temp(const char* text, const char* stem) {
  const char* dir = std::getenv("TMPDIR");
  std::string path = fmt::format("{}/{}-{}.toml", dir && *dir ? dir : "/tmp", stem, ::getpid());
  std::FILE* f = std::fopen(path.c_str(), "wb");
  if (f == nullptr) specloop_fuzz::fail(kHarness, "cannot write " + path);
  std::fputs(text, f);
  std::fclose(f);
  return path;
}

SpecFiles& spec_files() {
  static SpecFiles files = [] {
    SpecFiles f;
    f.linear = write_temp(kLinearSpec, "specloop-fuzz-vary-linear");
    f.nonlinear = write_temp(kNonlinearSpec, "specloop-fuzz-vary-nonlinear");
    f.linear_spec = std::make_unique<specloop::SweepSpec>(f.linear);
    f.nonlinear_spec = std::make_unique<specloop::SweepSpec>(f.nonlinear);
    std::remove(f.linear.c_str());
    std::remove(f.nonlinear.c_str());
    return f;
  }();
  return files;
}

std::vector<std::string_view> split_lines(std::string_view text) {
  std::vector<std::string_view> lines;
  std::size_t start = 0;
  while (start <= text.size()) {
    const auto at = text.find('\n', start);
    lines.push_back(text.substr(start, at == std::string_view::npos ? std::string_view::npos : at - start));
    if (at == std::string_view::npos) break;
    start = at + 1;
  }
  return lines;
}

void check_axis(const specloop::SweepAxis& axis, std::string_view text) {
  CHECK(!axis.key.empty() && !axis.values.empty(), "axis '{}': empty key or no values", text);
  CHECK(axis.values.size() <= 1000000, "axis '{}': more than 1000000 values", text);
  for (double v : axis.values) CHECK(finite(v), "axis '{}': non-finite value {}", text, v);
  const std::string& def = axis.definition;
  if (def.find(':') != std::string::npos) {
    const bool geometric = def.size() > 3 && def.compare(def.size() - 3, 3, "log") == 0;
    if (geometric)
      for (double v : axis.values) CHECK(v > 0.0, "axis '{}': log range value {} <= 0", text, v);
    const double first = axis.values.front(), last = axis.values.back();
    const double lo = std::min(first, last), hi = std::max(first, last);
    for (double v : axis.values)
      CHECK(v >= lo && v <= hi, "axis '{}': value {} outside [FROM, TO]", text, v);
  }
  // Round trip through the shortest spelling: what the store's canonical grid is made of.
  std::string listed = axis.key + "=";
  for (std::size_t j = 0; j < axis.values.size() && j < 64; ++j)
    listed += fmt::format("{}{}", j ? "," : "", axis.values[j]);
  specloop::SweepAxis again;
  try {
    again = specloop::parse_sweep_axis(listed);
  } catch (const specloop::SweepError& e) {
    specloop_fuzz::fail(kHarness, fmt::format("axis '{}': its values listed do not parse: {}", text, e.what()));
  }
  for (std::size_t j = 0; j < again.values.size(); ++j)
    CHECK(again.values[j] == axis.values[j], "axis '{}': value {} does not round-trip", text, j);
}

void check_grid(const specloop::SweepGrid& grid) {
  // The exact product (saturated above 2^64): size() returns it up to kMaxGridPoints, refuses more.
  const auto limit = static_cast<unsigned __int128>(1) << 64;
  unsigned __int128 product = 1;
  for (const auto& a : grid.axes) product = std::min(product * a.values.size(), limit);
  std::size_t size = 0;
  try {
    size = grid.size();
  } catch (const specloop::SweepError& e) {
    CHECK(product > specloop::kMaxGridPoints, "a grid of {} points refused: {}", static_cast<std::size_t>(product),
          e.what());
    return;
  }
  CHECK(product <= specloop::kMaxGridPoints && static_cast<unsigned __int128>(size) == product,
        "grid size {} is not the product of the axis lengths, or above the limit", size);
  for (std::size_t index : {std::size_t{0}, size / 2, size - 1}) {
    const auto values = grid.point(index);
    CHECK(values.size() == grid.axes.size(), "point has the wrong number of values");
    for (std::size_t a = 0; a < values.size(); ++a)
      CHECK(std::find(grid.axes[a].values.begin(), grid.axes[a].values.end(), values[a]) != grid.axes[a].values.end(),
            "point value not on its axis");
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  auto lines = split_lines(text);
  const bool nonlinear = lines.front() == "nonlinear";
  if (nonlinear) lines.erase(lines.begin());
  specloop::SweepGrid grid;
  std::optional<specloop::Shard> shard;
  try {
    for (const auto line : lines) {
      if (!line.empty() && line[0] == '#') {
        shard = specloop::parse_shard(line.substr(1));
        CHECK(shard->k >= 1 && shard->k <= shard->n, "shard outside 1 <= K <= N");
        continue;
      }
      if (grid.axes.size() == 4) break;
      grid.axes.push_back(specloop::parse_sweep_axis(line));
      check_axis(grid.axes.back(), line);
    }
  } catch (const specloop::SweepError&) {
    return 0;
  } catch (const std::exception& e) {
    specloop_fuzz::fail_exception(kHarness, e);
  }
  if (grid.axes.empty()) return 0;
  check_grid(grid);
  std::size_t total = 0;
  try {
    total = grid.size();
  } catch (const specloop::SweepError&) {
    return 0;
  }
  if (shard) {
    if (total <= 100000) {
      const auto mine = specloop::shard_points(total, *shard);
      for (std::size_t i : mine) CHECK(i < total && shard->contains(i), "shard point outside the grid or shard");
    }
  }
  // The point texts, as `specloop sweep` writes and validates them.
  const auto& spec = nonlinear ? *spec_files().nonlinear_spec : *spec_files().linear_spec;
  try {
    spec.check_keys(grid);
    for (std::size_t index : {std::size_t{0}, total - 1}) {
      const std::string point = spec.point_text(grid, index);
      try {
        (void)specloop::parse_spec(point, spec.path());
      } catch (const specloop::SpecError&) {
      }
    }
  } catch (const specloop::SweepError&) {
  } catch (const std::exception& e) {
    specloop_fuzz::fail_exception(kHarness, e);
  }
  return 0;
}
