// Sweeps: point spec texts (toml++), the SQLite store (C API, WAL, one transaction per point,
// single writer), worker threads, shards' merge. The store's layout is documented in README.md.
#include <fmt/format.h>
#include <sqlite3.h>
#include <fcntl.h>
#include <sys/file.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstring>

#include <chrono>
#include <condition_variable>
#include <deque>
#include <filesystem>
#include <map>
#include <mutex>
#include <nlohmann/json.hpp>
#include <set>
#include <sstream>
#include <thread>
#include <toml++/toml.h>

#include "specloop/design/design.hpp"
#include "specloop/output/json_io.hpp"
#include "specloop/output/report.hpp"
#include "specloop/spec/spec.hpp"
#include "specloop/sweep/sweep.hpp"

namespace specloop {

namespace fs = std::filesystem;
using nlohmann::json;

// ---------------------------------------------------------------------------------------------
// Spec texts
// ---------------------------------------------------------------------------------------------

namespace {

/// One step of a key path: a table key or an array index.
struct PathStep {
  std::string key;
  std::optional<std::size_t> index;
};

std::vector<PathStep> split_key(const std::string& key) {
  std::vector<PathStep> steps;
  std::size_t i = 0;
  const auto bad = [&]() -> std::vector<PathStep> {
    throw SweepError(fmt::format("--vary key '{}': expected a dotted path such as plant.delay or plant.poles[1][0]", key));
  };
  while (i < key.size()) {
    std::size_t j = i;
    while (j < key.size() && key[j] != '.' && key[j] != '[') ++j;
    if (j == i) return bad();
    steps.push_back({key.substr(i, j - i), std::nullopt});
    while (j < key.size() && key[j] == '[') {
      const auto close = key.find(']', j);
      if (close == std::string::npos || close == j + 1) return bad();
      std::size_t n = 0;
      for (std::size_t p = j + 1; p < close; ++p) {
        if (key[p] < '0' || key[p] > '9') return bad();
        n = n * 10 + static_cast<std::size_t>(key[p] - '0');
      }
      steps.push_back({"", n});
      j = close + 1;
    }
    if (j < key.size()) {
      if (key[j] != '.') return bad();
      ++j;
      if (j == key.size()) return bad();
    }
    i = j;
  }
  if (steps.empty()) return bad();
  return steps;
}

/// The node a key names, or an error saying which step failed.
toml::node* find_node(toml::table& root, const std::string& key, const std::string& spec_path) {
  const auto steps = split_key(key);
  toml::node* node = &root;
  std::string walked;
  for (const auto& step : steps) {
    if (!step.index) {
      auto* table = node->as_table();
      toml::node* next = table ? table->get(step.key) : nullptr;
      walked += (walked.empty() ? "" : ".") + step.key;
      if (next == nullptr)
        throw SweepError(fmt::format("{}: --vary key '{}': '{}' is not in the spec file (only keys written in the "
                                     "file can be varied)", spec_path, key, walked));
      node = next;
    } else {
      auto* array = node->as_array();
      if (array == nullptr)
        throw SweepError(fmt::format("{}: --vary key '{}': '{}' is not an array, so [{}] cannot index it", spec_path,
                                     key, walked, *step.index));
      if (*step.index >= array->size())
        throw SweepError(fmt::format("{}: --vary key '{}': '{}' has {} element(s); index {} is out of range "
                                     "(indices start at 0)", spec_path, key, walked, array->size(), *step.index));
      walked += fmt::format("[{}]", *step.index);
      node = array->get(*step.index);
    }
  }
  return node;
}

/// Replaces a numeric node's value, keeping an integer an integer when the value is integral.
void set_number(toml::table& root, const std::string& key, double value, const std::string& spec_path) {
  const toml::node* old = find_node(root, key, spec_path);  // throws unless every step exists
  const auto steps = split_key(key);
  toml::node* parent = &root;
  for (std::size_t s = 0; s + 1 < steps.size(); ++s) {
    if (!steps[s].index) parent = parent->as_table()->get(steps[s].key);
    else parent = parent->as_array()->get(*steps[s].index);
  }
  const bool keep_integer = old->is_integer() && std::floor(value) == value && std::abs(value) < 9.0e15;
  const auto& last = steps.back();
  if (!last.index) {
    if (keep_integer) parent->as_table()->insert_or_assign(last.key, static_cast<int64_t>(value));
    else parent->as_table()->insert_or_assign(last.key, value);
  } else {
    auto* array = parent->as_array();
    const auto at = array->cbegin() + static_cast<std::ptrdiff_t>(*last.index);
    if (keep_integer) array->replace(at, static_cast<int64_t>(value));
    else array->replace(at, value);
  }
}

std::string serialize(const toml::table& table) {
  std::ostringstream out;
  out << table << "\n";
  return out.str();
}

}  // namespace

struct SweepSpec::Impl {
  toml::table document;  // without [sweep]
};

SweepSpec::SweepSpec(const std::string& path) : impl_(new Impl), path_(path) {
  try {
    const Spec spec = load_spec(path);  // validates the whole file, [sweep] included
    name_ = spec.name;
    vary_in_file_ = spec.sweep_vary;
    impl_->document = toml::parse_file(path);
  } catch (const toml::parse_error& e) {
    delete impl_;
    throw SpecError(fmt::format("{}: invalid TOML: {}", path, e.description()));
  } catch (...) {
    delete impl_;
    throw;
  }
  impl_->document.erase("sweep");
  canonical_ = serialize(impl_->document);
}

SweepSpec::~SweepSpec() { delete impl_; }

void SweepSpec::check_keys(const SweepGrid& grid) const {
  std::set<std::string> seen;
  for (const auto& axis : grid.axes) {
    if (!seen.insert(axis.key).second)
      throw SweepError(fmt::format("--vary key '{}' is given twice; give each key once", axis.key));
    if (axis.key == "sweep" || axis.key.rfind("sweep.", 0) == 0 || axis.key.rfind("sweep[", 0) == 0)
      throw SweepError(fmt::format("--vary key '{}': the [sweep] table itself cannot be varied", axis.key));
    const toml::node* node = find_node(impl_->document, axis.key, path_);
    if (!node->is_number()) {
      std::string hint;
      if (node->is_array()) hint = " (it is an array: index an element, e.g. " + axis.key + "[0]; a complex pole [re, im] is indexed again: [i][0] is its real part, [i][1] its imaginary part)";
      else if (node->is_table()) hint = " (it is a table)";
      else if (node->is_string()) hint = " (it is a string)";
      else if (node->is_boolean()) hint = " (it is a boolean)";
      throw SweepError(fmt::format("{}: --vary key '{}': expected a numeric spec key{}", path_, axis.key, hint));
    }
  }
}

std::string SweepSpec::point_text(const SweepGrid& grid, std::size_t index) const {
  toml::table copy = impl_->document;
  const auto values = grid.point(index);
  for (std::size_t a = 0; a < grid.axes.size(); ++a) set_number(copy, grid.axes[a].key, values[a], path_);
  return serialize(copy);
}

// ---------------------------------------------------------------------------------------------
// SQLite, thinly
// ---------------------------------------------------------------------------------------------

namespace {

constexpr std::string_view kFormat = "specloop-sweep-2";

class Db {
 public:
  Db(const std::string& path, int flags) : path_(path) {
    const int rc = sqlite3_open_v2(path.c_str(), &db_, flags, nullptr);
    if (rc != SQLITE_OK) {
      const std::string why = db_ ? sqlite3_errmsg(db_) : sqlite3_errstr(rc);
      sqlite3_close(db_);
      db_ = nullptr;
      throw SweepError(fmt::format("{}: cannot open the store: {}", path, why));
    }
    sqlite3_busy_timeout(db_, 10000);
  }
  ~Db() { sqlite3_close(db_); }
  Db(const Db&) = delete;
  Db& operator=(const Db&) = delete;
  sqlite3* get() const { return db_; }
  const std::string& path() const { return path_; }
  void exec(const std::string& sql) const {
    char* message = nullptr;
    if (sqlite3_exec(db_, sql.c_str(), nullptr, nullptr, &message) != SQLITE_OK) {
      const std::string why = message ? message : sqlite3_errmsg(db_);
      sqlite3_free(message);
      throw SweepError(fmt::format("{}: {}", path_, why));
    }
  }

