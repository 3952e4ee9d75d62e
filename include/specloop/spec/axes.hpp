// Sweep axes and grids: the syntax of a varied key ("KEY=FROM:TO:COUNT", "KEY=a,b,c"), the
// Cartesian product's numbering, and shards. Part of the spec's language ([sweep] vary is read and
// checked with the spec), so it sits in the spec layer; it depends on nothing of specloop.
#pragma once

#include <cstddef>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

namespace specloop {

/// A bad sweep request (grid, key, store): the message is complete; the CLI exits 2.
class SweepError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// One varied key and its values, from "KEY=FROM:TO:COUNT", "KEY=FROM:TO:COUNTlog" or "KEY=a,b,c".
struct SweepAxis {
  std::string key;          // dotted path from the document root, array elements as [i] (0-based)
  std::string definition;   // the text after '=', as given
  std::vector<double> values;
};

/// Parses one axis. Throws SweepError naming the text and what was expected (COUNT ≥ 1, a log
/// range with both bounds > 0, finite numbers, a key before '=').
SweepAxis parse_sweep_axis(std::string_view text);

/// The most points one grid may have (its size() refuses more).
constexpr std::size_t kMaxGridPoints = 10000000;

/// The grid: axes in the order given; the first axis varies slowest (row-major, like nested loops
/// with the first axis outermost). Point i's value on axis a is values[digit_a(i)].
struct SweepGrid {
  std::vector<SweepAxis> axes;
  /// The product of the axis lengths (1 for no axes); throws SweepError when it exceeds
  /// kMaxGridPoints (so it never wraps around, and no sweep starts on an endless grid).
  std::size_t size() const;
  std::vector<double> point(std::size_t index) const;  // the values of point `index`, one per axis
  std::string canonical() const;                       // "key=def;key=def" with values listed exactly
};

/// Shard K of N (1 ≤ K ≤ N): the points with index % N == K − 1.
struct Shard {
  int k = 1;
  int n = 1;
  bool contains(std::size_t index) const { return index % static_cast<std::size_t>(n) == static_cast<std::size_t>(k - 1); }
  std::string text() const;                            // "K/N"
};
/// Parses "K/N"; throws SweepError otherwise.
Shard parse_shard(std::string_view text);
/// The indices of `grid` that belong to `shard`, ascending.
std::vector<std::size_t> shard_points(std::size_t grid_size, const Shard& shard);

}  // namespace specloop
