// Designs and their measurement: the requirement set as normalized constraints, the classical
// root-locus design, the ultimate-gain (Ziegler–Nichols) baseline, and the NLopt search against
// the true simulated response.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/design/characterize.hpp"
#include "specloop/core/compensator.hpp"
#include "specloop/core/margins.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop {

/// One requirement: its spec key, whether it is an upper ("max") or lower ("min") bound, its limit.
struct Requirement {
  std::string key;      // e.g. "overshoot_max_pct", as in the spec's [requirements]
  std::string unit;     // for tables: "%", "s", "dB", "deg", ""
  bool upper = true;    // value <= limit (true) or value >= limit (false)
  double limit = 0.0;   // in the key's unit (peak_time_ratio: the ratio)
  bool magnitude = false;  // the bound applies to |value| (steady-state error: the value stays signed)
};

/// The requirements of a spec as a list, in a fixed order. `reference_peak_time` converts
/// peak_time_ratio into seconds (it is required when the spec has peak_time_ratio).
std::vector<Requirement> requirement_list(const Requirements& r);

/// Everything the search does not change, computed once per spec.
struct Problem {
  Spec spec;
  TransferFunction plant;                 // the linear model: G(s), times the delay approximant
  double action = 1.0;                    // loop_action(plant): +1 direct, −1 reverse; every controller carries it
  TransferFunction normalized_plant;      // action·plant: what the design rules (reference gain, root locus,
                                          // ultimate gain) work on, with positive gains
  StateSpace plant_realization;           // of `plant`
  StateSpace delay_free_realization;      // of G(s) alone, for the nonlinear loop (exact delay)
  std::optional<double> reference_peak_time_s;  // from the characterization (P gain at the limit)
  std::vector<Requirement> requirements;
  double band_fraction = 0.02;
  double search_margin = 0.01;                  // search.margin_pct/100: see SearchMargin below
  double tracking_window_s = 1.0;               // W of the tracking objectives (see tracking_objective)
  bool needs_margins = false;                   // a margin requirement or the Ms objective
  std::vector<ParameterInfo> parameters;        // of the spec's structure
  std::vector<std::pair<double, double>> bounds;  // per parameter, natural units, lo < hi
  /// controller.sample_time is set and the plant is strictly proper: the linear loop of every
  /// measurement and of the search is the sampled one (sampled_loop.hpp), not the continuous one.
  bool sampled = false;
};

/// Builds the Problem: default search bounds from the plant's pole/zero scale and the reference
/// gain, overridden by [search.bounds]. Throws SpecError for a bound that names no parameter.
Problem make_problem(const Spec& spec, const Characterization& ch);

/// A requirement checked on one design.
struct RequirementCheck {
  Requirement requirement;
  std::optional<double> value;  // empty when the response has no such value (see README)
  bool met = false;
  double violation = 0.0;       // normalized: (value − limit)/|limit| for upper bounds, > 0 when missed
  double slack = 0.0;           // requirement_slack: normalized room, negative when missed
};

/// Effects of the nonlinear loop taken out (the others kept), to see what they cost: the
/// requirements that degraded, re-read on that loop. One effect or several together.
struct CauseTrial {
  std::string factor;                 // the factors joined by " + ", e.g. "saturation", "saturation + sampling"
  std::vector<std::string> factors;   // each: "saturation", "anti-windup", "rate limit", "sampling", "delay",
                                      // "load step", "measurement noise", "plant nonlinearity"
  std::string removed;                // how they were taken out, in words
  NonlinearStatus status = NonlinearStatus::ok;
  std::vector<RequirementCheck> checks;  // the degraded requirements, re-checked without the factor
  bool restores = false;              // without it, every degraded requirement is met again
};

