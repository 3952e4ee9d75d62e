// Reading how a run is set up: [reference] (the step), [search] (objective, budget, bounds),
// [disturbance] (load step, measurement noise), [sweep] (the axes' syntax), [units] (labels) and
// [rules] (the published tuning rules' settings).
#include "specloop/core/compensator.hpp"
#include "specloop/spec/axes.hpp"
#include "spec/sections.hpp"

#include <algorithm>
#include <cmath>
#include <numbers>
#include <cstdint>

namespace specloop::reading {

void read_reference(const DocumentReader& reader, ReferenceSpec& reference) {
  if (const auto amplitude = reader.ranged_number(
          reader.section("reference"), "reference", "amplitude",
          [](double v) { return std::abs(v) >= kMinAmplitude && std::abs(v) <= kMaxAmplitude; },
          fmt::format("a nonzero number of magnitude in [{}, {}] (express the output in other units otherwise)",
                      limit_text(kMinAmplitude), limit_text(kMaxAmplitude)))) {
    reference.amplitude = *amplitude;
  }
}

namespace {

/// [search.bounds]: parameter = [low, high], each parameter one of the structure's.
void read_bounds(const DocumentReader& reader, const Entry& entry, SearchSpec& search, const ControllerSpec& controller) {
  const Structure structure = controller.structure;
  const auto* bounds = entry.value->as_table();
  if (bounds == nullptr)
    reader.fail_expected(entry.at, "search.bounds", "a table of parameter = [low, high]", describe(*entry.value));
  std::vector<std::string_view> names;
  for (const auto& info : structure_parameters(structure)) names.emplace_back(info.name);
  if (search.tune_setpoint_weight) names.emplace_back(kSetpointWeightParameter);
  if (controller.notch_search)
    for (std::string_view n : {kNotchFrequencyParameter, kNotchDepthParameter, kNotchWidthParameter}) names.emplace_back(n);
  if (controller.measurement_filter_search) names.emplace_back(kFilterTimeParameter);
  for (const auto& bound : entries_in_file_order(*bounds)) {
    const std::string key = fmt::format("search.bounds.{}", bound.key);
    if (std::find(names.begin(), names.end(), bound.key) == names.end()) {
      const auto suggestion = closest_name(bound.key, names);
      reader.fail(bound.at, key,
                  fmt::format("structure '{}' has no parameter '{}'{}; its parameters: {}", structure_name(structure),
                              bound.key, suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "",
                              fmt::join(names, ", ")));
    }
    const auto* pair = bound.value->as_array();
    if (pair == nullptr || pair->size() != 2)
      reader.fail_expected(bound.at, key, "[low, high], two numbers", describe(*bound.value));
    const Number lo = reader.number_from(*pair->get(0), bound.at, key);
    const Number hi = reader.number_from(*pair->get(1), bound.at, key);
    reader.require(lo.value > 0.0, lo, key, "a low bound > 0 (parameters are searched on a log scale)");
    reader.require(hi.value > lo.value, hi, key, fmt::format("a high bound above the low bound ({})", lo.shown));
    if (bound.key == kSetpointWeightParameter)
      reader.require(hi.value <= 1.0, hi, key, "a high bound <= 1 (b weighs the set point within the error)");
    if (bound.key == kNotchDepthParameter)
      reader.require(hi.value < 1.0, hi, key, "a high bound < 1 (the notch's depth is its gain at the notch frequency)");
    if (bound.key == kNotchWidthParameter)
      reader.require(hi.value <= 1.0, hi, key, "a high bound <= 1 (the notch's width is its pole damping)");
    if (bound.key == kNotchFrequencyParameter && controller.sample_time_s > 0.0)
      reader.require(hi.value < std::numbers::pi / controller.sample_time_s, hi, key,
                     fmt::format("a high bound below the Nyquist frequency π/sample_time = {:.6g} rad/s",
                                 std::numbers::pi / controller.sample_time_s));
    search.bounds.emplace_back(std::string(bound.key), std::make_pair(lo.value, hi.value));
  }
}

}  // namespace

void read_search(const DocumentReader& reader, SearchSpec& search, const ControllerSpec& controller) {
  const toml::table* table = reader.section("search");
  if (table == nullptr) return;
  constexpr std::string_view kSection = "search";
  if (const auto objective =
          reader.read_choice(*table, kSection, "objective", "objective", objective_names(), parse_objective))
    search.objective = *objective;
  if (const auto mode =
          reader.read_choice(*table, kSection, "simulate", "mode", simulate_mode_names(), parse_simulate_mode))
    search.simulate = *mode;
  if (const auto at = reader.read_choice(*table, kSection, "objective_at", "place", objective_at_names(),
                                         parse_objective_at))
    search.objective_at = *at;
  const auto whole = [](double v) { return v == std::floor(v); };
  if (const auto seed = reader.ranged_number(
          table, kSection, "seed", [&](double v) { return v >= 0.0 && v <= 4294967295.0 && whole(v); },
          "a whole number in [0, 4294967295]"))
    search.seed = static_cast<unsigned>(*seed);
  if (const auto budget = reader.ranged_number(
          table, kSection, "max_evaluations", [&](double v) { return v >= 20.0 && v <= 1e8 && whole(v); },
          "a whole number in [20, 100000000]"))
    search.max_evaluations = static_cast<int>(*budget);
  if (const auto cap = reader.ranged_number(
          table, kSection, "max_time", [](double v) { return v > 0.0 && v <= 86400.0; }, "a time in s in (0, 86400]"))
    search.max_time_s = *cap;
  if (const auto margin = reader.ranged_number(
          table, kSection, "margin_pct", [](double v) { return v >= 0.0 && v < 50.0; }, "a percentage in [0, 50)"))
    search.margin_pct = *margin;
  if (const auto entry = find_entry(*table, "tune_setpoint_weight")) {
    const auto* flag = entry->value->as_boolean();
    if (flag == nullptr)
      reader.fail_expected(entry->at, "search.tune_setpoint_weight", "true or false", describe(*entry->value));
    search.tune_setpoint_weight = flag->get();
  }
  if (const auto entry = find_entry(*table, "bounds")) read_bounds(reader, *entry, search, controller);
}

void read_rules(const DocumentReader& reader, RulesSpec& rules) {
  if (const auto tau_c = reader.ranged_number(reader.section("rules"), "rules", "simc_tau_c",
                                              [](double v) { return v > 0.0; }, "a time in s > 0"))
    rules.simc_tau_c_s = *tau_c;
}

void read_disturbance(const DocumentReader& reader, DisturbanceSpec& disturbance, const std::optional<TimeRule>& times,
                      std::vector<PendingTime>& pending) {
  const toml::table* table = reader.section("disturbance");
  if (table == nullptr) return;
  if (const auto time = reader.ranged_number(table, "disturbance", "time", [](double v) { return v >= 0.0; },
                                             "a time in s >= 0"))
    disturbance.time_s = *time;
  if (const auto size = reader.optional_number(table, "disturbance", "size")) disturbance.size = size->value;
  if (const auto rms = reader.ranged_number(table, "disturbance", "noise_rms", [](double v) { return v >= 0.0; },
                                            "a standard deviation in output units >= 0"))
    disturbance.noise_rms = *rms;
  if (const auto period =
          read_plant_time(reader, table, "disturbance", "noise_period", "a time in s", "", times, pending))
    disturbance.noise_period_s = *period;
  if (const auto seed = reader.ranged_number(
          table, "disturbance", "seed",
          [](double v) { return v >= 0.0 && v <= 9007199254740992.0 && v == std::floor(v); },
          "a whole number in [0, 2^53]"))
    disturbance.noise_seed = static_cast<std::uint64_t>(*seed);
}

void read_sweep(const DocumentReader& reader, std::vector<std::string>& vary) {
  const toml::table* table = reader.section("sweep");
  if (table == nullptr) return;
  const auto entry = find_entry(*table, "vary");
  if (!entry) return;
  const auto* list = entry->value->as_array();
  if (list == nullptr || list->empty())
    reader.fail_expected(entry->at, "sweep.vary", "a non-empty array of strings such as \"plant.delay=0:0.2:5\"",
                         describe(*entry->value));
  for (std::size_t i = 0; i < list->size(); ++i) {
    const auto* text = list->get(i)->as_string();
    const std::string key = fmt::format("sweep.vary[{}]", i);
    if (text == nullptr)
      reader.fail_expected(position_of(list->get(i)->source()), key,
                           "a string \"KEY=FROM:TO:COUNT\", \"KEY=FROM:TO:COUNTlog\" or \"KEY=a,b,c\"",
                           describe(*list->get(i)));
    try {
      (void)parse_sweep_axis(text->get());
    } catch (const SweepError& error) {
      std::string why = error.what();
      if (why.rfind("--vary ", 0) == 0) why = why.substr(7);
      reader.fail(position_of(list->get(i)->source()), key, why);
    }
    vary.push_back(text->get());
  }
}

void read_units(const DocumentReader& reader, UnitsSpec& units) {
  const toml::table* table = reader.section("units");
  if (table == nullptr) return;
  // Each a label of 1 to kMaxUnitLength characters (code points), no control characters (labels
  // go into gnuplot scripts, the pages and terminal tables).
  constexpr std::size_t kMaxUnitLength = 24;
  const std::string expected = fmt::format(
      "a unit name such as \"m/s\": a non-empty string of at most {} characters without control characters",
      kMaxUnitLength);
  for (auto [name, target] : {std::pair<std::string_view, std::string*>{"output", &units.output},
                              {"input", &units.input},
                              {"time", &units.time}}) {
    const auto entry = find_entry(*table, name);
    if (!entry) continue;
    const std::string key = dotted("units", name);
    const auto* text = entry->value->as_string();
    if (text == nullptr) reader.fail_expected(entry->at, key, expected, describe(*entry->value));
    const std::string_view value = text->get();
    std::size_t code_points = 0;
    bool control = false, blank = true;
    for (const char c : value) {
      const auto byte = static_cast<unsigned char>(c);
      if ((byte & 0xC0u) != 0x80u) ++code_points;
      if (byte < 0x20u || byte == 0x7Fu) control = true;
      if (byte != ' ') blank = false;
    }
    if (blank || control || code_points > kMaxUnitLength)
      reader.fail_expected(entry->at, key, expected,
                           blank     ? std::string("an empty name")
                           : control ? std::string("a name with a control character")
                                     : fmt::format("{} ({} characters)", in_quotes(value), code_points));
    *target = std::string(value);
  }
}

}  // namespace specloop::reading
