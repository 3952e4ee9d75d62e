// Robust design (robust.hpp): the active-set search over the scenario plants, and a design's
// assessment over the set and a fresh verification sample.
#include "specloop/design/robust.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <memory>

#include "specloop/core/parallel.hpp"
#include "specloop/design/confirm.hpp"
#include "specloop/design/evaluate.hpp"

namespace specloop {

namespace {

constexpr double kInf = std::numeric_limits<double>::infinity();

double seconds_since(std::chrono::steady_clock::time_point t) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t).count();
}

/// Σ normalized violation of the tightened requirements on each plant of the set (inf: unstable).
std::vector<double> violations_on_set(const Problem& nominal, const std::vector<Scenario>& set, const SearchOptions& options,
                                      const std::vector<double>& params, unsigned jobs) {
  const unsigned workers = std::max(1u, std::min<unsigned>(jobs, static_cast<unsigned>(set.size())));
  std::vector<std::unique_ptr<CandidateEvaluator>> evaluators;
  for (unsigned w = 0; w < workers; ++w) evaluators.push_back(std::make_unique<CandidateEvaluator>(nominal, options));
  std::vector<double> v(set.size());
  parallel_for(set.size(), workers, [&](std::size_t i, unsigned worker) {
    const CandidateOutcome o = evaluators[worker]->evaluate(set[i].problem, params.data());
    v[i] = o.stable ? o.violation : kInf;
  });
  return v;
}

void add_summary(SearchSummary& total, const SearchSummary& round) {
  total.evaluations += round.evaluations;
  total.local_evaluations += round.local_evaluations;
  total.unstable += round.unstable;
  total.infeasible += round.infeasible;
}

std::vector<const Problem*> problems_of(const std::vector<Scenario>& set, const std::vector<std::size_t>& indices) {
  std::vector<const Problem*> out;
  for (const std::size_t i : indices) out.push_back(&set[i].problem);
  return out;
}

/// The least normalized room of a controller over the requirements on one plant (−inf: unstable).
double least_slack(const Problem& plant, const Controller& controller) {
  const Design d = measure_design(plant, DesignRole::optimized, controller);
  if (d.status != StepStatus::ok) return -kInf;
  double least = kInf;
  for (const RequirementCheck& c : d.checks) least = std::min(least, c.slack);
  return least;
}

/// When the set holds only some corners of the box (2^d > max_corners): from the corner where
/// the design has the least room, flip one key at a time to the corner with still less room, as
/// long as one is found (at most 4·d moves); each corner moved to joins the set. Returns how
/// many corners joined.
std::size_t add_worse_corners(const Problem& nominal, std::vector<Scenario>& set, const Controller& controller) {
  const UncertaintySpec& u = nominal.spec.uncertainty;
  const UncertaintyBox box = uncertainty_box(u);
  const std::size_t d = box.size();
  std::size_t corners = 0;
  for (const Scenario& s : set) corners += s.kind == ScenarioKind::corner ? 1 : 0;
  if (d < 63 && corners >= (std::size_t{1} << d)) return 0;  // every corner is in the set already
  std::optional<std::size_t> start;
  double room = kInf;
  for (std::size_t i = 0; i < set.size(); ++i)
    if (set[i].kind == ScenarioKind::corner) {
      const double r = least_slack(set[i].problem, controller);
      if (!start || r < room) start = i, room = r;
    }
  if (!start) return 0;
  std::vector<double> at = set[*start].values;
  std::size_t added = 0;
  for (std::size_t move = 0; move < 4 * d; ++move) {
    std::optional<Scenario> best;
    double best_room = room;
    for (std::size_t k = 0; k < d; ++k) {
      std::vector<double> values = at;
      values[k] = values[k] == box.low[k] ? box.high[k] : box.low[k];
      if (std::any_of(set.begin(), set.end(), [&](const Scenario& s) { return s.values == values; })) continue;
      Problem p = scenario_problem(nominal, values);
      const double r = least_slack(p, controller);
      if (r < best_room) {
        best_room = r;
        best = Scenario{ScenarioKind::corner, values, std::move(p)};
      }
    }
    if (!best) break;
    at = best->values;
    room = best_room;
    set.push_back(std::move(*best));
    ++added;
  }
  return added;
}

}  // namespace

