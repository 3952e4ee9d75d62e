// The `design` pipeline: characterize → problem → the reference, classical, ultimate-gain and
// published-rule (SIMC, AMIGO) designs → search → the verdict. Every design passes the same two stages: measure_design on the
// linear loop, then confirm_design on the nonlinear one.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/design/characterize.hpp"
#include "specloop/design/classical.hpp"
#include "specloop/design/measure.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/design/robust.hpp"
#include "specloop/design/role.hpp"
#include "specloop/design/search.hpp"
#include "specloop/design/tuning_rules.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

/// Why no design met every requirement, and how close one can get.
struct Infeasibility {
  std::string binding;                      // the requirement missed by the most (normalized)
  std::vector<RequirementCheck> misses;     // every missed requirement of the least-violating design
  std::optional<double> nearest_value;      // best value of the binding requirement with the others met
  std::string nearest_text;                 // that, in words (or why it was not found)
};

/// What became of the hand (root-locus) method: designed, or which step could not be done and why.
struct ClassicalOutcome {
  bool designed = false;
  std::string failed_step;                  // empty when designed, e.g. "target pole", "angle condition"
  std::string reason;                       // why that step could not be done, in words
  std::vector<std::string> notes;           // every step taken, as in the design's notes
};

struct DesignRun {
  Characterization characterization;
  Problem problem;
  std::optional<DesiredPole> target;
  ClassicalOutcome classical;
  std::vector<std::string> warnings;        // about the recommended result (e.g. a final value far from r)
  std::optional<UltimatePoint> ultimate;
  /// The published rules (SIMC, AMIGO, in that order): each applied (its design is in `designs`)
  /// or left out with its reason.
  std::vector<RuleOutcome> rules;
  std::vector<Design> designs;              // reference, classical, ultimate_gain, simc, amigo, optimized (those that exist)
  SearchSummary search;
  std::optional<Infeasibility> infeasibility;
  bool met = false;                         // the optimized design meets every requirement …
  bool judged_on_nonlinear = false;         // … on the nonlinear loop (an effect active, or search.simulate = "nonlinear") or the linear one
  bool met_on_linear = false;               // it meets every requirement on the linear loop (a linear-only pass when !met)
  /// With [uncertainty]: the scenario plants, the robust search's log and every design's
  /// assessment over them. `met` then also needs the optimized design's robust claim to hold.
  std::optional<RobustRun> robust;
  /// The design of that role, or nullptr when the run has none.
  const Design* find(DesignRole role) const;
};

/// The stages every design of a run passes, in order: measure_design on the linear loop,
/// confirm_design on the nonlinear one, then its fragility warnings (which read both).
Design measure_and_confirm(const Problem& problem, DesignRole role, const Controller& controller);

/// characterize → problem → classical, baseline and published-rule designs → search (seeded by the classical
/// design) → measurement and confirmation of every design → infeasibility analysis when the
/// optimum misses.
/// `jobs`: threads for the scenario plants of [uncertainty] (the result does not depend on it).
DesignRun run_design(const Spec& spec, unsigned jobs = 1);

/// The design the report recommends: the optimized one, else the classical one (with a stable
/// linear loop), else none.
const Design* recommended_design(const DesignRun& run);

}  // namespace specloop
