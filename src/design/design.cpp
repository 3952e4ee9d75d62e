// Requirements as constraints, measured designs, the classical root-locus design and the
// ultimate-gain baseline. The NLopt search lives in search.cpp.
#include "specloop/design/design.hpp"

#include "specloop/sim/expression_plant.hpp"
#include "specloop/sim/sampled_loop.hpp"

#include <algorithm>
#include <boost/math/tools/roots.hpp>
#include <cmath>
#include <fmt/format.h>
#include <limits>
#include <chrono>
#include <numbers>

namespace specloop {

namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kDeg = 180.0 / std::numbers::pi;

}  // namespace

// ---- requirements -------------------------------------------------------------------------------

std::vector<Requirement> requirement_list(const Requirements& r) {
  std::vector<Requirement> out;
  auto add = [&](const std::optional<double>& v, const char* key, const char* unit, bool upper) {
    if (v) out.push_back({key, unit, upper, *v});
  };
  add(r.overshoot_max_pct, "overshoot_max_pct", "%", true);
  add(r.undershoot_max_pct, "undershoot_max_pct", "%", true);
  add(r.peak_time_ratio, "peak_time_ratio", "", true);
  add(r.peak_time_max_s, "peak_time_max", "s", true);
  add(r.settling_time_max_s, "settling_time_max", "s", true);
  add(r.rise_time_max_s, "rise_time_max", "s", true);
  add(r.steady_state_error_max, "steady_state_error_max", "", true);
  if (r.steady_state_error_max) out.back().magnitude = true;  // the signed error e∞ = (r − y∞)/r, |e∞| ≤ limit
  add(r.effort_max, "effort_max", "", true);
  add(r.phase_margin_min_deg, "phase_margin_min_deg", "deg", false);
  add(r.gain_margin_min_db, "gain_margin_min_db", "dB", false);
  add(r.sensitivity_peak_max, "sensitivity_peak_max", "", true);
  return out;
}

std::optional<double> effective_peak_time(const StepMetrics& m, double band_pct, double margin) {
  const bool visible = m.peak_time_s && m.overshoot_pct > band_pct * (1.0 + margin) &&
                       m.post_peak_dip_pct <= m.overshoot_pct * (1.0 - margin);
  if (!visible) return m.settling_time_s;
  // With a margin, a later hump within the margin's fraction of the overshoot (beyond the tie
  // tolerance) counts as the peak too: the search keeps away from the knife edge where two humps
  // trade places under a tiny change of the plant.
  if (margin > 0.0 && m.next_peak_time_s &&
      m.next_peak_gap_pct <= kPeakTieFraction * 100.0 + margin * m.overshoot_pct)
    return m.next_peak_time_s;
  return m.peak_time_s;
}

std::optional<double> requirement_value(const Requirement& r, const StepMetrics& m,
                                        const std::optional<Margins>& margins,
                                        const std::optional<double>& reference_peak_time_s, double band_pct,
                                        double margin) {
  const std::string& k = r.key;
  if (k == "overshoot_max_pct") return m.overshoot_pct;
  if (k == "undershoot_max_pct") return m.undershoot_pct;
  if (k == "peak_time_ratio") {
    const auto tp = effective_peak_time(m, band_pct, margin);
    if (!tp || !reference_peak_time_s) return std::nullopt;
    return *tp / *reference_peak_time_s;
  }
  if (k == "peak_time_max") return effective_peak_time(m, band_pct, margin);
  if (k == "settling_time_max") return m.settling_time_s;
  if (k == "rise_time_max") return m.rise_time_s;
  if (k == "steady_state_error_max") return m.steady_state_error;  // signed; the bound is on |e∞|
  // the controller's output: on the nonlinear loop before the actuator's limits (a design that
  // rides the saturation does not meet effort_max by clipping), on the linear loop u itself
  if (k == "effort_max") return m.command_peak.value_or(m.effort_peak);
  if (!margins) return std::nullopt;
  if (k == "phase_margin_min_deg") return margins->phase_margin_deg.value_or(kInf);
  if (k == "gain_margin_min_db") {
    // The gain may move either way by the limit: the smaller of the upper margin and the
    // magnitude of the lower one (a conditionally stable loop).
    const double upper = margins->gain_margin_db.value_or(kInf);
    return margins->lower_gain_margin_db ? std::min(upper, -*margins->lower_gain_margin_db) : upper;
  }
  if (k == "sensitivity_peak_max") return margins->sensitivity_peak;
  throw std::logic_error("requirement_value: unknown requirement " + k);
}

Requirement tightened(const Requirement& r, double margin) {
  Requirement t = r;
  t.limit = r.upper ? r.limit - margin * std::abs(r.limit) : r.limit + margin * std::abs(r.limit);
  return t;
}

double tracking_objective(Objective objective, const StepMetrics& m, double amplitude, double window_s) {
  const double offset = std::abs(amplitude - m.final_value);
  switch (objective) {
    case Objective::itae: return m.itae + offset * window_s * window_s / 2.0;
    case Objective::iae: return m.iae + offset * window_s;
    case Objective::ise: return m.ise + offset * offset * window_s;
    default: break;
  }
  throw std::logic_error("tracking_objective: only itae, iae and ise are tracking integrals");
}

double requirement_violation(const Requirement& r, const std::optional<double>& value) {
  if (!value) return 1.0;
  // A zero limit (steady-state error 0) is scaled by 1 % so that a miss is measurable.
  const double scale = r.limit != 0.0 ? std::abs(r.limit) : 0.01;
  const double read = r.magnitude ? std::abs(*value) : *value;
  const double v = std::isinf(read) ? (read > 0 ? kInf : -kInf) : read;
  const double miss = r.upper ? (v - r.limit) / scale : (r.limit - v) / scale;
  if (std::isinf(miss)) return miss > 0 ? 1e3 : 0.0;
  // Exact zero steady-state error is computed to ~1e-12; count that as met.
  return miss > 1e-9 ? miss : 0.0;
}

