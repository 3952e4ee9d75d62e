// Nonlinear-loop step simulation: saturation, rate limit and anti-windup as a hybrid system
// integrated with Boost.Odeint's dense-output dopri5 (see nonlinear.hpp for the contract).
//
// Method. The discrete modes (command saturated low/high or not; integrator frozen by clamping
// or not; actuator tracking the command or slewing up/down at the rate limit) are held constant
// within an integration piece, so the right-hand side the stepper sees is smooth. After every
// accepted step the state at the step end is checked for consistency with the held modes (a
// "guard" changed sign); if not, the switch is located by bisection on the dense output to a
// few ulps of t, the state there becomes the new initial state, the modes are re-chosen and the
// integration restarts. The reference step (t = 0) and the disturbance step start new pieces.
//
// Delay: a DelayLine stores the applied u of every integrated piece (six dense-output points per
// step, interpolated by a degree-5 polynomial); steps are capped at L (method of steps) and
// every restart time s adds the break point s + L.
//
// The pieces: this file checks the input, builds the loop (loop_model.hpp), chooses the horizon,
// the stepper, the output samples, noise and disturbance, runs the continuous controller's
// integration (continuous_run.cpp) or the sampled controller's (sampled_run.cpp), and measures
// (sample_metrics.cpp).
#include "specloop/sim/nonlinear.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <stdexcept>
#include <string>

#include <Eigen/Dense>

#include "sim/discretization.hpp"
#include "sim/loop_model.hpp"
#include "sim/nonlinear_run.hpp"
#include "sim/sample_metrics.hpp"