/// A design re-measured on the nonlinear loop (saturation, rate limit, anti-windup, disturbance).
struct NonlinearConfirmation {
  NonlinearStatus status = NonlinearStatus::ok;
  StepMetrics simulated;              // same definitions as the linear metrics (nonlinear.hpp)
  double saturated_fraction = 0.0;    // time with the command beyond a limit ÷ horizon
  double rate_limited_fraction = 0.0; // time the applied u slews at the rate limit ÷ horizon
  double command_excess_max = 0.0;    // largest distance of the command beyond a limit (windup)
  double integrator_held_fraction = 0.0;  // time the conditional integration held the integrator ÷ horizon
  /// The effects of this loop that the continuous linear loop leaves out and that acted in this run
  /// (ids: see `effect_description`): actuator_limits (the command went beyond a limit),
  /// rate_limit (the actuator slewed at it), sampling, delay, plant_nonlinearity,
  /// measurement_noise, load_step.
  std::vector<std::string> active_effects;
  double horizon_s = 0.0;             // simulated time (extended until the response settled)
  bool horizon_bound_hit = false;     // not settled by kMaxHorizonFactor × the linear horizon
  /// When not confirmed: the active effects taken out one at a time, then in combinations, up to
  /// the smallest sets whose removal restores every degraded requirement (`restores`).
  std::vector<CauseTrial> attribution;
  NonlinearStepper stepper = NonlinearStepper::dopri5;  // the integrator the stiffness estimate chose
  std::vector<RequirementCheck> checks;
  bool meets_all = false;
  bool confirmed = false;             // every requirement met on the linear loop is met here too
  std::string verdict;                // one sentence, with the numbers
  std::optional<DifferenceEquation> difference_equation;  // when the controller is sampled
  std::optional<double> noise_period_s;      // the noise period used, when there is noise
  std::optional<double> tracking_time_s;     // the back-calculation tracking time used, when it applies
  std::vector<std::string> notes;
};

/// A design measured on the linear loop, and confirmed on the nonlinear one.
struct Design {
  std::string name;                 // reference, classical, ultimate_gain, optimized
  Controller controller;
  TransferFunction reference_path;  // C_r: u = C_r·r − C·y (equals C without set-point weights)
  StepStatus status = StepStatus::ok;
  std::vector<Complex> closed_loop_poles;
  std::optional<SecondOrderPrediction> second_order;  // from the slowest complex closed-loop pair
  std::optional<DominanceDiagnosis> dominance;        // does that prediction hold, and what breaks it
  StepMetrics simulated;
  std::optional<Margins> margins;   // empty when the closed loop is unstable
  std::vector<RequirementCheck> checks;
  bool meets_all = false;
  std::optional<NonlinearConfirmation> nonlinear;  // empty when the linear loop is unstable
  bool sampled = false;             // `simulated` is the sampled loop's (Problem::sampled)
  std::vector<std::string> notes;   // how it was made, what was left out
  /// Facts about the design an engineer would want flagged (fragility): a delay margin too short
  /// for any digital implementation, a command far beyond its final value with nothing bounding
  /// it, a parameter on its search bound (design.cpp, `fragility_warnings`).
  std::vector<std::string> warnings;
};

/// The spec's nonlinear loop: actuator, anti-windup, weights, disturbance, delay, sampling; the
/// horizon from the linear loop's (stretched by a disturbance and the delay), `samples` outputs.
struct NonlinearSetup {
  ActuatorModel actuator;
  LoopOptions options;
  bool delay_approximant = false;  // the delay as the linear loop has it (Padé), not exact (attribution)
  double fine_step_s = 0.0;        // > 0: also sample at this step on [0, fine_until_s] (see LinearGrid)
  double fine_until_s = 0.0;
};
NonlinearSetup nonlinear_setup(const Problem& problem, double linear_horizon_s, int samples);

/// What the linear loop's time grid knew about the response's time scales: its horizon and, when
/// its first segment is much finer than the rest (fast modes alive at the start, e.g. a stiff
/// loop), that segment's step and extent.
struct LinearGrid {
  double horizon_s = 0.0;
  double fine_step_s = 0.0;   // 0: one uniform resolution is enough
  double fine_until_s = 0.0;
};
/// The linear grid of the last call of either simulator.
LinearGrid linear_grid_of(const TimeGrid& grid);
/// nonlinear_setup on that grid: the output samples are the uniform ones plus, when the grid's
/// first segment is more than 4× finer than them, that segment's (so that a fast start is
/// measured, not stepped over), and the integrator's first step is at most the fine step.
NonlinearSetup nonlinear_setup(const Problem& problem, const LinearGrid& grid, int samples);
/// Fills setup.options.sample_times_s for its horizon and output step (and fine segment).
void set_output_times(NonlinearSetup& setup);
/// The step of the spec's reference through that loop with `controller` (the spec's plant).
NonlinearResult simulate_on_nonlinear_loop(const Problem& problem, const Controller& controller, const NonlinearSetup& setup);
/// Output samples of the confirmation run (and of the report's nonlinear traces).
inline constexpr int kConfirmationSamples = 20000;
/// How far the nonlinear run's horizon may be extended (a multiple of the starting horizon).
inline constexpr double kMaxHorizonFactor = 16.0;