double requirement_slack(const Requirement& r, const std::optional<double>& value) {
  if (!value) return -1.0;
  const double scale = r.limit != 0.0 ? std::abs(r.limit) : 0.01;
  const double read = r.magnitude ? std::abs(*value) : *value;
  const double v = std::isinf(read) ? (read > 0 ? kInf : -kInf) : read;
  const double room = r.upper ? (r.limit - v) / scale : (v - r.limit) / scale;
  return std::isinf(room) ? (room > 0 ? 1e3 : -1e3) : room;
}

std::string shown_value(const RequirementCheck& c) {
  if (!c.value) return "—";
  const double v = *c.value;
  if (std::isinf(v)) return v > 0 ? "∞" : "−∞";
  int digits = 4;
  if (!c.met) {
    // A miss never reads as the limit itself (tables show the limit in its shortest form).
    const double read = c.requirement.magnitude ? std::abs(v) : v;
    while (digits < 17 && std::stod(fmt::format("{:.{}g}", read, digits)) == c.requirement.limit) ++digits;
  }
  return fmt::format("{:.{}g}", v, digits);
}

std::string tightest_requirement(const std::vector<RequirementCheck>& checks) {
  std::string name;
  double least = kInf;
  for (const RequirementCheck& c : checks) {
    if (!c.met || !c.value) continue;
    if (c.requirement.limit == 0.0 && std::abs(*c.value) <= 1e-9) continue;
    const double room = requirement_slack(c.requirement, c.value);
    if (room < least) {
      least = room;
      name = c.requirement.key;
    }
  }
  return name;
}

// ---- problem ------------------------------------------------------------------------------------

Problem make_problem(const Spec& spec, const Characterization& ch) {
  Problem p;
  p.spec = spec;
  p.plant = linear_plant(spec);
  p.action = loop_action(p.plant);
  p.normalized_plant = TransferFunction(p.action * p.plant.numerator, p.plant.denominator);
  p.plant_realization = realize(p.plant);
  p.delay_free_realization =
      spec.plant.delay_s > 0.0
          ? realize(TransferFunction(Polynomial(spec.plant.numerator), Polynomial(spec.plant.denominator)))
          : p.plant_realization;
  if (ch.reference && ch.reference->simulated.peak_time_s) p.reference_peak_time_s = ch.reference->simulated.peak_time_s;
  p.requirements = requirement_list(spec.requirements);
  p.band_fraction = spec.requirements.settling_band_pct / 100.0;
  p.needs_margins = spec.search.objective == Objective::sensitivity_peak ||
                    std::any_of(p.requirements.begin(), p.requirements.end(), [](const Requirement& r) {
                      return r.key == "phase_margin_min_deg" || r.key == "gain_margin_min_db" ||
                             r.key == "sensitivity_peak_max";
                    });
  const Structure s = spec.controller.structure;
  p.parameters = structure_parameters(s);

  // Default bounds: frequencies over the plant's pole/zero scale widened by decades on both
  // sides; gains around the reference gain (or the plant's inverse magnitude at its scale).
  double w_lo = kInf, w_hi = 0.0;
  for (const auto* list : {&spec.plant.poles, &spec.plant.zeros})
    for (const Complex& z : *list)
      if (std::abs(z) > 0.0) {
        w_lo = std::min(w_lo, std::abs(z));
        w_hi = std::max(w_hi, std::abs(z));
      }
  if (!(w_hi > 0.0)) w_lo = w_hi = 1.0;
  double k_scale = 0.0;
  if (ch.reference) k_scale = ch.reference->gain;
  else if (ch.dominant) k_scale = ch.dominant->gain;
  else k_scale = 1.0 / std::abs(p.plant(Complex(0.0, std::sqrt(w_lo * w_hi))));
  if (!(k_scale > 0.0) || !std::isfinite(k_scale)) k_scale = 1.0;

  // The tracking window W: the horizon of the reference P loop's step response (its slowest mode
  // decayed to 1e-4 of its size), else of the P loop at the dominant crossing, else the settling
  // time limit, else the time the slowest plant pole or zero needs to decay to 1e-4.
  p.search_margin = spec.search.margin_pct / 100.0;
  p.tracking_window_s = std::log(1e4) / w_lo;
  if (spec.requirements.settling_time_max_s) p.tracking_window_s = *spec.requirements.settling_time_max_s;
  const GainPoint* anchor = ch.reference ? &*ch.reference : ch.dominant ? &*ch.dominant : nullptr;
  if (anchor) {
    StepSimulator sim;
    StepMetrics m;
    if (sim.simulate(close_loop(p.plant_realization, static_gain(anchor->gain)), spec.reference.amplitude,
                     p.band_fraction, m) == StepStatus::ok)
      p.tracking_window_s = sim.grid().horizon_s();
  }
  const double n = spec.controller.derivative_filter;
  for (const ParameterInfo& info : p.parameters) {
    std::pair<double, double> b;
    if (info.name == "gain") b = {k_scale * 1e-3, k_scale * 1e3};
    else if (info.name == "ratio" || info.name == "lag_ratio") b = {1.05, 100.0};
    else if (info.name == "zero_damping") b = {pid_min_zero_damping(n) * 1.0001, 20.0};
    else b = {w_lo * 1e-3, w_hi * 10.0};
    for (const auto& [name, range] : spec.search.bounds)
      if (name == info.name) b = range;
    p.bounds.push_back(b);
  }
  // The sampled loop needs a strictly proper plant (no algebraic loop through the hold); a
  // biproper plant keeps the continuous loop (the nonlinear loop refuses it too, with a note).
  p.sampled = spec.controller.sample_time_s > 0.0 && p.plant_realization.D(0) == 0.0;
  return p;
}

