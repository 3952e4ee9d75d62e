// The requirement catalogue (requirement_catalogue.hpp) against the reader and the key table: every
// entry's range is what the reader accepts and refuses (with the catalogue's message), its value
// lands in its member of Requirements, and the key table's [requirements] rows are made from it.
// The spec texts are invented examples (a conveyor's two-pole plant).
#include <catch2/catch.hpp>

#include <set>
#include <string>
#include <vector>

#include <fmt/format.h>

#include "specloop/spec/requirement_catalogue.hpp"
#include "specloop/spec/spec.hpp"

using specloop::find_requirement;
using specloop::parse_spec;
using specloop::requirement_catalogue;
using specloop::RequirementEntry;
using specloop::Requirements;
using specloop::SpecError;

namespace {

const std::string kPlant = "[plant]\npoles = [-1.0, -4.0]\n";

/// The spec with `key = value` under [requirements] (value as TOML text), parsed; the message of
/// its SpecError, or "no error".
std::string error_with(const RequirementEntry& entry, const std::string& value, Requirements* read = nullptr) {
  try {
    const auto spec = parse_spec(fmt::format("{}[requirements]\n{} = {}\n", kPlant, entry.key, value), "r.toml");
    if (read) *read = spec.requirements;
  } catch (const SpecError& error) {
    return error.what();
  }
  return "no error";
}

/// A value just inside the range next to `end` (towards `other`).
double inside(double end, double other) { return end + (other - end) * 1e-6; }

}  // namespace

TEST_CASE("requirement catalogue: one entry per member of Requirements, keys and ranks unique", "[spec][catalogue]") {
  std::set<std::string_view> keys;
  std::set<int> ranks;
  int settings = 0;
  for (const RequirementEntry& entry : requirement_catalogue()) {
    INFO(entry.key);
    CHECK(keys.insert(entry.key).second);
    CHECK(!entry.label.empty());
    CHECK((entry.limit == nullptr) != (entry.setting == nullptr));
    if (entry.is_limit()) {
      CHECK(entry.bound != specloop::RequirementBound::none);
      CHECK(ranks.insert(entry.check_rank).second);
    } else {
      CHECK(entry.bound == specloop::RequirementBound::none);
      CHECK(entry.check_rank == -1);
      ++settings;
    }
    CHECK(find_requirement(entry.key) == &entry);
  }
  // Requirements has 16 optional limits and the settling band.
  CHECK(ranks.size() == 16);
  CHECK(settings == 1);
  CHECK(*ranks.begin() == 0);
  CHECK(*ranks.rbegin() == 15);
  CHECK(find_requirement("settling_time_max_s") == nullptr);
}

TEST_CASE("requirement catalogue: the check order is the order of every list of checks", "[spec][catalogue]") {
  // The order result.json's "checks", the report's and the terminal's tables keep.
  const std::vector<std::string_view> expected{"overshoot_max_pct", "undershoot_max_pct", "peak_time_ratio",
                                               "peak_time_max",     "settling_time_max",  "rise_time_max",
                                               "steady_state_error_max", "effort_max", "phase_margin_min_deg",
                                               "gain_margin_min_db", "sensitivity_peak_max", "load_iae_max",
                                               "load_peak_max", "load_recovery_time_max", "noise_gain_max",
                                               "complementary_peak_max"};
  std::vector<std::string_view> order;
  for (const RequirementEntry* entry : specloop::requirement_check_order()) order.push_back(entry->key);
  CHECK(order == expected);
}

