// The confirmation stage (confirm.hpp): a measured design run on the loop the spec describes,
// its requirements checked again there, and the attribution of a degradation to the effects that
// acted.
#include "specloop/design/confirm.hpp"

#include <algorithm>
#include <cmath>
#include <fmt/format.h>
#include <limits>

#include "specloop/design/measure.hpp"
#include "specloop/design/nonlinear_loop.hpp"
#include "specloop/design/regulation.hpp"

namespace specloop {

namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
}  // namespace

std::string effect_description(std::string_view id) {
  if (id == "actuator_limits") return "actuator limits (the command goes beyond a limit)";
  if (id == "rate_limit") return "actuator rate limit (the actuator slews at it)";
  if (id == "sampling") return "sampled controller";
  if (id == "delay") return "exact transport delay (the linear loop has its Padé approximant)";
  if (id == "plant_nonlinearity") return "nonlinear plant model (the linear loop has its linearization)";
  if (id == "measurement_noise") return "measurement noise";
  if (id == "load_step") return "load step";
  return std::string(id);
}

namespace {

std::string show_value(const Requirement& req, const std::optional<double>& v) {
  return v ? fmt::format("{:.4g}{}", *v, req.unit.empty() ? "" : " " + req.unit) : std::string("none");
}

// An effect of the nonlinear loop that can be taken out of the setup to see what it costs.
struct Effect {
  const char* factor;
  const char* removed;
  void (*take_out)(NonlinearSetup&);
};

constexpr int kMaxAttributionRuns = 40;  // simulations per attribution, at most

// The limits count as reached when the command goes beyond one by more than rounding.
bool limits_reached(const Spec& spec, const NonlinearResult& r) {
  if (!spec.actuator.limited) return false;
  const double scale = std::max({1.0, std::abs(spec.actuator.min), std::abs(spec.actuator.max)});
  return r.command_excess_max > 1e-9 * scale;
}

// The effects the continuous linear loop leaves out that acted in the run `r` (ids); with
// `unfinished`, every one the spec has (the run cannot say which acted).
std::vector<std::string> active_effects_of(const Spec& spec, const NonlinearResult& r, double horizon,
                                           bool unfinished = false) {
  std::vector<std::string> out;
  if (unfinished ? spec.actuator.limited : limits_reached(spec, r)) out.emplace_back("actuator_limits");
  if (spec.actuator.rate_max && (unfinished || r.rate_limited_fraction > 0.0)) out.emplace_back("rate_limit");
  if (spec.controller.sample_time_s > 0.0) out.emplace_back("sampling");
  if (spec.plant.delay_s > 0.0) out.emplace_back("delay");
  if (spec.plant.nonlinear) out.emplace_back("plant_nonlinearity");
  if (spec.disturbance.noise_rms > 0.0) out.emplace_back("measurement_noise");
  if (spec.disturbance.size != 0.0 && spec.disturbance.time_s < horizon) out.emplace_back("load_step");
  return out;
}

// Attribution: the active effects taken out one at a time, then in combinations of growing size
// (supersets of a set that already restores skipped), at most kMaxAttributionRuns simulations.
// Returns the trials; `without` receives the words of the verdict.
std::vector<CauseTrial> attribute(const Problem& problem, const Design& d, const NonlinearSetup& setup,
                                  const std::vector<Effect>& effects, const std::vector<std::size_t>& degraded_index,
                                  std::string& words) {
  std::vector<CauseTrial> trials;
  const std::size_t k = effects.size();
  std::vector<unsigned> restoring;  // masks
  std::vector<std::string> restored_text, single_text;
  int runs = 0;
  bool truncated = false;
  for (std::size_t size = 1; size <= k; ++size) {
    for (unsigned mask = 1; mask < (1u << k); ++mask) {
      if (static_cast<std::size_t>(__builtin_popcount(mask)) != size) continue;
      if (std::any_of(restoring.begin(), restoring.end(), [&](unsigned r) { return (mask & r) == r; })) continue;
      if (runs >= kMaxAttributionRuns) {
        truncated = true;
        break;
      }
      ++runs;
      CauseTrial trial;
      NonlinearSetup reduced = setup;
      std::vector<std::string> removed;
      for (std::size_t i = 0; i < k; ++i) {
        if (!(mask & (1u << i))) continue;
        trial.factors.emplace_back(effects[i].factor);
        removed.emplace_back(effects[i].removed);
        effects[i].take_out(reduced);
      }
      trial.factor = fmt::format("{}", fmt::join(trial.factors, " + "));
      trial.removed = fmt::format("{}", fmt::join(removed, "; "));
      std::vector<std::string> values;
      try {
        const NonlinearResult rr = simulate_on_nonlinear_loop(problem, d.controller, reduced);
        trial.status = rr.status;
        if (rr.status == NonlinearStatus::ok && rr.measured) {
          trial.restores = true;
          for (std::size_t i : degraded_index) {
            const Requirement& req = problem.requirements[i];
            StepMetrics metrics = rr.metrics;
            if (problem.needs_load) fill_missing_load(metrics, d.simulated);
            RequirementCheck c = check_requirement(problem, req, metrics, d.margins);
            trial.restores = trial.restores && c.met;
            values.push_back(fmt::format("{} {}", req.key, show_value(req, c.value)));
            trial.checks.push_back(std::move(c));
          }
        }
      } catch (const std::invalid_argument&) {
        trial.status = NonlinearStatus::non_finite;
      }
      const std::string shown = values.empty() ? std::string("not measured") : fmt::format("{}", fmt::join(values, ", "));
      if (trial.restores) {
        restoring.push_back(mask);
        restored_text.push_back(fmt::format("{} ({})", trial.factor, shown));
      } else if (size == 1) {
        single_text.push_back(fmt::format("{} ({})", trial.factor, shown));
      }
      trials.push_back(std::move(trial));
    }
    if (truncated) break;
  }
  std::vector<std::string> parts;
  if (!restored_text.empty())
    parts.push_back(fmt::format("restored by taking out {}", fmt::join(restored_text, "; or ")));
  if (!single_text.empty())
    parts.push_back(fmt::format("not by taking out {} alone", fmt::join(single_text, "; nor ")));
  if (restored_text.empty())
    parts.push_back(truncated ? fmt::format("no combination restores it within {} runs", kMaxAttributionRuns)
                              : std::string("not even with every effect taken out together: the difference lies in "
                                            "the measurement (time resolution, horizon), not in an effect"));
  words = fmt::format("{}", fmt::join(parts, "; "));
  return trials;
}

// The run's facts, copied into the confirmation, with a note when its horizon was extended or
// reached the bound.
void take_run(const SettledRun& run, const NonlinearSetup& start, NonlinearConfirmation& nc) {
  const NonlinearResult& r = run.result;
  nc.status = r.status;
  if (r.noise_period_s > 0.0) nc.noise_period_s = r.noise_period_s;
  nc.tracking_time_s = r.tracking_time_s;
  nc.notes = r.notes;
  nc.difference_equation = r.difference_equation;
  nc.saturated_fraction = r.saturated_fraction;
  nc.rate_limited_fraction = r.rate_limited_fraction;
  nc.command_excess_max = r.command_excess_max;
  nc.integrator_held_fraction = r.integrator_held_fraction;
  nc.stepper = r.stepper;
  nc.horizon_s = run.setup.options.horizon_s;
  nc.horizon_bound_hit = run.bound_hit;
  if (run.extensions > 0 && !run.bound_hit)
    nc.notes.push_back(fmt::format("horizon extended to {:.4g} s ({:.0f}× the linear loop's {:.4g} s) until the response "
                                   "settled", nc.horizon_s, nc.horizon_s / start.options.horizon_s, start.options.horizon_s));
  if (run.bound_hit)
    nc.notes.push_back(fmt::format("the response had not settled by {:.4g} s ({:.0f}× the linear loop's horizon, the "
                                   "bound): metrics read on that horizon", nc.horizon_s, kMaxHorizonFactor));
}

// The requirements met on the linear loop and missed on the nonlinear one: in words, and their
// indices in the problem's list.
struct Degraded {
  std::vector<std::string> words;
  std::vector<std::size_t> index;
};

// Every requirement checked on the nonlinear run's metrics (nc.checks, meets_all, confirmed).
Degraded check_on_nonlinear_loop(const Problem& problem, const Design& d, NonlinearConfirmation& nc) {
  Degraded degraded;
  nc.meets_all = true;
  nc.confirmed = true;
  for (std::size_t i = 0; i < problem.requirements.size(); ++i) {
    const Requirement& req = problem.requirements[i];
    const RequirementCheck c = check_requirement(problem, req, nc.simulated, d.margins);
    nc.meets_all = nc.meets_all && c.met;
    // Strict: a requirement met on the linear loop and missed here, by any amount, degrades (the
    // nonlinear metrics locate extrema between samples, nonlinear.hpp; no resolution allowance).
    if (!c.met && d.checks[i].met) {
      nc.confirmed = false;
      degraded.words.push_back(fmt::format("{} {} on the linear loop, {} here", req.key,
                                           show_value(req, d.checks[i].value), show_value(req, c.value)));
      degraded.index.push_back(i);
    }
    nc.checks.push_back(c);
  }
  return degraded;
}

// What acted in the run, in words with the numbers: saturation (and the integrator held), the rate
// limit, the load step, noise, the exact delay, sampling, the plant model.
std::vector<std::string> effects_in_words(const Spec& spec, const NonlinearConfirmation& nc, const NonlinearResult& r) {
  const bool sampled = spec.controller.sample_time_s > 0.0;
  std::vector<std::string> causes;
  if (nc.saturated_fraction > 0.0 || limits_reached(spec, r)) {
    std::string text = fmt::format("the actuator saturates {:.1f} % of the time (the command runs up to {:.4g} beyond a limit",
                                   100.0 * nc.saturated_fraction, nc.command_excess_max);
    if (sampled) {
      const double periods = nc.saturated_fraction * nc.horizon_s / spec.controller.sample_time_s;
      text += fmt::format(", at {:.0f} sample{}", std::max(1.0, std::round(periods)), std::round(periods) > 1.0 ? "s" : "");
    }
    text += ")";
    if (nc.integrator_held_fraction > 0.0) {
      if (sampled) {
        const double held = std::round(nc.integrator_held_fraction * nc.horizon_s / spec.controller.sample_time_s);
        text += fmt::format("; the conditional integration held the integrator at {:.0f} sample{}", std::max(1.0, held),
                            held > 1.0 ? "s" : "");
      } else {
        text += fmt::format("; the conditional integration held the integrator {:.1f} % of the time",
                            100.0 * nc.integrator_held_fraction);
      }
    }
    causes.push_back(text);
  }
  if (nc.rate_limited_fraction > 0.0)
    causes.push_back(fmt::format("the actuator slews at its rate limit {:.1f} % of the time", 100.0 * nc.rate_limited_fraction));
  if (spec.disturbance.size != 0.0)
    causes.push_back(fmt::format("a load step of {:.4g} at t = {:.4g} s", spec.disturbance.size, spec.disturbance.time_s));
  if (spec.disturbance.noise_rms > 0.0)
    causes.push_back(fmt::format("measurement noise of {:.4g} rms", spec.disturbance.noise_rms));
  if (spec.plant.delay_s > 0.0)
    causes.push_back(fmt::format("the exact {:.4g} s delay (the linear loop used its Padé approximant)", spec.plant.delay_s));
  if (sampled) causes.push_back(fmt::format("sampling at {:.4g} s", spec.controller.sample_time_s));
  if (spec.plant.nonlinear)
    causes.push_back("the nonlinear plant model (the design used its linearization at the operating point)");
  return causes;
}

// The effects that acted in this run, each with the way to take it out of the setup (attribution).
std::vector<Effect> effects_to_take_out(const Spec& spec, const Design& d, const NonlinearConfirmation& nc,
                                        const NonlinearResult& r) {
  std::vector<Effect> effects;
  const bool limited = limits_reached(spec, r);
  if (limited)
    effects.push_back({"saturation", "actuator limits removed", [](NonlinearSetup& s) {
                         s.actuator.min = -kInf;
                         s.actuator.max = kInf;
                       }});
  const bool has_integral = d.controller.parallel && d.controller.parallel->ki != 0.0;
  if (limited && has_integral && spec.controller.anti_windup != AntiWindup::none &&
      (spec.controller.anti_windup == AntiWindup::back_calculation || nc.integrator_held_fraction > 0.0))
    effects.push_back({"anti-windup", "anti-windup off (limits kept)",
                       [](NonlinearSetup& s) { s.options.anti_windup = AntiWindup::none; }});
  if (spec.actuator.rate_max && nc.rate_limited_fraction > 0.0)
    effects.push_back({"rate limit", "rate limit removed", [](NonlinearSetup& s) { s.actuator.rate_max.reset(); }});
  if (spec.controller.sample_time_s > 0.0)
    effects.push_back({"sampling", "continuous controller", [](NonlinearSetup& s) { s.options.sample_time_s = 0.0; }});
  if (spec.plant.delay_s > 0.0) {
    if (spec.plant.nonlinear)
      effects.push_back({"delay", "no delay", [](NonlinearSetup& s) { s.options.delay_s = 0.0; }});
    else
      effects.push_back({"delay", "the delay's Padé approximant instead of the exact delay", [](NonlinearSetup& s) {
                           s.options.delay_s = 0.0;
                           s.delay_approximant = true;
                         }});
  }
  if (spec.disturbance.size != 0.0)
    effects.push_back({"load step", "no load step", [](NonlinearSetup& s) { s.options.disturbance_size = 0.0; }});
  if (spec.disturbance.noise_rms > 0.0)
    effects.push_back({"measurement noise", "no measurement noise", [](NonlinearSetup& s) { s.options.noise_rms = 0.0; }});
  if (spec.plant.nonlinear)
    effects.push_back({"plant nonlinearity", "the plant's linearization at the operating point",
                       [](NonlinearSetup& s) { s.options.plant_model.reset(); }});
  return effects;
}

}  // namespace