// ---- measuring a design -------------------------------------------------------------------------

namespace {
std::optional<Complex> slowest_complex_pair(const std::vector<Complex>& poles) {
  std::optional<Complex> best;
  for (const Complex& p : poles)
    if (p.imag() > 0.0 && (!best || p.real() > best->real())) best = p;
  return best;
}
}  // namespace

NonlinearResult simulate_on_nonlinear_loop(const Problem& problem, const Controller& controller, const NonlinearSetup& setup) {
  return simulate_nonlinear(setup.delay_approximant ? problem.plant_realization : problem.delay_free_realization,
                            controller, setup.actuator, setup.options, problem.spec.reference.amplitude,
                            problem.band_fraction);
}

LinearGrid linear_grid_of(const TimeGrid& grid) {
  LinearGrid g;
  g.horizon_s = grid.horizon_s();
  if (grid.coarse_intervals > 0) {
    g.fine_step_s = grid.step_s;
    g.fine_until_s = grid.step_s * grid.fine_intervals;
  }
  return g;
}

void set_output_times(NonlinearSetup& setup) {
  LoopOptions& o = setup.options;
  o.sample_times_s.clear();
  if (!(setup.fine_step_s > 0.0) || !(o.output_step_s > 4.0 * setup.fine_step_s)) return;
  const double horizon = o.horizon_s;
  const double count = std::ceil(horizon / o.output_step_s - 1e-9);
  const auto uniform = static_cast<long>(count);
  const double until = std::min(setup.fine_until_s, horizon);
  const auto fine = static_cast<long>(std::floor(until / setup.fine_step_s + 1e-9));
  o.sample_times_s.reserve(static_cast<std::size_t>(uniform + fine + 2));
  long i = 0, j = 0;
  while (i <= uniform || j <= fine) {
    const double a = i <= uniform ? horizon * static_cast<double>(i) / static_cast<double>(uniform) : kInf;
    const double b = j <= fine ? setup.fine_step_s * static_cast<double>(j) : kInf;
    const double next = std::min(a, b);
    if (a == next) ++i;
    if (b == next) ++j;
    if (next > horizon) continue;
    if (!o.sample_times_s.empty() && next <= o.sample_times_s.back() * (1.0 + 1e-12)) continue;
    o.sample_times_s.push_back(next);
  }
  if (o.sample_times_s.back() < horizon) o.sample_times_s.push_back(horizon);
}

NonlinearSetup nonlinear_setup(const Problem& problem, const LinearGrid& grid, int samples) {
  NonlinearSetup setup = nonlinear_setup(problem, grid.horizon_s, samples);
  if (grid.fine_step_s > 0.0 && setup.options.output_step_s > 4.0 * grid.fine_step_s) {
    setup.fine_step_s = grid.fine_step_s;
    setup.fine_until_s = grid.fine_until_s;
    setup.options.first_step_s = grid.fine_step_s;
    set_output_times(setup);
  }
  return setup;
}

namespace {
// Settled: within the band for at least the last fifth of the time since the last excitation.
bool settled_in(const NonlinearResult& r, const NonlinearSetup& setup) {
  if (r.status != NonlinearStatus::ok || !r.measured) return true;  // nothing a longer run would change
  const double horizon = setup.options.horizon_s;
  const LoopOptions& o = setup.options;
  const double since = o.disturbance_size != 0.0 && o.disturbance_time_s < horizon ? o.disturbance_time_s : 0.0;
  return r.metrics.settling_time_s && horizon - *r.metrics.settling_time_s >= 0.2 * (horizon - since);
}
}  // namespace

SettledRun simulate_until_settled(const Problem& problem, const Controller& controller, const NonlinearSetup& setup,
                                  double max_factor, double wall_cap_s) {
  const auto started = std::chrono::steady_clock::now();
  const double start_horizon = setup.options.horizon_s;
  const double start_step = setup.options.output_step_s;
  const double start_samples = start_step > 0.0 ? start_horizon / start_step : 4000.0;
  SettledRun run;
  run.setup = setup;
  for (;;) {
    const double spent = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
    run.setup.options.max_wall_time_s = std::max(1e-3, std::min(setup.options.max_wall_time_s, wall_cap_s - spent));
    run.result = simulate_on_nonlinear_loop(problem, controller, run.setup);
    if (settled_in(run.result, run.setup)) return run;
    if (run.setup.options.horizon_s * 2.0 > start_horizon * max_factor * (1.0 + 1e-12)) {
      run.bound_hit = true;
      return run;
    }
    ++run.extensions;
    run.setup.options.horizon_s *= 2.0;
    // The same output step while the samples grow to 4×; then the same count.
    const double samples = std::min(4.0 * start_samples, run.setup.options.horizon_s / start_step);
    run.setup.options.output_step_s = run.setup.options.horizon_s / std::ceil(samples);
    set_output_times(run.setup);
  }
}

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

