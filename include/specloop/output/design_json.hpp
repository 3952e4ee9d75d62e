// One design as JSON, in the one dialect that result.json and the sweep store share: the full
// object (result.json's designs.<name>) and the store's summary, which is the same object with
// fewer keys. Key names are a contract read by tests outside the project: extend, don't rename.
#pragma once

#include <nlohmann/json.hpp>

#include "specloop/design/design.hpp"

namespace specloop {

/// One design as result.json writes it: the summary's keys (below) and closed_loop_poles,
/// simulated_loop, warnings, notes, dominance, margins; its "nonlinear" block adds the
/// confirmation's effects, horizon, stepper, verdict, notes, attribution and difference equation.
nlohmann::json design_json(const Design& d);

/// Requirement checks: [{requirement, limit, bound, on_magnitude, unit, value, met, violation, slack}].
nlohmann::json checks_json(const std::vector<RequirementCheck>& list);

/// One design as the sweep store keeps it (README, "The store"): result.json's design object
/// restricted to status, meets_all, controller, checks, second_order, simulated and nonlinear,
/// the last restricted to status, simulated, checks, meets_all, confirmed (null when the linear
/// loop is not ok). Every value is written by the same code as in design_json.
nlohmann::json design_summary(const Design& d);

}  // namespace specloop
