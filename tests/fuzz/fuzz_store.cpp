// libFuzzer harness: the sweep store reader on any bytes. The input is written as a store file and
// read with read_sweep_store (then by the sweep report, without figures). Allowed outcome: a
// SweepError naming the file. Invariants of a store that reads: see store_common.hpp. SQLite
// itself is Debian's library, not instrumented: the fuzzer is guided by our code's coverage, and
// damage that keeps the file readable SQL is what store_sql covers better.
#include <cstddef>
#include <cstdint>
#include <cstdio>

#include "store_common.hpp"

namespace {
constexpr std::string_view kHarness = "fuzz_store";
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const auto& dir = specloop_fuzz::scratch_dir(kHarness);
  const auto store = dir / "store.sqlite";
  const auto report = dir / "report";
  specloop_fuzz::remove_store(store, report);
  std::FILE* f = std::fopen(store.c_str(), "wb");
  if (f == nullptr) specloop_fuzz::fail(kHarness, "cannot write " + store.string());
  if (size > 0 && std::fwrite(data, 1, size, f) != size) specloop_fuzz::fail(kHarness, "short write");
  std::fclose(f);
  specloop_fuzz::read_and_check(kHarness, store, report);
  specloop_fuzz::remove_store(store, report);
  return 0;
}