NonlinearSetup nonlinear_setup(const Problem& problem, double linear_horizon_s, int samples) {
  const Spec& spec = problem.spec;
  NonlinearSetup setup;
  // A nonlinear plant runs in deviation variables around its operating point: the spec's absolute
  // actuator limits become deviations from u0 (the spec parser checked that they bracket u0).
  const double u0 = spec.plant.nonlinear ? spec.plant.nonlinear->input : 0.0;
  if (spec.actuator.limited) {
    setup.actuator.min = spec.actuator.min - u0;
    setup.actuator.max = spec.actuator.max - u0;
  }
  setup.actuator.rate_max = spec.actuator.rate_max;
  LoopOptions& options = setup.options;
  if (spec.plant.nonlinear) options.plant_model = spec.plant.nonlinear->model;
  options.anti_windup = spec.controller.anti_windup;
  options.setpoint_weight = spec.controller.setpoint_weight;
  options.derivative_weight = spec.controller.derivative_on_measurement ? 0.0 : 1.0;
  options.tracking_time_s = spec.controller.tracking_time_s;
  options.disturbance_time_s = spec.disturbance.time_s;
  options.disturbance_size = spec.disturbance.size;
  options.noise_rms = spec.disturbance.noise_rms;
  options.noise_period_s = spec.disturbance.noise_period_s;
  options.noise_seed = spec.disturbance.noise_seed;
  // The linear horizon, stretched so that a disturbance has as long to settle as the step had,
  // and by the delay.
  options.horizon_s = linear_horizon_s;
  if (spec.disturbance.size != 0.0) options.horizon_s = spec.disturbance.time_s + linear_horizon_s;
  options.delay_s = spec.plant.delay_s;
  options.sample_time_s = spec.controller.sample_time_s;
  options.horizon_s += spec.plant.delay_s;
  options.output_step_s = options.horizon_s / samples;
  return setup;
}

namespace {

// A requirement read off a measured response.
RequirementCheck check_requirement(const Problem& problem, const Requirement& req, const StepMetrics& m,
                                   const std::optional<Margins>& margins) {
  RequirementCheck c;
  c.requirement = req;
  c.value = requirement_value(req, m, margins, problem.reference_peak_time_s, problem.band_fraction * 100.0);
  c.violation = requirement_violation(req, c.value);
  c.slack = requirement_slack(req, c.value);
  c.met = c.violation == 0.0;
  return c;
}

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
            RequirementCheck c = check_requirement(problem, req, rr.metrics, d.margins);
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

// The nonlinear loop of the spec for a design whose linear loop is stable.
NonlinearConfirmation confirm_nonlinear(const Problem& problem, const Design& d, const LinearGrid& grid) {
  const Spec& spec = problem.spec;
  NonlinearConfirmation nc;
  const NonlinearSetup start = nonlinear_setup(problem, grid, kConfirmationSamples);
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
  const NonlinearSetup& setup = run.setup;
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
  nc.horizon_s = setup.options.horizon_s;
  nc.horizon_bound_hit = run.bound_hit;
  if (run.extensions > 0 && !run.bound_hit)
    nc.notes.push_back(fmt::format("horizon extended to {:.4g} s ({:.0f}× the linear loop's {:.4g} s) until the response "
                                   "settled", nc.horizon_s, nc.horizon_s / start.options.horizon_s, start.options.horizon_s));
  if (run.bound_hit)
    nc.notes.push_back(fmt::format("the response had not settled by {:.4g} s ({:.0f}× the linear loop's horizon, the "
                                   "bound): metrics read on that horizon", nc.horizon_s, kMaxHorizonFactor));
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
  nc.meets_all = true;
  nc.confirmed = true;
  std::vector<std::string> degraded;
  std::vector<std::size_t> degraded_index;
  for (std::size_t i = 0; i < problem.requirements.size(); ++i) {
    const Requirement& req = problem.requirements[i];
    const RequirementCheck c = check_requirement(problem, req, nc.simulated, d.margins);
    nc.meets_all = nc.meets_all && c.met;
    // Strict: a requirement met on the linear loop and missed here, by any amount, degrades (the
    // nonlinear metrics locate extrema between samples, nonlinear.hpp; no resolution allowance).
    if (!c.met && d.checks[i].met) {
      nc.confirmed = false;
      degraded.push_back(fmt::format("{} {} on the linear loop, {} here", req.key, show_value(req, d.checks[i].value),
                                     show_value(req, c.value)));
      degraded_index.push_back(i);
    }
    nc.checks.push_back(c);
  }
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
  const std::string because = fmt::format("{}", fmt::join(causes, "; "));
  const std::string horizon_words =
      run.bound_hit ? fmt::format(" (not settled by {:.4g} s, the bound of the horizon)", nc.horizon_s) : std::string();
  if (nc.confirmed) {
    nc.verdict = (causes.empty() ? "confirmed: nothing saturates; the nonlinear loop matches the linear one"
                                 : "confirmed, with these in the loop: " + because) + horizon_words;
    return nc;
  }

  // Attribution over the effects that acted in this run.
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
  if (sampled)
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
  std::string words;
  if (!effects.empty()) nc.attribution = attribute(problem, d, setup, effects, degraded_index, words);
  else words = "no effect of the nonlinear loop acted: the difference lies in the measurement (time resolution, horizon)";
  nc.verdict = fmt::format("NOT confirmed: {}{}{} — {}", fmt::join(degraded, "; "), horizon_words,
                           causes.empty() ? "" : " — because " + because, words);
  return nc;
}

}  // namespace

