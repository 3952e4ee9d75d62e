// One candidate's evaluation on the linear loop: parameters → controller → closed loop → exact
// step response (continuous or sampled) → metrics → violation of the tightened requirements and
// the objective. The search ranks what this returns; the plant it runs on may be a scenario of
// the nominal one (the same problem with the plant fields replaced).
#pragma once

#include <optional>
#include <vector>

#include "specloop/core/margins.hpp"
#include "specloop/design/nonlinear_loop.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/design/search.hpp"
#include "specloop/sim/response.hpp"
#include "specloop/sim/sampled_loop.hpp"

namespace specloop {

/// What one evaluation found. Unstable (or not simulable): `objective` holds the barrier cost,
/// 1e9·(1 + how far right the rightmost pole is), and the other fields are 0.
struct CandidateOutcome {
  bool stable = false;
  double objective = 0.0;
  double violation = 0.0;    // Σ normalized violations of the tightened requirements (0: feasible)
  double effort_peak = 0.0;  // max |u|
};

/// The cost evaluation's workspace and judgement: one per search, not for concurrent use. On the
/// continuous loop without set-point weighting and without margins to compute (no margin
/// requirement, not the Ms objective), an evaluation allocates nothing once the storage has the
/// loop's size and the longest time grid seen (tests/design/test_hot_path.cpp), the load
/// response's second simulation included; the weighted and the sampled loops and the margins
/// allocate per call.
class CandidateEvaluator {
 public:
  /// `nominal`: the problem whose requirements (tightened by its search margin), band, objective
  /// and reference peak time every evaluation is judged against. Both arguments must outlive
  /// the evaluator.
  CandidateEvaluator(const Problem& nominal, const SearchOptions& options);
  // Temporaries would dangle (the evaluator keeps references): refused at compile time.
  CandidateEvaluator(Problem&&, const SearchOptions&) = delete;
  CandidateEvaluator(const Problem&, SearchOptions&&) = delete;
  CandidateEvaluator(Problem&&, SearchOptions&&) = delete;

  /// Evaluates natural-unit series parameters on `plant`'s linear loop (plant.plant,
  /// plant.plant_realization, plant.sampled): `plant` is the nominal problem or a copy of it with
  /// the plant fields replaced (a scenario of the plant's uncertainty). The controller (structure,
  /// action, set-point weighting, sample time), the step, the requirements and the objective are
  /// always those of `nominal`.
  CandidateOutcome evaluate(const Problem& plant, const double* params);

  /// The metrics of the last evaluation (meaningful when it was stable).
  const StepMetrics& metrics() const { return metrics_; }
  /// The time grid of the last successful evaluation, as the nonlinear loop takes it.
  LinearGrid linear_grid() const;

  /// Σ normalized violations of the tightened requirements for metrics measured elsewhere (the
  /// nonlinear loop); a missing value counts as 1.
  double violation(const StepMetrics& m, const std::optional<Margins>& margins) const;
  /// The objective minimized among feasible candidates, for metrics `m` of the loop of
  /// controller `c` and `plant` simulated over `horizon_s`.
  double objective(const StepMetrics& m, const std::optional<Margins>& margins, const TransferFunction& c,
                   const TransferFunction& plant, double horizon_s) const;

 private:
  // The outcome of a stable simulation (metrics_) of the loop with `plant`.
  CandidateOutcome judge(const TransferFunction& plant, double horizon_s) const;
  // objective() when the margins are present wherever the objective reads them.
  double objective_given(const StepMetrics& m, const std::optional<Margins>& margins, double horizon_s) const;

  const Problem& nominal_;
  const SearchOptions& options_;
  double margin_;                          // the search's margin (fraction)
  bool sensitivity_only_ = false;          // of the margins only Ms and the closed-loop peaks are read
  double band_;                            // the settling band narrowed by it
  std::vector<Requirement> requirements_;  // the nominal problem's, tightened by it
  bool last_sampled_ = false;              // which simulator ran last
  StepSimulator sim_;
  SampledStepSimulator sampled_sim_;
  SampledStepSimulator sampled_load_sim_;  // the sampled loop's load response (Problem::needs_load)
  StepMetrics metrics_;
  std::vector<double> num_, den_;  // the candidate's C(s) (with its filters: C·F·N)
  StateSpace controller_, loop_;   // its realization (the structure's part) and the closed loop, reused
  // The filters (controller.notch, controller.measurement_filter): their sections and the
  // two-input controller u = N·K·(r − F·y), in fixed storage too.
  void realize_filtered(const SearchedFilters& f);
  std::vector<double> filter_num_, filter_den_, notch_num_, notch_den_, scratch_;
  StateSpace filter_section_, notch_section_;
  TwoInputRealization filtered_;
  // The load response (Problem::needs_load): a second simulation of the same loop driven at the
  // plant's input (load_loop_into), in storage of its own, so that it allocates nothing either.
  double load_size_, load_offset_;
  StepSimulator load_sim_;
  StepMetrics load_metrics_;
  StateSpace load_loop_;
};

}  // namespace specloop
