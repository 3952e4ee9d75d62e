// Sweeps (sweep.hpp): the run — every point validated as a spec before anything is written, the
// store created or opened (store_db.hpp), worker threads designing the unfinished points, and the
// calling thread as the single writer, one transaction per point.
#include <fmt/format.h>

#include <algorithm>
#include <chrono>
#include <condition_variable>
#include <deque>
#include <filesystem>
#include <mutex>
#include <set>
#include <thread>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/output/design_json.hpp"
#include "specloop/output/report.hpp"
#include "specloop/output/robust_json.hpp"
#include "specloop/spec/spec.hpp"
#include "specloop/sweep/sweep.hpp"
#include "sweep/store_db.hpp"

namespace specloop {

namespace fs = std::filesystem;
using store::PointRow;

// ---------------------------------------------------------------------------------------------
// One point's results
// ---------------------------------------------------------------------------------------------

namespace {

PointRow run_point(const SweepSpec& spec, const SweepGrid& grid, std::size_t index, const std::string& reports) {
  const auto start = std::chrono::steady_clock::now();
  PointRow row;
  row.index = index;
  try {
    Spec point = parse_spec(spec.point_text(grid, index), spec.path());
    // Messages and reports of this point name it with its values.
    point.path = fmt::format("{} [sweep point {}: {}]", spec.path(), index, point_values_text(grid, index));
    const DesignRun run = run_design(point);
    if (!reports.empty()) {
      try {
        write_design_outputs(run, fs::path(reports) / point_report_name(index, grid.size()));
      } catch (const std::exception& e) {
        throw std::runtime_error(fmt::format("the point's report could not be written: {}", e.what()));
      }
    }
    row.met = run.met;
    row.judged_on = run.judged_on_nonlinear ? "nonlinear" : "linear";
    // The binding requirement: missed by the most when infeasible, else the tightest at the optimum
    // on the loop the design was judged on.
    if (run.infeasibility) {
      row.binding = run.infeasibility->binding;
    } else if (const Design* o = run.find(DesignRole::optimized); o && run.met) {
      row.binding = tightest_requirement(run.judged_on_nonlinear && o->nonlinear ? o->nonlinear->checks : o->checks);
    }
    row.evaluations = run.search.evaluations;
    row.search_wall_time_s = run.search.wall_time_s;
    // A design's summary; with [uncertainty], its robust claim and counts too (robust_summary_json).
    const auto summary = [&](const Design& d) {
      nlohmann::json j = design_summary(d);
      if (run.robust)
        if (const RobustAssessment* a = run.robust->find(d.role)) j["robust"] = robust_summary_json(*run.robust, *a);
      return j.dump();
    };
    if (const Design* c = run.find(DesignRole::classical)) {
      row.classical = summary(*c);
      if (c->nonlinear) row.classical_confirmed = c->nonlinear->confirmed;
    }
    if (const Design* o = run.find(DesignRole::optimized)) {
      row.optimized = summary(*o);
      if (o->nonlinear) row.optimized_confirmed = o->nonlinear->confirmed;
    }
  } catch (const std::exception& e) {
    row = PointRow{};
    row.index = index;
    row.status = "error";
    row.error = e.what();
  }
  row.point_wall_time_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return row;
}

// Every point is validated as a spec before anything is written.
void check_every_point(const SweepSpec& spec, const SweepGrid& grid) {
  for (std::size_t i = 0; i < grid.size(); ++i) {
    try {
      (void)parse_spec(spec.point_text(grid, i), spec.path());
    } catch (const SpecError& e) {
      const std::string values = point_values_text(grid, i);
      std::string why = e.what();
      // The line numbers refer to the re-written point text, not the file: drop them.
      if (why.rfind(spec.path() + ":", 0) == 0) {
        const auto colon = why.find(": ", spec.path().size());
        if (colon != std::string::npos) why = why.substr(colon + 2);
      }
      throw SweepError(fmt::format("{}: sweep point {} ({}) is not a valid spec: {}", spec.path(), i, values, why));
    }
  }
}

// ---------------------------------------------------------------------------------------------
// The workers and the writer
// ---------------------------------------------------------------------------------------------

// Runs the points `todo` on `jobs` worker threads; the calling thread is the only writer: each
// point in its own transaction (an INSERT outside BEGIN commits alone). Counts into `out`.
void run_points(const SweepSpec& spec, const SweepGrid& grid, const std::vector<std::size_t>& todo,
                const store::Db& db, const SweepOptions& options, std::chrono::steady_clock::time_point start,
                SweepOutcome& out) {
  std::mutex mutex;
  std::condition_variable ready;
  std::deque<PointRow> queue;
  std::atomic<std::size_t> next{0};
  unsigned running = 0;
  const unsigned jobs = std::max(1u, std::min<unsigned>(options.jobs, static_cast<unsigned>(std::max<std::size_t>(1, todo.size()))));
  std::vector<std::thread> workers;
  running = jobs;
  for (unsigned w = 0; w < jobs; ++w) {
    workers.emplace_back([&] {
      while (true) {
        if (options.stop && options.stop->load()) break;
        const std::size_t k = next.fetch_add(1);
        if (k >= todo.size()) break;
        PointRow row = run_point(spec, grid, todo[k], options.point_reports);
        std::lock_guard lock(mutex);
        queue.push_back(std::move(row));
        ready.notify_one();
      }
      std::lock_guard lock(mutex);
      --running;
      ready.notify_one();
    });
  }

  std::exception_ptr failure;
  try {
    store::ResultWriter writer(db);
    while (true) {
      std::unique_lock lock(mutex);
      ready.wait(lock, [&] { return !queue.empty() || running == 0; });
      if (queue.empty() && running == 0) break;
      PointRow row = std::move(queue.front());
      queue.pop_front();
      lock.unlock();
      writer.write(row);
      ++out.done_now;
      if (row.status != "ok") ++out.failed;
      if (row.met) ++out.met;
      if (options.progress)
        options.progress(out.done_before + out.done_now, out.total, out.met,
                         std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count(), out.done_now);
    }
  } catch (...) {
    failure = std::current_exception();
    next.store(todo.size());  // no new points
  }
  for (auto& t : workers) t.join();
  if (failure) std::rethrow_exception(failure);
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// The sweep
// ---------------------------------------------------------------------------------------------

std::string point_report_name(std::size_t index, std::size_t grid_size) {
  const std::size_t width = fmt::format("{}", grid_size > 0 ? grid_size - 1 : 0).size();
  return fmt::format("point-{:0{}}", index, width);
}

std::string default_store_path(const std::string& spec_name, const Shard& shard) {
  const std::string shard_part = shard.n == 1 ? "" : fmt::format(".shard-{}-of-{}", shard.k, shard.n);
  return (fs::path("results") / (spec_name + ".sweep" + shard_part + ".sqlite")).string();
}

SweepOutcome run_sweep(const SweepSpec& spec, const SweepGrid& grid, const SweepOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  if (grid.axes.empty())
    throw SweepError(fmt::format("{}: nothing to vary: give --vary KEY=FROM:TO:COUNT or a [sweep] vary list", spec.path()));
  spec.check_keys(grid);
  const std::vector<std::size_t> mine = shard_points(grid.size(), options.shard);
  check_every_point(spec, grid);

  const store::Header want{std::string(store::kFormat), SPECLOOP_VERSION, spec.name(), spec.canonical_text(),
                           fnv1a64_hex(spec.canonical_text()), grid.canonical(), options.shard.text(),
                           static_cast<std::int64_t>(grid.size())};
  const std::string& path = options.store_path;
  store::create_store_if_missing(path, want, grid);
  const store::StoreLock store_lock(path);
  const auto db = store::open_store_for_run(path, want);

  const std::set<std::size_t> finished = store::finished_points(*db);
  SweepOutcome out;
  out.total = mine.size();
  std::vector<std::size_t> todo;
  for (std::size_t i : mine) {
    if (finished.count(i)) ++out.done_before;
    else todo.push_back(i);
  }
  out.met = store::met_count(*db);

  if (options.started) options.started(out);
  run_points(spec, grid, todo, *db, options, start, out);
  out.interrupted = out.done_before + out.done_now < out.total;
  out.wall_time_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return out;
}

}  // namespace specloop
