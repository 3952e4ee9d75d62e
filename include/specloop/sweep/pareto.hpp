// Pareto fronts and the store's spec hash: small pure functions of the sweep layer.
#pragma once

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

namespace specloop {

/// The non-dominated points among `points` (each a vector of the same length, every objective
/// minimized): indices, ascending. q dominates p when q ≤ p in every objective and q < p in at least
/// one; equal points do not dominate each other (both stay). Throws std::invalid_argument for a
/// NaN or for rows of different lengths. O(n log n + n·f·k) for f front points, k objectives.
std::vector<std::size_t> non_dominated(const std::vector<std::vector<double>>& points);

/// 64-bit FNV-1a of the bytes, as 16 lowercase hex digits (the store's spec hash).
std::string fnv1a64_hex(std::string_view bytes);

}  // namespace specloop