Design measure_design(const Problem& problem, std::string name, const Controller& controller) {
  Design d;
  d.name = std::move(name);
  d.controller = controller;
  const ControllerSpec& cs = problem.spec.controller;
  d.reference_path = reference_path(controller, cs.setpoint_weight, cs.derivative_on_measurement ? 0.0 : 1.0);
  const StateSpace loop = close_loop(problem.plant_realization, controller.transfer, d.reference_path);
  StepSimulator sim;
  StepMetrics continuous;
  const StepStatus continuous_status = sim.simulate(loop, problem.spec.reference.amplitude, problem.band_fraction, continuous);
  LinearGrid grid = continuous_status == StepStatus::ok ? linear_grid_of(sim.grid()) : LinearGrid{};
  d.status = continuous_status;
  d.simulated = continuous;
  if (problem.sampled) {
    // The loop the spec describes has a sampled controller: its linear loop is the sampled one.
    d.sampled = true;
    SampledStepSimulator sampled;
    try {
      const DifferenceEquation eq = controller_difference_equation(controller, cs.sample_time_s, cs.setpoint_weight,
                                                                   cs.derivative_on_measurement ? 0.0 : 1.0);
      d.status = sampled.simulate(problem.plant_realization, eq, problem.spec.reference.amplitude, problem.band_fraction,
                                  d.simulated);
      if (d.status == StepStatus::ok) grid = {sampled.horizon_s(), sampled.fine_step_s(), sampled.fine_until_s()};
      if (d.status == StepStatus::numerical_failure) d.notes.push_back("sampled loop: " + sampled.failure());
    } catch (const std::invalid_argument& e) {
      d.status = StepStatus::numerical_failure;
      d.notes.push_back(std::string("sampled loop: ") + e.what());
    }
    d.notes.push_back(fmt::format("linear metrics on the sampled loop (controller at Ts = {:.4g} s, zero-order hold, the "
                                  "plant's output between samples included); closed-loop poles, margins, the "
                                  "second-order prediction and the dominance diagnosis (its simulated response too) "
                                  "are those of the continuous C(s)·G(s)",
                                  cs.sample_time_s));
  }
  const ClosedLoopTF cl = close_loop(problem.plant, controller.transfer);
  d.closed_loop_poles = cl.output.poles();
  if (d.status == StepStatus::ok) {
    const auto pair = slowest_complex_pair(d.closed_loop_poles);
    if (pair && continuous_status == StepStatus::ok) {
      d.second_order = predict_second_order(*pair, problem.band_fraction);
      // r → y through the two-degree-of-freedom controller: C_r shares C's denominator, so
      // T = C_r,num·G_num / (C_den·G_den + C_num·G_num).
      const TransferFunction& g = problem.plant;
      const TransferFunction t(d.reference_path.numerator * g.numerator, cl.output.denominator);
      d.dominance = diagnose_dominance(t, *pair, *d.second_order, continuous);
    }
    d.margins = loop_margins(controller.transfer * problem.plant);
  } else {
    d.notes.push_back(fmt::format("{} loop {}: no metrics", d.sampled ? "sampled" : "linear", status_name(d.status)));
  }
  d.meets_all = d.status == StepStatus::ok;
  for (const Requirement& r : problem.requirements) {
    RequirementCheck c;
    if (d.status == StepStatus::ok) {
      c = check_requirement(problem, r, d.simulated, d.margins);
    } else {
      c.requirement = r;
      c.violation = 1.0;
      c.slack = requirement_slack(r, std::nullopt);
    }
    d.meets_all = d.meets_all && c.met;
    d.checks.push_back(c);
  }
  if (d.status == StepStatus::ok) d.nonlinear = confirm_nonlinear(problem, d, grid);
  if (d.status == StepStatus::ok) d.warnings = fragility_warnings(problem, d, false);
  return d;
}

std::vector<std::string> fragility_warnings(const Problem& problem, const Design& d, bool searched) {
  std::vector<std::string> out;
  const Spec& spec = problem.spec;
  if (d.margins && d.margins->delay_margin_s) {
    const double dm = *d.margins->delay_margin_s;
    if (dm < kDelayMarginFloor)
      out.push_back(fmt::format(
          "delay margin {:.3g} s: any loop delay longer than that (a sample-and-hold adds about half a period, a "
          "computation its time) destabilizes this loop, so it can be built only as an analog controller or one "
          "sampled faster than {:.3g} Hz with no computation delay; if that is not intended, bound the effort "
          "(actuator limits, effort_max) or require phase_margin_min_deg",
          dm, 1.0 / (2.0 * dm)));
    const double ts = spec.controller.sample_time_s;
    if (ts > 0.0 && dm < 2.0 * ts)
      out.push_back(fmt::format("delay margin {:.3g} s of the continuous loop is less than two sample periods ({:.3g} s): "
                                "the margins overstate the sampled loop's robustness (its hold alone adds about {:.3g} s "
                                "of delay)", dm, 2.0 * ts, ts / 2.0));
  }
  if (!spec.actuator.limited && !spec.requirements.effort_max) {
    // The command's final value u∞ = y∞/G(0) for a plant with a finite nonzero DC gain.
    const double g0 = problem.plant.dc_gain();
    if (std::isfinite(g0) && g0 != 0.0 && d.simulated.final_value != 0.0) {
      const double u_final = std::abs(d.simulated.final_value / g0);
      if (d.simulated.effort_peak > kEffortAmplification * u_final)
        out.push_back(fmt::format("the command peaks at {:.4g}, {:.3g}× its final value {:.4g}: with neither actuator "
                                  "limits nor effort_max in the spec nothing bounds it, and faster responses were "
                                  "bought with effort no real actuator may have — give the actuator's limits",
                                  d.simulated.effort_peak, d.simulated.effort_peak / u_final, u_final));
    }
  }
  if (d.nonlinear && d.nonlinear->status == NonlinearStatus::ok && !d.nonlinear->active_effects.empty() &&
      !d.nonlinear->simulated.settling_time_s) {
    // Every requirement may be met and yet the loop never arrives: a set point beyond the
    // actuator's reach, or a load the controller cannot take back. Say so.
    const NonlinearConfirmation& n = *d.nonlinear;
    out.push_back(fmt::format("on the loop the spec describes the response does not settle within the {:.4g} % band "
                              "around {:.4g} (where the linear loop goes) by the end of its {:.4g} s run: the set point "
                              "may lie beyond what the actuator can reach, or an effect holds the output away from it",
                              100.0 * problem.band_fraction, n.simulated.final_value, n.horizon_s));
  }
  if (searched) {
    for (std::size_t i = 0; i < problem.parameters.size() && i < d.controller.series.size(); ++i) {
      const auto [lo, hi] = problem.bounds[i];
      const double x = d.controller.series[i], span = std::log(hi / lo);
      const char* side = std::log(x / lo) <= 1e-3 * span ? "lower" : std::log(hi / x) <= 1e-3 * span ? "upper" : nullptr;
      if (side)
        out.push_back(fmt::format("{} = {:.5g} is at the {} bound of its search range [{:.4g}, {:.4g}]: the objective "
                                  "still improves beyond it (widen search.bounds.{} to see how far, or add the "
                                  "requirement that should stop it)",
                                  problem.parameters[i].name, x, side, lo, hi, problem.parameters[i].name));
    }
  }
  return out;
}

