// Step response of the loop with a saturating, optionally rate-limited actuator, integrated with
// Boost.Odeint (controlled dopri5 with dense output) as a hybrid system: the saturation, the
// clamping anti-windup switch and the rate-limit modes are frozen within an integration piece;
// a switch is detected between accepted steps, located by bisection on the dense output, and
// the integration restarts there. Confirms on the nonlinear loop a design made on the linear one.
#pragma once

#include <limits>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/compensator.hpp"
#include "specloop/lti.hpp"
#include "specloop/response.hpp"

namespace specloop {

/// The actuator between the controller and the plant input.
struct ActuatorModel {
  double min = -std::numeric_limits<double>::infinity();  // lower limit of the applied u
  double max = std::numeric_limits<double>::infinity();   // upper limit of the applied u
  std::optional<double> rate_max;  // |du/dt| limit of the applied u, units/s (> 0); empty: none.
                                   // The applied u starts at 0, slews at ±rate_max toward the
                                   // saturated command and tracks it while |d/dt| <= rate_max.
                                   // "Saturated" for anti-windup means the command is beyond a
                                   // limit; back-calculation feeds back the applied (rate-limited) u.
};

struct LoopOptions {
  double setpoint_weight = 1.0;    // b: proportional term acts on b·r − y (parallel form only)
  double derivative_weight = 1.0;  // c: derivative of c·r − y; 1 = on error, 0 = on measurement
  AntiWindup anti_windup = AntiWindup::clamping;
  std::optional<double> tracking_time_s;  // back-calculation Tt, s; default √(Ti·Td), or Ti without D
  double disturbance_time_s = 0.0;  // a step of disturbance_size added at the plant input from here
  double disturbance_size = 0.0;    // in plant-input units; 0: no disturbance
  double horizon_s = 0.0;      // simulated time, s; <= 0: the linear step simulation's horizon
  double output_step_s = 0.0;  // observer sampling step, s; <= 0: horizon/4000
  std::vector<double> sample_times_s;  // if non-empty, sample exactly here instead (increasing, >= 0)
  int max_steps = 1'000'000;           // accepted integrator steps + restarts, over the whole run
  double max_wall_time_s = 60.0;       // wall-clock cap on one simulation, s
  double relative_tolerance = 1e-8;    // dopri5 error control, per step
  double absolute_tolerance = 1e-10;
};

enum class NonlinearStatus {
  ok,
  step_limit,  // max_steps reached, or the step size could not be adjusted (odeint gave up)
  non_finite,  // a state or output became NaN or infinite
  time_limit,  // max_wall_time_s reached
};
std::string_view status_name(NonlinearStatus s);

struct NonlinearResult {
  NonlinearStatus status = NonlinearStatus::ok;
  std::vector<double> time_s, output, control /*applied u*/, command /*u_c before saturation*/;
  double saturated_fraction = 0.0;  // time with the command beyond a limit ÷ horizon
  int steps = 0;                    // accepted integrator steps
  int switches = 0;                 // located mode switches (integration restarts)
  StepMetrics metrics;              // measured on the samples; valid only when status is ok
  std::vector<std::string> notes;   // what was simplified or not applied, in words
};

/// Simulates a step of `amplitude` in the reference at t = 0 (zero initial state; the
/// proportional and derivative terms see it at 0+) through the loop r → controller → actuator →
/// plant → y, unity negative feedback.
///
/// Controller: with parallel gains, u_c = Kp·(b·r − y) + I + Kd·s/(Tf·s + 1)·(c·r − y) and
/// I' = Ki·(r − y) modified by the anti-windup (Åström & Hägglund, Advanced PID Control, 2006,
/// ch. 3). Without parallel gains (lag, lead-lag), C(s) acts on e = r − y and neither weights nor
/// anti-windup apply (a note says so). The plant must be strictly proper (no algebraic loop).
///
/// Metrics use the linear definitions of StepMetrics measured on the samples: y∞ is the linear
/// loop's r·T(0) (final-value theorem), also when a limit or disturbance changes the true final
/// value; the steady-state error is the linear one. Extremes are sample maxima, crossings are
/// linearly interpolated, integrals use the trapezoid rule; with the default 4000 samples per
/// horizon that is accurate to about 1e-5 relative on smooth responses (the samples themselves
/// carry the integrator's error, ~1e-7 relative at the default tolerances).
///
/// Throws std::invalid_argument for malformed input (the message names the field); numerical
/// failures are reported in `status`, never as NaN samples.
NonlinearResult simulate_nonlinear(const StateSpace& plant, const Controller& controller, const ActuatorModel& actuator,
                                   const LoopOptions& options, double amplitude, double band_fraction);

}  // namespace specloop