/// A nonlinear run long enough to see the response settle.
struct SettledRun {
  NonlinearResult result;
  NonlinearSetup setup;     // as finally run (its horizon)
  int extensions = 0;       // horizon doublings
  bool bound_hit = false;   // still not settled at max_factor × the starting horizon
};
/// Runs `setup`; while the response is not settled — it must stay within the band for the last
/// fifth of the time since the last excitation (the step, or the load step) — doubles the horizon
/// (the output step kept, up to 4× the samples) and runs again, up to `max_factor` × the starting
/// horizon. A run that stops (status) or cannot be measured is returned as it is. `wall_cap_s`
/// bounds the wall time of all runs together (the last one's status says when it was reached).
SettledRun simulate_until_settled(const Problem& problem, const Controller& controller, const NonlinearSetup& setup,
                                  double max_factor, double wall_cap_s = 60.0);

/// Human description of an active-effect id (NonlinearConfirmation::active_effects).
std::string effect_description(std::string_view id);

/// Measures a controller on the problem's linear loop (the sampled one when Problem::sampled) and
/// checks every requirement, then confirms it on the nonlinear loop (the spec's actuator limits,
/// rate limit, anti-windup, disturbance, exact delay, sampling, plant model) and checks every
/// requirement again there.
Design measure_design(const Problem& problem, std::string name, const Controller& controller);

/// The fragility warnings of a measured design (Design::warnings): its delay margin below
/// kDelayMarginFloor (no digital controller is that fast) or below two sample periods of a sampled
/// controller; with neither actuator limits nor effort_max, a peak command over
/// kEffortAmplification × its final value; a search parameter within 0.1 % (log scale) of a bound.
std::vector<std::string> fragility_warnings(const Problem& problem, const Design& d, bool searched);
inline constexpr double kDelayMarginFloor = 1e-4;     // s
inline constexpr double kEffortAmplification = 100.0;
/// The time a peak-time requirement reads (README, "Metric definitions"): the time of the peak
/// when the peak is visible — the overshoot exceeds the settling band (`band_pct`) and the
/// response never falls further below y∞ after the peak than the peak rose above it (a decaying
/// oscillation) — else the final entry into the band (the settling time), so that no response
/// is credited with a time after which it still leaves the band. `margin` (a fraction, the
/// search's) makes both tests stricter: the overshoot must exceed band_pct·(1 + margin) and the
/// dip stay below overshoot·(1 − margin), and a later hump (StepMetrics::next_peak_time_s) whose
/// height is within kPeakTieFraction + margin·overshoot of the peak is read instead of the peak
/// (two humps near a tie: the later one). Used by the requirement checks, the search and
/// sweep-report, so all three read the same time.
std::optional<double> effective_peak_time(const StepMetrics& m, double band_pct, double margin = 0.0);

/// The value a requirement reads from a measured response (std::nullopt: not defined).
/// Peak-time requirements read effective_peak_time (`band_pct`, `margin` as there).
std::optional<double> requirement_value(const Requirement& r, const StepMetrics& m,
                                        const std::optional<Margins>& margins,
                                        const std::optional<double>& reference_peak_time_s, double band_pct,
                                        double margin = 0.0);

/// The search's margin (README, `search.margin_pct`): in the search every limit is tightened by
/// the fraction `margin` of itself (an upper bound L becomes L − margin·|L|, a lower one
/// L + margin·|L|; a zero limit stays zero) and the settling band is narrowed by the same
/// fraction, so that the design it returns meets the real limits with room, not on the edge.
/// The checks of a design always use the spec's own limits.
Requirement tightened(const Requirement& r, double margin);

/// The tracking objectives itae, iae and ise as the search minimizes them (README, "Objectives"):
/// the integral about y∞ plus the integral that the offset r − y∞ alone accumulates over the
/// problem's tracking window W — ITAE + |r − y∞|·W²/2, IAE + |r − y∞|·W, ISE + (r − y∞)²·W — so
/// that following the reference r (`amplitude`) is rewarded and a gain driven to zero, which
/// shrinks the integrals about y∞ with y∞ itself, is not optimal. Throws std::logic_error for
/// the other objectives.
double tracking_objective(Objective objective, const StepMetrics& m, double amplitude, double window_s);

