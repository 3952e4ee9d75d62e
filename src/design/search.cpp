// The NLopt search against the true simulated response.
//
// Variables are the structure's series parameters on a log scale. One evaluation
// (CandidateEvaluator, evaluate.hpp): parameters → controller polynomials → realization → closed
// loop → stability barrier (poles) → exact step simulation → metrics (→ margins when a
// requirement needs them) → violation and objective. The cost ranks candidates feasibility
// first: a feasible one costs objective/objective_at_seed (mapped monotonically below 1e4), an
// infeasible stable one 1e4·(1 + Σ normalized violations), an unstable one 1e9·(1 + how far right
// its rightmost pole is), so the search is steered back to stability, then to feasibility, then
// down the objective. (An additive penalty was measured too: it stalled on constraint
// boundaries, e.g. 45 % worse ITAE on the oven demo; see DEVELOPERS.md.) Feasibility is judged
// against the requirements tightened by the search's margin (requirements.hpp, `tightened`),
// with the settling band narrowed by it, so that the design returned keeps room on every limit.
#include <nlopt.hpp>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <fmt/format.h>
#include <limits>
#include <map>

#include "specloop/design/evaluate.hpp"
#include "specloop/design/nonlinear_loop.hpp"
#include "specloop/design/regulation.hpp"
#include "specloop/design/search.hpp"

namespace specloop {

namespace {

constexpr double kInfeasibleCost = 1e4;
constexpr double kUnstableCost = 1e9;
constexpr double kRefinementMaxSeconds = 0.25; // wall time per nonlinear evaluation (all its runs), at most
constexpr std::size_t kScreened = 16;          // archive points screened on the nonlinear loop, at most
constexpr std::size_t kNonlinearStarts = 3;    // Subplex starts of the nonlinear stage, at most

class CostFunction {
 public:
  CostFunction(const Problem& problem, const SearchOptions& options)
      : problem_(problem), options_(options), evaluator_(problem, options) {}

  struct Outcome : CandidateOutcome {
    double linear_violation = 0.0;  // nonlinear evaluations: the requirements missed on the linear loop
  };

  // Evaluates natural-unit parameters on the linear loop (the sampled one when the problem's
  // controller is sampled), on every scenario plant when there are some.
  Outcome evaluate(const double* params) {
    if (options_.scenarios.empty()) return {evaluator_.evaluate(problem_, params)};
    return options_.robust_mode == RobustMode::yield ? evaluate_yield(params) : evaluate_worst_case(params);
  }

  // SearchOptions::scenarios, worst-case (ScenarioJudgement in search.hpp).
  Outcome evaluate_worst_case(const double* params) {
    Outcome out;
    out.stable = true;
    double barrier = 0.0, objective = 0.0;
    const auto n = static_cast<double>(options_.scenarios.size());
    for (std::size_t i = 0; i < options_.scenarios.size(); ++i) {
      const CandidateOutcome o = evaluator_.evaluate(*options_.scenarios[i], params);
      if (!o.stable) {
        out.stable = false;
        barrier += std::min(o.objective / kUnstableCost, 2.0);
        continue;
      }
      out.violation += o.violation;
      out.effort_peak = std::max(out.effort_peak, o.effort_peak);
      if (i == 0 || options_.objective_at == ObjectiveAt::worst) objective = std::max(objective, o.objective);
    }
    if (!out.stable) {
      out.objective = kUnstableCost * (1.0 + barrier / n);
      out.violation = out.effort_peak = 0.0;
      return out;
    }
    out.objective = objective;
    return out;
  }

  // SearchOptions::scenarios, yield (ScenarioJudgement in search.hpp).
  Outcome evaluate_yield(const double* params) {
    Outcome out;
    const std::size_t n = options_.scenarios.size();
    violations_.resize(n);
    objectives_.resize(n);
    for (std::size_t i = 0; i < n; ++i) {
      const CandidateOutcome o = evaluator_.evaluate(*options_.scenarios[i], params);
      if (i == 0 && !o.stable) return {o};
      violations_[i] = o.stable ? o.violation : kUnstableScenarioViolation;
      objectives_[i] = o.stable ? o.objective : 0.0;
      if (o.stable) out.effort_peak = std::max(out.effort_peak, o.effort_peak);
    }
    out.stable = true;
    order_.resize(n - 1);
    for (std::size_t i = 1; i < n; ++i) order_[i - 1] = i;
    const std::size_t m = std::min(options_.yield_required, n - 1);
    std::stable_sort(order_.begin(), order_.end(), [&](std::size_t a, std::size_t b) { return violations_[a] < violations_[b]; });
    out.violation = violations_[0];
    out.objective = objectives_[0];
    for (std::size_t j = 0; j < m; ++j) {
      out.violation += violations_[order_[j]];
      if (options_.objective_at == ObjectiveAt::worst) out.objective = std::max(out.objective, objectives_[order_[j]]);
    }
    return out;
  }

