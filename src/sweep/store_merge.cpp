// The merge of stores (store.hpp): every input read-only, headers compared, rows collected by
// index as SQL literals (quote(), which round-trips doubles), a disagreeing duplicate refused, the
// merged store written beside OUT and renamed into place.
#include <fmt/format.h>

#include <filesystem>
#include <map>

#include "specloop/sweep/store.hpp"
#include "sweep/store_db.hpp"

namespace specloop {

namespace fs = std::filesystem;
using store::Db;
using store::Header;
using store::Stmt;

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
    auto db = store::open_store_for_reading(path);
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
      for (int c = 0; c < store::kResultColumnCount; ++c) r.cells.push_back(s.text(c));
      r.from = i.path;
      const std::int64_t idx = s.integer(0);
      auto [it, inserted] = rows.emplace(idx, r);
      if (!inserted) {
        for (int c = 0; c < store::kResultColumnCount - 2; ++c)
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
  const std::string tmp = store::temp_beside(out);
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

}  // namespace specloop