// ---- classical design ---------------------------------------------------------------------------

std::optional<DesiredPole> desired_pole(const Problem& problem, const Characterization& ch) {
  const Requirements& r = problem.spec.requirements;
  const double zeta = r.overshoot_max_pct ? damping_from_overshoot(*r.overshoot_max_pct) : std::sqrt(0.5);
  const std::string zeta_from = r.overshoot_max_pct
                                    ? fmt::format("ζ = {:.4f} from {:.4g} % overshoot", zeta, *r.overshoot_max_pct)
                                    : std::string("ζ = 0.7071 (no overshoot limit; common practice)");
  std::optional<double> tp;
  std::string tp_from;
  if (r.peak_time_ratio && problem.reference_peak_time_s) {
    tp = *r.peak_time_ratio * *problem.reference_peak_time_s;
    tp_from = fmt::format("target peak time {:.4g} s = {:.4g} × reference {:.4g} s", *tp, *r.peak_time_ratio,
                          *problem.reference_peak_time_s);
  }
  if (r.peak_time_max_s && (!tp || *r.peak_time_max_s < *tp)) {
    tp = *r.peak_time_max_s;
    tp_from = fmt::format("target peak time {:.4g} s from peak_time_max", *tp);
  }
  const double root = std::sqrt(1.0 - zeta * zeta);
  if (tp) {
    const double wd = std::numbers::pi / *tp;
    return DesiredPole{Complex(-zeta * wd / root, wd), zeta_from + ", " + tp_from + ", ω_d = π/t_p"};
  }
  if (r.settling_time_max_s) {
    const double sigma = -std::log(problem.band_fraction) / *r.settling_time_max_s;
    return DesiredPole{Complex(-sigma, sigma * root / zeta),
                       zeta_from + fmt::format(", σ = −ln(band)/t_s from settling_time_max {:.4g} s", *r.settling_time_max_s)};
  }
  if (ch.dominant_index) {
    const Complex pole = ch.crossings[*ch.dominant_index].pair_pole;
    return DesiredPole{pole, zeta_from + ", speed of the P-only dominant crossing (no time requirement)"};
  }
  return std::nullopt;
}

namespace {

// ∠(C1·G)(s) in degrees, wrapped to (−180, 180]; the angle condition wants ±180°.
double angle_error_deg(const TransferFunction& loop, Complex s) {
  return wrap_degrees(std::arg(loop(s)) * kDeg + 180.0);
}

// Finds x in [lo, hi] (log-scanned) where angle_error_deg(loop(x), target) = 0, the root whose
// x is closest (in log distance) to `prefer`.
template <typename MakeLoop>
std::optional<double> solve_angle(MakeLoop make_loop, Complex target, double lo, double hi, double prefer) {
  const int points = 400;
  std::optional<double> best;
  auto f = [&](double x) { return angle_error_deg(make_loop(x), target); };
  double prev_x = lo, prev_f = f(lo);
  for (int i = 1; i <= points; ++i) {
    const double x = lo * std::pow(hi / lo, static_cast<double>(i) / points);
    const double fx = f(x);
    // A sign change with small values on both sides is a root; a jump across ±180° is not.
    if ((prev_f <= 0.0) != (fx <= 0.0) && std::abs(prev_f) < 90.0 && std::abs(fx) < 90.0) {
      boost::uintmax_t iterations = 100;
      const auto [a, b] = boost::math::tools::toms748_solve(f, prev_x, x, prev_f, fx,
                                                           boost::math::tools::eps_tolerance<double>(45), iterations);
      const double root = 0.5 * (a + b);
      if (!best || std::abs(std::log(root / prefer)) < std::abs(std::log(*best / prefer))) best = root;
    }
    prev_x = x;
    prev_f = fx;
  }
  return best;
}

// Gain from the magnitude condition |K·C1·G| = 1 at s.
double magnitude_gain(const TransferFunction& unit_loop, Complex s) { return 1.0 / std::abs(unit_loop(s)); }

// Ogata's bisector rule for a lead: zero and pole where lines at ±φ/2 around the bisector of the
// angle between the horizontal through s_d and the line from s_d to the origin meet the real axis.
std::optional<std::pair<double, double>> bisector_lead(Complex sd, double phi_deg) {
  const double sigma = -sd.real(), wd = sd.imag();
  const double to_origin = std::atan2(-wd, sigma) * kDeg;  // direction from s_d to the origin
  const double bisector = (to_origin - 180.0) / 2.0;
  auto meet = [&](double dir_deg) -> std::optional<double> {
    const double th = dir_deg / kDeg;
    if (!(std::sin(th) < 0.0)) return std::nullopt;
    const double t = wd / -std::sin(th);
    const double x = sd.real() + t * std::cos(th);
    if (!(x < 0.0)) return std::nullopt;
    return -x;
  };
  const auto z = meet(bisector + phi_deg / 2.0);
  const auto p = meet(bisector - phi_deg / 2.0);
  if (!z || !p || !(*p > *z)) return std::nullopt;
  return std::make_pair(*z, *p);
}

// Lag boost β from a steady-state error limit on a type-0 loop (position constant needed over the
// one the P-only loop has), else 10 (common practice).
double lag_ratio(const TransferFunction& plant, double p_gain, std::optional<double> sse_max) {
  if (sse_max && *sse_max > 0.0 && plant.system_type() == 0) {
    const double kp_needed = (1.0 - *sse_max) / *sse_max;
    const double kp_now = std::abs(p_gain * plant.dc_gain());
    return std::clamp(1.1 * kp_needed / kp_now, 1.5, 100.0);
  }
  return 10.0;
}

std::optional<double> gain_at_crossing(const TransferFunction& unit_loop, double zeta, std::vector<std::string>& notes) {
  const auto crossings = damping_line_crossings(unit_loop, zeta);
  std::string why;
  const auto i = dominant_crossing(unit_loop, crossings, why);
  if (!i) {
    notes.push_back("no usable ζ-line crossing of the compensated locus: " + why);
    return std::nullopt;
  }
  notes.push_back(fmt::format("gain at the ζ-line crossing {:.4g} ± j{:.4g} of the compensated locus ({})",
                              crossings[*i].pair_pole.real(), crossings[*i].pair_pole.imag(), why));
  return crossings[*i].gain;
}

}  // namespace

