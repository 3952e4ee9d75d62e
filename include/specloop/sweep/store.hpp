// The sweep store as its readers see it: every grid point with its stored result, read from the
// SQLite file (README, "The store"); the merge of shards' stores.
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <vector>

#include "specloop/spec/axes.hpp"

namespace specloop {

/// One grid point of a store, with its result when finished.
struct StoredPoint {
  std::size_t index = 0;
  std::vector<double> values;        // one per axis
  bool finished = false;             // has a result row
  std::string status;                // "ok" or "error" (finished points)
  std::string error;                 // the message of an "error" point
  bool met = false;
  std::string judged_on, binding;    // binding: "" when none
  int evaluations = 0;
  std::optional<bool> classical_confirmed, optimized_confirmed;
  std::string classical, optimized;  // JSON text (design_summary: README, "The store"); empty: no such design
  double search_wall_time_s = 0.0, point_wall_time_s = 0.0;
};

/// A whole store, read.
struct SweepStoreContents {
  std::string path, format, tool_version, spec_name, spec_text, spec_hash, shard;
  SweepGrid grid;
  std::vector<StoredPoint> points;   // every grid point, by index
  std::size_t finished() const;
};

/// Reads a store (read-only). Throws SweepError for a missing, damaged, truncated, foreign or
/// other-format file, naming the file and what is wrong.
SweepStoreContents read_sweep_store(const std::string& path);

/// Combines stores of the same spec and grid into `out` (written to a temporary file beside it,
/// then renamed). Throws SweepError naming the files on a mismatch or a disagreeing overlap.
/// Returns the number of finished points in `out`.
std::size_t merge_stores(const std::string& out, const std::vector<std::string>& inputs);

}  // namespace specloop