  // The same outcome measured on the spec's nonlinear loop, exactly as the confirmation measures
  // it (the confirmation stage, confirm_nonlinear): the linear loop's horizon, the confirmation's samples,
  // extended until the response settles.
  Outcome evaluate_nonlinear(const double* params) {
    Outcome out;
    Controller c;
    try {
      c = controller_from(problem_, params);
    } catch (const std::invalid_argument&) {
      out.objective = kUnstableCost;
      return out;
    }
    const Outcome linear = evaluate(params);
    if (!linear.stable) {
      out.objective = kUnstableCost;
      return out;
    }
    out.linear_violation = linear.violation;
    const NonlinearSetup setup = nonlinear_setup(problem_, evaluator_.linear_grid(), kConfirmationSamples);
    SettledRun run;
    try {
      run = simulate_until_settled(problem_, c, setup, kMaxHorizonFactor, kRefinementMaxSeconds);
    } catch (const std::invalid_argument&) {
      out.objective = kUnstableCost;
      return out;
    }
    const NonlinearResult& r = run.result;
    if (r.status != NonlinearStatus::ok || !r.measured) {
      out.objective = kUnstableCost;
      return out;
    }
    out.stable = true;
    std::optional<Margins> margins;
    if (problem_.needs_margins) margins = design_margins(problem_, c.transfer, problem_.plant);
    StepMetrics metrics = r.metrics;
    if (problem_.needs_load) fill_missing_load(metrics, evaluator_.metrics());  // no load step in the run
    out.violation = evaluator_.violation(metrics, margins);
    out.objective = evaluator_.objective(metrics, margins, c.transfer, problem_.plant, run.setup.options.horizon_s);
    out.effort_peak = r.metrics.effort_peak;
    return out;
  }

  double cost(const Outcome& o) const {
    if (!o.stable) return o.objective;
    if (o.violation > 0.0) return kInfeasibleCost * (1.0 + o.violation);
    // Feasible: the objective relative to the seed's, mapped monotonically below kInfeasibleCost.
    return -kInfeasibleCost * std::expm1(-(o.objective / objective_scale_) / kInfeasibleCost);
  }

  // The nonlinear stage's ranking: feasible on the nonlinear loop first; among those, the ones
  // that also meet every requirement on the linear loop (steps small enough not to saturate)
  // before the ones that do not (by how much they miss there), then the objective. Without the
  // middle tier the stage drifts to designs that meet the spec's step only because the
  // actuator's limits clip a command tens of times too large (a conveyor PID went to Kp = 137
  // from 4, overshooting 59 % on any step small enough not to saturate).
  double stage_cost(const Outcome& o) const {
    if (!o.stable || o.violation > 0.0) return cost(o);
    constexpr double half = 0.5 * kInfeasibleCost;
    if (o.linear_violation > 0.0) return half * (1.0 + o.linear_violation / (1.0 + o.linear_violation));
    return -half * std::expm1(-(o.objective / objective_scale_) / half);
  }

  // NLopt entry: x is log(parameters).
  double operator()(const std::vector<double>& x) {
    for (std::size_t i = 0; i < x.size(); ++i) params_[i] = std::exp(x[i]);
    const Outcome o = evaluate(params_.data());
    ++evaluations;
    if (!o.stable) ++unstable;
    else if (o.violation > 0.0) ++infeasible;
    else keep(o);
    // A NaN would stall NLopt and never become the best point: rank it with the worst.
    double c = cost(o);
    if (!std::isfinite(c)) c = 2.0 * kUnstableCost;
    if (c < best_cost) {
      best_cost = c;
      best_x = x;
      best = o;
    }
    return c;
  }