namespace {

// The hand method at one target pole (classical_controller's steps, without the move along the
// ζ-line).
std::optional<Controller> classical_at(const TransferFunction& plant, Structure structure, double n, Complex target,
                                       double zeta, std::optional<double> sse_max, std::vector<std::string>& notes,
                                       std::string* failed_step) {
  auto failed = [&](const char* step) -> std::optional<Controller> {
    if (failed_step) *failed_step = step;
    return std::nullopt;
  };
  const double sigma = -target.real();
  const double w = std::abs(target);
  auto unit = [&](std::vector<double> series) { return make_controller(structure, std::move(series), n); };
  auto with_gain = [&](std::vector<double> series, double k) {
    series[0] = k;
    return make_controller(structure, std::move(series), n);
  };
  const double needed = wrap_degrees(-180.0 - std::arg(plant(target)) * kDeg);  // angle the compensator must add
  switch (structure) {
    case Structure::p: {
      const auto k = gain_at_crossing(plant, zeta, notes);
      if (!k) return failed("ζ-line crossing of the compensated locus");
      return with_gain({1.0}, *k);
    }
    case Structure::pi:
    case Structure::lag: {
      const double z = sigma / 10.0;
      notes.push_back(fmt::format("{} zero at −{:.4g} = σ/10 of the target pole (common practice: its angle at the "
                                  "dominant pole stays small)", structure == Structure::pi ? "PI" : "lag", z));
      std::vector<double> series{1.0, z};
      if (structure == Structure::lag) {
        const double p_gain = gain_at_crossing(plant, zeta, notes).value_or(1.0);
        series.push_back(lag_ratio(plant, p_gain, sse_max));
        notes.push_back(fmt::format("lag ratio β = {:.3g}", series.back()));
      }
      const auto k = gain_at_crossing(unit(series).transfer * plant, zeta, notes);
      if (!k) return failed("ζ-line crossing of the compensated locus");
      notes.push_back("a structure without a zero to place cannot move the locus onto the target pole; the design "
                      "keeps the compensated locus's ζ-line crossing");
      return with_gain(series, *k);
    }
    case Structure::pd:
    case Structure::pid: {
      const double integral_zero = sigma / 10.0;
      auto series_for = [&](double z) -> std::vector<double> {
        if (structure == Structure::pd) return {1.0, z};
        const double w0 = std::sqrt(z * integral_zero);
        return {1.0, w0, (z + integral_zero) / (2.0 * w0)};
      };
      const auto z = solve_angle([&](double x) { return unit(series_for(x)).transfer * plant; }, target, w * 1e-3,
                                 w * 1e3, w);
      if (!z) {
        notes.push_back(fmt::format("the angle condition at the target pole cannot be met by one zero (the plant "
                                    "leaves {:.1f}° to add)", needed));
        return failed("angle condition");
      }
      notes.push_back(fmt::format("derivative zero at −{:.4g} from the angle condition (compensator adds {:.1f}° "
                                  "with its filter pole included)", *z, needed));
      if (structure == Structure::pid)
        notes.push_back(fmt::format("PI zero at −{:.4g} = σ/10 of the target pole (common practice)", integral_zero));
      const auto series = series_for(*z);
      return with_gain(series, magnitude_gain(unit(series).transfer * plant, target));
    }
    case Structure::lead:
    case Structure::lead_lag: {
      if (!(needed > 0.0)) {
        notes.push_back(fmt::format("the target pole needs no lead (the plant is {:.1f}° past the angle condition)", -needed));
        return failed("lead angle");
      }
      std::vector<double> series;
      double extra = 0.0;
      if (structure == Structure::lead_lag) {
        // The lag's (small, negative) angle at the target is included in what the lead must add.
        const double zg = sigma / 10.0;
        const double p_gain = gain_at_crossing(plant, zeta, notes).value_or(1.0);
        const double beta = lag_ratio(plant, p_gain, sse_max);
        extra = -wrap_degrees(std::arg((target + zg) / (target + zg / beta)) * kDeg);
        series = {1.0, 0.0, 0.0, zg, beta};
        notes.push_back(fmt::format("lag zero at −{:.4g} = σ/10, lag ratio β = {:.3g}", zg, beta));
      }
      const auto zp = bisector_lead(target, needed + extra);
      if (!zp) {
        notes.push_back(fmt::format("the bisector construction fails for {:.1f}° of lead", needed + extra));
        return failed("bisector construction");
      }
      notes.push_back(fmt::format("lead zero −{:.4g} and pole −{:.4g} by the bisector rule for {:.1f}° of lead",
                                  zp->first, zp->second, needed + extra));
      if (structure == Structure::lead) series = {1.0, zp->first, zp->second / zp->first};
      else {
        series[1] = zp->first;
        series[2] = zp->second / zp->first;
      }
      return with_gain(series, magnitude_gain(unit(series).transfer * plant, target));
    }
  }
  return failed("structure");
}

}  // namespace