SearchResult optimize_over_scenarios(const Problem& nominal, std::vector<Scenario>& set,
                                     const std::vector<double>& seed_parameters, SearchOptions options, unsigned jobs,
                                     RobustSearchLog& log, const std::vector<std::size_t>& start_active) {
  const auto start = std::chrono::steady_clock::now();
  const UncertaintySpec& u = nominal.spec.uncertainty;
  options.robust_mode = u.mode;
  options.objective_at = nominal.spec.search.objective_at;
  log = RobustSearchLog{};

  if (u.mode == RobustMode::yield) {
    // Every plant each time: the nominal one and the random samples (the yield is theirs).
    std::size_t samples = 0;
    for (std::size_t i = 0; i < set.size(); ++i)
      if (i == 0 || set[i].kind == ScenarioKind::sample) {
        log.active.push_back(i);
        samples += i == 0 ? 0 : 1;
      }
    options.scenarios = problems_of(set, log.active);
    options.yield_required = static_cast<std::size_t>(std::ceil(u.yield_min_pct / 100.0 * static_cast<double>(samples) - 1e-9));
    SearchResult result = optimize(nominal, seed_parameters, options);
    log.rounds = 1;
    log.scenario_evaluations = result.summary.evaluations * static_cast<int>(log.active.size());
    log.converged = result.summary.feasible;
    log.text = fmt::format("yield search over the nominal plant and {} random plants: at least {} of them ({} %) must meet "
                           "every requirement (tightened by the search margin) besides the nominal one; {}",
                           samples, options.yield_required, u.yield_min_pct,
                           log.converged ? "reached" : "not reached");
    result.summary.stop_reason += "; " + log.text;
    return result;
  }

  // Worst case: an active set, the nominal plant first, then the plants the seed misses on most.
  const int budget = options.max_evaluations;
  const double time_cap = options.max_time_s;
  log.active = start_active.empty() ? std::vector<std::size_t>{0} : start_active;
  const auto add_worst = [&](const std::vector<double>& v) {
    std::vector<std::size_t> missed;
    for (std::size_t i = 0; i < v.size(); ++i)
      if (v[i] > 0.0 && std::find(log.active.begin(), log.active.end(), i) == log.active.end()) missed.push_back(i);
    std::stable_sort(missed.begin(), missed.end(), [&](std::size_t a, std::size_t b) { return v[a] > v[b]; });
    for (std::size_t j = 0; j < missed.size() && j < kAddedPerRound; ++j) log.active.push_back(missed[j]);
    return !missed.empty();
  };
  if (start_active.empty()) add_worst(violations_on_set(nominal, set, options, seed_parameters, jobs));

  SearchResult result;
  SearchSummary total;
  std::vector<double> from = seed_parameters;
  bool global_next = start_active.empty();  // the first round searches globally (not a continuation); later ones locally, unless stuck
  bool global_retried = false;
  const int rounds = start_active.empty() ? kMaxRobustRounds : kMaxContinuationRounds;
  for (int round = 0; round < rounds; ++round) {
    options.scenarios = problems_of(set, log.active);
    options.local_only = !global_next;
    options.max_evaluations = global_next ? budget : std::max(100, static_cast<int>((1.0 - options.global_share) * budget));
    options.max_time_s = std::max(0.05, time_cap - seconds_since(start));
    SearchResult r = optimize(nominal, from, options);
    ++log.rounds;
    log.scenario_evaluations += r.summary.evaluations * static_cast<int>(log.active.size());
    if (round == 0) total = r.summary;
    else add_summary(total, r.summary);
    result = std::move(r);
    from = search_vector(nominal, result.controller);
    // The next round's other starts: the seed and the gentlest feasible designs of this one (a
    // lower effort tends to tolerate more plant variation).
    options.extra_starts = {seed_parameters};
    for (std::size_t j = 0; j < result.archive.size() && j < 3; ++j) options.extra_starts.push_back(result.archive[j].series);
    // Only some corners in the set: look for worse ones next to the worst (they join the set).
    log.corners_found += add_worse_corners(
        nominal, set, controller_from(nominal, from));
    const std::vector<double> v = violations_on_set(nominal, set, options, from, jobs);
    log.scenario_evaluations += static_cast<int>(set.size());
    log.converged = std::all_of(v.begin(), v.end(), [](double x) { return x == 0.0; });
    global_next = false;
    if (log.converged || seconds_since(start) >= time_cap) break;
    if (!add_worst(v)) {
      // Every plant it misses on is active already: the local stage is stuck. One global round more.
      if (global_retried) break;
      global_retried = global_next = true;
    }
  }
  // The totals of every round, the last round's verdict on its best point.
  total.feasible = result.summary.feasible;
  total.best_objective = result.summary.best_objective;
  total.best_violation = result.summary.best_violation;
  total.wall_time_s = seconds_since(start);
  log.text = fmt::format("worst-case search over {} plants: {} round(s) (global and local, or local from the previous "
                         "optimum), active set of {} plant(s){}; its optimum {} every requirement "
                         "(tightened by the search margin) on every plant of the set",
                         set.size(), log.rounds, log.active.size(),
                         log.corners_found ? fmt::format(", {} worse corner(s) found and added to the set", log.corners_found) : "",
                         log.converged ? "meets" : "does not meet");
  total.stop_reason = result.summary.stop_reason + "; " + log.text;
  result.summary = total;
  return result;
}

