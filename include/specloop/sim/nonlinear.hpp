// Step response of the loop with a saturating, optionally rate-limited actuator, integrated with
// Boost.Odeint (controlled dopri5 with dense output) as a hybrid system: the saturation, the
// clamping anti-windup switch and the rate-limit modes are frozen within an integration piece;
// a switch is detected between accepted steps, located by bisection on the dense output, and
// the integration restarts there. Confirms on the nonlinear loop a design made on the linear one.
//
// Extensions: an exact transport delay between the actuator and the plant (a delay differential
// equation solved by the method of steps), and a sampled controller (difference equations at a
// fixed period, zero-order hold, the plant integrated piece by piece between the hold's switches).
#pragma once

#include <cstdint>
#include <limits>
#include <memory>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/sim/response.hpp"

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

/// The integrator for the continuous loop: odeint's explicit dopri5 (controlled, dense output)
/// or its implicit Rosenbrock method of order 4 (for stiff loops).
enum class NonlinearStepper { dopri5, rosenbrock4 };
std::string_view stepper_name(NonlinearStepper s);

/// A loop is integrated implicitly when dopri5 would need more than this many steps for
/// stability alone over the horizon (horizon·ρ/3.3, ρ the largest |eigenvalue| of the linear
/// loop or of the plant; 3.3 ≈ dopri5's stability limit on the negative real axis, Hairer &
/// Wanner, Solving ODEs II, 1996, sec. IV.2 — recalled from memory). Chosen by measurement
/// (`specloop_bench_confirm --stepper-sweep`, printed by bench/run_bench_confirm.sh): on a
/// saturated 3-state loop dopri5 took the estimated number of steps to within 1 % once it
/// exceeded ~1000, and Rosenbrock (about 200 steps, each several times dearer) was 1.5× faster
/// at an estimate of 2400 and 3.3× at 7300; on the demo loops (estimates 55–813, larger states)
/// Rosenbrock was 1.3–8× slower. Above 5000 the implicit stepper wins with margin.
inline constexpr double kStiffStepThreshold = 5000.0;
/// A plant given by its own right-hand side instead of (A, B, C), in deviation variables around
/// an operating point (x0, u0, y0): the simulation's state is δx = x − x0, its input δu = u − u0,
/// its output δy = h(x0 + δx) − y0. Implemented by ExpressionPlant (expression_plant.hpp).
/// Evaluations may throw PlantEvaluationError (a NaN or infinity from the model); the simulation
/// turns that into status non_finite with the message as a note.
class PlantModel {
 public:
  virtual ~PlantModel() = default;
  virtual int states() const = 0;
  /// δx' = f(x0 + δx, u0 + δu).
  virtual void derivative(const double* deviation, double input_deviation, double* rate) const = 0;
  /// δy = h(x0 + δx) − y0.
  virtual double output(const double* deviation) const = 0;
  /// dδy/dt along the state rate `rate` at δx: ∂h/∂x·rate.
  virtual double output_rate(const double* deviation, const double* rate) const = 0;
};

/// A plant model evaluated to NaN or infinity; the message names the expression and the values.
class PlantEvaluationError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

