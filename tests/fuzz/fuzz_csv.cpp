// libFuzzer harness: the recorded-test reader of `specloop fit` (parse_test_csv) and the data
// preparation (prepare_test_data). The input is the CSV text itself.
// Allowed outcome: FitDataError from either. Invariants on success: three columns of equal
// length, at least kMinSamples rows, every value finite, time strictly increasing, source lines
// increasing; the prepared deviations finite and equal to the values minus the operating point,
// the excitation's first change a sample whose input differs from the first.
#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

#include <fmt/format.h>

#include "fuzz_common.hpp"
#include "specloop/fit/test_data.hpp"

namespace {

constexpr std::string_view kHarness = "fuzz_csv";

#define CHECK(condition, ...) SPECLOOP_FUZZ_CHECK(kHarness, condition, __VA_ARGS__)

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace specloop::fit;
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  try {
    const TestRecord r = parse_test_csv(text, "fuzz.csv", {});
    CHECK(r.t.size() == r.u.size() && r.u.size() == r.y.size() && r.y.size() == r.line.size(), "column lengths differ");
    CHECK(r.t.size() >= kMinSamples, "{} samples accepted", r.t.size());
    for (std::size_t k = 0; k < r.t.size(); ++k) {
      CHECK(specloop_fuzz::finite(r.t[k]) && specloop_fuzz::finite(r.u[k]) && specloop_fuzz::finite(r.y[k]), "a non-finite value at row {}", k);
      if (k > 0) CHECK(r.t[k] > r.t[k - 1] && r.line[k] > r.line[k - 1], "time or line not increasing at row {}", k);
    }
    const PreparedData d = prepare_test_data(r, std::nullopt, std::nullopt);
    CHECK(d.first_change > 0 && d.first_change < r.t.size() && d.record.u[d.first_change] != d.record.u[0],
          "first change {} is not a change", d.first_change);
    for (std::size_t k = 0; k < r.t.size(); ++k)
      CHECK(specloop_fuzz::finite(d.du[k]) && specloop_fuzz::finite(d.dy[k]) && d.du[k] == r.u[k] - d.u0 && d.dy[k] == r.y[k] - d.y0,
            "deviation wrong at row {}", k);
    CHECK(specloop_fuzz::finite(d.median_dt) && d.median_dt > 0 && specloop_fuzz::finite(d.noise_sigma), "median step or noise not finite");
  } catch (const FitDataError&) {
  } catch (const std::exception& e) {
    specloop_fuzz::fail_exception(kHarness, e);
  }
  return 0;
}
