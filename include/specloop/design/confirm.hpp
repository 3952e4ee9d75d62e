// The confirmation stage: a design measured on the linear loop is run on the loop the spec
// describes (actuator limits, rate limit, anti-windup, disturbance, exact delay, sampling, plant
// model), every requirement is checked again there, and when one that the linear loop met is
// missed, the effects that acted are taken out to see which of them cost it (attribution).
#pragma once

#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/design/problem.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop {

struct Design;  // measure.hpp

/// Effects of the nonlinear loop taken out (the others kept), to see what they cost: the
/// requirements that degraded, re-read on that loop. One effect or several together.
struct CauseTrial {
  std::string factor;                 // the factors joined by " + ", e.g. "saturation", "saturation + sampling"
  std::vector<std::string> factors;   // each: "saturation", "anti-windup", "rate limit", "sampling", "delay",
                                      // "load step", "measurement noise", "plant nonlinearity"
  std::string removed;                // how they were taken out, in words
  NonlinearStatus status = NonlinearStatus::ok;
  std::vector<RequirementCheck> checks;  // the degraded requirements, re-checked without the factor
  bool restores = false;              // without it, every degraded requirement is met again
};

/// A design re-measured on the nonlinear loop (saturation, rate limit, anti-windup, disturbance).
struct NonlinearConfirmation {
  NonlinearStatus status = NonlinearStatus::ok;
  StepMetrics simulated;              // same definitions as the linear metrics (nonlinear.hpp)
  double saturated_fraction = 0.0;    // time with the command beyond a limit ÷ horizon
  double rate_limited_fraction = 0.0; // time the applied u slews at the rate limit ÷ horizon
  double command_excess_max = 0.0;    // largest distance of the command beyond a limit (windup)
  double integrator_held_fraction = 0.0;  // time the conditional integration held the integrator ÷ horizon
  /// The effects of this loop that the continuous linear loop leaves out and that acted in this run
  /// (ids: see `effect_description`): actuator_limits (the command went beyond a limit),
  /// rate_limit (the actuator slewed at it), sampling, delay, plant_nonlinearity,
  /// measurement_noise, load_step.
  std::vector<std::string> active_effects;
  double horizon_s = 0.0;             // simulated time (extended until the response settled)
  bool horizon_bound_hit = false;     // not settled by kMaxHorizonFactor × the linear horizon
  /// When not confirmed: the active effects taken out one at a time, then in combinations, up to
  /// the smallest sets whose removal restores every degraded requirement (`restores`).
  std::vector<CauseTrial> attribution;
  NonlinearStepper stepper = NonlinearStepper::dopri5;  // the integrator the stiffness estimate chose
  std::vector<RequirementCheck> checks;
  bool meets_all = false;
  bool confirmed = false;             // every requirement met on the linear loop is met here too
  std::string verdict;                // one sentence, with the numbers
  std::optional<DifferenceEquation> difference_equation;  // when the controller is sampled
  std::optional<double> noise_period_s;      // the noise period used, when there is noise
  std::optional<double> tracking_time_s;     // the back-calculation tracking time used, when it applies
  std::vector<std::string> notes;
};

/// Human description of an active-effect id (NonlinearConfirmation::active_effects).
std::string effect_description(std::string_view id);

/// Confirms a design whose linear loop is stable on the spec's nonlinear loop: the run starts
/// from the linear loop's grid (Design::linear_grid, kConfirmationSamples outputs) and is extended
/// until the response settles (simulate_until_settled, up to kMaxHorizonFactor); every
/// requirement is checked there against the linear checks, and the verdict says what acted and,
/// when not confirmed, which effects taken out restore the degraded requirements.
NonlinearConfirmation confirm_nonlinear(const Problem& problem, const Design& d);

/// The confirmation stage of a measured design: fills Design::nonlinear (confirm_nonlinear) when
/// its linear loop is stable, leaves it empty otherwise.
void confirm_design(const Problem& problem, Design& d);

}  // namespace specloop