TEST_CASE("requirement catalogue: the reader accepts and refuses each key by its range", "[spec][catalogue]") {
  for (const RequirementEntry& entry : requirement_catalogue()) {
    INFO(entry.key);
    const auto& range = entry.range;
    const double finite_high = std::isinf(range.high) ? range.low + 10.0 : range.high;
    const double finite_low = std::isinf(range.low) ? range.high - 10.0 : range.low;
    const std::string refused = fmt::format("requirements.{}: expected {}, got ", entry.key,
                                            specloop::requirement_expected_text(entry));
    // Inside: accepted and stored in the entry's member.
    const double mid = inside(finite_low, finite_high);
    Requirements read;
    REQUIRE(error_with(entry, fmt::format("{}", mid), &read) == "no error");
    if (entry.is_limit()) {
      REQUIRE((read.*entry.limit).has_value());
      CHECK(*(read.*entry.limit) == mid);
    } else {
      CHECK(read.*entry.setting == mid);
    }
    // The ends: accepted when closed, refused with the catalogue's text when open; beyond: refused.
    for (const auto& [end, closed, beyond] : {std::tuple{range.low, range.low_closed, range.low - 1.0},
                                             std::tuple{range.high, range.high_closed, range.high + 1.0}}) {
      if (std::isinf(end)) continue;
      const std::string at_end = error_with(entry, fmt::format("{}", end));
      if (closed) {
        CHECK(at_end == "no error");
      } else {
        CHECK_THAT(at_end, Catch::Contains(refused + fmt::format("{}", end)));
      }
      CHECK_THAT(error_with(entry, fmt::format("{}", beyond)), Catch::Contains(refused + fmt::format("{}", beyond)));
    }
  }
  // Messages as the README and the bad-spec corpus spell them.
  CHECK_THAT(error_with(*find_requirement("overshoot_max_pct"), "-5"),
             Catch::Contains("r.toml:4:1: requirements.overshoot_max_pct: expected a number in (0, 100), got -5"));
  CHECK_THAT(error_with(*find_requirement("settling_time_max"), "0"),
             Catch::Contains("requirements.settling_time_max: expected a time in s > 0, got 0"));
  CHECK_THAT(error_with(*find_requirement("steady_state_error_max"), "-0.5"),
             Catch::Contains("requirements.steady_state_error_max: expected a number >= 0, got -0.5"));
  CHECK_THAT(error_with(*find_requirement("phase_margin_min_deg"), "90"),
             Catch::Contains("requirements.phase_margin_min_deg: expected an angle in degrees in (0, 90), got 90"));
  CHECK_THAT(error_with(*find_requirement("sensitivity_peak_max"), "1"),
             Catch::Contains("expected a number > 1 (|S| is at least 1 somewhere for any loop of relative degree >= 1), "
                             "got 1"));
}

TEST_CASE("requirement catalogue: the key table's [requirements] rows come from it", "[spec][catalogue][keys]") {
  std::vector<const specloop::SpecKey*> rows;
  for (const auto& row : specloop::spec_keys())
    if (row.key.starts_with("requirements.")) rows.push_back(&row);
  REQUIRE(rows.size() == requirement_catalogue().size());
  for (std::size_t i = 0; i < rows.size(); ++i) {
    const RequirementEntry& entry = requirement_catalogue()[i];
    INFO(entry.key);
    CHECK(rows[i]->key == fmt::format("requirements.{}", entry.key));
    CHECK(rows[i]->unit == specloop::requirement_unit_key_text(entry.unit));
    CHECK(rows[i]->meaning == specloop::requirement_meaning_text(entry));
    CHECK_THAT(std::string(rows[i]->meaning), Catch::Contains(entry.range.text(true)));
  }
  CHECK(find_requirement("settling_band_pct")->range.text(true) == "in (0, 50)");
  CHECK(find_requirement("steady_state_error_max")->range.text(true) == "≥ 0");
  CHECK(find_requirement("steady_state_error_max")->range.text(false) == ">= 0");
  CHECK(find_requirement("undershoot_max_pct")->range.text(false) == "in [0, 100)");
}

TEST_CASE("requirement catalogue: unit names follow [units]", "[spec][catalogue]") {
  specloop::UnitsSpec units;
  units.time = "min";
  units.input = "V";
  units.output = "m/s";
  using specloop::RequirementUnit;
  CHECK(specloop::requirement_unit_name(RequirementUnit::time, units) == "min");
  CHECK(specloop::requirement_unit_name(RequirementUnit::input, units) == "V");
  CHECK(specloop::requirement_unit_name(RequirementUnit::output, units) == "m/s");
  CHECK(specloop::requirement_unit_name(RequirementUnit::percent, units) == "%");
  CHECK(specloop::requirement_unit_name(RequirementUnit::none, units).empty());
  // The fixed code result.json's checks carry (the [units] names are written beside them).
  CHECK(specloop::requirement_unit_code(RequirementUnit::time) == "s");
  CHECK(specloop::requirement_unit_code(RequirementUnit::input).empty());
  CHECK(specloop::requirement_unit_code(RequirementUnit::decibels) == "dB");
}
