// Robust design over the plant's uncertainty ([uncertainty], scenarios.hpp): the search over a
// growing active set of scenario plants, and the assessment of a design on the whole scenario
// set and on a fresh verification sample (the claim: worst case or yield, with its interval).
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <vector>

#include "specloop/design/measure.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/design/role.hpp"
#include "specloop/design/scenarios.hpp"
#include "specloop/design/search.hpp"

namespace specloop {

/// How the robust search went: the rounds of the active-set method.
struct RobustSearchLog {
  std::vector<std::size_t> active;          // indices into the scenario set, in the order they were added
  int rounds = 0;                           // searches run (the first global + local, the rest local only)
  int scenario_evaluations = 0;             // single-plant simulations of the whole search
  std::size_t corners_found = 0;            // corners the search added to the set (only some were in it)
  bool converged = false;                   // the last round's optimum met every requirement on every scenario of the set (tightened)
  std::string text;                         // in words
};

/// The search over the scenario set (worst-case: an active set of plants, grown by the plants
/// the round's optimum misses on, until it meets every tightened requirement on every plant of
/// the set or the rounds run out; yield: every plant of the set each time). When the set holds
/// only some of the box's corners, each worst-case round also walks from the corner with the least
/// room to worse neighbouring corners (one key flipped at a time), which join `set`.
/// Deterministic: the result does not depend on `jobs` (the full-set checks run on `jobs` threads).
/// `start_active` (a continuation: the active set of an earlier search plus new plants) starts the
/// active set there and makes every round local from the seed.
SearchResult optimize_over_scenarios(const Problem& nominal, std::vector<Scenario>& set,
                                     const std::vector<double>& seed_parameters, SearchOptions options, unsigned jobs,
                                     RobustSearchLog& log, const std::vector<std::size_t>& start_active = {});
inline constexpr int kMaxRobustRounds = 8;
inline constexpr int kMaxContinuationRounds = 3;   // rounds of a continuation (start_active), at most
inline constexpr std::size_t kAddedPerRound = 4;   // plants added to the active set per round, at most

/// Share of plants meeting every requirement, with Wilson's 95 % interval.
struct YieldCount {
  int met = 0, of = 0;
  double pct = 0.0;
  ProportionInterval interval;
};
YieldCount yield_count(int met, int of);

/// One design on one plant (linear loop, the spec's own limits).
struct ScenarioCheck {
  bool stable = false;
  bool meets_all = false;
  std::vector<RequirementCheck> checks;
};

/// A requirement's worst value over the scenario set and the plant it occurs on.
struct WorstCase {
  RequirementCheck check;                   // on that plant (met or not)
  std::size_t scenario = 0;                 // index into the set
};

/// A design on the plant of its worst scenario, confirmed on the nonlinear loop.
struct WorstConfirmation {
  std::size_t scenario = 0;
  std::vector<std::string> requirements;    // the requirements whose worst case it is
  Design design;                            // measured and confirmed on that plant
};

/// A design over the uncertainty.
struct RobustAssessment {
  DesignRole role = DesignRole::optimized;
  std::vector<ScenarioCheck> set;           // per scenario of the set, in its order
  std::vector<WorstCase> worst;             // per requirement (the problem's order), over the set
  std::optional<std::size_t> unstable_scenario;  // the first plant of the set it does not stabilize
  std::size_t weakest_scenario = 0;         // the plant with the least room (the envelope's first named)
  YieldCount set_all;                       // every plant of the set
  YieldCount set_samples;                   // the set's random samples only
  YieldCount verification;                  // the fresh sample
  std::vector<bool> verification_meets;     // per fresh plant
  std::vector<std::pair<std::size_t, std::string>> verification_misses;  // fresh plants that miss (first kMaxListed): index, what
  std::vector<WorstConfirmation> confirmations;  // the optimized design's worst plants on the nonlinear loop
  bool holds = false;                       // the mode's claim holds on what was verified
  std::string claim;                        // that, in words, with the counts and the interval
};
inline constexpr std::size_t kMaxListed = 8;
inline constexpr std::size_t kMaxRefuting = 16;  // refuting fresh plants added to the set, at most

/// The fresh verification sample's values and plants (verification_plants).
struct RobustRun {
  UncertaintyBox box;
  std::vector<Scenario> scenarios;          // the set (nominal, corners, samples)
  std::vector<Scenario> verification;       // the fresh plants
  int verification_draw = 0;                // which sample they are (1: a second one, after refuting plants joined the set)
  std::size_t refuting_added = 0;           // fresh plants that refuted the first optimum and joined the set (kind found)
  RobustSearchLog search;
  std::vector<RobustAssessment> assessments;  // one per design of the run, in its order
  const RobustAssessment* find(DesignRole role) const;
};

/// Measures `controller` on every plant of the set (on `jobs` threads; the result does not depend
/// on it). For the design the run `claimed` (the optimized one), also on every fresh plant of the
/// verification sample and on the nonlinear loop of each requirement's worst plant, and states the
/// claim of the spec's mode: every plant of both (worst-case; a miss on a worst plant's nonlinear
/// loop voids it when `judged_on_nonlinear`), or the fresh plants' share ≥ yield_min_pct (yield).
/// Other designs (the hand designs, for comparison) are judged on the set alone, and say so.
RobustAssessment assess_over_scenarios(const RobustRun& robust, const Problem& nominal, DesignRole role,
                                       const Controller& controller, unsigned jobs, bool claimed,
                                       bool judged_on_nonlinear);

}  // namespace specloop