struct LoopOptions {
  double setpoint_weight = 1.0;    // b: proportional term acts on b·r − y (parallel form only)
  double derivative_weight = 1.0;  // c: derivative of c·r − y; 1 = on error, 0 = on measurement
  AntiWindup anti_windup = AntiWindup::conditional_integration;
  std::optional<double> tracking_time_s;  // back-calculation Tt, s; default √(Ti·Td), or Ti without D
  double disturbance_time_s = 0.0;  // a step of disturbance_size added at the plant input from here
  double disturbance_size = 0.0;    // in plant-input units; 0: no disturbance
  /// Measure the load response after the disturbance step (StepMetrics::load_*, README
  /// "Regulators") into the metrics: the output less that of a second run without the load (the
  /// same samples and noise), its peak always, its IAE and recovery time (last exit from
  /// ±load_band, output units) when the controller integrates (C(s) has a pole at s = 0).
  bool measure_load = false;
  double load_band = 0.0;
  double horizon_s = 0.0;      // simulated time, s; <= 0: the linear step simulation's horizon
  double output_step_s = 0.0;  // observer sampling step, s; <= 0: horizon/4000
  std::vector<double> sample_times_s;  // if non-empty, sample exactly here instead (increasing, >= 0)
  double first_step_s = 0.0;   // > 0: the integrator's first trial step at most this (a fast start the
                               // error control must see, e.g. a stiff loop's fast transient); 0: default
  int max_steps = 1'000'000;           // accepted integrator steps + restarts, over the whole run
  double max_wall_time_s = 60.0;       // wall-clock cap on one simulation, s
  double relative_tolerance = 1e-8;    // dopri5 error control, per step
  double absolute_tolerance = 1e-10;
  double delay_s = 0.0;        // transport delay between the applied actuator output and the plant input, s (>= 0)
  double sample_time_s = 0.0;  // > 0: the controller runs at this period (see below); 0: continuous
  double noise_rms = 0.0;      // measurement noise added to y where the controller reads it (>= 0); 0: none
  double noise_period_s = 0.0; // each noise value is held this long, s; <= 0: sample_time_s, or horizon/2000
  std::uint64_t noise_seed = 1;
  std::optional<NonlinearStepper> stepper;  // empty: chosen by the stiffness estimate (above)
  /// Set: the plant is this model (deviation variables) instead of the StateSpace argument, which
  /// then only gives the linear loop's final value y∞ and the default horizon (its linearization).
  std::shared_ptr<const PlantModel> plant_model;
};

/// `count` values of zero-mean Gaussian noise with standard deviation `rms`, from the 64-bit
/// Mersenne Twister (whose output the C++ standard fixes) by the Box–Muller transform on 53-bit
/// uniforms, so a seed gives the same sequence on every platform and build.
std::vector<double> gaussian_sequence(double rms, std::uint64_t seed, std::size_t count);

/// u[k] as a linear recursion of the controller's discrete transfer functions in z⁻¹, from the
/// reference and from the measurement: U(z) = (R(z)·r_num − Y(z)·y_num)/den, coefficients of
/// z⁰, z⁻¹, … (den[0] = 1). For PI/PID: integral by Tustin, filtered derivative by the documented rule.
struct DifferenceEquation {
  double sample_time_s = 0.0;
  std::vector<double> reference_numerator;    // acting on r[k], r[k−1], …
  std::vector<double> measurement_numerator;  // acting on y[k], y[k−1], …
  std::vector<double> denominator;            // 1, a1, a2, …
  std::string method;                         // in words, e.g. "integral: Tustin; derivative: backward difference on the filtered term"
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
  std::vector<double> plant_input;  // the applied u as it reaches the plant: control delayed by
                                    // delay_s (0 before it); the disturbance is not included
  double saturated_fraction = 0.0;  // time with the command beyond a limit ÷ horizon
  double rate_limited_fraction = 0.0;  // time the applied u slews at ±rate_max ÷ horizon
  double command_excess_max = 0.0;  // largest |u_c − clamp(u_c)| at the samples: how far the
                                    // command runs beyond the limits (integrator windup shows here);
                                    // a sampled controller's command as first computed counts too
  double integrator_held_fraction = 0.0;  // time the conditional integration held the integrator
                                         // (sampled: periods whose increment it skipped) ÷ horizon
  int steps = 0;                    // accepted integrator steps
  int switches = 0;                 // located mode switches (integration restarts)
  NonlinearStepper stepper = NonlinearStepper::dopri5;  // the one used
  double explicit_steps_estimate = 0.0;  // horizon·ρ/3.3: dopri5's steps for stability alone
  StepMetrics metrics;              // measured on the samples; valid only when status is ok and `measured`
  bool measured = false;            // false: the linear loop has no finite nonzero y∞ (a note says so)
  std::vector<std::string> notes;   // what was simplified or not applied, in words
  /// For a sampled controller: its difference equations at sample_time_s (empty when continuous).
  std::optional<DifferenceEquation> difference_equation;
  double noise_period_s = 0.0;             // the noise period used (options' or the default); 0: no noise
  std::optional<double> tracking_time_s;   // the back-calculation Tt used (given or by the default rule)
};

