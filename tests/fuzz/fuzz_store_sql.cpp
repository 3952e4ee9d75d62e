// libFuzzer harness: the sweep store reader on stores damaged through SQL. A real store is made once
// (a 2 × 2 sweep of a small spec, designed with a tiny budget); each input is SQL text run against a
// fresh copy of it (rows changed, deleted or added, tables dropped or re-created, the schema edited
// through writable_schema), then the copy is read with read_sweep_store and by the sweep report.
// Allowed outcome: a SweepError naming the file. Invariants of a store that reads: see
// store_common.hpp. The SQL runs confined: no ATTACH or VACUUM (they could write other files), a
// short list of pragmas, at most 2000 pages, and a cap on the work of one statement.
#include <sqlite3.h>

#include <algorithm>
#include <cctype>
#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <fstream>
#include <iterator>
#include <string>
#include <string_view>
#include <vector>

#include "store_common.hpp"

namespace {

constexpr std::string_view kHarness = "fuzz_store_sql";

constexpr const char* kSpec = R"(title = "fuzz: store template"
[plant]
poles = [-1, -4]
gain = 3
[controller]
structure = "pi"
[requirements]
overshoot_max_pct = 10
[search]
max_evaluations = 20
max_time = 5
)";

/// The bytes of a real store, made once by run_sweep.
const std::string& template_store() {
  static const std::string bytes = [] {
    const auto& dir = specloop_fuzz::scratch_dir(kHarness);
    const auto spec_path = dir / "template.toml";
    const auto store_path = dir / "template.sqlite";
    {
      std::ofstream spec(spec_path);
      spec << kSpec;
    }
    specloop::SweepSpec spec(spec_path.string());
    specloop::SweepGrid grid;
    grid.axes.push_back(specloop::parse_sweep_axis("plant.gain=2,5"));
    grid.axes.push_back(specloop::parse_sweep_axis("requirements.overshoot_max_pct=5:20:2"));
    specloop::SweepOptions options;
    options.store_path = store_path.string();
    (void)specloop::run_sweep(spec, grid, options);
    std::ifstream in(store_path, std::ios::binary);
    std::string contents((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    if (contents.empty()) specloop_fuzz::fail(kHarness, "the template store is empty");
    std::filesystem::remove(spec_path);
    specloop_fuzz::remove_store(store_path, dir / "none");
    return contents;
  }();
  return bytes;
}

bool allowed_pragma(std::string_view name) {
  static const std::vector<std::string_view> kAllowed{"writable_schema", "schema_version", "user_version",
                                                      "application_id",  "page_size",      "auto_vacuum",
                                                      "journal_mode",    "foreign_keys",   "cell_size_check"};
  std::string lower(name);
  std::transform(lower.begin(), lower.end(), lower.begin(),
                 [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  return std::find(kAllowed.begin(), kAllowed.end(), lower) != kAllowed.end();
}

int authorize(void*, int action, const char* a3, const char*, const char*, const char*) {
  switch (action) {
    case SQLITE_ATTACH:
    case SQLITE_DETACH:
    case SQLITE_CREATE_VTABLE:
    case SQLITE_DROP_VTABLE:
      return SQLITE_DENY;
    case SQLITE_PRAGMA:
      return a3 != nullptr && allowed_pragma(a3) ? SQLITE_OK : SQLITE_DENY;
    default:
      return SQLITE_OK;
  }
}

int progress(void* counter) { return ++*static_cast<int*>(counter) > 2000 ? 1 : 0; }

/// True when the text contains `word` in any case (ATTACH and VACUUM INTO are refused by text too).
bool mentions(std::string_view text, std::string_view word) {
  const auto it = std::search(text.begin(), text.end(), word.begin(), word.end(),
                              [](char a, char b) { return std::tolower(static_cast<unsigned char>(a)) == b; });
  return it != text.end();
}

void damage(const std::filesystem::path& store, const std::string& sql) {
  sqlite3* db = nullptr;
  if (sqlite3_open_v2(store.c_str(), &db, SQLITE_OPEN_READWRITE, nullptr) != SQLITE_OK) {
    sqlite3_close(db);
    specloop_fuzz::fail(kHarness, "cannot open the copy of the template store");
  }
  sqlite3_limit(db, SQLITE_LIMIT_ATTACHED, 0);
  sqlite3_limit(db, SQLITE_LIMIT_LENGTH, 1000000);
  sqlite3_exec(db, "PRAGMA max_page_count = 2000", nullptr, nullptr, nullptr);
  sqlite3_set_authorizer(db, authorize, nullptr);
  int counter = 0;
  sqlite3_progress_handler(db, 1000, progress, &counter);
  sqlite3_exec(db, sql.c_str(), nullptr, nullptr, nullptr);  // errors are part of the game
  sqlite3_close_v2(db);
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string sql(reinterpret_cast<const char*>(data), size);
  if (sql.find('\0') != std::string::npos || mentions(sql, "attach") || mentions(sql, "vacuum")) return 0;
  const std::string& bytes = template_store();
  const auto& dir = specloop_fuzz::scratch_dir(kHarness);
  const auto store = dir / "store.sqlite";
  const auto report = dir / "report";
  specloop_fuzz::remove_store(store, report);
  {
    std::ofstream out(store, std::ios::binary);
    out.write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
  }
  damage(store, sql);
  specloop_fuzz::read_and_check(kHarness, store, report);
  specloop_fuzz::remove_store(store, report);
  return 0;
}