namespace specloop {

std::string_view stepper_name(NonlinearStepper s) {
  return s == NonlinearStepper::dopri5 ? "dopri5" : "rosenbrock4";
}

std::string_view status_name(NonlinearStatus s) {
  switch (s) {
    case NonlinearStatus::ok: return "ok";
    case NonlinearStatus::step_limit: return "step_limit";
    case NonlinearStatus::non_finite: return "non_finite";
    case NonlinearStatus::time_limit: return "time_limit";
  }
  throw std::invalid_argument("status_name: not a NonlinearStatus value");
}

namespace nonlinear_loop {

void fail(const std::string& what) { throw std::invalid_argument("simulate_nonlinear: " + what); }

}  // namespace nonlinear_loop

namespace {

using namespace nonlinear_loop;
using std::to_string;

// Malformed input is rejected before any work, naming the field.
void check_inputs(const StateSpace& plant, const ActuatorModel& actuator, const LoopOptions& options, double amplitude,
                  double band_fraction) {
  if (plant.states() < 1) fail("plant: needs at least one state");
  if (plant.outputs() != 1) fail("plant: expected one output, got " + to_string(plant.outputs()));
  if (plant.D(0) != 0.0) fail("plant: must be strictly proper (D = 0); a direct feedthrough makes an algebraic loop through the saturation");
  if (!plant.A.allFinite() || !plant.B.allFinite() || !plant.C.allFinite()) fail("plant: non-finite matrix entry");
  if (!std::isfinite(amplitude) || amplitude == 0.0) fail("amplitude: expected a finite nonzero number, got " + to_string(amplitude));
  if (!(band_fraction > 0.0 && band_fraction < 0.5)) fail("band_fraction: expected a number in (0, 0.5), got " + to_string(band_fraction));
  if (std::isnan(actuator.min) || std::isnan(actuator.max) || !(actuator.min < actuator.max))
    fail("actuator: expected min < max, got min " + to_string(actuator.min) + ", max " + to_string(actuator.max));
  if (actuator.min > 0.0 || actuator.max < 0.0) fail("actuator: the limits must include 0 (the loop starts at rest with u = 0)");
  if (actuator.rate_max && !(std::isfinite(*actuator.rate_max) && *actuator.rate_max > 0.0))
    fail("actuator.rate_max: expected a finite number > 0, got " + to_string(*actuator.rate_max));
  if (options.max_steps < 1) fail("max_steps: expected >= 1, got " + to_string(options.max_steps));
  if (!(options.relative_tolerance > 0.0) || !(options.absolute_tolerance > 0.0))
    fail("relative_tolerance, absolute_tolerance: expected numbers > 0");
  if (!(options.max_wall_time_s > 0.0)) fail("max_wall_time_s: expected a number > 0");
  if (!std::isfinite(options.setpoint_weight) || !std::isfinite(options.derivative_weight))
    fail("setpoint_weight, derivative_weight: expected finite numbers");
  if (!std::isfinite(options.disturbance_time_s) || options.disturbance_time_s < 0.0 || !std::isfinite(options.disturbance_size))
    fail("disturbance_time_s, disturbance_size: expected a finite time >= 0 and a finite size");
  if (options.tracking_time_s && !(std::isfinite(*options.tracking_time_s) && *options.tracking_time_s > 0.0))
    fail("tracking_time_s: expected a finite number > 0");
  if (!std::isfinite(options.delay_s) || options.delay_s < 0.0)
    fail("delay_s: expected a finite number >= 0, got " + to_string(options.delay_s));
  if (!std::isfinite(options.sample_time_s) || options.sample_time_s < 0.0)
    fail("sample_time_s: expected a finite number >= 0 (0: continuous controller), got " + to_string(options.sample_time_s));
  if (!std::isfinite(options.noise_rms) || options.noise_rms < 0.0)
    fail("noise_rms: expected a finite number >= 0, got " + to_string(options.noise_rms));
  if (!std::isfinite(options.noise_period_s)) fail("noise_period_s: expected a finite number");
}

// The parallel controller's gains, weights and anti-windup, its states from index `size` on.
void set_parallel_controller(LoopModel& model, const ParallelGains& g, const LoopOptions& options, int& size,
                             NonlinearResult& result) {
  if (!std::isfinite(g.kp) || !std::isfinite(g.ki) || !std::isfinite(g.kd) || !std::isfinite(g.filter_time))
    fail("controller: non-finite parallel gain");
  if (g.kd != 0.0 && !(g.filter_time > 0.0)) fail("controller: derivative action needs a filter time Tf > 0");
  model.parallel = true;
  model.kp = g.kp;
  model.ki = g.ki;
  model.kd = g.kd;
  model.tf = g.filter_time;
  model.b = options.setpoint_weight;
  model.c = options.derivative_weight;
  model.anti_windup = options.anti_windup;
  if (g.ki != 0.0) model.i_index = size++;
  if (g.kd != 0.0) model.d_index = size++;
  model.command_r = g.kp * model.b + (g.kd != 0.0 ? g.kd / g.filter_time * model.c : 0.0);
  model.command_n = g.kp + (g.kd != 0.0 ? g.kd / g.filter_time : 0.0);
  if (g.ki != 0.0 && options.anti_windup == AntiWindup::back_calculation) {
    if (options.tracking_time_s) {
      model.tt = *options.tracking_time_s;
    } else {
      // Default tracking time (Åström & Hägglund, Advanced PID Control, 2006, anti-windup
      // section; recalled from memory): Tt = √(Ti·Td) with derivative action, else Ti.
      // Ti = Kp/Ki and Td = Kd/Kp are positive for either action (reverse: all gains negative).
      if (!(g.kp * g.ki > 0.0))
        fail("tracking_time_s: no default without Kp and Ki of one sign; give it explicitly");
      const double ti = g.kp / g.ki;
      model.tt = g.kd * g.kp > 0.0 ? std::sqrt(ti * g.kd / g.kp) : ti;
    }
    result.tracking_time_s = model.tt;
    result.notes.push_back("back-calculation tracking time Tt = " + to_string(model.tt) + " s");
  }
  if (g.ki == 0.0 && options.anti_windup != AntiWindup::none)
    result.notes.push_back("no integral action: anti-windup has nothing to act on");
}

// A controller without parallel gains: C(s) realized as a state space on e = r − y, its states
// from index `size` on.
void set_state_space_controller(LoopModel& model, const Controller& controller, int& size, NonlinearResult& result) {
  const StateSpace cs = realize(controller.transfer);
  if (cs.outputs() != 1) fail("controller: expected a single-output realization");
  model.parallel = false;
  model.nc = cs.states();
  model.c_index = size;
  size += model.nc;
  model.ac = cs.A;
  model.bc = cs.B;
  model.cc = cs.C.row(0);
  model.dc = cs.D(0);
  model.command_r = model.dc;
  model.command_n = model.dc;
  result.notes.push_back("controller has no parallel form: C(s) realized as a state space acting on e = r - y; "
                         "no anti-windup, set-point and derivative weights not applied");
}

// The filters of a parallel controller as their own states from index `size` on (loop_model.hpp):
// F on the measurement the PID reads, N after the PID's output. The PID's integrator keeps its
// anti-windup: u_c is the command after N, and ∂u_c/∂I = 1 since N(∞) = 1.
void add_filter_states(LoopModel& model, const Controller& controller, const LoopOptions& options, int& size,
                       NonlinearResult& result) {
  if (const auto& f = controller.measurement_filter) {
    if (!(f->order == 1 || f->order == 2) || !(f->time_constant > 0.0) || !std::isfinite(f->time_constant))
      fail("controller.measurement_filter: expected order 1 or 2 and a finite time constant > 0");
    model.f_index = size;
    model.f_order = f->order;
    model.f_time = f->time_constant;
    size += f->order;
    model.command_n = 0.0;  // the noise reaches u_c only through F's states
  }
  if (const auto& f = controller.notch) {
    if (!(f->frequency > 0.0) || !std::isfinite(f->frequency) || !(f->depth > 0.0) || !(f->width > 0.0))
      fail("controller.notch: expected a finite frequency > 0, depth and width > 0");
    model.n_index = size;
    model.n_freq = f->frequency;
    model.n_zeta_p = f->width;
    model.n_zeta_z = f->depth * f->width;
    size += 2;
  }
  result.notes.push_back(std::string("controller with ") +
                         (controller.notch && controller.measurement_filter ? "a notch and a measurement filter"
                          : controller.notch                               ? "a notch"
                                                                           : "a measurement filter") +
                         ": u = N·v, v the parallel PID law on the filtered measurement F·y" +
                         (options.anti_windup != AntiWindup::none && model.i_index >= 0
                              ? "; anti-windup on the PID's integrator against the command after N"
                              : ""));
}

// A controller with filters and no parallel form (u = N·(C_r·r − C·F·y)): the two-input
// controller realized as one state space from C·F·N and C_r·N, its states from index `size` on.
// It has no integrator of its own for an anti-windup (a note says so).
void set_filtered_controller(LoopModel& model, const Controller& controller, const LoopOptions& options, int& size,
                             NonlinearResult& result) {
  const TwoInputRealization k = controller_realization(controller, options.setpoint_weight, options.derivative_weight);
  model.parallel = false;
  model.two_input = true;
  model.nc = static_cast<int>(k.A.rows());
  model.c_index = size;
  size += model.nc;
  model.ac = k.A;
  model.bc = k.b_y;
  model.br = k.b_r;
  model.cc = k.c.row(0);
  model.dc = k.d_y;
  model.command_r = k.d_r;
  model.command_n = k.d_y;
  result.notes.push_back(std::string("controller with ") +
                         (controller.notch && controller.measurement_filter ? "a notch and a measurement filter"
                          : controller.notch                               ? "a notch"
                                                                           : "a measurement filter") +
                         ": u = N·(C_r·r − C·F·y) realized as one two-input state space (no parallel form)" +
                         (options.anti_windup != AntiWindup::none ? "; anti-windup not applied to it" : ""));
}

// The loop plant → controller → actuator; state layout [plant | controller | applied u].
LoopModel loop_model_of(const StateSpace& plant, const Controller& controller, const ActuatorModel& actuator,
                        const LoopOptions& options, double amplitude, NonlinearResult& result) {
  LoopModel model;
  model.ap = plant.A;
  model.bp = plant.B;
  model.cp = plant.C.row(0);
  model.np = plant.states();
  if (options.plant_model) {
    if (options.plant_model->states() < 1) fail("plant_model: needs at least one state");
    model.pm = options.plant_model.get();
    model.np = model.pm->states();
  }
  model.r = amplitude;
  model.umin = actuator.min;
  model.umax = actuator.max;
  int size = model.np;
  const bool filtered = controller.notch || controller.measurement_filter;
  if (controller.parallel) {
    set_parallel_controller(model, *controller.parallel, options, size, result);
    if (filtered) add_filter_states(model, controller, options, size, result);
  } else if (filtered) {
    set_filtered_controller(model, controller, options, size, result);
  } else {
    set_state_space_controller(model, controller, size, result);
  }
  if (actuator.rate_max) {
    model.rate = true;
    model.rate_max = *actuator.rate_max;
    model.ua_index = size++;
  }
  model.size = size;
  return model;
}

// r → y at DC of the linear loop u = C_r·r − C·y, y = G·u, from the plant's and the controller's
// own DC values (not from the closed loop's state matrix: with a stiff plant and a large gain its
// entries span so many decades that a rank-revealing factorization calls it singular, and y∞
// came out NaN). `weight` = C_r(0)/C(0). NaN when the limit is 0/0 (a plant zero at the origin
// against an integrating controller).
double loop_dc_gain(const StateSpace& plant, const TransferFunction& c, double weight) {
  const double nc0 = c.numerator.coefficients.back(), dc0 = c.denominator.coefficients.back();
  const Eigen::Index n = plant.A.rows();
  Eigen::EigenSolver<Eigen::MatrixXd> es(plant.A, false);
  double rho = 0.0, smallest = std::numeric_limits<double>::infinity();
  for (Eigen::Index i = 0; i < n; ++i) {
    rho = std::max(rho, std::abs(es.eigenvalues()(i)));
    smallest = std::min(smallest, std::abs(es.eigenvalues()(i)));
  }
  const bool plant_integrates = es.info() != Eigen::Success || smallest <= 1e-13 * std::max(1.0, rho);
  const double g0 = plant_integrates ? std::numeric_limits<double>::infinity()
                                     : plant.D(0) - plant.C.row(0).dot(plant.A.partialPivLu().solve(plant.B));
  if (dc0 == 0.0) {  // an integrating controller: T(0) = C_r/C at s → 0 = 1
    if (nc0 == 0.0 || g0 == 0.0) return std::numeric_limits<double>::quiet_NaN();
    return 1.0;
  }
  const double c0 = nc0 / dc0;
  if (plant_integrates) return c0 != 0.0 ? weight : std::numeric_limits<double>::quiet_NaN();
  return weight * c0 * g0 / (1.0 + c0 * g0);
}

// The simulated time: the options' horizon, else the last sample time, else the linear loop's
// step-simulation horizon (extended by the delay).
double choose_horizon(const LoopOptions& options, const StateSpace& linear, NonlinearResult& result) {
  double horizon = options.horizon_s;
  if (!(horizon > 0.0)) {
    if (!options.sample_times_s.empty()) {
      horizon = options.sample_times_s.back();
    } else {
      Eigen::EigenSolver<Eigen::MatrixXd> es(linear.A, false);
      std::vector<Complex> poles;
      for (Eigen::Index i = 0; i < es.eigenvalues().size(); ++i) poles.push_back(es.eigenvalues()(i));
      if (es.info() != Eigen::Success || !all_stable(poles))
        fail("horizon_s: no default, the linear loop is not stable; give horizon_s explicitly");
      horizon = choose_time_grid(poles, TimeGridRules{}).horizon_s();
      if (options.delay_s > 0.0) {
        horizon += options.delay_s;
        result.notes.push_back("default horizon from the delay-free loop, extended by delay_s");
      }
    }
  }
  if (!std::isfinite(horizon) || !(horizon > 0.0)) fail("horizon_s: expected a finite number > 0");
  return horizon;
}

// The stepper for the continuous loop, from the stiffness estimate (kStiffStepThreshold) unless
// the options name one.
void choose_stepper(const StateSpace& linear, const StateSpace& plant, double horizon, const LoopOptions& options,
                    NonlinearResult& result) {
  double rho = 0.0;
  for (const Eigen::MatrixXd* a : {&linear.A, &plant.A}) {
    Eigen::EigenSolver<Eigen::MatrixXd> es(*a, false);
    if (es.info() == Eigen::Success) rho = std::max(rho, es.eigenvalues().cwiseAbs().maxCoeff());
  }
  result.explicit_steps_estimate = horizon * rho / 3.3;
  result.stepper = options.stepper ? *options.stepper
                                   : (result.explicit_steps_estimate > kStiffStepThreshold ? NonlinearStepper::rosenbrock4
                                                                                           : NonlinearStepper::dopri5);
  if (result.stepper == NonlinearStepper::rosenbrock4)
    result.notes.push_back("stiff loop (dopri5 would need about " + to_string(static_cast<long>(result.explicit_steps_estimate)) +
                           " steps for stability alone): integrated with the implicit Rosenbrock method");
}

// The output sample times: the options' (checked), else a uniform grid over the horizon.
std::vector<double> output_sample_times(const LoopOptions& options, double horizon) {
  std::vector<double> samples = options.sample_times_s;
  if (samples.empty()) {
    const double step = options.output_step_s > 0.0 ? options.output_step_s : horizon / 4000.0;
    const double count = std::ceil(horizon / step - 1e-9);
    if (!(count >= 1.0 && count <= 1e8)) fail("output_step_s: expected a step giving 1 to 1e8 samples per horizon");
    const auto n = static_cast<long>(count);
    samples.reserve(static_cast<std::size_t>(n) + 1);
    for (long k = 0; k <= n; ++k) samples.push_back(horizon * static_cast<double>(k) / static_cast<double>(n));
  } else {
    for (std::size_t k = 0; k < samples.size(); ++k)
      if (!std::isfinite(samples[k]) || samples[k] < 0.0 || samples[k] > horizon || (k > 0 && samples[k] <= samples[k - 1]))
        fail("sample_times_s: expected strictly increasing times in [0, horizon], bad entry " + to_string(k));
  }
  return samples;
}

// The output samples, the noise, the disturbance and the break points of one run.
void set_up_run(RunState& run) {
  const LoopOptions& options = run.options;
  NonlinearResult& result = run.result;
  run.samples = output_sample_times(options, run.horizon);
  for (std::vector<double>* v : {&result.time_s, &result.output, &result.control, &result.command})
    v->reserve(run.samples.size());
  if (run.period > 0.0 && run.horizon / run.period > 1e8) fail("sample_time_s: more than 1e8 controller samples per horizon");
  run.noise = measurement_noise(options, run.period, run.horizon, result);
  const double td = options.disturbance_time_s, dsize = options.disturbance_size, horizon = run.horizon;
  run.disturbance_time = td;
  run.disturbance_size = dsize;
  if (dsize != 0.0 && td >= horizon) result.notes.push_back("disturbance_time_s is at or beyond the horizon: no disturbance simulated");
  run.breaks.insert(horizon);
  if (dsize != 0.0 && td > 0.0 && td < horizon) run.breaks.insert(td);
  if (!run.noise.values.empty() && !(run.period > 0.0))  // a continuous controller sees every new noise value
    for (std::size_t k = 1; static_cast<double>(k) * run.noise.period < horizon; ++k)
      run.breaks.insert(static_cast<double>(k) * run.noise.period);
}

// After a completed run: the non-finite checks, the fractions, the metrics relative to y∞.
void finish(RunState& run, double y_inf, double band_fraction) {
  NonlinearResult& result = run.result;
  const LoopModel& model = run.model;
  for (double v : result.output)
    if (!std::isfinite(v)) {
      run.halt(NonlinearStatus::non_finite, "a sampled output is non-finite");
      return;
    }
  for (double v : result.control)
    if (!std::isfinite(v)) {
      run.halt(NonlinearStatus::non_finite, "a sampled control is non-finite");
      return;
    }
  if (run.domain_retries > 0)
    result.notes.push_back(std::to_string(run.domain_retries) + " integrator step(s) retried smaller after a trial stage left the "
                           "plant model's domain");
  const double horizon = run.horizon;
  result.saturated_fraction = run.saturated_time / horizon;
  result.rate_limited_fraction = run.slewing_time / horizon;
  result.integrator_held_fraction = run.held_time / horizon;
  result.command_excess_max = run.tentative_excess;
  for (double uc : result.command)
    result.command_excess_max = std::max(result.command_excess_max, std::max(uc - model.umax, model.umin - uc));
  if (std::isfinite(y_inf) && std::abs(y_inf) > 1e-12 * std::abs(run.amplitude)) {
    result.metrics = metrics_from_samples(result.time_s, result.output, result.control, y_inf, run.amplitude, band_fraction,
                                          run.exact_y);
    result.metrics.effort_peak = std::max(result.metrics.effort_peak, run.peak_applied);
    double command_peak = run.peak_command;
    for (double uc : result.command) command_peak = std::max(command_peak, std::abs(uc));
    result.metrics.command_peak = command_peak;
    result.measured = true;
    result.notes.push_back("metrics relative to the linear loop's final value y_inf = " + to_string(y_inf));
  } else {
    result.notes.push_back("metrics not measured: the linear loop has no finite nonzero final value");
  }
}

}  // namespace

NonlinearResult simulate_nonlinear(const StateSpace& plant, const Controller& controller, const ActuatorModel& actuator,
                                   const LoopOptions& options, double amplitude, double band_fraction) {
  using namespace nonlinear_loop;
  check_inputs(plant, actuator, options, amplitude, band_fraction);
  const double period = options.sample_time_s;
  NonlinearResult result;
  LoopModel model = loop_model_of(plant, controller, actuator, options, amplitude, result);

  // y∞ of the linear loop (final-value theorem). C_r(0)/C(0): the set-point weight b acts at DC
  // only without integral action (the integral term acts on r − y), and only where the weights
  // are applied at all.
  const StateSpace linear = close_loop(plant, realize(controller.transfer));
  const bool weights_applied = model.parallel && (!(period > 0.0) || samples_parallel_law(controller));
  const bool filtered_integral = controller.parallel && controller.parallel->ki != 0.0;
  const bool filtered = controller.notch || controller.measurement_filter;
  const double reference_weight_dc = filtered ? (filtered_integral ? 1.0 : options.setpoint_weight)
                                     : weights_applied && model.ki == 0.0 ? model.b : 1.0;
  const double y_inf = amplitude * loop_dc_gain(plant, controller.transfer, reference_weight_dc);

  RunState run(options, model, result);
  run.amplitude = amplitude;
  run.delay = options.delay_s;
  run.period = period;
  run.horizon = choose_horizon(options, linear, result);
  choose_stepper(linear, plant, run.horizon, options, result);
  set_up_run(run);
  run.started = std::chrono::steady_clock::now();
  const bool completed = period > 0.0 ? run_sampled(run, controller) : run_continuous(run);
  if (completed) finish(run, y_inf, band_fraction);
  if (completed && result.measured && options.measure_load && options.disturbance_size != 0.0 &&
      options.disturbance_time_s < run.horizon) {
    // The load's effect: this run less the same run without the load (same samples, same noise),
    // so that what the set point still does after the load step is not read as the load's.
    LoopOptions without = options;
    without.disturbance_size = 0.0;
    without.measure_load = false;
    without.sample_times_s = result.time_s;
    const NonlinearResult base = simulate_nonlinear(plant, controller, actuator, without, amplitude, band_fraction);
    if (base.status == NonlinearStatus::ok && base.output.size() == result.output.size()) {
      std::vector<double> effect(result.output.size());
      for (std::size_t k = 0; k < effect.size(); ++k) effect[k] = result.output[k] - base.output[k];
      add_load_metrics(result.time_s, effect, 0.0, options.disturbance_time_s, options.load_band,
                       controller.transfer.system_type() > 0, {}, result.metrics);
    } else {
      result.notes.push_back("load response not measured: the run without the load did not finish");
    }
  }
  return result;
}

}  // namespace specloop
