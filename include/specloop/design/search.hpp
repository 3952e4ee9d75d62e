// The NLopt search of a structure's parameters against the simulated response: its options, its
// summary, and the nonlinear stage that ranks candidates on the loop the spec describes.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

struct SearchOptions {
  Objective objective = Objective::itae;
  /// When set, the search minimizes this requirement's value instead (maximizes it for a lower
  /// bound), subject to the problem's other requirements: "how far can this one go?"
  std::optional<Requirement> objective_requirement;
  unsigned seed = 1;                  // NLopt's random seed: runs repeat exactly
  int max_evaluations = 6000;         // global + local cost evaluations, at most
  double max_time_s = 20.0;           // wall-time cap for the whole search, s
  double global_share = 0.6;          // fraction of the evaluation budget for the global stage
  double local_relative_tolerance = 1e-6;  // local stage stops when |Δcost|/cost falls below this
  /// Budget of the nonlinear stage (refine_on_nonlinear_loop), evaluations on the nonlinear loop
  /// (search_options: a tenth of max_evaluations, between 40 and 400).
  int nonlinear_evaluations = 400;
  std::string global_algorithm = "GN_DIRECT_L";  // NLopt algorithm names (nlopt_algorithm_from_string)
  std::string local_algorithm = "LN_SBPLX";
  /// Robust search: every candidate is evaluated on each of these plants (scenario problems,
  /// scenarios.hpp; the first is the nominal one) instead of the problem's plant alone, and
  /// judged as `robust_mode` says (see `ScenarioJudgement`). Empty: the problem's plant only.
  std::vector<const Problem*> scenarios;
  RobustMode robust_mode = RobustMode::worst_case;
  ObjectiveAt objective_at = ObjectiveAt::nominal;
  /// Mode yield: at least this many of scenarios[1…] must meet every requirement (and the nominal).
  std::size_t yield_required = 0;
  /// Skip the global stage: the local stage starts from the seed only (a robust search's later rounds).
  bool local_only = false;
  /// More starts of the local stage (natural units), after the global stage's and the seed.
  std::vector<std::vector<double>> extra_starts;
};

/// How a candidate's outcomes on several plants become one (SearchOptions::scenarios):
///  - worst-case: stable only when stable on every plant (else the barrier grows with the share of
///    unstable plants and how far right their poles are); violation Σ over the plants; the
///    objective the nominal plant's, or the largest (objective_at = worst);
///  - yield: the nominal plant must be stable; a plant of scenarios[1…] that is unstable counts as
///    a violation of kUnstableScenarioViolation; violation = the nominal's + the sum of the
///    `yield_required` smallest violations of the others (0 exactly when the nominal and that
///    many others meet everything); objective the nominal's, or the largest over those plants.
inline constexpr double kUnstableScenarioViolation = 10.0;

struct SearchSummary {
  std::string global_given, local_given;  // NLopt names, as asked for
  std::string global_algorithm;       // NLopt's descriptions of what ran
  std::string local_algorithm;
  int evaluations = 0;
  int global_evaluations = 0;
  int local_evaluations = 0;
  int nonlinear_evaluations = 0;      // of the nonlinear stage (0: none)
  std::string nonlinear_stage;        // what it did, or why it did not run, in words
  std::string simulate;               // search.simulate as given: "auto", "linear", "nonlinear"
  std::string linear_loop = "continuous";  // the loop of the linear stages: "continuous" or "sampled"
  std::vector<std::string> active_effects;  // of the linear optimum (ids), which decided the stage
  int unstable = 0;                   // candidates rejected by the stability barrier
  int infeasible = 0;                 // stable candidates missing at least one requirement
  double wall_time_s = 0.0;
  bool feasible = false;
  double best_objective = 0.0;
  double best_violation = 0.0;        // Σ normalized violations of the best point (0 if feasible)
  std::string stop_reason;            // in words, with numbers
  bool time_capped = false;           // a stage stopped on search.max_time before its evaluation budget
};

/// A feasible point the linear stages visited, kept as a start for the nonlinear stage.
struct SearchCandidate {
  std::vector<double> series;   // natural units
  double objective = 0.0;
  double effort_peak = 0.0;
};

struct SearchResult {
  Controller controller;
  SearchSummary summary;
  /// The best feasible point in each band of peak effort (a tenth of a decade wide): designs from
  /// gentle to aggressive, for the nonlinear stage to screen.
  std::vector<SearchCandidate> archive;
};

/// Searches the structure's parameters (log scale, within the problem's bounds) minimizing the
/// objective subject to the requirements, from `seed_parameters` (series values), on the linear
/// loop (the sampled one when Problem::sampled). Deterministic for a given seed.
SearchResult optimize(const Problem& problem, const std::vector<double>& seed_parameters,
                      const SearchOptions& options);

/// The nonlinear stage: the same feasibility-first ranking measured on the loop the spec describes
/// (each candidate run as the confirmation runs it, simulate_until_settled, so that the final
/// verdict reads exactly what the stage ranked). Screens the archive of `linear` (at most 16
/// points across the effort bands), the linear optimum and `extra_starts`, then runs Subplex
/// from the best three, with `options.nonlinear_evaluations` in all. Returns `linear` with the
/// controller moved (or not) and the summary's nonlinear fields filled.
SearchResult refine_on_nonlinear_loop(const Problem& problem, const SearchResult& linear,
                                      const std::vector<std::vector<double>>& extra_starts, const SearchOptions& options);

/// SearchOptions from the spec's [search] table.
SearchOptions search_options(const Spec& spec);

/// What a NOT MET verdict adds when a search stage stopped on search.max_time before its evaluation
/// budget ("" otherwise): the "no design meets" rests on a shortened search.
std::string time_cap_advice(const SearchSummary& s, double max_time_s);

}  // namespace specloop
