// Reading a whole store (store.hpp): the open checks, the header, the axes rebuilt into the grid,
// every grid point and every result row, each checked against the grid (damage is a SweepError
// naming the file and what is wrong).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <filesystem>

#include "specloop/sweep/store.hpp"
#include "sweep/store_db.hpp"

namespace specloop {

namespace fs = std::filesystem;
using store::Db;
using store::Header;
using store::Stmt;

std::size_t SweepStoreContents::finished() const {
  return static_cast<std::size_t>(std::count_if(points.begin(), points.end(), [](const StoredPoint& p) { return p.finished; }));
}

namespace {

// The grid rebuilt from sweep_axes, checked against the header. A damaged axis is the store's
// fault, not a --vary the user typed: say so, with the file.
SweepGrid read_grid(const Db& db, const std::string& path, const Header& h) {
  SweepGrid grid;
  Stmt s(db, "SELECT key, definition FROM sweep_axes ORDER BY axis");
  while (s.step()) {
    const std::string text = s.text(0) + "=" + s.text(1);
    try {
      grid.axes.push_back(parse_sweep_axis(text));
    } catch (const SweepError& e) {
      std::string why = e.what();
      const std::string prefix = fmt::format("--vary '{}': ", text);
      if (why.rfind(prefix, 0) == 0) why = why.substr(prefix.size());
      throw SweepError(fmt::format("{}: axis {} of the store ('{}') is damaged: {}", path, grid.axes.size() + 1,
                                   text, why));
    }
  }
  std::size_t grid_size = 0;
  try {
    grid_size = grid.size();
  } catch (const SweepError& e) {
    throw SweepError(fmt::format("{}: {} (damaged)", path, e.what()));
  }
  if (static_cast<std::int64_t>(grid_size) != h.point_count || grid.canonical() != h.grid)
    throw SweepError(fmt::format("{}: the store's axes do not reproduce its grid (damaged)", path));
  return grid;
}

// Every grid point from sweep_points: each index once, with the grid's values.
void read_points(const Db& db, const std::string& path, const Header& h, SweepStoreContents& out) {
  const std::size_t grid_size = out.grid.size();
  {
    // Memory follows the rows actually stored, not a size the header claims.
    Stmt s(db, "SELECT count(*) FROM sweep_points");
    const std::int64_t rows = s.step() ? s.integer(0) : 0;
    if (rows != h.point_count)
      throw SweepError(fmt::format("{}: {} grid point(s) stored for a grid of {} (damaged)", path, rows, grid_size));
  }
  out.points.resize(grid_size);
  Stmt s(db, "SELECT * FROM sweep_points ORDER BY idx");
  const int columns = sqlite3_column_count(s.get());
  if (columns != static_cast<int>(out.grid.axes.size()) + 1)
    throw SweepError(fmt::format("{}: sweep_points has {} value column(s) for {} axes (damaged)", path, columns - 1,
                                 out.grid.axes.size()));
  std::size_t rows = 0;
  std::vector<bool> seen(out.points.size(), false);
  while (s.step()) {
    const std::int64_t idx = s.integer(0);
    if (idx < 0 || static_cast<std::size_t>(idx) >= out.points.size())
      throw SweepError(fmt::format("{}: point index {} outside the grid of {} (damaged)", path, idx, out.points.size()));
    const auto i = static_cast<std::size_t>(idx);
    if (seen[i]) throw SweepError(fmt::format("{}: point {} is stored twice (damaged)", path, idx));
    seen[i] = true;
    StoredPoint& p = out.points[i];
    p.index = i;
    for (int c = 1; c < columns; ++c) p.values.push_back(sqlite3_column_double(s.get(), c));
    if (p.values != out.grid.point(i))
      throw SweepError(fmt::format("{}: point {}'s values differ from the grid's (damaged)", path, idx));
    ++rows;
  }
  if (rows != out.points.size())
    throw SweepError(fmt::format("{}: {} grid point(s) stored for a grid of {} (damaged)", path, rows, out.points.size()));
}

// Every result row from sweep_results onto its point.
void read_results(const Db& db, const std::string& path, SweepStoreContents& out) {
  Stmt s(db, "SELECT idx, status, error, met, judged_on, binding, evaluations, classical_confirmed, optimized_confirmed, "
             "classical, optimized, search_wall_time_s, point_wall_time_s FROM sweep_results ORDER BY idx");
  const auto optional_bool = [&](int c) -> std::optional<bool> {
    if (sqlite3_column_type(s.get(), c) == SQLITE_NULL) return std::nullopt;
    return s.integer(c) != 0;
  };
  while (s.step()) {
    const std::int64_t idx = s.integer(0);
    if (idx < 0 || static_cast<std::size_t>(idx) >= out.points.size())
      throw SweepError(fmt::format("{}: a result for point {} outside the grid (damaged)", path, idx));
    StoredPoint& p = out.points[static_cast<std::size_t>(idx)];
    p.finished = true;
    p.status = s.text(1);
    p.error = s.text(2);
    p.met = s.integer(3) != 0;
    p.judged_on = s.text(4);
    p.binding = s.text(5);
    p.evaluations = static_cast<int>(s.integer(6));
    p.classical_confirmed = optional_bool(7);
    p.optimized_confirmed = optional_bool(8);
    p.classical = s.text(9);
    p.optimized = s.text(10);
    p.search_wall_time_s = sqlite3_column_double(s.get(), 11);
    p.point_wall_time_s = sqlite3_column_double(s.get(), 12);
    // SQLite keeps ±inf in a REAL column; a time is finite and not negative.
    if (!(p.search_wall_time_s >= 0.0 && p.point_wall_time_s >= 0.0 && std::isfinite(p.search_wall_time_s) &&
          std::isfinite(p.point_wall_time_s)))
      throw SweepError(fmt::format("{}: point {}'s wall times ({}, {}) are not finite times >= 0 (damaged)", path,
                                   idx, p.search_wall_time_s, p.point_wall_time_s));
  }
}

}  // namespace

SweepStoreContents read_sweep_store(const std::string& path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw SweepError(fmt::format("{}: no such file", path));
  if (fs::is_directory(path, ec)) throw SweepError(fmt::format("{}: a folder, not a sweep store", path));
  auto db = store::open_store_for_reading(path);
  const Header h = read_header(*db);
  SweepStoreContents out;
  out.path = path;
  out.format = h.format;
  out.tool_version = h.tool_version;
  out.spec_name = h.spec_name;
  out.spec_text = h.spec_text;
  out.spec_hash = h.spec_hash;
  out.shard = h.shard;
  out.grid = read_grid(*db, path, h);
  read_points(*db, path, h, out);
  read_results(*db, path, out);
  return out;
}

}  // namespace specloop
