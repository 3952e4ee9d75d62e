// The robust design's part of result.json ([uncertainty]): the scenario plants and the search's
// rounds (run level), and each design's assessment over them. Key names are a contract read by
// tests outside the project (tests/check_scipy_robust.py): extend, don't rename.
#pragma once

#include <nlohmann/json.hpp>

#include "specloop/design/design_run.hpp"

namespace specloop {

/// One design over the uncertainty: {mode, holds, claim, scenarios: [{index, kind, values: {key:
/// value}, stable, meets_all, checks}], worst: {requirement: {value, limit, met, slack, scenario}},
/// yield: {met, of, pct, low_pct, high_pct} (the set's random samples), set: {…} (every plant of
/// the set), verify: {met, of, pct, low_pct, high_pct, plants: [[values…]], meets_all: [bool…],
/// misses: [{plant, what}]}, confirmations: [{scenario, requirements, nonlinear: {status,
/// meets_all, checks}}]}.
nlohmann::json robust_assessment_json(const RobustRun& robust, const RobustAssessment& a);

/// The sweep store's form (README, "The store"): robust_assessment_json without the per-plant
/// lists (scenarios, verify.plants, verify.meets_all).
nlohmann::json robust_summary_json(const RobustRun& robust, const RobustAssessment& a);

/// The run level: {mode, keys, box: {low, high, nominal}, scenario_count, verification: {count,
/// seed}, search: {rounds, active, scenario_evaluations, converged, text}}.
nlohmann::json robust_run_json(const DesignRun& run);

}  // namespace specloop