NonlinearConfirmation confirm_nonlinear(const Problem& problem, const Design& d) {
  const Spec& spec = problem.spec;
  NonlinearConfirmation nc;
  const NonlinearSetup start = nonlinear_setup(problem, d.linear_grid, kConfirmationSamples);
  SettledRun run;
  try {
    run = simulate_until_settled(problem, d.controller, start, kMaxHorizonFactor);
  } catch (const std::invalid_argument& e) {
    nc.status = NonlinearStatus::non_finite;
    nc.active_effects = active_effects_of(spec, NonlinearResult{}, start.options.horizon_s, true);
    nc.verdict = std::string("not confirmed: the nonlinear loop cannot be simulated (") + e.what() + ")";
    return nc;
  }
  const NonlinearResult& r = run.result;
  take_run(run, start, nc);
  if (r.status != NonlinearStatus::ok) {
    // The run did not finish, so nothing it measured can be trusted: every effect the spec has
    // counts as active (the verdict is then read on this loop, where it failed).
    nc.active_effects = active_effects_of(spec, r, nc.horizon_s, true);
    nc.verdict = fmt::format("not confirmed: the nonlinear simulation stopped ({}{})", status_name(r.status),
                             r.notes.empty() ? std::string() : ": " + r.notes.back());
    return nc;
  }
  if (!r.measured) {
    nc.status = NonlinearStatus::non_finite;
    nc.verdict = "not confirmed: the nonlinear run cannot be measured (the linear loop has no finite nonzero final "
                 "value to measure it against)";
    return nc;
  }
  nc.active_effects = active_effects_of(spec, r, nc.horizon_s);
  nc.simulated = r.metrics;
  if (problem.needs_load) fill_missing_load(nc.simulated, d.simulated);  // no load step: the linear loop's
  const Degraded degraded = check_on_nonlinear_loop(problem, d, nc);
  const std::vector<std::string> causes = effects_in_words(spec, nc, r);
  const std::string because = fmt::format("{}", fmt::join(causes, "; "));
  const std::string horizon_words =
      run.bound_hit ? fmt::format(" (not settled by {:.4g} s, the bound of the horizon)", nc.horizon_s) : std::string();
  if (nc.confirmed) {
    nc.verdict = (causes.empty() ? "confirmed: nothing saturates; the nonlinear loop matches the linear one"
                                 : "confirmed, with these in the loop: " + because) + horizon_words;
    return nc;
  }
  // Attribution over the effects that acted in this run.
  const std::vector<Effect> effects = effects_to_take_out(spec, d, nc, r);
  std::string words;
  if (!effects.empty()) nc.attribution = attribute(problem, d, run.setup, effects, degraded.index, words);
  else words = "no effect of the nonlinear loop acted: the difference lies in the measurement (time resolution, horizon)";
  nc.verdict = fmt::format("NOT confirmed: {}{}{} — {}", fmt::join(degraded.words, "; "), horizon_words,
                           causes.empty() ? "" : " — because " + because, words);
  return nc;
}

void confirm_design(const Problem& problem, Design& d) {
  if (d.status == StepStatus::ok) d.nonlinear = confirm_nonlinear(problem, d);
}

}  // namespace specloop