YieldCount yield_count(int met, int of) {
  YieldCount y{met, of, of > 0 ? 100.0 * met / of : 0.0, wilson_interval(met, of)};
  return y;
}

const RobustAssessment* RobustRun::find(DesignRole role) const {
  for (const RobustAssessment& a : assessments)
    if (a.role == role) return &a;
  return nullptr;
}

namespace {

ScenarioCheck check_on(const Problem& plant, DesignRole role, const Controller& controller) {
  const Design d = measure_design(plant, role, controller);
  return {d.status == StepStatus::ok, d.meets_all, d.checks};
}

std::string miss_text(const ScenarioCheck& c) {
  if (!c.stable) return "unstable";
  std::vector<std::string> missed;
  for (const RequirementCheck& r : c.checks)
    if (!r.met) missed.push_back(r.requirement.key);
  return fmt::format("misses {}", fmt::join(missed, ", "));
}

std::string interval_text(const YieldCount& y) {
  return fmt::format("{} of {} ({:.4g} %, 95 % interval {:.4g}–{:.4g} %)", y.met, y.of, y.pct, y.interval.low_pct,
                     y.interval.high_pct);
}

/// Worst value of each requirement over the stable plants of the set; the weakest plant.
void find_worst(const Problem& nominal, RobustAssessment& a) {
  double least = kInf;
  for (std::size_t i = 0; i < a.set.size(); ++i) {
    const ScenarioCheck& c = a.set[i];
    if (!c.stable) {
      if (!a.unstable_scenario) a.unstable_scenario = i;
      continue;
    }
    for (const RequirementCheck& r : c.checks) least = std::min(least, r.slack);
  }
  for (std::size_t q = 0; q < nominal.requirements.size(); ++q) {
    std::optional<WorstCase> worst;
    for (std::size_t i = 0; i < a.set.size(); ++i) {
      if (!a.set[i].stable || q >= a.set[i].checks.size()) continue;
      const RequirementCheck& r = a.set[i].checks[q];
      if (!worst || r.slack < worst->check.slack) worst = WorstCase{r, i};
    }
    if (worst) a.worst.push_back(*worst);
  }
  a.weakest_scenario = 0;
  if (a.unstable_scenario) a.weakest_scenario = *a.unstable_scenario;
  else
    for (std::size_t i = 0; i < a.set.size(); ++i)
      for (const RequirementCheck& r : a.set[i].checks)
        if (r.slack == least) {
          a.weakest_scenario = i;
          i = a.set.size() - 1;
          break;
        }
}

}  // namespace

