// The `design` pipeline (design_run.hpp): every design of a spec, measured on the linear loop and
// confirmed on the nonlinear one the same way, then the search and the verdict. run_design reads
// as its list of stages; each stage is a function below.
#include "specloop/design/design_run.hpp"

#include <algorithm>
#include <cmath>
#include <fmt/format.h>
#include <optional>

#include "specloop/sim/sampled_loop.hpp"

#include <boost/math/tools/roots.hpp>

namespace specloop {

const Design* DesignRun::find(DesignRole role) const {
  for (const Design& d : designs)
    if (d.role == role) return &d;
  return nullptr;
}

const Design* recommended_design(const DesignRun& run) {
  for (const DesignRole role : {DesignRole::optimized, DesignRole::classical}) {
    const Design* d = run.find(role);
    if (d && d->status == StepStatus::ok) return d;
  }
  return nullptr;
}

Design measure_and_confirm(const Problem& problem, DesignRole role, const Controller& controller) {
  Design d = measure_design(problem, role, controller);
  confirm_design(problem, d);
  if (d.status == StepStatus::ok) d.warnings = fragility_warnings(problem, d, false);
  return d;
}

namespace {

// Geometric middle of the bounds: the seed when no hand design exists.
std::vector<double> middle_of_bounds(const Problem& p) {
  std::vector<double> x;
  for (const auto& [lo, hi] : p.bounds) x.push_back(std::sqrt(lo * hi));
  return x;
}

// The power of s that the closed loop's characteristic polynomial Dc·D + Nc·N lacks for every
// choice of the structure's parameters, if any. Dc and Nc have positive coefficients wherever
// they are nonzero, so a term is missing for all parameters exactly when it is missing at one
// generic point (the geometric middle of the bounds, nudged off round numbers).
std::optional<int> structurally_missing_power(const Problem& problem) {
  std::vector<double> x;
  for (const auto& [lo, hi] : problem.bounds) x.push_back(std::sqrt(lo * hi) * 1.0123456789);
  Controller c;
  try {
    c = make_controller(problem.spec.controller.structure,
                        std::vector<double>(x.begin(), x.begin() + static_cast<std::ptrdiff_t>(structure_parameter_count(problem))),
                        problem.spec.controller.derivative_filter, 1.0);
  } catch (const std::invalid_argument&) {
    return std::nullopt;
  }
  const TransferFunction& g = problem.normalized_plant;
  const Polynomial p = c.transfer.denominator * g.denominator + c.transfer.numerator * g.numerator;
  const int n = p.degree();
  for (int i = 0; i <= n; ++i)
    if (p.coefficients[static_cast<std::size_t>(i)] == 0.0) return n - i;
  return std::nullopt;
}

// Every missed check, and the one missed by the most (normalized) as the binding requirement.
Infeasibility collect_misses(const std::vector<RequirementCheck>& checks) {
  Infeasibility info;
  double worst = -1.0;
  for (const RequirementCheck& c : checks) {
    if (c.met) continue;
    info.misses.push_back(c);
    if (c.violation > worst) {
      worst = c.violation;
      info.binding = c.requirement.key;
    }
  }
  return info;
}

Infeasibility analyze_misses(const Problem& problem, const Design& best, const SearchResult& first,
                             const SearchOptions& options) {
  Infeasibility info = collect_misses(best.checks);
  if (info.binding.empty() || best.status != StepStatus::ok) {
    // Unstable: every requirement "missed" says nothing; stability is what binds.
    info.binding = "stability";
    const auto missing = structurally_missing_power(problem);
    info.nearest_text =
        missing ? fmt::format("no {} controller can stabilize this plant: the closed loop's characteristic polynomial "
                              "has no s^{} term whatever the gains, and a polynomial with a missing term is never "
                              "Hurwitz (Stodola's necessary condition); another structure is needed",
                              structure_name(problem.spec.controller.structure), *missing)
                : "no stable design was found within the search bounds";
    return info;
  }
  // How far can the binding requirement go with the others met? Search again on it alone.
  Problem relaxed = problem;
  std::optional<Requirement> binding;
  relaxed.requirements.clear();
  for (const Requirement& r : problem.requirements) {
    if (r.key == info.binding) binding = r;
    else relaxed.requirements.push_back(r);
  }
  SearchOptions o = options;
  o.objective_requirement = binding;
  const SearchResult nearest = optimize(relaxed, search_vector(problem, first.controller), o);
  // Measured on the linear loop only: the nearest value is read there (no confirmation needed).
  const Design d = measure_design(relaxed, DesignRole::optimized, nearest.controller);
  const auto value = d.status == StepStatus::ok
                         ? requirement_value(*binding, d.simulated, d.margins, problem.reference_peak_time_s,
                                             problem.band_fraction * 100.0)
                         : std::nullopt;
  if (d.meets_all && value) {
    info.nearest_value = *value;
    info.nearest_text = fmt::format("with every other requirement met, the best {} reachable is {:.4g}{} (limit {:.4g}{})",
                                    binding->key, *value, binding->unit.empty() ? "" : " " + binding->unit,
                                    binding->limit, binding->unit.empty() ? "" : " " + binding->unit);
  } else {
    info.nearest_text = "the other requirements cannot be met together either, even with " + info.binding + " dropped";
  }
  return info;
}

// The reference P gain of a sampled controller. analyze's gain puts the continuous loop's overshoot
// at the limit, but every design of a sampled spec is measured (and judged) on the sampled loop,
// where the hold's lag adds overshoot; so the reference is aimed again there: the gain is stepped
// geometrically from analyze's (down while the sampled overshoot is above the aim, up while below)
// until the aim is bracketed, then TOMS 748 (Boost). The aim is `aim_pct` (the limit a hair
// below, as analyze aims). nullopt when no bracket is found within a factor of 1e3 (the
// continuous gain is then kept, and a note says so).
std::optional<double> sampled_reference_gain(const Problem& problem, double k0, double n, double aim_pct) {
  const ControllerSpec& cs = problem.spec.controller;
  SampledStepSimulator sim;
  auto excess = [&](double k) -> std::optional<double> {
    const Controller c = make_controller(Structure::p, {k}, n, problem.action);
    const DifferenceEquation eq =
        controller_difference_equation(c, cs.sample_time_s, cs.setpoint_weight, cs.derivative_on_measurement ? 0.0 : 1.0);
    StepMetrics m;
    if (sim.simulate(problem.plant_realization, eq, problem.spec.reference.amplitude, problem.band_fraction, m) !=
        StepStatus::ok)
      return std::nullopt;  // unstable: beyond every gain of interest
    return m.overshoot_pct - aim_pct;
  };
  constexpr int kSteps = 140;  // 1.05^140 ≈ 930
  double k = k0;
  std::optional<double> fk = excess(k);
  for (int i = 0; i < kSteps && !fk; ++i) fk = excess(k /= 1.05);  // unstable there: come down first
  if (!fk) return std::nullopt;
  double lo = k, hi = k, flo = *fk, fhi = *fk;
  const double step = *fk >= 0.0 ? 1.0 / 1.05 : 1.05;
  bool bracketed = false;
  for (int i = 0; i < kSteps && !bracketed; ++i) {
    const double k2 = k * step;
    const auto f2 = excess(k2);
    if (!f2) return std::nullopt;  // unstable before the aim is reached
    if (step > 1.0) {
      lo = k, flo = *fk, hi = k2, fhi = *f2;
      bracketed = *f2 >= 0.0;
    } else {
      hi = k, fhi = *fk, lo = k2, flo = *f2;
      bracketed = *f2 < 0.0;
    }
    k = k2, fk = f2;
  }
  if (!bracketed) return std::nullopt;
  boost::uintmax_t iterations = 100;
  const auto f = [&](double kk) { return excess(kk).value_or(1e9); };
  const auto [a, b] = boost::math::tools::toms748_solve(f, lo, hi, flo, fhi, boost::math::tools::eps_tolerance<double>(40),
                                                       iterations);
  return f(a) <= 0.0 ? a : b;  // the end at or below the aim: the reference's own check holds
}

// ---- the stages ---------------------------------------------------------------------------------

// The run's base: the spec's checks that 'design' needs, the characterization and the problem.
DesignRun prepare_run(const Spec& spec) {
  if (!spec.requirements.overshoot_max_pct)
    throw SpecError(spec.path + ": requirements.overshoot_max_pct: required by 'design' (the reference gain and the "
                                "classical design's ζ come from it)");
  DesignRun run;
  run.characterization = characterize(spec);
  run.problem = make_problem(spec, run.characterization);
  if (spec.requirements.peak_time_ratio && !run.problem.reference_peak_time_s)
    throw SpecError(spec.path + ": requirements.peak_time_ratio: no reference peak time exists for this plant (" +
                    run.characterization.reference_note + "); use peak_time_max instead");
  return run;
}

// The reference P design (when the characterization found its gain): aimed again on the sampled
// loop for a sampled controller, whose reference peak time then becomes the problem's.
void add_reference_design(DesignRun& run) {
  if (!run.characterization.reference) return;
  const Problem& problem = run.problem;
  const Spec& spec = problem.spec;
  const double n = spec.controller.derivative_filter;
  double k_ref = run.characterization.reference->gain;
  std::string aimed = "P gain whose simulated overshoot equals the limit (from analyze)";
  if (problem.sampled) {
    // Aimed on the loop it is measured on: the sampled one (analyze knows only the continuous).
    if (const auto k = sampled_reference_gain(problem, k_ref, n, *spec.requirements.overshoot_max_pct - 1e-4)) {
      aimed = fmt::format("P gain whose overshoot on the sampled loop equals the limit (analyze's {:.4g} puts the "
                          "continuous loop's there)", problem.action * k_ref);
      k_ref = *k;
    } else {
      aimed += "; no gain near it puts the sampled loop's overshoot at the limit: analyze's gain is kept";
    }
  }
  Design ref = measure_and_confirm(problem, DesignRole::reference, make_controller(Structure::p, {k_ref}, n, problem.action));
  ref.notes.push_back(aimed);
  // peak_time_ratio reads the reference's peak time on the loop every design is measured on
  if (problem.sampled && ref.status == StepStatus::ok) run.problem.reference_peak_time_s = ref.simulated.peak_time_s;
  if (!run.characterization.reference_note.empty()) ref.notes.push_back(run.characterization.reference_note);
  run.designs.push_back(std::move(ref));
}

// The classical (root-locus) design at the target pole from the requirements; run.classical says
// what became of the hand method. Returns the controller (the search's first seed) when designed.
std::optional<Controller> add_classical_design(DesignRun& run) {
  const Problem& problem = run.problem;
  const Spec& spec = problem.spec;
  const Structure structure = spec.controller.structure;
  const double n = spec.controller.derivative_filter;
  std::optional<Controller> classical;
  std::vector<std::string>& classical_notes = run.classical.notes;
  run.target = desired_pole(problem, run.characterization);
  if (!run.target) {
    run.classical.failed_step = "target pole";
    run.classical.reason = "no time requirement to set its speed and no usable ζ-line crossing of the P-only locus (" +
                           run.characterization.dominant_reason + ")";
    classical_notes.push_back(run.classical.reason);
    return classical;
  }
  classical_notes.push_back(fmt::format("target dominant pole {:.4g} ± j{:.4g} ({})", run.target->pole.real(),
                                        run.target->pole.imag(), run.target->derivation));
  const double zeta = -run.target->pole.real() / std::abs(run.target->pole);
  // The hand rules work on the plant with direct action; the controller then takes the action.
  classical = classical_controller(problem.normalized_plant, structure, n, run.target->pole, zeta,
                                   spec.requirements.steady_state_error_max, classical_notes, &run.classical.failed_step);
  if (!classical) {
    run.classical.reason = classical_notes.back();
    return classical;
  }
  classical = make_controller(structure, classical->series, n, problem.action);
  Design d = measure_and_confirm(problem, DesignRole::classical, *classical);
  d.notes = classical_notes;
  run.designs.push_back(std::move(d));
  run.classical.designed = true;
  return classical;
}

// The ultimate-gain baseline by the Ziegler–Nichols rules (when the plant has an ultimate point and
// the rules cover the structure). Returns its controller (the search's second seed).
std::optional<Controller> add_ultimate_gain_design(DesignRun& run) {
  const Problem& problem = run.problem;
  const Structure structure = problem.spec.controller.structure;
  const double n = problem.spec.controller.derivative_filter;
  run.ultimate = ultimate_point(problem.normalized_plant);
  if (!run.ultimate) return std::nullopt;
  const auto form = ziegler_nichols(structure, *run.ultimate, n);
  if (!form) return std::nullopt;
  const auto series = series_from_standard(structure, *form);
  if (!series) return std::nullopt;
  Controller baseline = make_controller(structure, *series, n, problem.action);
  Design d = measure_and_confirm(problem, DesignRole::ultimate_gain, baseline);
  d.notes.push_back(fmt::format("Ziegler–Nichols closed-loop rules from Ku = {:.4g}, Tu = {:.4g} s",
                                problem.action * run.ultimate->gain, run.ultimate->period_s));
  run.designs.push_back(std::move(d));
  return baseline;
}

// The published rules (SIMC, AMIGO) on the plant's half-rule model: each design measured and
// confirmed like the ultimate-gain one; a rule that does not apply is kept with its reason.
void add_rule_designs(DesignRun& run) {
  const Problem& problem = run.problem;
  const RuleInputs in = tuning_rule_inputs(problem);
  for (const DesignRole role : {DesignRole::simc, DesignRole::amigo}) {
    RuleOutcome rule = role == DesignRole::simc ? simc_rule(problem.spec.plant, in) : amigo_rule(problem.spec.plant, in);
    screen_rule_loop(rule, problem.plant);
    if (rule.controller) {
      Design d = measure_and_confirm(problem, role, *rule.controller);
      d.notes.push_back(fmt::format("{} rules on the model {} ({}){}: {}", role == DesignRole::simc ? "SIMC" : "AMIGO",
                                    model_text(*rule.model), rule.model->exact ? "exact" : "half rule",
                                    rule.tau_c_s ? fmt::format(", τc = {:.4g} s ({})", *rule.tau_c_s, rule.tau_c_source) : "",
                                    rule.formula));
      run.designs.push_back(std::move(d));
    }
    run.rules.push_back(std::move(rule));
  }
}

// What the search stage hands on: its result, the optimized design measured and confirmed, whether
// the nonlinear stage ran, and the effects active for the linear optimum that decided it.
struct SearchOutcome {
  SearchResult result;
  Design best;
  bool nonlinear_stage = false;
  bool stage_adds_nothing = false;  // only linear effects acted and the linear optimum met everything on both loops
  std::vector<std::string> active;
};

// The search on the linear loop from the hand designs' seed, the optimum measured and confirmed;
// then, when an effect the linear loop leaves out acts for it (or search.simulate says so), the
// nonlinear stage, and the moved optimum measured and confirmed again.
SearchOutcome search_stage(const Problem& problem, const std::optional<Controller>& classical,
                           const std::optional<Controller>& baseline, SearchOptions options, RobustRun* robust,
                           unsigned jobs, const std::optional<std::vector<double>>& restart) {
  // Seed: a restart's point, else the classical design, else the ultimate-gain baseline, else the
  // middle of the bounds.
  std::vector<double> seed = restart      ? *restart
                             : classical ? search_vector(problem, *classical)
                             : baseline  ? search_vector(problem, *baseline)
                                         : middle_of_bounds(problem);
  SearchOutcome out;
  if (robust) {
    // A restart continues from the earlier active set with the refuting plants (the last ones).
    std::vector<std::size_t> start_active;
    if (restart) {
      start_active = robust->search.active;
      for (std::size_t i = robust->scenarios.size() - robust->refuting_added; i < robust->scenarios.size(); ++i)
        start_active.push_back(i);
    }
    out.result = optimize_over_scenarios(problem, robust->scenarios, seed, options, jobs, robust->search, start_active);
    // The nonlinear stage's linear tier then reads the final active set (or the yield's plants).
    options.robust_mode = problem.spec.uncertainty.mode;
    options.objective_at = problem.spec.search.objective_at;
    for (const std::size_t i : robust->search.active) options.scenarios.push_back(&robust->scenarios[i].problem);
    if (options.robust_mode == RobustMode::yield) {
      const auto samples = static_cast<double>(robust->search.active.size() - 1);
      options.yield_required = static_cast<std::size_t>(std::ceil(problem.spec.uncertainty.yield_min_pct / 100.0 * samples - 1e-9));
    }
  } else {
    out.result = optimize(problem, seed, options);
  }
  out.best = measure_and_confirm(problem, DesignRole::optimized, out.result.controller);
  // Which loop the search ends on, and which loop judges: the effects the linear loop leaves out
  // that act for the linear optimum, measured on its confirmation run.
  const SimulateMode mode = problem.spec.search.simulate;
  out.active = out.best.nonlinear ? out.best.nonlinear->active_effects : std::vector<std::string>{};
  SearchResult& result = out.result;
  result.summary.active_effects = out.active;
  // Only linear effects acting (the exact delay where the linear loop has its Padé approximant, a
  // load step superposed) with the linear optimum meeting every requirement on both loops: the
  // stage ranks designs that also meet every requirement on the linear loop first, which the linear
  // search already optimized, so it could only trade the approximant's error in the objective (it
  // moved no design of the demo, claims and regulator specs where this holds) at twice the cost of
  // the whole linear search with a load step.
  const bool linear_effects_only =
      !out.active.empty() && std::all_of(out.active.begin(), out.active.end(), [](const std::string& id) {
        return id == "delay" || id == "load_step";
      });
  const bool met_on_both = out.best.meets_all && out.best.nonlinear && out.best.nonlinear->meets_all;
  out.stage_adds_nothing = mode == SimulateMode::automatic && linear_effects_only && met_on_both;
  out.nonlinear_stage =
      mode == SimulateMode::nonlinear || (mode == SimulateMode::automatic && !out.active.empty() && !out.stage_adds_nothing);
  if (out.nonlinear_stage) {
    std::vector<std::vector<double>> hand;
    if (classical) hand.push_back(search_vector(problem, *classical));
    if (baseline) hand.push_back(search_vector(problem, *baseline));
    const SearchResult refined = refine_on_nonlinear_loop(problem, result, hand, options);
    if (search_vector(problem, refined.controller) != search_vector(problem, result.controller))
      out.best = measure_and_confirm(problem, DesignRole::optimized, refined.controller);
    result = refined;
    result.summary.active_effects = out.active;
  } else if (out.stage_adds_nothing) {
    result.summary.nonlinear_stage = fmt::format(
        "no nonlinear stage: the effects acting ({}) keep the loop linear and the linear optimum meets every "
        "requirement on both loops (the verdict is read on the loop the spec describes)",
        fmt::join(out.active, ", "));
  } else if (!out.active.empty()) {
    result.summary.nonlinear_stage = "no nonlinear stage: search.simulate = \"linear\" (the verdict is still read on the "
                                     "loop the spec describes)";
  } else {
    result.summary.nonlinear_stage = mode == SimulateMode::automatic
                                         ? "no nonlinear stage: no effect the linear loop leaves out acts for the linear "
                                           "optimum (the nonlinear loop is the linear one)"
                                         : "no nonlinear stage: search.simulate = \"linear\"";
  }
  return out;
}

// The optimized design's notes (its seed, the nonlinear stage) and warnings: the fragility of a
// searched design (a parameter on its bound), and a pass that holds only with the nonlinear
// loop's effects acting.
void review_optimized(const DesignRun& run, SearchOutcome& s, bool seeded_by_classical, bool seeded_by_baseline) {
  Design& best = s.best;
  best.notes.push_back(fmt::format("seeded by the {} design", seeded_by_classical ? "classical"
                                                                : seeded_by_baseline ? "ultimate-gain"
                                                                                     : "mid-bounds"));
  if (s.nonlinear_stage || s.stage_adds_nothing) best.notes.push_back(s.result.summary.nonlinear_stage);
  for (std::string& w : fragility_warnings(run.problem, best, true))
    if (std::find(best.warnings.begin(), best.warnings.end(), w) == best.warnings.end()) best.warnings.push_back(std::move(w));
  if (run.judged_on_nonlinear && best.nonlinear && best.nonlinear->meets_all && !best.meets_all) {
    // Met for the spec's step on the loop it describes, but not for steps small enough that
    // nothing saturates: true, and worth saying.
    std::vector<std::string> misses;
    for (const RequirementCheck& c : best.checks)
      if (!c.met)
        misses.push_back(fmt::format("{} {}", c.requirement.key,
                                     c.value ? fmt::format("{:.4g}{}", *c.value, c.requirement.unit.empty() ? "" : " " + c.requirement.unit)
                                             : std::string("none")));
    best.warnings.push_back(fmt::format(
        "on the linear loop — a step small enough that nothing saturates — this design misses {}: it meets the "
        "requirements for the spec's step of {:.4g} only with the effects of the loop it describes (limits, …) acting",
        fmt::join(misses, ", "), run.problem.spec.reference.amplitude));
  }
}

// The verdict: met or not, on the loop that judges, and when not, why (run.infeasibility; on the
// linear loop with the nearest reachable value of the binding requirement).
void judge(DesignRun& run, SearchOutcome& s, const SearchOptions& options) {
  Design& best = s.best;
  const SearchResult& result = s.result;
  if (run.judged_on_nonlinear) {
    // Judged on the loop the spec describes. Misses are that loop's; no second search.
    run.met = best.nonlinear && best.nonlinear->status == NonlinearStatus::ok && best.nonlinear->meets_all;
    if (run.met) return;
    Infeasibility info = collect_misses(best.nonlinear ? best.nonlinear->checks : std::vector<RequirementCheck>{});
    if (info.binding.empty()) info.binding = "the nonlinear simulation";
    info.nearest_text = fmt::format(
        "judged on the nonlinear loop ({}){}; the best reachable value is not searched there",
        s.active.empty() ? std::string("search.simulate = \"nonlinear\"") : fmt::format("active: {}", fmt::join(s.active, ", ")),
        best.meets_all ? "; the linear loop alone meets every requirement (a linear-only pass, which does not count)" : "");
    run.infeasibility = info;
    return;
  }
  // "Met" needs the search's own evaluation of its best point and the re-measurement of the
  // controller to agree: a best point the search rated unstable or infeasible is never met, even
  // if the re-measurement (another realization of the same loop) passes.
  // (A robust search's feasibility is over the scenario plants: the nominal verdict is the
  // measurement's, and the plants' claim is assess_robust's.)
  const bool search_feasible = result.summary.feasible || run.robust.has_value();
  run.met = best.meets_all && search_feasible;
  if (best.meets_all && !search_feasible) {
    Infeasibility info;
    info.binding = "search";
    info.nearest_text = fmt::format(
        "the search rated its best point {}, but the re-measured controller meets every requirement: the two "
        "evaluations of one loop disagree, which happens only at the edge of what the numerics resolve, so the "
        "design is not claimed as met",
        result.summary.best_violation > 0.0 ? "infeasible" : "unstable");
    best.notes.push_back(info.nearest_text);
    run.infeasibility = info;
  } else if (!best.meets_all) {
    run.infeasibility = analyze_misses(run.problem, best, result, options);
  }
}

// A final value far from r with no requirement saying how far it may be: say so.
void warn_final_value(DesignRun& run, Design& best) {
  const Problem& problem = run.problem;
  if (best.status != StepStatus::ok || problem.spec.requirements.steady_state_error_max ||
      !(std::abs(best.simulated.steady_state_error) > problem.band_fraction))
    return;
  const std::string w = fmt::format(
      "the optimized design's final value {:.4g} is {:.3g} % away from the reference {:.4g} (outside the ±{:.3g} % "
      "settling band around it), and no requirement limits the steady-state error: add steady_state_error_max, or a "
      "structure with integral action, if the output must follow the reference",
      best.simulated.final_value, 100.0 * std::abs(best.simulated.steady_state_error), problem.spec.reference.amplitude,
      100.0 * problem.band_fraction);
  best.notes.push_back("warning: " + w);
  run.warnings.push_back(w);
}

// Every design of the run over the scenario plants; the optimized one's claim joins the verdict.
void assess_robust(DesignRun& run, unsigned jobs) {
  RobustRun& robust = *run.robust;
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok && d.role != DesignRole::optimized) continue;
    const bool optimized = d.role == DesignRole::optimized;
    robust.assessments.push_back(
        assess_over_scenarios(robust, run.problem, d.role, d.controller, jobs, optimized, run.judged_on_nonlinear));
  }
  const RobustAssessment* best = robust.find(DesignRole::optimized);
  if (!best || best->holds || !run.met) {
    run.met = run.met && best && best->holds;
    return;
  }
  run.met = false;
  Infeasibility info;
  info.binding = "uncertainty";
  info.nearest_text = best->claim;
  run.infeasibility = info;
}

