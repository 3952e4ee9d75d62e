// Pareto fronts (non-dominated points) and the 64-bit FNV-1a spec hash.
#include "specloop/sweep/pareto.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <stdexcept>

namespace specloop {

std::vector<std::size_t> non_dominated(const std::vector<std::vector<double>>& points) {
  if (points.empty()) return {};
  const std::size_t k = points.front().size();
  for (const auto& p : points) {
    if (p.size() != k) throw std::invalid_argument("non_dominated: rows of different lengths");
    for (double v : p)
      if (std::isnan(v)) throw std::invalid_argument("non_dominated: NaN objective");
  }
  // A dominating point is lexicographically smaller, so in lexicographic order a point can only be
  // dominated by points before it, and a dominated point's dominator is itself dominated by (or is)
  // a kept point: checking the kept ones is enough.
  std::vector<std::size_t> order(points.size());
  for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return points[a] < points[b]; });
  const auto dominates = [&](const std::vector<double>& q, const std::vector<double>& p) {
    bool strict = false;
    for (std::size_t j = 0; j < k; ++j) {
      if (q[j] > p[j]) return false;
      if (q[j] < p[j]) strict = true;
    }
    return strict;
  };
  std::vector<std::size_t> front;
  for (std::size_t i : order) {
    bool dominated = false;
    for (std::size_t f : front)
      if (dominates(points[f], points[i])) {
        dominated = true;
        break;
      }
    if (!dominated) front.push_back(i);
  }
  std::sort(front.begin(), front.end());
  return front;
}

std::string fnv1a64_hex(std::string_view bytes) {
  std::uint64_t h = 0xcbf29ce484222325ULL;  // FNV offset basis (Fowler–Noll–Vo, 64-bit)
  for (unsigned char c : bytes) {
    h ^= c;
    h *= 0x100000001b3ULL;  // FNV prime
  }
  return fmt::format("{:016x}", h);
}

}  // namespace specloop
