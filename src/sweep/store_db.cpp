// The sweep store's SQLite side (store_db.hpp): connections and statements, the schema and header,
// opening with its checks (quick_check, the four tables, the format, the run's spec, grid and
// shard), the run's flock, and one result row written in its own transaction.
#include "sweep/store_db.hpp"

#include <fcntl.h>
#include <fmt/format.h>
#include <sys/file.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <filesystem>

namespace specloop::store {

namespace fs = std::filesystem;

// ---- SQLite, thinly --------------------------------------------------------------------------

Db::Db(const std::string& path, int flags) : path_(path) {
  const int rc = sqlite3_open_v2(path.c_str(), &db_, flags, nullptr);
  if (rc != SQLITE_OK) {
    const std::string why = db_ ? sqlite3_errmsg(db_) : sqlite3_errstr(rc);
    sqlite3_close(db_);
    db_ = nullptr;
    throw SweepError(fmt::format("{}: cannot open the store: {}", path, why));
  }
  sqlite3_busy_timeout(db_, 10000);
}

void Db::exec(const std::string& sql) const {
  char* message = nullptr;
  if (sqlite3_exec(db_, sql.c_str(), nullptr, nullptr, &message) != SQLITE_OK) {
    const std::string why = message ? message : sqlite3_errmsg(db_);
    sqlite3_free(message);
    throw SweepError(fmt::format("{}: {}", path_, why));
  }
}

Stmt::Stmt(const Db& db, const std::string& sql) : db_(db) {
  if (sqlite3_prepare_v2(db.get(), sql.c_str(), -1, &stmt_, nullptr) != SQLITE_OK)
    throw SweepError(fmt::format("{}: {}", db.path(), sqlite3_errmsg(db.get())));
}

bool Stmt::step() {
  const int rc = sqlite3_step(stmt_);
  if (rc == SQLITE_ROW) return true;
  if (rc == SQLITE_DONE) return false;
  throw SweepError(fmt::format("{}: {}", db_.path(), sqlite3_errmsg(db_.get())));
}

void Stmt::reset() {
  sqlite3_reset(stmt_);
  sqlite3_clear_bindings(stmt_);
}

std::string Stmt::text(int i) const {
  const auto* p = sqlite3_column_text(stmt_, i);
  return p ? reinterpret_cast<const char*>(p) : "";
}

// ---- opening and checking ----------------------------------------------------------------------

std::unique_ptr<Db> open_store(const std::string& path, bool writable) {
  auto db = std::make_unique<Db>(path, writable ? SQLITE_OPEN_READWRITE : SQLITE_OPEN_READONLY);
  // Any read fails on a non-SQLite file ("file is not a database"); quick_check finds truncation.
  try {
    Stmt check(*db, "PRAGMA quick_check");
    std::string first;
    if (check.step()) first = check.text(0);
    if (first != "ok") throw SweepError(fmt::format("integrity check says: {}", first));
  } catch (const SweepError& e) {
    std::string why = e.what();
    if (why.rfind(path + ": ", 0) == 0) why = why.substr(path.size() + 2);
    throw SweepError(fmt::format("{}: not a usable specloop sweep store (damaged, truncated or not an SQLite "
                                 "database): {}", path, why));
  }
  Stmt tables(*db, "SELECT count(*) FROM sqlite_master WHERE type = 'table' AND name IN "
                   "('sweep_header', 'sweep_axes', 'sweep_points', 'sweep_results')");
  tables.step();
  if (tables.integer(0) != 4)
    throw SweepError(fmt::format("{}: an SQLite database but not a specloop sweep store (it lacks the sweep_header, "
                                 "sweep_axes, sweep_points and sweep_results tables); name another file",
                                 path));
  return db;
}

std::unique_ptr<Db> open_store_for_reading(const std::string& path) {
  const fs::path parent = fs::path(path).parent_path().empty() ? fs::path(".") : fs::path(path).parent_path();
  const bool writable = ::access(path.c_str(), W_OK) == 0 && ::access(parent.c_str(), W_OK) == 0;
  return open_store(path, writable);
}

Header read_header(const Db& db) {
  Stmt s(db, "SELECT format, tool_version, spec_name, spec_text, spec_hash, grid, shard, point_count FROM sweep_header");
  if (!s.step()) throw SweepError(fmt::format("{}: the specloop store has no header row (damaged)", db.path()));
  Header h{s.text(0), s.text(1), s.text(2), s.text(3), s.text(4), s.text(5), s.text(6), s.integer(7)};
  if (h.format != kFormat)
    throw SweepError(fmt::format("{}: store format '{}', this specloop reads '{}'", db.path(), h.format, kFormat));
  return h;
}

std::unique_ptr<Db> open_store_for_run(const std::string& path, const Header& want) {
  auto db = open_store(path, true);
  const Header have = read_header(*db);
  if (have.spec_hash != want.spec_hash || have.spec_text != want.spec_text)
    throw SweepError(fmt::format("{}: this store was made from a different spec text (hash {}, this spec's is {}); "
                                 "give another --store or remove it", path, have.spec_hash, want.spec_hash));
  if (have.grid != want.grid)
    throw SweepError(fmt::format("{}: this store was made for a different grid ({}), this run's is ({}); give "
                                 "another --store or remove it", path, have.grid, want.grid));
  if (have.shard != want.shard)
    throw SweepError(fmt::format("{}: this store belongs to shard {}, this run is shard {}", path, have.shard, want.shard));
  db->exec("PRAGMA journal_mode = WAL");
  db->exec("PRAGMA synchronous = NORMAL");
  return db;
}

std::set<std::size_t> finished_points(const Db& db) {
  std::set<std::size_t> finished;
  Stmt s(db, "SELECT idx FROM sweep_results");
  while (s.step()) finished.insert(static_cast<std::size_t>(s.integer(0)));
  return finished;
}

std::size_t met_count(const Db& db) {
  Stmt s(db, "SELECT count(*) FROM sweep_results WHERE met = 1");
  s.step();
  return static_cast<std::size_t>(s.integer(0));
}

// ---- a new store ---------------------------------------------------------------------------------

namespace {
const char* kResultColumns =
    "idx INTEGER PRIMARY KEY REFERENCES sweep_points(idx), status TEXT NOT NULL, error TEXT, met INTEGER, "
    "judged_on TEXT, binding TEXT, evaluations INTEGER, classical_confirmed INTEGER, optimized_confirmed INTEGER, "
    "classical TEXT, optimized TEXT, search_wall_time_s REAL, point_wall_time_s REAL";
}  // namespace

void write_schema(const Db& db, const Header& h, const SweepGrid& grid) {
  db.exec("BEGIN");
  db.exec("CREATE TABLE sweep_header(format TEXT NOT NULL, tool_version TEXT NOT NULL, spec_name TEXT NOT NULL, "
          "spec_text TEXT NOT NULL, spec_hash TEXT NOT NULL, grid TEXT NOT NULL, shard TEXT NOT NULL, "
          "point_count INTEGER NOT NULL)");
  db.exec("CREATE TABLE sweep_axes(axis INTEGER PRIMARY KEY, key TEXT NOT NULL, definition TEXT NOT NULL, "
          "value_count INTEGER NOT NULL)");
  std::string columns = "idx INTEGER PRIMARY KEY";
  for (std::size_t a = 0; a < grid.axes.size(); ++a) columns += fmt::format(", v{} REAL NOT NULL", a + 1);
  db.exec("CREATE TABLE sweep_points(" + columns + ")");
  db.exec(std::string("CREATE TABLE sweep_results(") + kResultColumns + ")");
  {
    Stmt s(db, "INSERT INTO sweep_header VALUES (?, ?, ?, ?, ?, ?, ?, ?)");
    s.bind(1, h.format); s.bind(2, h.tool_version); s.bind(3, h.spec_name); s.bind(4, h.spec_text);
    s.bind(5, h.spec_hash); s.bind(6, h.grid); s.bind(7, h.shard); s.bind(8, h.point_count);
    s.step();
  }
  {
    Stmt s(db, "INSERT INTO sweep_axes VALUES (?, ?, ?, ?)");
    for (std::size_t a = 0; a < grid.axes.size(); ++a) {
      s.reset();
      s.bind(1, static_cast<std::int64_t>(a + 1)); s.bind(2, grid.axes[a].key); s.bind(3, grid.axes[a].definition);
      s.bind(4, static_cast<std::int64_t>(grid.axes[a].values.size()));
      s.step();
    }
  }
  {
    std::string marks = "?";
    for (std::size_t a = 0; a < grid.axes.size(); ++a) marks += ", ?";
    Stmt s(db, "INSERT INTO sweep_points VALUES (" + marks + ")");
    for (std::size_t i = 0; i < grid.size(); ++i) {
      s.reset();
      s.bind(1, static_cast<std::int64_t>(i));
      const auto v = grid.point(i);
      for (std::size_t a = 0; a < v.size(); ++a) s.bind(static_cast<int>(a + 2), v[a]);
      s.step();
    }
  }
  db.exec("COMMIT");
}

void create_store_if_missing(const std::string& path, const Header& want, const SweepGrid& grid) {
  std::error_code ec;
  if (fs::exists(path, ec)) return;
  const fs::path parent = fs::path(path).parent_path();
  if (!parent.empty()) fs::create_directories(parent, ec);
  const std::string tmp = temp_beside(path);
  fs::remove(tmp, ec);
  {
    Db db(tmp, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE);
    write_schema(db, want, grid);
  }
  fs::rename(tmp, path, ec);
  if (ec) throw SweepError(fmt::format("{}: cannot create the store: {}", path, ec.message()));
}

std::string temp_beside(const std::string& path) {
  return fmt::format("{}.tmp-{}", path, static_cast<long>(getpid()));
}

// ---- the run's lock ------------------------------------------------------------------------------

StoreLock::StoreLock(const std::string& path) {
  fd_ = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd_ < 0) throw SweepError(fmt::format("{}: cannot open the store: {}", path, std::strerror(errno)));
  if (::flock(fd_, LOCK_EX | LOCK_NB) != 0) {
    const int reason = errno;
    ::close(fd_);
    if (reason == EWOULDBLOCK)
      throw SweepError(fmt::format("{}: the store is in use by another sweep; wait for it to end (or stop it) "
                                   "and run the command again", path));
    throw SweepError(fmt::format("{}: cannot lock the store: {}", path, std::strerror(reason)));
  }
}

