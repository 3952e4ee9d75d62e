// Shared by the two sweep-store harnesses: a scratch folder of this process, the read of a store
// file with its allowed outcomes and invariants, and the sweep report's reading of what was read
// (render_figures off: no gnuplot), which must refuse damaged summaries with a SweepError too.
#pragma once

#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <string>
#include <string_view>

#include <fmt/format.h>

#include "fuzz_common.hpp"
#include "specloop/sweep/sweep.hpp"
#include "specloop/sweep/sweep_report.hpp"

namespace specloop_fuzz {

/// A folder of this process under $TMPDIR (or /tmp), made once.
inline const std::filesystem::path& scratch_dir(std::string_view harness) {
  static const std::filesystem::path dir = [&] {
    const char* base = std::getenv("TMPDIR");
    std::filesystem::path d = std::filesystem::path(base && *base ? base : "/tmp") /
                              fmt::format("specloop-{}-{}", harness, ::getpid());
    std::error_code ec;
    std::filesystem::create_directories(d, ec);
    if (ec) fail(harness, "cannot create " + d.string() + ": " + ec.message());
    return d;
  }();
  return dir;
}

/// Removes the store file, its -wal/-shm/-journal companions and the report folder.
inline void remove_store(const std::filesystem::path& store, const std::filesystem::path& report) {
  std::error_code ec;
  for (const char* suffix : {"", "-wal", "-shm", "-journal"})
    std::filesystem::remove(store.string() + suffix, ec);
  std::filesystem::remove_all(report, ec);
}

/// Reads the store at `store`; a SweepError is the documented refusal. On success checks what the
/// reader promises, then lets the sweep report read the summaries (SweepError allowed).
inline void read_and_check(std::string_view harness, const std::filesystem::path& store,
                           const std::filesystem::path& report) {
  specloop::SweepStoreContents contents;
  try {
    contents = specloop::read_sweep_store(store.string());
  } catch (const specloop::SweepError& e) {
    const std::string_view message = e.what();
    SPECLOOP_FUZZ_CHECK(harness, message.rfind(store.string() + ":", 0) == 0, "SweepError without the store's path: {}",
                        message);
    return;
  } catch (const std::exception& e) {
    fail_exception(harness, e);
  }
  SPECLOOP_FUZZ_CHECK(harness, contents.format == "specloop-sweep-3", "a store of format '{}' was read",
                      contents.format);
  std::size_t size = 0;
  try {
    size = contents.grid.size();
  } catch (const specloop::SweepError& e) {
    fail(harness, fmt::format("read a store whose grid size throws: {}", e.what()));
  }
  SPECLOOP_FUZZ_CHECK(harness, contents.points.size() == size, "{} points read for a grid of {}",
                      contents.points.size(), size);
  for (std::size_t i = 0; i < contents.points.size(); ++i) {
    const auto& p = contents.points[i];
    SPECLOOP_FUZZ_CHECK(harness, p.index == i, "point {} has index {}", i, p.index);
    SPECLOOP_FUZZ_CHECK(harness, p.values == contents.grid.point(i), "point {}'s values are not the grid's", i);
    SPECLOOP_FUZZ_CHECK(harness,
                        !p.finished || (std::isfinite(p.search_wall_time_s) && std::isfinite(p.point_wall_time_s)),
                        "point {} has a non-finite wall time", i);
  }
  SPECLOOP_FUZZ_CHECK(harness, contents.finished() <= contents.points.size(), "more finished points than points");

  specloop::SweepReportOptions options;
  options.render_figures = false;
  try {
    (void)specloop::write_sweep_report(contents, report, options);
  } catch (const specloop::SweepError&) {
  } catch (const std::exception& e) {
    fail(harness, fmt::format("the sweep report of a store that read cleanly threw: {}", e.what()));
  }
}

}  // namespace specloop_fuzz