/// The difference equation a sampled controller runs at period `ts` (documented below under
/// "Sampled controller"), with set-point weight b and derivative weight c (PID family only).
/// Throws std::invalid_argument for ts <= 0 or an improper C(s).
DifferenceEquation controller_difference_equation(const Controller& controller, double ts, double setpoint_weight,
                                                  double derivative_weight);

/// Simulates a step of `amplitude` in the reference at t = 0 (zero initial state; the
/// proportional and derivative terms see it at 0+) through the loop r → controller → actuator →
/// plant → y, unity negative feedback.
///
/// Controller: with parallel gains, u_c = Kp·(b·r − y) + I + Kd·s/(Tf·s + 1)·(c·r − y) and
/// I' = Ki·(r − y) modified by the anti-windup (Åström & Hägglund, Advanced PID Control, 2006,
/// ch. 3). With filters (controller.notch N, controller.measurement_filter F) the same law reads
/// y_f = F·(y + n) in place of y and u_c = N·(its output); F and N are extra linear states and the
/// anti-windup acts on I against that u_c (N(∞) = 1). Without parallel gains (lag, lead-lag), C(s)
/// acts on e = r − y (with filters: u = N·(C_r·r − C·F·y) as one two-input state space) and neither
/// weights nor anti-windup apply (a note says so). The plant must be strictly proper (no algebraic
/// loop).
///
/// Metrics use the linear definitions of StepMetrics measured on the samples: y∞ is the linear
/// loop's r·T(0) (final-value theorem), also when a limit or disturbance changes the true final
/// value; the steady-state error is the linear one. The extrema of y (the peak, the deepest dip
/// after it, the undershoot) and the peaks of the applied u (`effort_peak`) and of the command
/// (`command_peak`, before the actuator's limits) are taken where the integrator puts them: at
/// every accepted step's end, every switch (both sides) and restart (0+: the kick), and at each
/// point inside a step where y′ or u_c′ changes sign, located by TOMS 748 on the dense output; a
/// sampled controller's applied u at its hold's knots. A hump that leaves the settling band
/// between two samples inside it (it moves the settling time) comes from the parabola through
/// the three samples around it; crossings are linearly interpolated, integrals use the trapezoid
/// rule (about 1e-5 relative with the default samples; the samples themselves carry the
/// integrator's error, ~1e-7 relative at the default tolerances).
///
/// Transport delay (delay_s = L > 0), exact: the plant input at t is the applied u at t − L (0
/// before L); the disturbance acts at the plant input undelayed. With a continuous controller
/// the loop is a delay differential equation, solved by the method of steps: every dopri5 step
/// is capped at L, so all its stages need u only at times already integrated. The applied u of
/// each accepted step (or part of a step up to a located switch) is stored as its values at six
/// equally spaced points of the step, taken from the stepper's own dense output; dopri5's
/// continuous extension is a polynomial of degree ≤ 5 in the step fraction within a held-mode
/// piece, so the degree-5 interpolant through those points reproduces it to rounding and the
/// delayed input carries only the dense output's error (4th order, about the step tolerance).
/// Every restart time s (t = 0, located switches, the disturbance step) makes s + L a break
/// point where the integration restarts, so the jumps and kinks of u reach the plant at a piece
/// boundary. Mode switches are located as without delay. A very small L forces many steps and
/// can end in step_limit. Without a horizon, the default one (from the delay-free loop) is
/// extended by L.
///
/// Sampled controller (sample_time_s = Ts > 0): at t = k·Ts (k = 0, 1, …; r[k] = amplitude, the
/// loop at rest before 0) the controller reads y(k·Ts) and computes the command u_c[k] by its
/// difference equation (reported in `difference_equation`):
///   p, pi, pd, pid (parallel gains): P[k] = Kp·(b·r − y);
///     integral by Tustin, I[k] = I[k−1] + Ki·Ts/2·(e[k] + e[k−1]);
///     derivative by the backward difference s ≈ (1 − z⁻¹)/Ts on Kd·s/(Tf·s + 1) acting on
///     v = c·r − y: D[k] = Tf/(Tf + Ts)·D[k−1] + Kd/(Tf + Ts)·(v[k] − v[k−1]) (pole in (0, 1):
///     stable for every Tf > 0);
///   lead, lag, lead-lag: Tustin of C(s), s = (2/Ts)·(1 − z⁻¹)/(1 + z⁻¹), acting on e = r − y
///     in direct form (no weights, no anti-windup, as in the continuous case);
///   p, pi, pd, pid with filters: the same P and integral on y_f[k] = F_d·(y + n) (F by Tustin),
///     the derivative by Tustin, D[k] = (2Tf − Ts)/(2Tf + Ts)·D[k−1] + 2Kd/(2Tf + Ts)·(v[k] − v[k−1]),
///     and u_c[k] = N_d·(P + I + D) (N by Tustin prewarped at ωn): term by term the equation
///     reported (Tustin of C_r, C, F and N), with the anti-windup below on I against that u_c;
///     other structures with filters: that equation in direct form, without anti-windup.
/// The command is saturated at the sample; anti-windup acts at the samples: clamping skips the
/// integral increment when the command with it lies beyond a limit and the increment pushes
/// further; back-calculation adds the discrete tracking term Ts/Tt·(u_a[k−1] − u_c[k−1]) to the
/// increment, u_a[k−1] being the applied value at the end of period k−1. Zero-order hold: the
/// saturated command is held until the next sample; with a rate limit the applied u slews at
/// ±rate_max from its current value toward it (reaching it within the period or continuing to
/// slew until the next sample). The applied u is thus piecewise linear and known in advance; the
/// delay shifts its switching instants exactly; the plant is integrated with dopri5 piece by
/// piece between those instants. `switches` counts the integration pieces; the saturated
/// fraction counts the sample periods whose command lies beyond a limit — the command as first
/// computed, with the integral increment, counts: a sample where clamping skipped the increment
/// and so brought the command back within the limit is saturated (the limit acted through the
/// anti-windup), and `integrator_held_fraction` counts those periods.
///
/// Measurement noise (noise_rms > 0): values n_k = gaussian_sequence(noise_rms, noise_seed)[k],
/// each held over [k·Tn, (k+1)·Tn), Tn = noise_period_s; the controller reads y + n (proportional,
/// integral and derivative terms, and e for the state-space form; through F when the controller has
/// a measurement filter). With a continuous controller
/// every k·Tn is a break point where the integration restarts (the noise is a staircase, so the
/// right-hand side stays smooth within a piece); a sampled controller reads y(k·Ts) + n at its
/// samples. The recorded output and the metrics are the noise-free plant output.
/// Nonlinear plant (options.plant_model set): the plant part of the loop is the model's
/// right-hand side in deviation variables; everything else (actuator limits and rates, which are
/// then deviations from u0 too, anti-windup, delay, sampling) is unchanged. A NaN or infinity from
/// the model in a trial step is retried from the last accepted state with steps ten times smaller
/// (up to 12 times: trial stages may leave the model's domain where the solution does not); if it
/// persists the run ends with status non_finite and a note naming the expression and the time.
///
/// Throws std::invalid_argument for malformed input (the message names the field); numerical
/// failures are reported in `status`, never as NaN samples.
NonlinearResult simulate_nonlinear(const StateSpace& plant, const Controller& controller, const ActuatorModel& actuator,
                                   const LoopOptions& options, double amplitude, double band_fraction);

}  // namespace specloop
