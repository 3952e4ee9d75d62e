// Sweeps: a grid of spec variants (the Cartesian product of varied numeric keys), each point
// designed in full, the results kept in a resumable SQLite store; shards and their merge.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/spec/axes.hpp"
#include "specloop/sweep/pareto.hpp"

namespace specloop {

/// A spec file prepared for sweeping: the document re-serialized without its [sweep] table (the
/// canonical text that identifies the spec), and the point texts.
class SweepSpec {
 public:
  /// Reads the file (SpecError/SweepError on problems). Does not validate the axes' keys yet.
  explicit SweepSpec(const std::string& path);
  ~SweepSpec();
  SweepSpec(const SweepSpec&) = delete;
  SweepSpec& operator=(const SweepSpec&) = delete;

  const std::string& path() const { return path_; }
  const std::string& name() const { return name_; }
  const std::string& canonical_text() const { return canonical_; }
  /// The axes written in the spec's [sweep] vary list (empty when there is none).
  const std::vector<std::string>& vary_in_file() const { return vary_in_file_; }
  /// Checks that every axis key names a number present in the document (not in [sweep]).
  void check_keys(const SweepGrid& grid) const;
  /// The spec text of one point: the canonical document with each axis key set to its value.
  std::string point_text(const SweepGrid& grid, std::size_t index) const;

 private:
  struct Impl;
  Impl* impl_;
  std::string path_, name_, canonical_;
  std::vector<std::string> vary_in_file_;
};

/// What a sweep run did.
struct SweepOutcome {
  std::size_t total = 0;        // points in this shard
  std::size_t done_before = 0;  // found finished in the store at the start
  std::size_t done_now = 0;     // finished in this run
  std::size_t met = 0;          // of all finished points in this shard
  std::size_t failed = 0;       // points whose design threw (recorded with status "error")
  bool interrupted = false;     // stopped by the stop flag before every point was done
  double wall_time_s = 0.0;
};

struct SweepOptions {
  std::string store_path;
  /// When set, each point designed in this run also gets its full design report (report.html,
  /// report.md, result.json, series, plots) in <point_reports>/point-<index>/.
  std::string point_reports;
  unsigned jobs = 1;
  Shard shard;
  /// Set asynchronously (SIGINT): no new point starts; points in flight finish and are stored.
  const std::atomic<bool>* stop = nullptr;
  /// Called once the grid is validated and the store opened, before any point runs.
  std::function<void(const SweepOutcome& at_start)> started;
  /// Progress: called by the writer thread after each stored point.
  std::function<void(std::size_t done, std::size_t total, std::size_t met, double elapsed_s,
                     std::size_t done_this_run)> progress;
};

/// Validates the grid against the spec (every point parsed as a spec; SweepError/SpecError),
/// opens or creates the store (refusing a store of another spec, grid or shard), runs the points
/// not yet finished on `jobs` threads and commits each in its own transaction.
SweepOutcome run_sweep(const SweepSpec& spec, const SweepGrid& grid, const SweepOptions& options);

/// The folder of one point's design report: "point-" and the index, zero-padded to the width of
/// the grid's largest index.
std::string point_report_name(std::size_t index, std::size_t grid_size);

/// The default store path: results/<name>.sweep.sqlite, with ".shard-K-of-N" before ".sqlite"
/// for a shard other than 1/1.
std::string default_store_path(const std::string& spec_name, const Shard& shard);

/// Combines stores of the same spec and grid into `out` (written to a temporary file beside it,
/// then renamed). Throws SweepError naming the files on a mismatch or a disagreeing overlap.
/// Returns the number of finished points in `out`.
std::size_t merge_stores(const std::string& out, const std::vector<std::string>& inputs);

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
  std::string classical, optimized;  // JSON text (README, "The store"); empty: no such design
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

}  // namespace specloop