 private:
  std::string path_;
  sqlite3* db_ = nullptr;
};

class Stmt {
 public:
  Stmt(const Db& db, const std::string& sql) : db_(db) {
    if (sqlite3_prepare_v2(db.get(), sql.c_str(), -1, &stmt_, nullptr) != SQLITE_OK)
      throw SweepError(fmt::format("{}: {}", db.path(), sqlite3_errmsg(db.get())));
  }
  ~Stmt() { sqlite3_finalize(stmt_); }
  Stmt(const Stmt&) = delete;
  Stmt& operator=(const Stmt&) = delete;
  sqlite3_stmt* get() const { return stmt_; }
  /// True while a row is available; throws on an error.
  bool step() {
    const int rc = sqlite3_step(stmt_);
    if (rc == SQLITE_ROW) return true;
    if (rc == SQLITE_DONE) return false;
    throw SweepError(fmt::format("{}: {}", db_.path(), sqlite3_errmsg(db_.get())));
  }
  void reset() {
    sqlite3_reset(stmt_);
    sqlite3_clear_bindings(stmt_);
  }
  void bind(int i, const std::string& s) { sqlite3_bind_text(stmt_, i, s.c_str(), static_cast<int>(s.size()), SQLITE_TRANSIENT); }
  void bind(int i, double v) { sqlite3_bind_double(stmt_, i, v); }
  void bind(int i, std::int64_t v) { sqlite3_bind_int64(stmt_, i, v); }
  void bind_null(int i) { sqlite3_bind_null(stmt_, i); }
  std::string text(int i) const {
    const auto* p = sqlite3_column_text(stmt_, i);
    return p ? reinterpret_cast<const char*>(p) : "";
  }
  std::int64_t integer(int i) const { return sqlite3_column_int64(stmt_, i); }

