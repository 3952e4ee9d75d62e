// The search problem built from a spec (problem.hpp): models, requirement list, default bounds,
// tracking window.
#include "specloop/design/problem.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>
#include <string>

#include "specloop/sim/response.hpp"

namespace specloop {

namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
// The default low end of a searched set-point weight (log scale: 0 itself is out of reach; at
// b = 0.01 the proportional kick is 1 % of the error's).
constexpr double kSetpointWeightLow = 0.01;
}  // namespace

std::size_t filter_parameter_count(const ControllerSpec& cs) {
  return (cs.notch_search ? 3 : 0) + (cs.measurement_filter_search ? 1 : 0);
}

std::size_t structure_parameter_count(const Problem& problem) {
  return problem.parameters.size() - (problem.spec.search.tune_setpoint_weight ? 1 : 0) -
         filter_parameter_count(problem.spec.controller);
}

SearchedFilters filters_from(const ControllerSpec& cs, const double* params) {
  SearchedFilters f{cs.notch, cs.measurement_filter};
  std::size_t i = 0;
  if (cs.notch_search) {
    f.notch = NotchFilter{params[0], params[1], params[2]};
    i = 3;
  }
  if (cs.measurement_filter_search) f.measurement = MeasurementFilter{1, params[i]};
  return f;
}

Controller controller_from(const Problem& problem, const double* params) {
  const std::size_t count = structure_parameter_count(problem);
  const ControllerSpec& cs = problem.spec.controller;
  Controller c = make_controller(cs.structure, std::vector<double>(params, params + count), cs.derivative_filter,
                                 problem.action);
  const std::size_t after = count + (problem.spec.search.tune_setpoint_weight ? 1 : 0);
  if (problem.spec.search.tune_setpoint_weight) c.setpoint_weight = params[count];
  if (cs.has_filters()) {
    const SearchedFilters f = filters_from(cs, params + after);
    c = with_filters(std::move(c), f.notch, f.measurement);
    c.notch_searched = cs.notch_search;
    c.measurement_filter_searched = cs.measurement_filter_search;
  }
  return c;
}

Controller controller_from(const Problem& problem, const std::vector<double>& params) {
  if (params.size() != problem.parameters.size())
    throw std::invalid_argument("controller_from: the search vector has the wrong size");
  return controller_from(problem, params.data());
}

std::vector<double> search_vector(const Problem& problem, const Controller& c) {
  std::vector<double> v = c.series;
  const ControllerSpec& cs = problem.spec.controller;
  if (problem.spec.search.tune_setpoint_weight) v.push_back(setpoint_weight_of(cs, c));
  if (cs.notch_search) {
    // A controller without a notch (a hand design seeding the search) starts at the range's middle.
    const NotchFilter f = c.notch.value_or(NotchFilter{0.0, 0.0, 0.0});
    const std::size_t at = v.size();
    const auto* lo_hi = problem.bounds.size() > at + 2 ? &problem.bounds[at] : nullptr;
    auto mid = [&](std::size_t k) { return std::sqrt(problem.bounds[at + k].first * problem.bounds[at + k].second); };
    v.push_back(c.notch ? f.frequency : (lo_hi ? mid(0) : 1.0));
    v.push_back(c.notch ? f.depth : (lo_hi ? mid(1) : 0.1));
    v.push_back(c.notch ? f.width : (lo_hi ? mid(2) : 0.3));
  }
  if (cs.measurement_filter_search) {
    const std::size_t at = v.size();
    const bool known = problem.bounds.size() > at;
    v.push_back(c.measurement_filter ? c.measurement_filter->time_constant
                                     : (known ? std::sqrt(problem.bounds[at].first * problem.bounds[at].second) : 1.0));
  }
  return v;
}

double setpoint_weight_of(const ControllerSpec& spec, const Controller& c) {
  return c.setpoint_weight.value_or(spec.setpoint_weight);
}

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
                      return r.entry->source == RequirementSource::frequency_response;
                    });
  p.needs_peaks = spec.requirements.noise_gain_max || spec.requirements.complementary_peak_max;
  p.needs_load = spec.search.objective == Objective::load_iae ||
                 std::any_of(p.requirements.begin(), p.requirements.end(), [](const Requirement& r) {
                   return r.entry->source == RequirementSource::load_response;
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
  if (spec.search.tune_setpoint_weight)
    p.parameters.push_back({std::string(kSetpointWeightParameter), "",
                            "set-point weight b: the proportional term acts on b·r − y"});
  if (spec.controller.notch_search) {
    p.parameters.push_back({std::string(kNotchFrequencyParameter), "rad/s", "notch frequency ωn"});
    p.parameters.push_back({std::string(kNotchDepthParameter), "", "notch depth: the gain at ωn"});
    p.parameters.push_back({std::string(kNotchWidthParameter), "", "notch width: the pole damping ζp"});
  }
  if (spec.controller.measurement_filter_search)
    p.parameters.push_back({std::string(kFilterTimeParameter), "s", "measurement filter time constant Tf (order 1)"});
  const auto notch_range = notch_frequency_range(spec.plant.poles, spec.controller.sample_time_s);
  const double n = spec.controller.derivative_filter;
  for (const ParameterInfo& info : p.parameters) {
    std::pair<double, double> b;
    if (info.name == kSetpointWeightParameter) b = {kSetpointWeightLow, 1.0};
    else if (info.name == "gain") b = {k_scale * 1e-3, k_scale * 1e3};
    else if (info.name == "ratio" || info.name == "lag_ratio") b = {1.05, 100.0};
    else if (info.name == "zero_damping") b = {pid_min_zero_damping(n) * 1.0001, 20.0};
    else if (info.name == kNotchFrequencyParameter) b = notch_range.value_or(std::make_pair(w_lo, w_hi * 10.0));
    else if (info.name == kNotchDepthParameter) b = {0.01, 0.5};
    else if (info.name == kNotchWidthParameter) b = {0.05, 1.0};
    else if (info.name == kFilterTimeParameter) b = {0.01 / w_hi, 1.0 / w_lo};
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

}  // namespace specloop