RobustAssessment assess_over_scenarios(const RobustRun& robust, const Problem& nominal, DesignRole role,
                                       const Controller& controller, unsigned jobs, bool claimed,
                                       bool judged_on_nonlinear) {
  RobustAssessment a;
  a.role = role;
  const bool confirm_worst = claimed;
  const std::size_t n_set = robust.scenarios.size(), n_fresh = claimed ? robust.verification.size() : 0;
  std::vector<ScenarioCheck> all(n_set + n_fresh);
  parallel_for(all.size(), jobs, [&](std::size_t i, unsigned) {
    all[i] = check_on(i < n_set ? robust.scenarios[i].problem : robust.verification[i - n_set].problem, role, controller);
  });
  a.set.assign(all.begin(), all.begin() + static_cast<std::ptrdiff_t>(n_set));
  find_worst(nominal, a);

  int met = 0, sample_met = 0, samples = 0, fresh_met = 0;
  for (std::size_t i = 0; i < n_set; ++i) {
    met += a.set[i].meets_all ? 1 : 0;
    if (robust.scenarios[i].kind == ScenarioKind::sample) {
      ++samples;
      sample_met += a.set[i].meets_all ? 1 : 0;
    }
  }
  for (std::size_t i = 0; i < n_fresh; ++i) {
    const ScenarioCheck& c = all[n_set + i];
    fresh_met += c.meets_all ? 1 : 0;
    a.verification_meets.push_back(c.meets_all);
    if (!c.meets_all && a.verification_misses.size() < kMaxListed) a.verification_misses.emplace_back(i, miss_text(c));
  }
  a.set_all = yield_count(met, static_cast<int>(n_set));
  a.set_samples = yield_count(sample_met, samples);
  a.verification = yield_count(fresh_met, static_cast<int>(n_fresh));

  bool nonlinear_ok = true;
  if (confirm_worst) {
    for (const WorstCase& w : a.worst) {
      auto it = std::find_if(a.confirmations.begin(), a.confirmations.end(),
                             [&](const WorstConfirmation& c) { return c.scenario == w.scenario; });
      if (it == a.confirmations.end()) {
        Design d = measure_design(robust.scenarios[w.scenario].problem, role, controller);
        confirm_design(robust.scenarios[w.scenario].problem, d);
        a.confirmations.push_back({w.scenario, {}, std::move(d)});
        it = a.confirmations.end() - 1;
      }
      it->requirements.push_back(w.check.requirement.key);
    }
    for (const WorstConfirmation& c : a.confirmations)
      nonlinear_ok = nonlinear_ok && c.design.nonlinear && c.design.nonlinear->status == NonlinearStatus::ok &&
                     c.design.nonlinear->meets_all;
  }

  const UncertaintySpec& u = nominal.spec.uncertainty;
  if (!claimed) {
    // A design the run does not claim (the hand designs, for comparison): the scenario set only.
    a.holds = u.mode == RobustMode::worst_case ? a.set_all.met == a.set_all.of
                                               : !a.set.empty() && a.set[0].meets_all && a.set_samples.pct >= u.yield_min_pct;
    a.claim = fmt::format("on the scenario set (not verified on fresh plants): {} meet every requirement{}",
                          interval_text(a.set_all),
                          u.mode == RobustMode::yield ? fmt::format("; of its random plants {}", interval_text(a.set_samples))
                                                      : std::string());
    return a;
  }
  if (u.mode == RobustMode::worst_case) {
    a.holds = a.set_all.met == a.set_all.of && a.verification.met == a.verification.of &&
              (!judged_on_nonlinear || nonlinear_ok);
    a.claim = a.holds
                  ? fmt::format("worst case met: every requirement on all {} plants of the scenario set and on all {} "
                                "fresh random plants (95 % interval of the share that meets: {:.4g}–{:.4g} %)",
                                a.set_all.of, a.verification.of, a.verification.interval.low_pct,
                                a.verification.interval.high_pct)
                  : fmt::format("worst case not met: scenario set {}; fresh random plants {}{}",
                                interval_text(a.set_all), interval_text(a.verification),
                                judged_on_nonlinear && !nonlinear_ok ? "; a worst plant misses on the nonlinear loop" : "");
  } else {
    // The estimate decides; the interval says how sure it is, and the claim says both.
    a.holds = !a.set.empty() && a.set[0].meets_all && a.verification.pct >= u.yield_min_pct;
    const bool demonstrated = a.verification.interval.low_pct >= u.yield_min_pct;
    a.claim = fmt::format("yield {}: fresh random plants {}; the target is {} %{}{}", a.holds ? "met" : "not met",
                          interval_text(a.verification), u.yield_min_pct,
                          a.holds && !demonstrated
                              ? " (the estimate reaches it, but the interval's lower end does not: not demonstrated at "
                                "95 % confidence; raise search.margin_pct or verify_samples for that)"
                              : a.holds ? " (demonstrated at 95 % confidence: the interval's lower end is above it)" : "",
                          a.set[0].meets_all ? "" : "; the nominal plant misses");
  }
  return a;
}

}  // namespace specloop
