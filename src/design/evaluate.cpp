// One candidate's evaluation on the linear loop (evaluate.hpp): the controller's polynomials, the
// closed loop, the exact step response and its metrics, judged against the nominal problem's
// requirements tightened by the search's margin (requirements.hpp, `tightened`) with the settling
// band narrowed by it, so that a design the search calls feasible keeps room on every limit.
#include "specloop/design/evaluate.hpp"

#include "specloop/design/regulation.hpp"

#include <algorithm>
#include <cmath>
#include <stdexcept>

namespace specloop {

namespace {
constexpr double kUnstableCost = 1e9;  // the search's stability barrier (search.cpp ranks above it)

// a·b into `out` (coefficients highest power first), reusing out's storage.
void multiply_into(const std::vector<double>& a, const std::vector<double>& b, std::vector<double>& out) {
  out.assign(a.size() + b.size() - 1, 0.0);
  for (std::size_t i = 0; i < a.size(); ++i)
    for (std::size_t j = 0; j < b.size(); ++j) out[i + j] += a[i] * b[j];
}
}  // namespace

void CandidateEvaluator::realize_filtered(const SearchedFilters& f) {
  // K's section first (num_/den_ are still the structure's C(s)), then the filters' sections, then
  // num_/den_ become the whole C·F·N the margins read. The buffers take turns (swap), so each
  // gets room for the largest product once.
  for (auto* v : {&num_, &den_, &scratch_}) v->reserve(8);
  realize_low_order(num_, den_, controller_);
  if (f.measurement) {
    measurement_filter_polynomials(*f.measurement, filter_den_);
    filter_num_.assign(1, 1.0);
    realize_low_order(filter_num_, filter_den_, filter_section_);
    multiply_into(den_, filter_den_, scratch_);
    den_.swap(scratch_);
  }
  if (f.notch) {
    double n3[3], d3[3];
    notch_polynomials(*f.notch, n3, d3);
    notch_num_.assign(n3, n3 + 3);
    notch_den_.assign(d3, d3 + 3);
    realize_low_order(notch_num_, notch_den_, notch_section_);
    multiply_into(num_, notch_num_, scratch_);
    num_.swap(scratch_);
    multiply_into(den_, notch_den_, scratch_);
    den_.swap(scratch_);
  }
  filtered_controller_into(controller_, f.measurement ? &filter_section_ : nullptr, f.notch ? &notch_section_ : nullptr,
                           filtered_);
}

CandidateEvaluator::CandidateEvaluator(const Problem& nominal, const SearchOptions& options)
    : nominal_(nominal), options_(options), margin_(nominal.search_margin),
      band_(nominal.band_fraction * (1.0 - nominal.search_margin)), load_size_(load_size(nominal.spec)),
      load_offset_(std::abs(nominal.spec.reference.amplitude)), load_sim_(kLoadGridRules) {
  for (const Requirement& r : nominal.requirements) requirements_.push_back(tightened(r, margin_));
  // Which of the margins the evaluation reads: when only Ms and the closed-loop peaks, not the
  // crossovers and gain margins, whose polynomial roots cost most of a margin computation.
  auto peaks_only = [](const std::string& key) {
    return key == "sensitivity_peak_max" || key == "noise_gain_max" || key == "complementary_peak_max";
  };
  sensitivity_only_ = (!options.objective_requirement || peaks_only(options.objective_requirement->key)) &&
                      std::all_of(nominal.requirements.begin(), nominal.requirements.end(), [&](const Requirement& r) {
                        return r.entry->source != RequirementSource::frequency_response || peaks_only(r.key);
                      });
}

CandidateOutcome CandidateEvaluator::evaluate(const Problem& plant, const double* params) {
  const Structure structure = nominal_.spec.controller.structure;
  const double n = nominal_.spec.controller.derivative_filter;
  const ControllerSpec& cs = nominal_.spec.controller;
  const double amplitude = nominal_.spec.reference.amplitude;
  const std::size_t count = structure_parameter_count(nominal_);
  const double b = nominal_.spec.search.tune_setpoint_weight ? params[count] : cs.setpoint_weight;
  controller_polynomials(structure, params, n, nominal_.action, num_, den_);
  const bool filtered = cs.has_filters();
  if (filtered) realize_filtered(filters_from(cs, params + count + (nominal_.spec.search.tune_setpoint_weight ? 1 : 0)));
  last_sampled_ = plant.sampled;
  CandidateOutcome out;
  if (plant.sampled) {
    // The controller's difference equation at the spec's period, exactly.
    StepStatus status = StepStatus::numerical_failure;
    try {
      const Controller ctl = controller_from(nominal_, params);
      const DifferenceEquation eq = controller_difference_equation(ctl, cs.sample_time_s, b,
                                                                   cs.derivative_on_measurement ? 0.0 : 1.0);
      status = sampled_sim_.simulate(plant.plant_realization, eq, amplitude, band_, metrics_);
      if (status == StepStatus::ok && nominal_.needs_load) {
        // The same loop driven by the load (poles as the set point's: stable whenever it is).
        if (sampled_load_sim_.simulate_load(plant.plant_realization, eq, load_size_, load_offset_, band_, load_metrics_) !=
            StepStatus::ok) {
          out.objective = kUnstableCost;
          return out;
        }
        take_load_metrics(load_metrics_, has_integrator(structure), metrics_);
      }
    } catch (const std::invalid_argument&) {
      status = StepStatus::numerical_failure;
    }
    if (status != StepStatus::ok) {
      out.objective = kUnstableCost * (1.0 + std::min(1.0, sampled_sim_.instability()));
      return out;
    }
    return judge(plant.plant, sampled_sim_.horizon_s());
  }
  const bool weighted = b != 1.0 || cs.derivative_on_measurement;
  if (weighted) {
    const TransferFunction c{Polynomial(num_), Polynomial(den_)};
    loop_ = close_loop(plant.plant_realization, c,
                       reference_path(controller_from(nominal_, params), b, cs.derivative_on_measurement ? 0.0 : 1.0));
  } else if (filtered) {  // u = N·K·(r − F·y), in the evaluator's storage like the unfiltered loop
    close_loop_into(plant.plant_realization, filtered_, loop_);
  } else {  // in the evaluator's own storage: nothing allocated after the first candidate
    realize_low_order(num_, den_, controller_);
    close_loop_into(plant.plant_realization, controller_, loop_);
  }
  const StepStatus status = sim_.simulate(loop_, amplitude, band_, metrics_);
  if (status != StepStatus::ok) {
    double rightmost = 0.0;
    for (const Complex& p : sim_.poles()) rightmost = std::max(rightmost, p.real() / std::max(1.0, std::abs(p)));
    out.objective = kUnstableCost * (1.0 + rightmost);
    return out;
  }
  if (nominal_.needs_load) {
    // The second simulation: the same loop driven by the load (its A is the set-point loop's), in
    // the evaluator's storage, with the band narrowed like the set point's.
    if (filtered) {
      load_loop_into(plant.plant_realization, filtered_, load_size_, load_offset_, load_loop_);
    } else {
      if (weighted) realize_low_order(num_, den_, controller_);
      load_loop_into(plant.plant_realization, controller_, load_size_, load_offset_, load_loop_);
    }
    if (load_sim_.simulate(load_loop_, 1.0, band_, load_metrics_) != StepStatus::ok) {
      out.objective = kUnstableCost;
      return out;
    }
    take_load_metrics(load_metrics_, has_integrator(structure), metrics_);
  }
  return judge(plant.plant, sim_.grid().horizon_s());
}

CandidateOutcome CandidateEvaluator::judge(const TransferFunction& plant, double horizon_s) const {
  CandidateOutcome out;
  out.stable = true;
  // C(s) as a transfer function and the margins only where something reads them (they allocate).
  std::optional<Margins> margins;
  const bool sensitivity = !options_.objective_requirement && options_.objective == Objective::sensitivity_peak;
  if (nominal_.needs_margins || options_.objective_requirement || sensitivity) {
    const TransferFunction c{Polynomial(num_), Polynomial(den_)};
    if (sensitivity_only_) {
      margins = sensitivity_margins(c * plant);
      if (nominal_.needs_peaks) add_closed_loop_peaks(*margins, c, plant);
    } else {
      margins = design_margins(nominal_, c, plant);
    }
  }
  out.violation = violation(metrics_, margins);
  out.objective = objective_given(metrics_, margins, horizon_s);
  out.effort_peak = metrics_.effort_peak;
  return out;
}

LinearGrid CandidateEvaluator::linear_grid() const {
  if (last_sampled_) {
    LinearGrid g{sampled_sim_.horizon_s(), sampled_sim_.fine_step_s(), sampled_sim_.fine_until_s()};
    if (nominal_.needs_load) g.load_horizon_s = load_settle_horizon(sampled_load_sim_.horizon_s());
    return g;
  }
  LinearGrid g = linear_grid_of(sim_.grid());
  if (nominal_.needs_load) g.load_horizon_s = load_settle_horizon(load_sim_.grid().horizon_s());
  return g;
}

double CandidateEvaluator::violation(const StepMetrics& m, const std::optional<Margins>& margins) const {
  double total = 0.0;
  for (const Requirement& r : requirements_)
    total += requirement_violation(
        r, requirement_value(r, m, margins, nominal_.reference_peak_time_s, nominal_.band_fraction * 100.0, margin_));
  return total;
}

double CandidateEvaluator::objective(const StepMetrics& m, const std::optional<Margins>& margins,
                                     const TransferFunction& c, const TransferFunction& plant,
                                     double horizon_s) const {
  if (!margins && !options_.objective_requirement && options_.objective == Objective::sensitivity_peak)
    return design_margins(nominal_, c, plant).sensitivity_peak;
  return objective_given(m, margins, horizon_s);
}

double CandidateEvaluator::objective_given(const StepMetrics& m, const std::optional<Margins>& margins,
                                           double horizon_s) const {
  if (options_.objective_requirement) {
    const auto v = requirement_value(*options_.objective_requirement, m, margins, nominal_.reference_peak_time_s,
                                     nominal_.band_fraction * 100.0);
    const double big = 1e3 * std::max(1.0, std::abs(options_.objective_requirement->limit));
    if (!v) return big;
    const double read = options_.objective_requirement->magnitude ? std::abs(*v) : *v;
    return options_.objective_requirement->upper ? read : 1.0 / std::max(read, 1e-12);
  }
  switch (options_.objective) {
    case Objective::itae:
    case Objective::iae:
    case Objective::ise:
      return tracking_objective(options_.objective, m, nominal_.spec.reference.amplitude, nominal_.tracking_window_s);
    case Objective::effort: return m.command_peak.value_or(m.effort_peak);  // what effort_max reads
    case Objective::settling_time: return m.settling_time_s.value_or(1e3 * horizon_s);
    case Objective::sensitivity_peak: return margins->sensitivity_peak;  // present: see objective()
    case Objective::load_iae: return m.load_iae.value_or(1e3 * horizon_s * load_offset_);  // present: see the reader
  }
  return 0.0;
}

}  // namespace specloop