std::optional<Controller> classical_controller(const TransferFunction& plant, Structure structure, double n,
                                               Complex target, double zeta, std::optional<double> sse_max,
                                               std::vector<std::string>& notes, std::string* failed_step) {
  std::vector<std::string> first;
  std::string step;
  if (auto c = classical_at(plant, structure, n, target, zeta, sse_max, first, &step)) {
    notes.insert(notes.end(), first.begin(), first.end());
    return c;
  }
  // The angle conditions of a zero or a lead have a range: a zero adds 0–90°, a lead less than
  // its bisector construction allows. When the target asks for what they cannot add, the hand
  // method keeps the damping and moves the target along the ζ-line (common practice): outward
  // (faster) when the plant is already past the angle condition there, inward (slower) when it
  // needs more lead than one stage gives. The first point, in steps of 5 % in |s| up to 100×
  // either way, where every step succeeds is designed for, and the notes say so.
  const bool movable = step == "angle condition" || step == "lead angle" || step == "bisector construction";
  if (movable) {
    const double needed = wrap_degrees(-180.0 - std::arg(plant(target)) * kDeg);
    const double factor = needed <= 0.0 ? 1.05 : 1.0 / 1.05;
    Complex moved = target;
    for (int i = 0; i < 95; ++i) {
      moved *= factor;
      std::vector<std::string> trial;
      std::string trial_step;
      if (auto c = classical_at(plant, structure, n, moved, zeta, sse_max, trial, &trial_step)) {
        notes.push_back(fmt::format("at the target pole {:.4g} ± j{:.4g} the {} step cannot be done: {}", target.real(),
                                    target.imag(), step, first.empty() ? std::string("-") : first.back()));
        notes.push_back(fmt::format("target moved along the ζ-line {} to {:.4g} ± j{:.4g} ({:.3g}× |s|), the first point "
                                    "where it can (common practice: keep the damping, change the speed)",
                                    factor > 1.0 ? "outward (faster)" : "inward (slower)", moved.real(), moved.imag(),
                                    std::abs(moved) / std::abs(target)));
        notes.insert(notes.end(), trial.begin(), trial.end());
        return c;
      }
    }
  }
  notes.insert(notes.end(), first.begin(), first.end());
  if (movable)
    notes.push_back(fmt::format("{}; nor can it at any point of the ζ-line within 100× of the target's distance from the "
                                "origin, either way", first.empty() ? step : first.back()));
  if (failed_step) *failed_step = step;
  return std::nullopt;
}

// ---- ultimate gain ------------------------------------------------------------------------------

std::optional<UltimatePoint> ultimate_point(const TransferFunction& plant) {
  // The first range of stable P gains that ends where a pair of poles reaches the axis at
  // ±jω (0 < ω < ∞): raised through it, the loop starts to oscillate at Ku.
  const StableGainSet set = stable_gain_set(plant);
  for (const StableGainSet::Range& r : set.ranges) {
    if (r.state != StableGainSet::State::stable || !std::isfinite(r.high)) continue;
    if (!(r.high_frequency > 0.0 && std::isfinite(r.high_frequency))) continue;
    UltimatePoint u;
    u.gain = r.high;
    u.frequency_rad_s = r.high_frequency;
    u.period_s = 2.0 * std::numbers::pi / u.frequency_rad_s;
    return u;
  }
  return std::nullopt;
}

std::optional<StandardForm> ziegler_nichols(Structure s, const UltimatePoint& u, double n) {
  const double inf = kInf;
  switch (s) {
    case Structure::p: return StandardForm{0.5 * u.gain, inf, 0.0, 0.0, false, false};
    case Structure::pi: return StandardForm{0.45 * u.gain, u.period_s / 1.2, 0.0, 0.0, true, false};
    case Structure::pd: return StandardForm{0.8 * u.gain, inf, u.period_s / 8.0, n, false, true};
    case Structure::pid: return StandardForm{0.6 * u.gain, u.period_s / 2.0, u.period_s / 8.0, n, true, true};
    default: return std::nullopt;
  }
}

std::optional<std::vector<double>> series_from_standard(Structure s, const StandardForm& f) {
  switch (s) {
    case Structure::p: return std::vector<double>{f.kp};
    case Structure::pi: return std::vector<double>{f.kp, 1.0 / f.ti};
    case Structure::pd: return std::vector<double>{f.kp, f.n / ((f.n + 1.0) * f.td)};
    case Structure::pid: {
      const double ki = f.kp / f.ti, kd = f.kp * f.td, tf = f.td / f.n;
      const double kc = f.kp * tf + kd;
      const double w0 = std::sqrt(ki / kc);
      return std::vector<double>{f.kp, w0, (f.kp + ki * tf) / (2.0 * kc * w0)};
    }
    default: return std::nullopt;
  }
}

}  // namespace specloop
