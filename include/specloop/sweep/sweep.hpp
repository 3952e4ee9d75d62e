// Sweeps: a grid of spec variants (the Cartesian product of varied numeric keys), each point
// designed in full on worker threads, the results kept in a resumable SQLite store. The point
// specs are in sweep_spec.hpp, reading and merging stores in store.hpp (both included here).
#pragma once

#include <atomic>
#include <cstddef>
#include <functional>
#include <string>

#include "specloop/spec/axes.hpp"
#include "specloop/sweep/pareto.hpp"
#include "specloop/sweep/store.hpp"
#include "specloop/sweep/sweep_spec.hpp"

namespace specloop {

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

}  // namespace specloop
