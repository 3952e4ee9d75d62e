// The `design` pipeline: every design of a spec, measured the same way.
#include <cmath>
#include <fmt/format.h>

#include "specloop/design.hpp"

namespace specloop {

const Design* DesignRun::find(std::string_view name) const {
  for (const Design& d : designs)
    if (d.name == name) return &d;
  return nullptr;
}

SearchOptions search_options(const Spec& spec) {
  SearchOptions o;
  o.objective = spec.search.objective;
  o.seed = spec.search.seed;
  o.max_evaluations = spec.search.max_evaluations;
  o.max_time_s = spec.search.max_time_s;
  o.nonlinear_refinement = spec.search.simulate_nonlinear;
  return o;
}

namespace {

// Geometric middle of the bounds: the seed when no hand design exists.
std::vector<double> middle_of_bounds(const Problem& p) {
  std::vector<double> x;
  for (const auto& [lo, hi] : p.bounds) x.push_back(std::sqrt(lo * hi));
  return x;
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
  if (info.binding.empty()) {
    info.binding = "stability";
    info.nearest_text = "no stable design was found within the search bounds";
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
  const SearchResult nearest = optimize(relaxed, first.controller.series, o);
  const Design d = measure_design(relaxed, "nearest", nearest.controller);
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

}  // namespace

DesignRun run_design(const Spec& spec) {
  if (!spec.requirements.overshoot_max_pct)
    throw SpecError(spec.path + ": requirements.overshoot_max_pct: required by 'design' (the reference gain and the "
                                "classical design's ζ come from it)");
  DesignRun run;
  run.characterization = characterize(spec);
  run.problem = make_problem(spec, run.characterization);
  const Problem& problem = run.problem;
  if (spec.requirements.peak_time_ratio && !problem.reference_peak_time_s)
    throw SpecError(spec.path + ": requirements.peak_time_ratio: no reference peak time exists for this plant (" +
                    run.characterization.reference_note + "); use peak_time_max instead");
  const Structure structure = spec.controller.structure;
  const double n = spec.controller.derivative_filter;

  if (run.characterization.reference) {
    Design ref = measure_design(problem, "reference", make_controller(Structure::p, {run.characterization.reference->gain}, n));
    ref.notes.push_back("P gain whose simulated overshoot equals the limit (from analyze)");
    if (!run.characterization.reference_note.empty()) ref.notes.push_back(run.characterization.reference_note);
    run.designs.push_back(std::move(ref));
  }

  std::optional<Controller> classical;
  std::vector<std::string>& classical_notes = run.classical.notes;
  run.target = desired_pole(problem, run.characterization);
  if (run.target) {
    classical_notes.push_back(fmt::format("target dominant pole {:.4g} ± j{:.4g} ({})", run.target->pole.real(),
                                          run.target->pole.imag(), run.target->derivation));
    const double zeta = -run.target->pole.real() / std::abs(run.target->pole);
    classical = classical_controller(problem.plant, structure, n, run.target->pole, zeta,
                                     spec.requirements.steady_state_error_max, classical_notes,
                                     &run.classical.failed_step);
    if (classical) {
      Design d = measure_design(problem, "classical", *classical);
      d.notes = classical_notes;
      run.designs.push_back(std::move(d));
      run.classical.designed = true;
    } else {
      run.classical.reason = classical_notes.back();
    }
  } else {
    run.classical.failed_step = "target pole";
    run.classical.reason = "no time requirement to set its speed and no usable ζ-line crossing of the P-only locus (" +
                           run.characterization.dominant_reason + ")";
    classical_notes.push_back(run.classical.reason);
  }

  std::optional<Controller> baseline;
  run.ultimate = ultimate_point(problem.plant);
  if (run.ultimate) {
    if (const auto form = ziegler_nichols(structure, *run.ultimate, n)) {
      if (const auto series = series_from_standard(structure, *form)) {
        baseline = make_controller(structure, *series, n);
        Design d = measure_design(problem, "ultimate_gain", *baseline);
        d.notes.push_back(fmt::format("Ziegler–Nichols closed-loop rules from Ku = {:.4g}, Tu = {:.4g} s",
                                      run.ultimate->gain, run.ultimate->period_s));
        run.designs.push_back(std::move(d));
      }
    }
  }

  // Seed: the classical design, else the ultimate-gain baseline, else the middle of the bounds.
  std::vector<double> seed = classical ? classical->series : baseline ? baseline->series : middle_of_bounds(problem);
  const SearchOptions options = search_options(spec);
  const SearchResult result = optimize(problem, seed, options);
  run.search = result.summary;
  Design best = measure_design(problem, "optimized", result.controller);
  best.notes.push_back(fmt::format("seeded by the {} design", classical ? "classical" : baseline ? "ultimate-gain" : "mid-bounds"));
  run.judged_on_nonlinear = spec.search.simulate_nonlinear;
  if (run.judged_on_nonlinear) {
    // Tuned for the nonlinear loop: judged there. Misses are that loop's; no second search.
    best.notes.push_back(result.summary.nonlinear_stage);
    run.met = best.nonlinear && best.nonlinear->status == NonlinearStatus::ok && best.nonlinear->meets_all;
    if (!run.met) {
      Infeasibility info = collect_misses(best.nonlinear ? best.nonlinear->checks : std::vector<RequirementCheck>{});
      if (info.binding.empty()) info.binding = "the nonlinear simulation";
      info.nearest_text = "judged on the nonlinear loop (search.simulate = \"nonlinear\"); the best reachable value is not "
                          "searched in this mode";
      run.infeasibility = info;
    }
  } else {
    run.met = best.meets_all;
    if (!best.meets_all) run.infeasibility = analyze_misses(problem, best, result, options);
  }
  // A final value far from r with no requirement saying how far it may be: say so.
  if (best.status == StepStatus::ok && !spec.requirements.steady_state_error_max &&
      std::abs(best.simulated.steady_state_error) > problem.band_fraction) {
    const std::string w = fmt::format(
        "the optimized design's final value {:.4g} is {:.3g} % away from the reference {:.4g} (outside the ±{:.3g} % "
        "settling band around it), and no requirement limits the steady-state error: add steady_state_error_max, or a "
        "structure with integral action, if the output must follow the reference",
        best.simulated.final_value, 100.0 * std::abs(best.simulated.steady_state_error), spec.reference.amplitude,
        100.0 * problem.band_fraction);
    best.notes.push_back("warning: " + w);
    run.warnings.push_back(w);
  }
  run.designs.push_back(std::move(best));
  return run;
}

}  // namespace specloop
