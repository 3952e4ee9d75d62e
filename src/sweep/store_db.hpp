// Internal: the sweep store's SQLite side, shared by the run (sweep.cpp), the reader
// (store_read.cpp) and the merge (store_merge.cpp): SQLite's C API behind two small RAII classes,
// the header row, the schema, opening with its checks, the run's lock, and writing one result.
// The layout is documented in README.md ("The store").
#pragma once

#include <sqlite3.h>

#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <set>
#include <string>
#include <string_view>

#include "specloop/spec/axes.hpp"

namespace specloop::store {

/// The format this specloop writes and reads; a store of any other is refused (read_header).
inline constexpr std::string_view kFormat = "specloop-sweep-3";

/// An open SQLite connection; errors are SweepErrors naming the file.
class Db {
 public:
  Db(const std::string& path, int flags);
  ~Db() { sqlite3_close(db_); }
  Db(const Db&) = delete;
  Db& operator=(const Db&) = delete;
  sqlite3* get() const { return db_; }
  const std::string& path() const { return path_; }
  void exec(const std::string& sql) const;

 private:
  std::string path_;
  sqlite3* db_ = nullptr;
};

/// A prepared statement of one connection.
class Stmt {
 public:
  Stmt(const Db& db, const std::string& sql);
  ~Stmt() { sqlite3_finalize(stmt_); }
  Stmt(const Stmt&) = delete;
  Stmt& operator=(const Stmt&) = delete;
  sqlite3_stmt* get() const { return stmt_; }
  /// True while a row is available; throws on an error.
  bool step();
  void reset();
  void bind(int i, const std::string& s) { sqlite3_bind_text(stmt_, i, s.c_str(), static_cast<int>(s.size()), SQLITE_TRANSIENT); }
  void bind(int i, double v) { sqlite3_bind_double(stmt_, i, v); }
  void bind(int i, std::int64_t v) { sqlite3_bind_int64(stmt_, i, v); }
  void bind_null(int i) { sqlite3_bind_null(stmt_, i); }
  std::string text(int i) const;
  std::int64_t integer(int i) const { return sqlite3_column_int64(stmt_, i); }

 private:
  const Db& db_;
  sqlite3_stmt* stmt_ = nullptr;
};

/// The sweep_header row.
struct Header {
  std::string format, tool_version, spec_name, spec_text, spec_hash, grid, shard;
  std::int64_t point_count = 0;
};

/// The columns of sweep_results, in order (merge copies them as they are).
inline constexpr int kResultColumnCount = 13;

/// Opens an existing file as a specloop store: refuses non-SQLite, damaged and foreign files.
std::unique_ptr<Db> open_store(const std::string& path, bool writable);

/// Opens a store only to read it. Read-write when the file and its folder allow it, so that closing
/// the last connection checkpoints the WAL and removes the -wal/-shm files (a read-only connection
/// would leave them beside the store); read-only otherwise. Nothing is written either way.
std::unique_ptr<Db> open_store_for_reading(const std::string& path);

/// The header row; refuses a store of another format than kFormat.
Header read_header(const Db& db);

/// Writes a new store's schema, header, axes and every grid point (in one transaction).
void write_schema(const Db& db, const Header& h, const SweepGrid& grid);

/// Creates the store at `path` when there is none: built in a temporary file beside it, then
/// renamed into place, so that a store file always has its header.
void create_store_if_missing(const std::string& path, const Header& want, const SweepGrid& grid);

/// Opens the run's store for writing: refuses one made from another spec text, grid or shard
/// than `want`, then switches it to WAL with synchronous = NORMAL.
std::unique_ptr<Db> open_store_for_run(const std::string& path, const Header& want);

/// The indices of the points that have a result row, and how many of them are met.
std::set<std::size_t> finished_points(const Db& db);
std::size_t met_count(const Db& db);

/// An exclusive advisory lock (flock) on the store file for the whole run, so that a second sweep
/// on the same store is refused instead of designing the same points. flock locks are separate from
/// the POSIX record locks SQLite takes, so the two do not interfere.
class StoreLock {
 public:
  explicit StoreLock(const std::string& path);
  ~StoreLock();
  StoreLock(const StoreLock&) = delete;
  StoreLock& operator=(const StoreLock&) = delete;

 private:
  int fd_ = -1;
};

/// A temporary path beside `path`, unique to this process.
std::string temp_beside(const std::string& path);

/// One point's result row (sweep_results).
struct PointRow {
  std::size_t index = 0;
  std::string status = "ok", error;
  bool met = false;
  std::string judged_on, binding;
  int evaluations = 0;
  std::optional<bool> classical_confirmed, optimized_confirmed;
  std::string classical, optimized;  // JSON text (design_summary), empty: no such design
  double search_wall_time_s = 0.0, point_wall_time_s = 0.0;
};

/// Writes result rows, each an INSERT of its own: outside any BEGIN, so each commits alone.
class ResultWriter {
 public:
  explicit ResultWriter(const Db& db);
  void write(const PointRow& row);

 private:
  Stmt insert_;
};

}  // namespace specloop::store
