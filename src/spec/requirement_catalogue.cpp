// The requirement catalogue (requirement_catalogue.hpp): the table and the texts made from it.
#include "specloop/spec/requirement_catalogue.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <iterator>

namespace specloop {

namespace {

constexpr double kNoLimit = std::numeric_limits<double>::infinity();
using U = RequirementUnit;
using B = RequirementBound;
using S = RequirementSource;
using R = Requirements;

// In key-table order (the README's spec table, `specloop keys`, the reader's checks).
constexpr RequirementEntry kCatalogue[] = {
    {"overshoot_max_pct", U::percent, B::upper, false, S::step_response, {0.0, false, 100.0, false}, "", "OS", 0,
     &R::overshoot_max_pct, nullptr, "overshoot limit, {range}; `analyze` and `design` need it"},
    {"peak_time_ratio", U::none, B::upper, false, S::step_response, {0.0, false, 10.0, true}, "", "tp", 2,
     &R::peak_time_ratio, nullptr, "peak time ÷ the reference peak time (see `analyze`), {range}"},
    {"settling_time_max", U::time, B::upper, false, S::step_response, {0.0, false, kNoLimit, false}, "", "ts", 4,
     &R::settling_time_max_s, nullptr, "{range}"},
    {"peak_time_max", U::time, B::upper, false, S::step_response, {0.0, false, kNoLimit, false}, "", "tp", 3,
     &R::peak_time_max_s, nullptr, "{range}"},
    {"rise_time_max", U::time, B::upper, false, S::step_response, {0.0, false, kNoLimit, false}, "", "tr", 5,
     &R::rise_time_max_s, nullptr, "10–90 % rise time, {range}"},
    {"settling_band_pct", U::percent, B::none, false, S::step_response, {0.0, false, 50.0, false}, "", "band", -1,
     nullptr, &R::settling_band_pct, "settling band half-width around y∞, {range}"},
    {"steady_state_error_max", U::none, B::upper, true, S::step_response, {0.0, true, kNoLimit, false}, "", "ess", 6,
     &R::steady_state_error_max, nullptr,
     "relative steady-state error to the reference step, {range}; `0` needs an integrator in the loop (a type-0 plant "
     "with a structure without one is refused)"},
    {"effort_max", U::input, B::upper, false, S::step_response, {0.0, false, kNoLimit, false}, "", "u", 7,
     &R::effort_max, nullptr,
     "peak |u| for the reference step, {range} (for `[plant.nonlinear]`: peak |u − u0|); on the nonlinear loop the "
     "controller's output before the actuator's limits (`command_peak`), so clipping does not meet it"},
    {"undershoot_max_pct", U::percent, B::upper, false, S::step_response, {0.0, true, 100.0, false}, "", "US", 1,
     &R::undershoot_max_pct, nullptr, "initial wrong-way excursion, {range}"},
    {"phase_margin_min_deg", U::degrees, B::lower, false, S::frequency_response, {0.0, false, 90.0, false}, "", "PM",
     8, &R::phase_margin_min_deg, nullptr, "{range}"},
    {"gain_margin_min_db", U::decibels, B::lower, false, S::frequency_response, {0.0, false, 60.0, false}, "", "GM", 9,
     &R::gain_margin_min_db, nullptr, "{range}"},
    {"sensitivity_peak_max", U::none, B::upper, false, S::frequency_response, {1.0, false, kNoLimit, false},
     " (|S| is at least 1 somewhere for any loop of relative degree >= 1)", "Ms", 10, &R::sensitivity_peak_max, nullptr,
     "Ms = max |1/(1 + L(jω))|, {range}"},
    {"load_iae_max", U::output_time, B::upper, false, S::load_response, {0.0, false, kNoLimit, false}, "", "IAEd", 11,
     &R::load_iae_max, nullptr,
     "∫|y| dt after a step load of `disturbance.size` (1 when not given) at the plant input, linear loop, {range}; "
     "needs integral action in the controller"},
    {"load_peak_max", U::output, B::upper, false, S::load_response, {0.0, false, kNoLimit, false}, "", "yd", 12,
     &R::load_peak_max, nullptr, "peak |y| after that load step, {range}"},
    {"load_recovery_time_max", U::time, B::upper, false, S::load_response, {0.0, false, kNoLimit, false}, "", "trd",
     13, &R::load_recovery_time_max_s, nullptr,
     "time after that load step until |y| stays within settling_band_pct of |reference.amplitude|, {range}; needs "
     "integral action in the controller"},
    {"noise_gain_max", U::input_per_output, B::upper, false, S::frequency_response, {0.0, false, kNoLimit, false}, "",
     "Mn", 14, &R::noise_gain_max, nullptr,
     "max over ω of |C(jω)/(1 + L(jω))|: measurement noise to u, input units per output unit, {range}"},
    {"complementary_peak_max", U::none, B::upper, false, S::frequency_response, {1.0, false, kNoLimit, false},
     " (a loop with integral action has |T(0)| = 1)", "Mt", 15, &R::complementary_peak_max, nullptr,
     "Mt = max |L(jω)/(1 + L(jω))|, {range}"},
};

}  // namespace

bool RequirementRange::contains(double v) const {
  const bool above = std::isinf(low) || (low_closed ? v >= low : v > low);
  const bool below = std::isinf(high) || (high_closed ? v <= high : v < high);
  return above && below;
}

std::string RequirementRange::text(bool symbols) const {
  const bool has_low = !std::isinf(low), has_high = !std::isinf(high);
  if (has_low && has_high)
    return fmt::format("in {}{}, {}{}", low_closed ? '[' : '(', low, high, high_closed ? ']' : ')');
  if (has_low) return fmt::format("{} {}", low_closed ? (symbols ? "≥" : ">=") : ">", low);
  if (has_high) return fmt::format("{} {}", high_closed ? (symbols ? "≤" : "<=") : "<", high);
  return "any number";
}

std::span<const RequirementEntry> requirement_catalogue() { return kCatalogue; }

const RequirementEntry* find_requirement(std::string_view key) {
  for (const RequirementEntry& entry : kCatalogue)
    if (entry.key == key) return &entry;
  return nullptr;
}

const std::vector<const RequirementEntry*>& requirement_check_order() {
  static const std::vector<const RequirementEntry*> order = [] {
    std::vector<const RequirementEntry*> limits;
    for (const RequirementEntry& entry : kCatalogue)
      if (entry.is_limit()) limits.push_back(&entry);
    std::sort(limits.begin(), limits.end(),
              [](const RequirementEntry* a, const RequirementEntry* b) { return a->check_rank < b->check_rank; });
    return limits;
  }();
  return order;
}

std::string requirement_unit_name(RequirementUnit unit, const UnitsSpec& units) {
  switch (unit) {
    case RequirementUnit::time: return units.time;
    case RequirementUnit::output: return units.output;
    case RequirementUnit::input: return units.input;
    case RequirementUnit::output_time: return units.output + "·" + units.time;
    case RequirementUnit::input_per_output: return units.input + "/" + units.output;
    default: return std::string(requirement_unit_code(unit));
  }
}

std::string_view requirement_unit_key_text(RequirementUnit unit) {
  switch (unit) {
    case RequirementUnit::none: return "—";
    case RequirementUnit::output: return "output units";
    case RequirementUnit::input: return "input units";
    case RequirementUnit::output_time: return "output units × s";
    case RequirementUnit::input_per_output: return "input units / output unit";
    default: return requirement_unit_code(unit);
  }
}

std::string_view requirement_unit_code(RequirementUnit unit) {
  switch (unit) {
    case RequirementUnit::percent: return "%";
    case RequirementUnit::time: return "s";
    case RequirementUnit::degrees: return "deg";
    case RequirementUnit::decibels: return "dB";
    case RequirementUnit::none:
    case RequirementUnit::output:
    case RequirementUnit::input:
    case RequirementUnit::output_time:
    case RequirementUnit::input_per_output: break;
  }
  return "";
}

std::string requirement_expected_text(const RequirementEntry& entry) {
  std::string_view noun = "a number";
  if (entry.unit == RequirementUnit::time) noun = "a time in s";
  if (entry.unit == RequirementUnit::degrees) noun = "an angle in degrees";
  if (entry.unit == RequirementUnit::decibels) noun = "a number of dB";
  return fmt::format("{} {}{}", noun, entry.range.text(false), entry.range_note);
}

std::string requirement_meaning_text(const RequirementEntry& entry) {
  constexpr std::string_view kSlot = "{range}";
  std::string text(entry.meaning);
  if (const auto at = text.find(kSlot); at != std::string::npos) text.replace(at, kSlot.size(), entry.range.text(true));
  return text;
}

}  // namespace specloop