StoreLock::~StoreLock() { ::close(fd_); }

// ---- one result ----------------------------------------------------------------------------------

ResultWriter::ResultWriter(const Db& db)
    : insert_(db, "INSERT INTO sweep_results VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)") {}

void ResultWriter::write(const PointRow& r) {
  Stmt& s = insert_;
  s.reset();
  s.bind(1, static_cast<std::int64_t>(r.index));
  s.bind(2, r.status);
  if (r.status == "ok") {
    s.bind_null(3);
    s.bind(4, static_cast<std::int64_t>(r.met));
    s.bind(5, r.judged_on);
    if (r.binding.empty()) s.bind_null(6); else s.bind(6, r.binding);
    s.bind(7, static_cast<std::int64_t>(r.evaluations));
    if (r.classical_confirmed) s.bind(8, static_cast<std::int64_t>(*r.classical_confirmed)); else s.bind_null(8);
    if (r.optimized_confirmed) s.bind(9, static_cast<std::int64_t>(*r.optimized_confirmed)); else s.bind_null(9);
    if (r.classical.empty()) s.bind_null(10); else s.bind(10, r.classical);
    if (r.optimized.empty()) s.bind_null(11); else s.bind(11, r.optimized);
    s.bind(12, r.search_wall_time_s);
  } else {
    s.bind(3, r.error);
    for (int i = 4; i <= 12; ++i) s.bind_null(i);
  }
  s.bind(13, r.point_wall_time_s);
  s.step();
}

}  // namespace specloop::store