// Worst case met on the whole set but refuted by fresh plants: those plants (at most
// kMaxRefuting) join the set and a second, independent fresh sample replaces the first, for one
// more search. False when there is nothing to add (or it was done already).
bool add_refuting_plants(DesignRun& run) {
  RobustRun& robust = *run.robust;
  const RobustAssessment* a = robust.find(DesignRole::optimized);
  if (run.problem.spec.uncertainty.mode != RobustMode::worst_case || robust.verification_draw > 0 || !a || a->holds ||
      a->set_all.met != a->set_all.of || a->verification.met == a->verification.of)
    return false;
  for (std::size_t i = 0; i < a->verification_meets.size() && robust.refuting_added < kMaxRefuting; ++i)
    if (!a->verification_meets[i]) {
      Scenario s = robust.verification[i];
      s.kind = ScenarioKind::found;
      robust.scenarios.push_back(std::move(s));
      ++robust.refuting_added;
    }
  robust.verification_draw = 1;
  robust.verification = verification_plants(run.problem, robust.verification_draw);
  return true;
}

}  // namespace

DesignRun run_design(const Spec& spec, unsigned jobs) {
  DesignRun run = prepare_run(spec);
  if (spec.uncertainty.active()) {
    run.robust.emplace();
    run.robust->box = uncertainty_box(spec.uncertainty);
    run.robust->scenarios = scenario_set(run.problem);
    run.robust->verification = verification_plants(run.problem);
  }
  add_reference_design(run);
  const std::optional<Controller> classical = add_classical_design(run);
  const std::optional<Controller> baseline = add_ultimate_gain_design(run);
  add_rule_designs(run);
  const SearchOptions options = search_options(spec);
  const std::vector<std::string> warnings_before = run.warnings;
  std::optional<std::vector<double>> restart;
  std::optional<DesignRun> first;  // the run as judged before a second search
  for (;;) {
    SearchOutcome s = search_stage(run.problem, classical, baseline, options, run.robust ? &*run.robust : nullptr, jobs,
                                   restart);
    run.search = s.result.summary;
    run.judged_on_nonlinear = s.nonlinear_stage || !s.active.empty();
    run.met_on_linear = s.best.meets_all;
    review_optimized(run, s, classical.has_value(), baseline.has_value());
    judge(run, s, options);
    warn_final_value(run, s.best);
    run.designs.push_back(std::move(s.best));
    if (!run.robust) break;
    assess_robust(run, jobs);
    if (first) {
      // The second search did not meet every plant of its set: the first optimum, its verdict
      // and its verification stand (its refutation stated).
      if (!run.robust->search.converged) {
        const std::size_t added = run.robust->refuting_added;
        run = std::move(*first);
        run.robust->search.text += fmt::format(
            "; {} fresh plant(s) refuted this optimum; a second search with them in the set did not meet every plant "
            "of it, so this optimum and its verification stand", added);
      }
      break;
    }
    first = run;  // kept in case the second search does worse
    if (!add_refuting_plants(run)) break;
    // Fresh plants refuted the worst case: search again (from this optimum) with them in the set,
    // and judge afresh on a new sample. This attempt's verdict is undone.
    restart = search_vector(run.problem, run.designs.back().controller);
    run.designs.pop_back();
    run.robust->assessments.clear();
    run.met = false;
    run.infeasibility.reset();
    run.warnings = warnings_before;
  }
  if (run.robust && run.robust->refuting_added > 0 && run.robust->verification_draw > 0)
    run.robust->search.text += fmt::format("; a first optimum met every plant of the set but {} fresh plant(s) refuted "
                                           "it: they joined the set, this search started from that optimum, and the "
                                           "claim is verified on a second, independent fresh sample",
                                           run.robust->refuting_added);
  return run;
}

}  // namespace specloop
