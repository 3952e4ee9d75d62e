// Reading [uncertainty]: the ranges of numeric plant keys (checked with the sweep's key checker
// against the document, the nominal inside each range) and how the scenarios are drawn and judged.
#include <algorithm>
#include <optional>
#include <cmath>
#include <regex>
#include <utility>

#include "spec/key_paths.hpp"
#include "spec/sections.hpp"

namespace specloop::reading {

namespace {

/// A range as written: its key path, the [low, high] node and where it was written.
struct RangeEntry {
  std::string path;
  const toml::node* value = nullptr;
  Position at{};
};

/// The section's plant keys: "plant.gain" (one quoted key) or plant.gain (nested tables), flattened.
void collect(const toml::table& table, const std::string& prefix, std::vector<RangeEntry>& out) {
  for (const auto& entry : entries_in_file_order(table)) {
    const std::string path = prefix.empty() ? std::string(entry.key) : prefix + "." + std::string(entry.key);
    if (const auto* inner = entry.value->as_table()) collect(*inner, path, out);
    else out.push_back({path, entry.value, entry.at});
  }
}

/// What a plant key's range may not do, whatever the plant: reverse the loop's action (a gain, a
/// real zero, the numerator's constant or the denominator's leading coefficient through 0), make a
/// delay negative, or take a pair's imaginary part to 0. Empty when the range is fine.
std::optional<std::string> range_refusal(const toml::table& document, const std::string& path, double lo, double hi) {
  static const std::regex imaginary(R"(plant\.(poles|zeros)\[\d+\]\[1\])");
  static const std::regex real_zero(R"(plant\.zeros\[\d+\])");
  static const std::regex coefficient(R"(plant\.(numerator|denominator)\[(\d+)\])");
  const bool through_zero = lo <= 0.0 && hi >= 0.0;
  std::smatch m;
  if (path == "plant.gain" && through_zero)
    return "a gain's range may not contain 0: the loop's action would reverse inside it";
  if (path == "plant.delay" && lo < 0.0) return "a delay's range may not reach below 0 (a delay is never negative)";
  if (std::regex_match(path, imaginary) && lo <= 0.0)
    return "the imaginary part of a pair must stay > 0 (give the pair's real part [i][0] a range to move it, or write "
           "two real poles)";
  if (std::regex_match(path, real_zero) && through_zero)
    return "a real zero's range may not contain 0: the plant's DC gain changes sign there and the loop's action would "
           "reverse inside it";
  if (std::regex_match(path, m, coefficient) && through_zero) {
    const auto* array = node_at(document, "plant." + m[1].str()).as_array();
    const std::size_t i = std::stoul(m[2].str());
    if (m[1] == "numerator" && array && i + 1 == array->size())
      return "the numerator's constant term may not pass through 0: the plant's DC gain changes sign there and the "
             "loop's action would reverse inside it";
    if (m[1] == "denominator" && i == 0)
      return "the denominator's leading coefficient may not pass through 0: the plant's order and its high-frequency "
             "sign change there";
  }
  return std::nullopt;
}

void read_range(const DocumentReader& reader, const RangeEntry& entry, UncertaintySpec& uncertainty) {
  const std::string key = fmt::format("uncertainty.\"{}\"", entry.path);
  const auto* pair = entry.value->as_array();
  if (pair == nullptr || pair->size() != 2)
    reader.fail_expected(entry.at, key, "[low, high], two numbers (the range of that plant key)", describe(*entry.value));
  const Number lo = reader.number_from(*pair->get(0), entry.at, key);
  const Number hi = reader.number_from(*pair->get(1), entry.at, key);
  double nominal = 0.0;
  try {
    nominal = number_at(reader.document(), entry.path);
  } catch (const KeyPathError& e) {
    reader.fail(entry.at, key,
                fmt::format("{}{}", e.what(),
                            e.kind() == KeyPathError::Kind::missing ? " (only keys written in the file can be given a range)"
                                                                    : ""));
  }
  reader.require(hi.value > lo.value, hi, key, fmt::format("a high end above the low end ({})", lo.shown));
  if (nominal < lo.value || nominal > hi.value)
    reader.fail(entry.at, key,
                fmt::format("the range [{}, {}] does not contain the nominal value {} that the file gives {}", lo.shown,
                            hi.shown, nominal, entry.path));
  if (const auto why = range_refusal(reader.document(), entry.path, lo.value, hi.value))
    reader.fail(entry.at, key, fmt::format("[{}, {}]: {}", lo.shown, hi.shown, *why));
  if (std::any_of(uncertainty.ranges.begin(), uncertainty.ranges.end(),
                  [&](const UncertainRange& r) { return r.key == entry.path; }))
    reader.fail(entry.at, key, "given twice (a quoted \"plant.x\" and a dotted plant.x name the same key)");
  uncertainty.ranges.push_back({entry.path, lo.value, hi.value, nominal});
}

}  // namespace

void read_uncertainty(const DocumentReader& reader, UncertaintySpec& uncertainty) {
  const toml::table* table = reader.section("uncertainty");
  if (table == nullptr) return;
  constexpr std::string_view kSection = "uncertainty";
  std::vector<RangeEntry> ranges;
  for (const auto& entry : entries_in_file_order(*table)) {
    if (entry.key == "plant") {
      if (const auto* inner = entry.value->as_table()) collect(*inner, "plant", ranges);
      else reader.fail_expected(entry.at, "uncertainty.plant", "ranges of plant keys", describe(*entry.value));
    } else if (entry.key.starts_with("plant.")) {
      ranges.push_back({std::string(entry.key), entry.value, entry.at});
    }
  }
  for (const RangeEntry& range : ranges) read_range(reader, range, uncertainty);
  if (uncertainty.ranges.empty())
    reader.fail(DocumentReader::header_of(*table), "uncertainty",
                "no range given: add a numeric plant key with its [low, high], e.g. \"plant.gain\" = [0.8, 1.2]");

  const auto whole = [](double v) { return v == std::floor(v); };
  if (const auto n = reader.ranged_number(table, kSection, "samples",
                                          [&](double v) { return v >= 0.0 && v <= 10000.0 && whole(v); },
                                          "a whole number in [0, 10000]"))
    uncertainty.samples = static_cast<int>(*n);
  if (const auto seed = reader.ranged_number(
          table, kSection, "seed", [&](double v) { return v >= 0.0 && v <= 9007199254740992.0 && whole(v); },
          "a whole number in [0, 2^53]"))
    uncertainty.seed = static_cast<std::uint64_t>(*seed);
  if (const auto mode = reader.read_choice(*table, kSection, "mode", "mode", robust_mode_names(), parse_robust_mode))
    uncertainty.mode = *mode;
  if (const auto pct = reader.ranged_number(table, kSection, "yield_min_pct",
                                            [](double v) { return v > 0.0 && v <= 100.0; }, "a percentage in (0, 100]")) {
    if (uncertainty.mode != RobustMode::yield)
      reader.fail(find_entry(*table, "yield_min_pct")->at, "uncertainty.yield_min_pct",
                  "only mode = \"yield\" reads it (the mode is \"worst-case\": every plant must meet every requirement)");
    uncertainty.yield_min_pct = *pct;
  }
  if (const auto n = reader.ranged_number(table, kSection, "verify_samples",
                                          [&](double v) { return v >= 1.0 && v <= 1e6 && whole(v); },
                                          "a whole number in [1, 1000000]"))
    uncertainty.verify_samples = static_cast<int>(*n);
  if (const auto scale = reader.ranged_number(table, kSection, "scale", [](double v) { return v >= 0.0 && v <= 10.0; },
                                              "a number in [0, 10]"))
    uncertainty.scale = *scale;
  if (const auto n = reader.ranged_number(table, kSection, "max_corners",
                                          [&](double v) { return v >= 2.0 && v <= 4096.0 && whole(v); },
                                          "a whole number in [2, 4096]"))
    uncertainty.max_corners = static_cast<int>(*n);
  if (uncertainty.scale != 1.0)
    for (std::size_t k = 0; k < ranges.size(); ++k) {
      const UncertainRange& r = uncertainty.ranges[k];
      if (const auto why = range_refusal(reader.document(), r.key, uncertainty.low_of(r), uncertainty.high_of(r)))
        reader.fail(ranges[k].at, fmt::format("uncertainty.\"{}\"", r.key),
                    fmt::format("uncertainty.scale = {} stretches the range to [{:.6g}, {:.6g}] about the nominal {:.6g}: "
                                "{}", uncertainty.scale, uncertainty.low_of(r), uncertainty.high_of(r), r.nominal, *why));
    }
  if (uncertainty.mode == RobustMode::yield && uncertainty.samples < 10)
    reader.fail(find_entry(*table, "samples") ? find_entry(*table, "samples")->at : DocumentReader::header_of(*table),
                "uncertainty.samples",
                fmt::format("mode \"yield\" estimates the yield from the random plants: give samples >= 10 (got {})",
                            uncertainty.samples));
}

}  // namespace specloop::reading
