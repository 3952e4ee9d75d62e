// The load response and the closed-loop peaks of a design (regulation.hpp).
#include "specloop/design/regulation.hpp"

#include <cmath>
#include <stdexcept>

#include "specloop/sim/nonlinear.hpp"
#include "specloop/sim/sampled_loop.hpp"

namespace specloop {

double load_size(const Spec& spec) { return spec.disturbance.size != 0.0 ? spec.disturbance.size : 1.0; }

double load_band(const Problem& problem) {
  return problem.band_fraction * std::abs(problem.spec.reference.amplitude);
}

double load_settle_horizon(double load_grid_horizon_s) {
  return load_grid_horizon_s * std::log(1.0 / TimeGridRules{}.decay_fraction) / std::log(1.0 / kLoadGridRules.decay_fraction);
}

void take_load_metrics(const StepMetrics& load_run, bool integrates, StepMetrics& m) {
  m.load_peak = load_run.effort_peak;
  m.load_iae.reset();
  m.load_recovery_time_s.reset();
  if (!integrates) return;
  m.load_iae = load_run.iae;
  // Never outside the band: recovered at once.
  m.load_recovery_time_s = load_run.settling_time_s;
}

StepStatus measure_load(const Problem& problem, const StateSpace& plant_realization, const Controller& controller,
                        StepMetrics& m, StepTrace* trace, double* horizon_s) {
  const double offset = std::abs(problem.spec.reference.amplitude);
  StepMetrics run;
  StepStatus status = StepStatus::numerical_failure;
  double horizon = 0.0;
  if (problem.sampled) {
    // The set-point weights do not matter here: the load run replaces the reference path.
    SampledStepSimulator sim;
    try {
      const DifferenceEquation eq =
          controller_difference_equation(controller, problem.spec.controller.sample_time_s, 1.0, 1.0);
      status = sim.simulate_load(plant_realization, eq, load_size(problem.spec), offset, problem.band_fraction, run, trace);
    } catch (const std::invalid_argument&) {
      status = StepStatus::numerical_failure;
    }
    horizon = sim.horizon_s();
  } else {
    StateSpace loop;
    load_loop_into(plant_realization, realize(controller.transfer), load_size(problem.spec), offset, loop);
    StepSimulator sim(kLoadGridRules);
    status = sim.simulate(loop, 1.0, problem.band_fraction, run, trace);
    horizon = sim.grid().horizon_s();
    if (status == StepStatus::ok && trace) trace->output = trace->effort;  // row 1: y itself
  }
  if (status != StepStatus::ok) {
    m.load_iae.reset();
    m.load_peak.reset();
    m.load_recovery_time_s.reset();
    return status;
  }
  take_load_metrics(run, controller.transfer.system_type() > 0, m);
  if (horizon_s) *horizon_s = load_settle_horizon(horizon);
  return status;
}

Margins design_margins(const Problem& problem, const TransferFunction& controller, const TransferFunction& plant) {
  Margins margins = loop_margins(controller * plant);
  if (problem.needs_peaks) add_closed_loop_peaks(margins, controller, plant);
  return margins;
}

void fill_missing_load(StepMetrics& nonlinear, const StepMetrics& linear) {
  if (nonlinear.load_peak) return;
  nonlinear.load_iae = linear.load_iae;
  nonlinear.load_peak = linear.load_peak;
  nonlinear.load_recovery_time_s = linear.load_recovery_time_s;
}

}  // namespace specloop
