// The curves a report draws (traces.hpp): every design's step response again on the loop it was
// measured on, the recommended design's on the nonlinear loop, the root locus of its loop and the
// frequency responses of the classical and optimized loops.
#include "specloop/design/traces.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "specloop/core/margins.hpp"
#include "specloop/design/nonlinear_loop.hpp"
#include "specloop/design/regulation.hpp"
#include "specloop/sim/response.hpp"
#include "specloop/sim/sampled_loop.hpp"

namespace specloop {

namespace {

constexpr int kTraceNonlinearSamples = 2000;  // output samples of the nonlinear trace

// A frequency range that shows every corner and crossover of the loop: two decades beyond.
std::pair<double, double> frequency_range(const TransferFunction& loop, const std::optional<Margins>& m) {
  double lo = std::numeric_limits<double>::infinity(), hi = 0.0;
  auto take = [&](double w) {
    if (w > 0.0 && std::isfinite(w)) {
      lo = std::min(lo, w);
      hi = std::max(hi, w);
    }
  };
  for (const Complex& p : loop.poles()) take(std::abs(p));
  if (!loop.numerator.is_zero())
    for (const Complex& z : loop.zeros()) take(std::abs(z));
  if (m) {
    if (m->gain_crossover_rad_s) take(*m->gain_crossover_rad_s);
    if (m->phase_crossover_rad_s) take(*m->phase_crossover_rad_s);
    if (m->lower_phase_crossover_rad_s) take(*m->lower_phase_crossover_rad_s);
  }
  if (!(hi > 0.0)) return {0.01, 100.0};
  return {lo / 100.0, hi * 100.0};
}

bool all_finite(const std::vector<double>& v) {
  return std::all_of(v.begin(), v.end(), [](double x) { return std::isfinite(x); });
}

// A figure's series never carries a NaN or an infinity: a trace with one is left out whole (the
// figure is drawn without it), a frequency point with one is left out alone.
bool trace_is_finite(const ResponseTrace& t) {
  return !t.time_s.empty() && all_finite(t.time_s) && all_finite(t.output) && all_finite(t.control) &&
         all_finite(t.command);
}

FrequencySeries finite_rows(const FrequencySeries& f) {
  FrequencySeries out;
  for (std::size_t i = 0; i < f.omega_rad_s.size(); ++i)
    if (std::isfinite(f.omega_rad_s[i]) && std::isfinite(f.magnitude_db[i]) && std::isfinite(f.phase_deg[i])) {
      out.omega_rad_s.push_back(f.omega_rad_s[i]);
      out.magnitude_db.push_back(f.magnitude_db[i]);
      out.phase_deg.push_back(f.phase_deg[i]);
    }
  return out;
}

// A design's step response on the loop it was measured on (the sampled one for a sampled design);
// empty when that loop does not simulate or the trace is not finite.
std::optional<ResponseTrace> linear_trace(const Problem& problem, const Design& d) {
  const Spec& spec = problem.spec;
  StepSimulator sim;
  SampledStepSimulator sampled;
  StepMetrics m;
  StepTrace trace;
  StepStatus status = StepStatus::numerical_failure;
  if (d.sampled) {  // the sampled loop, as the design was measured
    const ControllerSpec& cs = spec.controller;
    const DifferenceEquation eq = controller_difference_equation(d.controller, cs.sample_time_s, setpoint_weight_of(cs, d.controller),
                                                                 cs.derivative_on_measurement ? 0.0 : 1.0);
    status = sampled.simulate(problem.plant_realization, eq, spec.reference.amplitude, problem.band_fraction, m, &trace);
  } else {
    status = sim.simulate(design_loop(problem, problem.plant_realization, d),
                          spec.reference.amplitude, problem.band_fraction, m, &trace);
  }
  if (status != StepStatus::ok) return std::nullopt;
  ResponseTrace t{d.role, false, std::move(trace.time_s), std::move(trace.output), std::move(trace.effort), {}};
  if (!trace_is_finite(t)) return std::nullopt;
  return t;
}

// The recommended design on the nonlinear loop: the linear trace's horizon (1 when it has none), or
// the confirmation's (possibly extended) one, so the trace shows what the verdict read. Empty when
// the run stops or is not finite (the confirmation said why).
std::optional<ResponseTrace> nonlinear_trace(const Problem& problem, const Design& best, const ResponseTrace* linear) {
  NonlinearSetup setup = nonlinear_setup(problem, linear ? linear->time_s.back() : 1.0, kTraceNonlinearSamples);
  if (best.nonlinear && best.nonlinear->horizon_s > 0.0) {
    setup.options.horizon_s = best.nonlinear->horizon_s;
    setup.options.output_step_s = setup.options.horizon_s / kTraceNonlinearSamples;
  }
  NonlinearResult r;
  try {
    r = simulate_on_nonlinear_loop(problem, best.controller, setup);
  } catch (const std::invalid_argument&) {
    r.status = NonlinearStatus::non_finite;
  }
  ResponseTrace t{best.role, true, r.time_s, r.output, r.control, r.command};
  if (r.status != NonlinearStatus::ok || r.time_s.empty() || !trace_is_finite(t)) return std::nullopt;
  return t;
}

// The root locus of the recommended loop and its open-loop roots, the delay's Padé roots marked;
// without a locus, the plant's own roots.
LocusTrace locus_trace(const Problem& problem, const Design* best) {
  LocusTrace out;
  if (best) {
    out.design = best->role;
    out.loop = best->controller.transfer * problem.plant;
    out.locus = trace_root_locus(out.loop, 1e-3, 1e3);
  }
  if (!out.locus.poles.empty()) {
    // The delay's Padé approximant brings poles and zeros of its own into the loop: marked apart.
    const double delay = problem.spec.plant.delay_s;
    const TransferFunction pade = delay_approximant(delay, kDelayApproximantOrder);
    const std::vector<Complex> pade_poles = delay > 0.0 ? pade.poles() : std::vector<Complex>{};
    const std::vector<Complex> pade_zeros = delay > 0.0 ? pade.zeros() : std::vector<Complex>{};
    auto from_pade = [](Complex z, const std::vector<Complex>& list) {
      return std::any_of(list.begin(), list.end(), [&](Complex q) { return std::abs(z - q) <= 1e-4 * std::max(1.0, std::abs(q)); });
    };
    for (const Complex& p : out.loop.poles()) out.poles.push_back({p, from_pade(p, pade_poles)});
    if (!out.loop.numerator.is_zero())
      for (const Complex& z : out.loop.zeros()) out.zeros.push_back({z, from_pade(z, pade_zeros)});
  } else {
    // No stable design, so no locus: the plant's own poles and zeros at least.
    out.of_plant = true;
    for (const Complex& p : problem.plant.poles()) out.poles.push_back({p, false});
    if (!problem.plant.numerator.is_zero())
      for (const Complex& z : problem.plant.zeros()) out.zeros.push_back({z, false});
  }
  return out;
}

}  // namespace

DesignTraces design_traces(const DesignRun& run) {
  const Problem& problem = run.problem;
  DesignTraces out;
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok) continue;
    if (auto t = linear_trace(problem, d)) out.responses.push_back(std::move(*t));
  }
  const Design* best = recommended_design(run);
  if (best) {
    const auto linear = std::find_if(out.responses.begin(), out.responses.end(),
                                     [&](const ResponseTrace& t) { return t.design == best->role; });
    if (auto t = nonlinear_trace(problem, *best, linear != out.responses.end() ? &*linear : nullptr))
      out.responses.push_back(std::move(*t));
  }
  if (best && run.robust)
    for (std::size_t i = 0; i < run.robust->scenarios.size(); ++i)
      if (auto t = linear_trace(run.robust->scenarios[i].problem, *best)) {
        // Thinned for the figure (every scenario is drawn): about kEnvelopeSamples points.
        const std::size_t every = std::max<std::size_t>(1, t->time_s.size() / kEnvelopeSamples);
        ResponseTrace thin{t->design, false, {}, {}, {}, {}};
        for (std::size_t k = 0; k < t->time_s.size(); k += every) {
          thin.time_s.push_back(t->time_s[k]);
          thin.output.push_back(t->output[k]);
          thin.control.push_back(t->control[k]);
        }
        out.scenarios.emplace_back(i, std::move(thin));
      }
  if (problem.needs_load)
    for (const Design& d : run.designs) {
      if (d.status != StepStatus::ok) continue;
      StepMetrics m;
      StepTrace trace;
      if (measure_load(problem, problem.plant_realization, d.controller, m, &trace) != StepStatus::ok) continue;
      ResponseTrace t{d.role, false, std::move(trace.time_s), std::move(trace.output), {}, {}};
      if (trace_is_finite(t)) out.load.push_back(std::move(t));
    }
  out.locus = locus_trace(problem, best);
  for (const DesignRole role : {DesignRole::classical, DesignRole::optimized}) {
    const Design* d = run.find(role);
    if (!d || d->status != StepStatus::ok) continue;
    const TransferFunction loop = d->controller.transfer * problem.plant;
    const auto [lo, hi] = frequency_range(loop, d->margins);
    FrequencySeries f = finite_rows(loop_frequency_response(loop, lo, hi, 300));
    if (!f.omega_rad_s.empty()) out.frequency.emplace_back(role, std::move(f));
  }
  return out;
}

}  // namespace specloop