/// A checked value as tables show it: 4 significant digits, more when a miss would otherwise
/// print equal to the limit ("10.0002 ✗" against "≤ 10", never "10 ✗").
std::string shown_value(const RequirementCheck& c);

/// Normalized violation of a requirement by a value: (value − limit)/|limit| for an upper bound
/// (the reverse for a lower one; a zero limit is scaled by 0.01), 0 when met; a missing value
/// counts as a 100 % miss, an infinite miss as 1000.
double requirement_violation(const Requirement& r, const std::optional<double>& value);

/// Normalized room left by a value, the same scale as requirement_violation but signed: positive
/// when met with room, negative when missed; −1 for a missing value.
double requirement_slack(const Requirement& r, const std::optional<double>& value);

/// The tightest requirement among met checks (smallest slack), ignoring a zero limit met exactly
/// (zero steady-state error from an integrator is structure, not a trade-off); "" when none.
std::string tightest_requirement(const std::vector<RequirementCheck>& checks);

// ---- classical design -------------------------------------------------------------------------

/// The desired dominant pole −σ + jω_d from the requirements, and how it was derived.
struct DesiredPole {
  Complex pole;
  std::string derivation;
};
/// ζ from the overshoot limit (0.7071 when there is none, common practice); ω_d from the target
/// peak time (peak_time_ratio × reference peak time, or peak_time_max, the smaller), else σ from
/// settling_time_max; else the P-only dominant crossing's pole.
std::optional<DesiredPole> desired_pole(const Problem& problem, const Characterization& ch);

/// The root-locus design (direct action: give it Problem::normalized_plant, then apply the action
/// with make_controller) of `structure` placing a closed-loop pole at `target` where the
/// structure can (pd, pid, lead, lead-lag: angle condition; lead pole by the bisector rule;
/// PI/lag zero at a tenth of σ), or at the dominant ζ-line crossing of the compensated locus
/// where it cannot (p, pi, lag). Gain from the magnitude condition. `notes` says what was done;
/// when a step cannot be done the result is empty, the last note says why, and `failed_step`
/// (when given) receives the step's name ("angle condition", "lead angle", ...).
std::optional<Controller> classical_controller(const TransferFunction& plant, Structure structure,
                                               double derivative_filter, Complex target, double zeta,
                                               std::optional<double> steady_state_error_max,
                                               std::vector<std::string>& notes, std::string* failed_step = nullptr);

// ---- ultimate-gain baseline ---------------------------------------------------------------------

/// Ultimate gain Ku and period Tu: the P gain at which K·G reaches the imaginary axis (direct
/// action: give it Problem::normalized_plant).
struct UltimatePoint {
  double gain = 0.0;
  double period_s = 0.0;
  double frequency_rad_s = 0.0;
};
std::optional<UltimatePoint> ultimate_point(const TransferFunction& plant);
/// Ziegler–Nichols (1942) closed-loop rules: P Kp = 0.5Ku; PI Kp = 0.45Ku, Ti = Tu/1.2;
/// PID Kp = 0.6Ku, Ti = Tu/2, Td = Tu/8; PD (common practice) Kp = 0.8Ku, Td = Tu/8.
/// std::nullopt for structures the rules do not cover (lead, lag, lead-lag).
std::optional<StandardForm> ziegler_nichols(Structure s, const UltimatePoint& u, double derivative_filter);
/// Series parameters from a standard form (the inverse of make_controller's conversion).
std::optional<std::vector<double>> series_from_standard(Structure s, const StandardForm& f);

// ---- search -------------------------------------------------------------------------------------

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
};

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

// ---- the whole design run -----------------------------------------------------------------------

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
  std::vector<Design> designs;              // reference, classical, ultimate_gain, optimized (those that exist)
  SearchSummary search;
  std::optional<Infeasibility> infeasibility;
  bool met = false;                         // the optimized design meets every requirement …
  bool judged_on_nonlinear = false;         // … on the nonlinear loop (an effect active, or search.simulate = "nonlinear") or the linear one
  bool met_on_linear = false;               // it meets every requirement on the linear loop (a linear-only pass when !met)
  const Design* find(std::string_view name) const;
};

/// characterize → problem → classical and baseline designs → search (seeded by the classical
/// design) → measurement of every design → infeasibility analysis when the optimum misses.
DesignRun run_design(const Spec& spec);

}  // namespace specloop