 private:
  const Db& db_;
  sqlite3_stmt* stmt_ = nullptr;
};

struct Header {
  std::string format, tool_version, spec_name, spec_text, spec_hash, grid, shard;
  std::int64_t point_count = 0;
};

/// Opens an existing file as a specloop store: refuses non-SQLite, damaged and foreign files.
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

/// Opens a store only to read it. Read-write when the file and its folder allow it, so that closing
/// the last connection checkpoints the WAL and removes the -wal/-shm files (a read-only connection
/// would leave them beside the store); read-only otherwise. Nothing is written either way.
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

const char* kResultColumns =
    "idx INTEGER PRIMARY KEY REFERENCES sweep_points(idx), status TEXT NOT NULL, error TEXT, met INTEGER, "
    "judged_on TEXT, binding TEXT, evaluations INTEGER, classical_confirmed INTEGER, optimized_confirmed INTEGER, "
    "classical TEXT, optimized TEXT, search_wall_time_s REAL, point_wall_time_s REAL";
constexpr int kResultColumnCount = 13;

/// Writes a new store's schema, header, axes and every grid point (in one transaction).
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

/// An exclusive advisory lock (flock) on the store file for the whole run, so that a second sweep
/// on the same store is refused instead of designing the same points. flock locks are separate from
/// the POSIX record locks SQLite takes, so the two do not interfere.
class StoreLock {
 public:
  explicit StoreLock(const std::string& path) {
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
  ~StoreLock() { ::close(fd_); }
  StoreLock(const StoreLock&) = delete;
  StoreLock& operator=(const StoreLock&) = delete;

 private:
  int fd_ = -1;
};

/// A temporary path beside `path`, unique to this process.
std::string temp_beside(const std::string& path) {
  return fmt::format("{}.tmp-{}", path, static_cast<long>(getpid()));
}

// ---------------------------------------------------------------------------------------------
// One point's results
// ---------------------------------------------------------------------------------------------

json controller_summary(const Controller& c) {
  json series = json::object();
  const auto& info = structure_parameters(c.structure);
  const std::vector<double> shown = signed_series(c);
  for (std::size_t i = 0; i < info.size() && i < shown.size(); ++i) series[info[i].name] = number_json(shown[i]);
  json j{{"structure", std::string(structure_name(c.structure))}, {"series", series}};
  j["parallel"] = c.parallel ? json{{"kp", number_json(c.parallel->kp)}, {"ki", number_json(c.parallel->ki)},
                                    {"kd", number_json(c.parallel->kd)}, {"filter_time", number_json(c.parallel->filter_time)}}
                             : json(nullptr);
  j["standard"] = c.standard ? json{{"kp", number_json(c.standard->kp)},
                                    {"ti", c.standard->has_integral ? number_json(c.standard->ti) : json(nullptr)},
                                    {"td", c.standard->has_derivative ? number_json(c.standard->td) : json(nullptr)},
                                    {"n", c.standard->has_derivative ? number_json(c.standard->n) : json(nullptr)}}
                             : json(nullptr);
  return j;
}

json checks_summary(const std::vector<RequirementCheck>& checks) {
  json list = json::array();
  for (const RequirementCheck& c : checks)
    list.push_back({{"requirement", c.requirement.key}, {"limit", number_json(c.requirement.limit)},
                    {"upper", c.requirement.upper}, {"value", c.value ? number_json(*c.value) : json(nullptr)},
                    {"met", c.met}, {"slack", number_json(requirement_slack(c.requirement, c.value))}});
  return list;
}

json design_summary(const Design& d) {
  json j{{"status", std::string(status_name(d.status))}, {"meets_all", d.meets_all},
         {"linear", metrics_json(d.simulated)}, {"checks", checks_summary(d.checks)},
         {"controller", controller_summary(d.controller)}};
  j["second_order"] = d.second_order ? json{{"overshoot_pct", number_json(d.second_order->overshoot_pct)},
                                            {"peak_time", number_json(d.second_order->peak_time_s)}}
                                     : json(nullptr);
  if (d.nonlinear) {
    j["nonlinear"] = {{"status", std::string(status_name(d.nonlinear->status))},
                      {"metrics", metrics_json(d.nonlinear->simulated)},
                      {"checks", checks_summary(d.nonlinear->checks)},
                      {"meets_all", d.nonlinear->meets_all},
                      {"confirmed", d.nonlinear->confirmed}};
  } else {
    j["nonlinear"] = nullptr;
  }
  return j;
}

struct PointRow {
  std::size_t index = 0;
  std::string status = "ok", error;
  bool met = false;
  std::string judged_on, binding;
  int evaluations = 0;
  std::optional<bool> classical_confirmed, optimized_confirmed;
  std::string classical, optimized;  // JSON text, empty: no such design
  double search_wall_time_s = 0.0, point_wall_time_s = 0.0;
};

/// "key = value, key = value" of one grid point.
std::string point_values_text(const SweepGrid& grid, std::size_t index) {
  const auto v = grid.point(index);
  std::string text;
  for (std::size_t a = 0; a < v.size(); ++a) text += fmt::format("{}{} = {}", a ? ", " : "", grid.axes[a].key, v[a]);
  return text;
}

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
    if (const Design* c = run.find(DesignRole::classical)) {
      row.classical = design_summary(*c).dump();
      if (c->nonlinear) row.classical_confirmed = c->nonlinear->confirmed;
    }
    if (const Design* o = run.find(DesignRole::optimized)) {
      row.optimized = design_summary(*o).dump();
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

void insert_row(Stmt& s, const PointRow& r) {
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
  // Every point is validated as a spec before anything is written.
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

  Header want{std::string(kFormat), SPECLOOP_VERSION, spec.name(), spec.canonical_text(),
              fnv1a64_hex(spec.canonical_text()), grid.canonical(), options.shard.text(),
              static_cast<std::int64_t>(grid.size())};
  const std::string& path = options.store_path;
  std::error_code ec;
  if (!fs::exists(path, ec)) {
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
  const StoreLock store_lock(path);
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

  std::set<std::size_t> finished;
  {
    Stmt s(*db, "SELECT idx FROM sweep_results");
    while (s.step()) finished.insert(static_cast<std::size_t>(s.integer(0)));
  }
  SweepOutcome out;
  out.total = mine.size();
  std::vector<std::size_t> todo;
  for (std::size_t i : mine) {
    if (finished.count(i)) ++out.done_before;
    else todo.push_back(i);
  }
  {
    Stmt s(*db, "SELECT count(*) FROM sweep_results WHERE met = 1");
    s.step();
    out.met = static_cast<std::size_t>(s.integer(0));
  }

  if (options.started) options.started(out);

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

  // The single writer: each point in its own transaction (an INSERT outside BEGIN commits alone).
  std::exception_ptr failure;
  try {
    Stmt insert(*db, "INSERT INTO sweep_results VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)");
    while (true) {
      std::unique_lock lock(mutex);
      ready.wait(lock, [&] { return !queue.empty() || running == 0; });
      if (queue.empty() && running == 0) break;
      PointRow row = std::move(queue.front());
      queue.pop_front();
      lock.unlock();
      insert_row(insert, row);
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
  out.interrupted = out.done_before + out.done_now < out.total;
  out.wall_time_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  return out;
}

// ---------------------------------------------------------------------------------------------
// Merge
// ---------------------------------------------------------------------------------------------

std::size_t merge_stores(const std::string& out, const std::vector<std::string>& inputs) {
  if (inputs.empty()) throw SweepError("merge: give at least one input store");
  struct Input {
    std::string path;
    std::unique_ptr<Db> db;
    Header header;
  };
  std::vector<Input> in;
  for (const auto& path : inputs) {
    if (!fs::exists(path)) throw SweepError(fmt::format("{}: no such file", path));
    auto db = open_store_for_reading(path);
    Header h = read_header(*db);
    in.push_back({path, std::move(db), std::move(h)});
  }
  const Header& first = in.front().header;
  for (const auto& i : in) {
    if (i.header.spec_hash != first.spec_hash || i.header.spec_text != first.spec_text)
      throw SweepError(fmt::format("merge: {} and {} come from different spec texts (hash {} against {}); refusing "
                                   "to mix them", in.front().path, i.path, first.spec_hash, i.header.spec_hash));
    if (i.header.grid != first.grid)
      throw SweepError(fmt::format("merge: {} and {} were made for different grids ({} against {}); refusing to mix "
                                   "them", in.front().path, i.path, first.grid, i.header.grid));
  }
  // Rows by index, with the file each came from; overlaps must agree outside the wall times.
  struct Row {
    std::vector<std::string> cells;  // as SQL literals via quote()
    std::string from;
  };
  std::map<std::int64_t, Row> rows;
  std::string compare_columns;
  for (const char* c : {"idx", "status", "error", "met", "judged_on", "binding", "evaluations", "classical_confirmed",
                        "optimized_confirmed", "classical", "optimized"})
    compare_columns += std::string(compare_columns.empty() ? "" : ", ") + "quote(" + c + ")";
  for (auto& i : in) {
    Stmt s(*i.db, "SELECT " + compare_columns + ", quote(search_wall_time_s), quote(point_wall_time_s) FROM sweep_results");
    while (s.step()) {
      Row r;
      for (int c = 0; c < kResultColumnCount; ++c) r.cells.push_back(s.text(c));
      r.from = i.path;
      const std::int64_t idx = s.integer(0);
      auto [it, inserted] = rows.emplace(idx, r);
      if (!inserted) {
        for (int c = 0; c < kResultColumnCount - 2; ++c)
          if (it->second.cells[static_cast<std::size_t>(c)] != r.cells[static_cast<std::size_t>(c)])
            throw SweepError(fmt::format("merge: point {} is in both {} and {} with different results; refusing to "
                                         "merge", idx, it->second.from, i.path));
      }
    }
  }
  SweepGrid grid;
  {
    Stmt s(*in.front().db, "SELECT key, definition FROM sweep_axes ORDER BY axis");
    while (s.step()) grid.axes.push_back(parse_sweep_axis(s.text(0) + "=" + s.text(1)));
  }
  if (grid.canonical() != first.grid)
    throw SweepError(fmt::format("{}: the store's axes do not reproduce its grid (damaged)", in.front().path));
  Header merged = first;
  merged.shard = Shard{}.text();  // the merged store is a whole-grid store: a rerun completes it
  const std::string tmp = temp_beside(out);
  std::error_code ec;
  fs::remove(tmp, ec);
  try {
    {
      Db db(tmp, SQLITE_OPEN_READWRITE | SQLITE_OPEN_CREATE);
      write_schema(db, merged, grid);
      db.exec("BEGIN");
      for (const auto& [idx, r] : rows) {
        std::string values;
        for (const auto& cell : r.cells) values += (values.empty() ? "" : ", ") + cell;
        db.exec("INSERT INTO sweep_results VALUES (" + values + ")");
      }
      db.exec("COMMIT");
    }
    in.clear();  // close the inputs (one may be `out` itself)
    // A WAL left by an earlier store at `out` must not be replayed onto the new file.
    fs::remove(out + "-wal", ec);
    fs::remove(out + "-shm", ec);
    fs::rename(tmp, out, ec);
    if (ec) throw SweepError(fmt::format("{}: cannot write the merged store: {}", out, ec.message()));
  } catch (...) {
    fs::remove(tmp, ec);
    throw;
  }
  return rows.size();
}

// ---------------------------------------------------------------------------------------------
// Reading a store
// ---------------------------------------------------------------------------------------------

std::size_t SweepStoreContents::finished() const {
  return static_cast<std::size_t>(std::count_if(points.begin(), points.end(), [](const StoredPoint& p) { return p.finished; }));
}

SweepStoreContents read_sweep_store(const std::string& path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw SweepError(fmt::format("{}: no such file", path));
  if (fs::is_directory(path, ec)) throw SweepError(fmt::format("{}: a folder, not a sweep store", path));
  auto db = open_store_for_reading(path);
  const Header h = read_header(*db);
  SweepStoreContents out;
  out.path = path;
  out.format = h.format;
  out.tool_version = h.tool_version;
  out.spec_name = h.spec_name;
  out.spec_text = h.spec_text;
  out.spec_hash = h.spec_hash;
  out.shard = h.shard;
  {
    // A damaged axis is the store's fault, not a --vary the user typed: say so, with the file.
    Stmt s(*db, "SELECT key, definition FROM sweep_axes ORDER BY axis");
    while (s.step()) {
      const std::string text = s.text(0) + "=" + s.text(1);
      try {
        out.grid.axes.push_back(parse_sweep_axis(text));
      } catch (const SweepError& e) {
        std::string why = e.what();
        const std::string prefix = fmt::format("--vary '{}': ", text);
        if (why.rfind(prefix, 0) == 0) why = why.substr(prefix.size());
        throw SweepError(fmt::format("{}: axis {} of the store ('{}') is damaged: {}", path, out.grid.axes.size() + 1,
                                     text, why));
      }
    }
  }
  std::size_t grid_size = 0;
  try {
    grid_size = out.grid.size();
  } catch (const SweepError& e) {
    throw SweepError(fmt::format("{}: {} (damaged)", path, e.what()));
  }
  if (static_cast<std::int64_t>(grid_size) != h.point_count || out.grid.canonical() != h.grid)
    throw SweepError(fmt::format("{}: the store's axes do not reproduce its grid (damaged)", path));
  {
    // Memory follows the rows actually stored, not a size the header claims.
    Stmt s(*db, "SELECT count(*) FROM sweep_points");
    const std::int64_t rows = s.step() ? s.integer(0) : 0;
    if (rows != h.point_count)
      throw SweepError(fmt::format("{}: {} grid point(s) stored for a grid of {} (damaged)", path, rows, grid_size));
  }
  out.points.resize(grid_size);
  {
    Stmt s(*db, "SELECT * FROM sweep_points ORDER BY idx");
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
  {
    Stmt s(*db, "SELECT idx, status, error, met, judged_on, binding, evaluations, classical_confirmed, optimized_confirmed, "
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
  return out;
}

}  // namespace specloop