  void set_objective_scale(double s) { objective_scale_ = s > 0.0 && std::isfinite(s) ? s : 1.0; }
  void resize(std::size_t n) { params_.resize(n); }

  // The best feasible point per tenth of a decade of peak effort.
  void keep(const Outcome& o) {
    if (!(o.effort_peak > 0.0) || !std::isfinite(o.effort_peak)) return;
    const int band = static_cast<int>(std::floor(10.0 * std::log10(o.effort_peak)));
    auto it = archive.find(band);
    if (it != archive.end() && it->second.objective <= o.objective) return;
    SearchCandidate& kept = archive[band];
    kept.series = params_;
    kept.objective = o.objective;
    kept.effort_peak = o.effort_peak;
  }

  int evaluations = 0, unstable = 0, infeasible = 0;
  double best_cost = std::numeric_limits<double>::infinity();
  std::vector<double> best_x;
  Outcome best;
  std::map<int, SearchCandidate> archive;

 private:
  const Problem& problem_;
  const SearchOptions& options_;
  CandidateEvaluator evaluator_;
  double objective_scale_ = 1.0;
  std::vector<double> params_;
  std::vector<double> violations_, objectives_;  // yield mode's workspace, per scenario
  std::vector<std::size_t> order_;
};

double nlopt_trampoline(const std::vector<double>& x, std::vector<double>&, void* data) {
  return (*static_cast<CostFunction*>(data))(x);
}

std::string result_text(nlopt::result r, const SearchOptions& o, int budget) {
  switch (r) {
    case nlopt::FTOL_REACHED:
      return fmt::format("converged: |Δcost|/cost ≤ {:.0e}", o.local_relative_tolerance);
    case nlopt::XTOL_REACHED:
      return fmt::format("converged: parameter steps ≤ {:.0e} (relative)", o.local_relative_tolerance);
    case nlopt::MAXEVAL_REACHED: return fmt::format("evaluation budget used ({} evaluations)", budget);
    case nlopt::MAXTIME_REACHED: return fmt::format("wall-time cap reached ({:.3g} s)", o.max_time_s);
    case nlopt::STOPVAL_REACHED: return "stop value reached";
    case nlopt::SUCCESS: return "converged";
    default: return fmt::format("NLopt returned code {}", static_cast<int>(r));
  }
}

}  // namespace

namespace {
nlopt::algorithm algorithm_named(const std::string& name) {
  const int code = nlopt_algorithm_from_string(name.c_str());
  if (code < 0) throw std::invalid_argument("unknown NLopt algorithm '" + name + "'");
  return static_cast<nlopt::algorithm>(code);
}
}  // namespace

SearchResult optimize(const Problem& problem, const std::vector<double>& seed_parameters, const SearchOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  const std::size_t dim = problem.parameters.size();
  CostFunction cost(problem, options);
  cost.resize(dim);

  std::vector<double> lower(dim), upper(dim), x(dim);
  for (std::size_t i = 0; i < dim; ++i) {
    lower[i] = std::log(problem.bounds[i].first);
    upper[i] = std::log(problem.bounds[i].second);
    x[i] = std::clamp(std::log(seed_parameters[i]), lower[i], upper[i]);
  }
  {
    std::vector<double> seed_natural(dim);
    for (std::size_t i = 0; i < dim; ++i) seed_natural[i] = std::exp(x[i]);
    const auto o = cost.evaluate(seed_natural.data());
    cost.set_objective_scale(o.stable ? o.objective : 1.0);
  }

  SearchSummary summary;
  nlopt::srand(options.seed);
  const int global_budget =
      options.local_only ? 0 : std::max(1, static_cast<int>(options.global_share * options.max_evaluations));
  const int local_budget = std::max(1, options.max_evaluations - global_budget);

  // Global stage: one or more algorithms over the whole box (a comma-separated list), each with
  // an equal share of the global budget, each starting from the best point so far. The best
  // point of each becomes a start of the local stage.
  summary.global_given = options.global_algorithm;
  summary.local_given = options.local_algorithm;
  std::vector<std::string> globals;
  for (std::size_t from = 0;;) {
    const std::size_t comma = options.global_algorithm.find(',', from);
    globals.push_back(options.global_algorithm.substr(from, comma - from));
    if (comma == std::string::npos) break;
    from = comma + 1;
  }
  std::vector<std::vector<double>> starts;
  double value = 0.0;
  nlopt::result global_result = nlopt::FAILURE;
  if (options.local_only) globals.clear();
  for (const std::string& name : globals) {
    nlopt::opt global(algorithm_named(name), static_cast<unsigned>(dim));
    summary.global_algorithm += std::string(summary.global_algorithm.empty() ? "" : "; ") + global.get_algorithm_name();
    global.set_lower_bounds(lower);
    global.set_upper_bounds(upper);
    global.set_min_objective(nlopt_trampoline, &cost);
    global.set_maxeval(std::max(1, global_budget / static_cast<int>(globals.size())));
    global.set_maxtime(options.max_time_s * options.global_share / static_cast<double>(globals.size()));
    std::vector<double> gx = cost.best_x.empty() ? x : cost.best_x;
    const double before = cost.best_cost;
    try {
      global_result = global.optimize(gx, value);
    } catch (const std::exception&) {
      // A stopped or failed global stage still leaves its best point in `cost`.
    }
    if (global_result == nlopt::MAXTIME_REACHED) summary.time_capped = true;
    if (!cost.best_x.empty() && (starts.empty() || cost.best_cost < before)) starts.push_back(cost.best_x);
  }
  summary.global_evaluations = cost.evaluations;

  // Local polish: subplex on the same cost, from each global algorithm's best point and from the
  // seed (the hand design often sits in a different basin), then once more from the best of
  // those; each start gets an equal share of the local budget.
  nlopt::opt local(algorithm_named(options.local_algorithm), static_cast<unsigned>(dim));
  summary.local_algorithm = local.get_algorithm_name();
  local.set_lower_bounds(lower);
  local.set_upper_bounds(upper);
  local.set_min_objective(nlopt_trampoline, &cost);
  local.set_ftol_rel(options.local_relative_tolerance);
  if (std::find(starts.begin(), starts.end(), x) == starts.end()) starts.push_back(x);
  for (const std::vector<double>& e : options.extra_starts) {
    if (e.size() != dim) continue;
    std::vector<double> lx(dim);
    for (std::size_t i = 0; i < dim; ++i) lx[i] = std::clamp(std::log(e[i]), lower[i], upper[i]);
    if (std::find(starts.begin(), starts.end(), lx) == starts.end()) starts.push_back(lx);
  }
  const int runs = static_cast<int>(starts.size()) + 1;
  nlopt::result local_result = nlopt::FAILURE;
  for (int run = 0; run < runs; ++run) {
    const double elapsed = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    if (elapsed >= options.max_time_s) {
      summary.time_capped = true;
      break;
    }
    local.set_maxtime(options.max_time_s - elapsed);
    local.set_maxeval(std::max(1, local_budget / runs));
    std::vector<double> lx = run < static_cast<int>(starts.size()) ? starts[static_cast<std::size_t>(run)] : cost.best_x;
    try {
      local_result = local.optimize(lx, value);
    } catch (const std::exception& e) {
      summary.stop_reason = std::string("local stage stopped: ") + e.what();
    }
    if (local_result == nlopt::MAXTIME_REACHED) summary.time_capped = true;
  }
  summary.local_evaluations = cost.evaluations - summary.global_evaluations;
  summary.evaluations = cost.evaluations;
  summary.unstable = cost.unstable;
  summary.infeasible = cost.infeasible;
  summary.wall_time_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  summary.feasible = cost.best.stable && cost.best.violation == 0.0;
  summary.best_objective = cost.best.objective;
  summary.best_violation = cost.best.violation;
  if (summary.stop_reason.empty())
    summary.stop_reason = fmt::format("global stage: {}; local stage: {}; best point {}",
                                      options.local_only ? std::string("skipped (local only)")
                                                         : result_text(global_result, options, global_budget),
                                      result_text(local_result, options, local_budget),
                                      summary.feasible     ? std::string("feasible")
                                      : !cost.best.stable ? std::string("unstable (no stable candidate was found)")
                                                           : fmt::format("infeasible (Σ normalized violation {:.3g})",
                                                                         summary.best_violation));

  summary.linear_loop = problem.sampled ? "sampled" : "continuous";
  summary.simulate = simulate_mode_name(problem.spec.search.simulate);
  const std::vector<double> best_x = cost.best_x.empty() ? x : cost.best_x;
  std::vector<double> best(dim);
  for (std::size_t i = 0; i < dim; ++i) best[i] = std::exp(best_x[i]);
  SearchResult result{controller_from(problem, best),
                      summary, {}};
  for (auto& [band, candidate] : cost.archive) result.archive.push_back(std::move(candidate));
  return result;
}

SearchResult refine_on_nonlinear_loop(const Problem& problem, const SearchResult& linear,
                                      const std::vector<std::vector<double>>& extra_starts, const SearchOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  auto elapsed = [&] { return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count(); };
  const std::size_t dim = problem.parameters.size();
  // search.max_time bounds the whole search: the stage gets what the linear stages left (at least 1 s).
  const double time_cap = std::max(1.0, options.max_time_s - linear.summary.wall_time_s);
  CostFunction cost(problem, options);
  cost.resize(dim);
  cost.set_objective_scale(linear.summary.best_objective);
  std::vector<double> lower(dim), upper(dim);
  for (std::size_t i = 0; i < dim; ++i) {
    lower[i] = std::log(problem.bounds[i].first);
    upper[i] = std::log(problem.bounds[i].second);
  }
  auto to_log = [&](const std::vector<double>& series) {
    std::vector<double> lx(dim);
    for (std::size_t i = 0; i < dim; ++i) lx[i] = std::clamp(std::log(series[i]), lower[i], upper[i]);
    return lx;
  };
  struct Stage {
    CostFunction* cost;
    std::vector<double> params, best_x;
    double best = std::numeric_limits<double>::infinity();
    CostFunction::Outcome best_outcome;
    int evaluations = 0;
    int budget = 0;
  } stage{&cost, std::vector<double>(dim), {}, std::numeric_limits<double>::infinity(), {}, 0, options.nonlinear_evaluations};
  auto evaluate = [](const std::vector<double>& lx, std::vector<double>&, void* data) {
    auto* st = static_cast<Stage*>(data);
    for (std::size_t i = 0; i < lx.size(); ++i) st->params[i] = std::exp(lx[i]);
    const CostFunction::Outcome o = st->cost->evaluate_nonlinear(st->params.data());
    const double c = st->cost->stage_cost(o);
    ++st->evaluations;
    if (c < st->best) {
      st->best = c;
      st->best_x = lx;
      st->best_outcome = o;
    }
    return c;
  };
  std::vector<double> unused;

  // Screening: the linear optimum, the extra starts (hand designs), and the archive across its
  // effort bands (gentle to aggressive designs, at most kScreened).
  std::vector<std::vector<double>> screen{to_log(search_vector(problem, linear.controller))};
  for (const auto& e : extra_starts)
    if (e.size() == dim) screen.push_back(to_log(e));
  const std::size_t n_archive = linear.archive.size();
  const std::size_t take = std::min(n_archive, kScreened);
  for (std::size_t j = 0; j < take; ++j) {
    const std::size_t i = take == 1 ? n_archive - 1 : j * (n_archive - 1) / (take - 1);
    screen.push_back(to_log(linear.archive[i].series));
  }
  std::vector<std::pair<double, std::vector<double>>> ranked;
  CostFunction::Outcome linear_outcome;  // the linear optimum measured on the nonlinear loop
  for (const auto& lx : screen) {
    if (stage.evaluations >= stage.budget || elapsed() > time_cap) break;
    if (std::any_of(ranked.begin(), ranked.end(), [&](const auto& r) { return r.second == lx; })) continue;
    ranked.emplace_back(evaluate(lx, unused, &stage), lx);
    if (ranked.size() == 1) linear_outcome = stage.best_outcome;
  }
  std::stable_sort(ranked.begin(), ranked.end(), [](const auto& a, const auto& b) { return a.first < b.first; });
  const int screened = stage.evaluations;

  // Subplex from the best screened points, then once more from the best of all.
  nlopt::opt local(algorithm_named(options.local_algorithm), static_cast<unsigned>(dim));
  local.set_lower_bounds(lower);
  local.set_upper_bounds(upper);
  local.set_min_objective(evaluate, &stage);
  local.set_ftol_rel(options.local_relative_tolerance);
  const std::size_t starts = std::min(kNonlinearStarts, ranked.size());
  const int runs = static_cast<int>(starts) + 1;
  const int per_run = std::max(1, (stage.budget - screened) / std::max(1, runs));
  double value = 0.0;
  bool capped = false;
  for (int run = 0; run < runs && stage.evaluations < stage.budget; ++run) {
    const double left = time_cap - elapsed();
    if (left <= 0.0) {
      capped = true;
      break;
    }
    local.set_maxtime(left);
    local.set_maxeval(std::min(per_run, stage.budget - stage.evaluations));
    std::vector<double> lx = run < static_cast<int>(starts) ? ranked[static_cast<std::size_t>(run)].second : stage.best_x;
    if (lx.empty()) break;
    try {
      if (local.optimize(lx, value) == nlopt::MAXTIME_REACHED) capped = true;
    } catch (const std::exception&) {
      // the best point so far stays in `stage`
    }
  }

  SearchResult out = linear;
  SearchSummary& summary = out.summary;
  summary.time_capped = linear.summary.time_capped || capped;
  summary.nonlinear_evaluations = stage.evaluations;
  summary.evaluations = linear.summary.evaluations + stage.evaluations;
  summary.wall_time_s = linear.summary.wall_time_s + elapsed();
  const std::vector<double> linear_x = to_log(search_vector(problem, linear.controller));
  const bool feasible = stage.best < kInfeasibleCost;
  const bool linear_feasible = linear_outcome.stable && linear_outcome.violation == 0.0;
  const std::string screened_words = fmt::format(
      "{} screened: the linear optimum, {} hand design(s) and {} points of the linear search from gentle to aggressive; "
      "then Subplex from the best {}", screened, screen.size() - 1 - take, take, starts);
  if (feasible && !stage.best_x.empty() && stage.best_x != linear_x) {
    std::vector<double> best(dim);
    for (std::size_t i = 0; i < dim; ++i) best[i] = std::exp(stage.best_x[i]);
    out.controller = controller_from(problem, best);
    summary.nonlinear_stage = fmt::format("nonlinear stage: {} evaluations on the nonlinear loop ({}) moved the design to "
                                          "one that meets every requirement there{}",
                                          stage.evaluations, screened_words,
                                          linear_feasible ? " with a better objective" : "");
  } else if (feasible) {
    summary.nonlinear_stage = fmt::format("nonlinear stage: {} evaluations on the nonlinear loop ({}) found nothing better "
                                          "than the linear optimum, which meets every requirement there",
                                          stage.evaluations, screened_words);
  } else {
    // Nothing meets the requirements on the nonlinear loop. The least-violating point of that
    // ranking tends to sit in a degenerate corner (a curing oven's went to 0.3° of phase margin),
    // so the well-conditioned linear optimum stays the recommendation; its misses are reported.
    summary.nonlinear_stage = fmt::format("nonlinear stage: {} evaluations on the nonlinear loop ({}) found no design that "
                                          "meets every requirement there; the linear optimum is kept",
                                          stage.evaluations, screened_words);
  }
  // The summary's best point is now the recommended design, measured on the nonlinear loop.
  const CostFunction::Outcome& chosen = feasible ? stage.best_outcome : linear_outcome;
  summary.feasible = feasible;
  summary.best_objective = chosen.stable ? chosen.objective : summary.best_objective;
  summary.best_violation = chosen.stable ? chosen.violation : summary.best_violation;
  return out;
}

SearchOptions search_options(const Spec& spec) {
  SearchOptions o;
  o.objective = spec.search.objective;
  o.seed = spec.search.seed;
  o.max_evaluations = spec.search.max_evaluations;
  o.max_time_s = spec.search.max_time_s;
  // The nonlinear stage gets a tenth of the linear budget, between 40 and 400 evaluations.
  o.nonlinear_evaluations = std::clamp(spec.search.max_evaluations / 10, 40, 400);
  return o;
}

std::string time_cap_advice(const SearchSummary& s, double max_time_s) {
  if (!s.time_capped) return "";
  return fmt::format("The search stopped on its wall-time cap (search.max_time = {:g} s) before its evaluation budget: a "
                     "longer search may find a design that meets; raise search.max_time.", max_time_s);
}

}  // namespace specloop
