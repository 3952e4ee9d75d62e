// The requirement catalogue: one entry per key of [requirements], with everything the layers say
// about it — its key, unit, bound, valid range, short label and where `Requirements` stores it.
// The spec reader and the key table (spec_keys) iterate it; a new requirement is one entry here
// (plus its measurement in the design layer).
#pragma once

#include <limits>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/spec/spec.hpp"

namespace specloop {

/// What a requirement's limit is measured in.
enum class RequirementUnit {
  none,      // a ratio or a plain number
  percent,   // %
  time,      // the spec's time unit ([units] time, "s" by default)
  output,    // the output's unit ([units] output)
  input,     // the actuator's unit ([units] input)
  output_time,       // output unit × time unit (an integral of y)
  input_per_output,  // input unit per output unit (a gain from y to u)
  degrees,   // deg
  decibels,  // dB
};

/// Which way a limit bounds its value; `none` for a key of [requirements] that is a setting of the
/// measurement, not a limit (settling_band_pct).
enum class RequirementBound { upper, lower, none };

/// Where the value a limit is checked against comes from.
enum class RequirementSource {
  step_response,       // the step's metrics (StepMetrics)
  frequency_response,  // the loop's margins (Margins): a design needs them computed
  load_response,       // the load step's response (StepMetrics::load_*): a design needs it simulated
};

/// The values a key accepts: from `low` to `high`, each end open or closed; an infinite end is no
/// limit on that side.
struct RequirementRange {
  double low = -std::numeric_limits<double>::infinity();
  bool low_closed = false;
  double high = std::numeric_limits<double>::infinity();
  bool high_closed = false;

  bool contains(double v) const;
  /// "in (0, 100)", "in [0, 100)", "> 0", ">= 0"; with `symbols` "≥"/"≤" instead of ">="/"<="
  /// (the key table's spelling; messages use the ASCII one).
  std::string text(bool symbols) const;
};

/// One key of [requirements].
struct RequirementEntry {
  std::string_view key;                         // under [requirements], e.g. "overshoot_max_pct"
  RequirementUnit unit;
  RequirementBound bound;
  bool on_magnitude;                            // the bound applies to |value| (the value stays signed)
  RequirementSource source;
  RequirementRange range;                       // what the reader accepts
  std::string_view range_note;                  // appended to the range in the reader's message, or ""
  std::string_view label;                       // short name: sweep-report map cells, axes
  int check_rank;                               // position in the list of checks (result.json, reports,
                                                // the terminal); -1 for a setting
  std::optional<double> Requirements::*limit;   // where a limit is stored; nullptr for a setting
  double Requirements::*setting;                // where a setting is stored; nullptr for a limit
  std::string_view meaning;                     // the key table's text; "{range}" stands for range.text(true)

  bool is_limit() const { return limit != nullptr; }
};

/// Every key of [requirements], in the order of the key table (`specloop keys`, the README), which
/// is also the order the reader checks them in.
std::span<const RequirementEntry> requirement_catalogue();

/// The entry of `key` (without "requirements."), or nullptr.
const RequirementEntry* find_requirement(std::string_view key);

/// The limits (no settings) in check order (`check_rank`): the order of every list of checks.
const std::vector<const RequirementEntry*>& requirement_check_order();

/// The unit as shown to the user: "%", the [units] names for time, output and input (and their
/// product "output·time" and ratio "input/output"), "deg", "dB", "" for none.
std::string requirement_unit_name(RequirementUnit unit, const UnitsSpec& units);

/// The unit as the key table writes it: "%", "s", "output units", "input units", "output units × s",
/// "input units / output unit", "deg", "dB", "—".
std::string_view requirement_unit_key_text(RequirementUnit unit);

/// The fixed unit text a check carries (result.json's "unit"): "%", "s", "deg", "dB"; "" for none
/// and for output and input, whose names live in [units].
std::string_view requirement_unit_code(RequirementUnit unit);

/// What the reader expects, as its message says it: "a number in (0, 100)", "a time in s > 0",
/// "an angle in degrees in (0, 90)", …, followed by the entry's range note.
std::string requirement_expected_text(const RequirementEntry& entry);

/// The key table's meaning column: `meaning` with its range filled in.
std::string requirement_meaning_text(const RequirementEntry& entry);

}  // namespace specloop
