// One run of simulate_nonlinear (private to the sim layer): what the set-up decided (nonlinear.cpp)
// and what the integration accumulates, shared by the continuous controller's run
// (continuous_run.cpp) and the sampled controller's (sampled_run.cpp).
#pragma once

#include <algorithm>
#include <array>
#include <chrono>
#include <cmath>
#include <cstddef>
#include <limits>
#include <set>
#include <string>
#include <utility>
#include <vector>

#include <boost/math/tools/roots.hpp>

#include "sim/loop_model.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop::nonlinear_loop {

/// Throws std::invalid_argument("simulate_nonlinear: " + what): malformed input.
[[noreturn]] void fail(const std::string& what);

/// Measurement noise: a zero-order-held Gaussian sequence, one value per period (noise.cpp).
struct MeasurementNoise {
  std::vector<double> values;  // empty: no noise
  double period = 0.0;
  /// The value held at `time`.
  double at(double time) const {
    if (values.empty()) return 0.0;
    const auto k = static_cast<std::size_t>(std::max(0.0, std::floor(time / period + 1e-9)));
    return values[std::min(k, values.size() - 1)];
  }
};

/// The noise the options ask for over `horizon` (controller period `period`, 0: continuous);
/// records its period and a note in `result`. Throws (fail) for more than 1e6 values.
MeasurementNoise measurement_noise(const LoopOptions& options, double period, double horizon, NonlinearResult& result);

struct RunState {
  // ---- Set up before the run (nonlinear.cpp).
  const LoopOptions& options;
  LoopModel& model;
  NonlinearResult& result;
  double amplitude = 0.0;
  double horizon = 0.0;
  double delay = 0.0;   // transport delay L, s
  double period = 0.0;  // controller sample time, s; 0: continuous
  std::vector<double> samples;  // the output sample times
  MeasurementNoise noise;
  double disturbance_time = 0.0, disturbance_size = 0.0;
  std::set<double> breaks;  // known discontinuities: the integration restarts at each
  std::chrono::steady_clock::time_point started;

  // ---- Accumulated by the run.
  std::size_t next_sample = 0;  // the first output sample not yet recorded
  int work = 0;                 // accepted steps + restarts, against max_steps
  int domain_retries = 0;       // smaller-step retries after a plant model left its domain
  double saturated_time = 0.0, slewing_time = 0.0;
  double held_time = 0.0;         // the integrator held by conditional integration
  double tentative_excess = 0.0;  // sampled controller: command excess before the integrator was held
  // Peaks of the applied u and of the command, exact where they sit: at 0+ (the proportional and
  // derivative kick), at every switch and restart (both sides) and at every accepted step's end,
  // besides the output samples (a kick or a corner of the rate limit lies between samples).
  double peak_applied = 0.0, peak_command = 0.0;
  // y at every step end, switch and restart, and at every y' = 0 inside a step (located on the
  // dense output by TOMS 748): the extrema the metrics read, exact to the integrator's tolerance.
  std::vector<std::pair<double, double>> exact_y;

  RunState(const LoopOptions& o, LoopModel& m, NonlinearResult& r) : options(o), model(m), result(r) {}

  /// The load disturbance at the plant input at `time`.
  double disturbance_at(double time) const {
    return (disturbance_size != 0.0 && disturbance_time < horizon && time >= disturbance_time) ? disturbance_size : 0.0;
  }
  /// Seconds since `started`.
  double wall() const { return std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count(); }
  /// Stops the run with a status and a note; returns false (what the integration returns then).
  bool halt(NonlinearStatus s, const std::string& why) {
    result.status = s;
    result.notes.push_back(why);
    return false;
  }
  /// Counts one unit of work; past max_steps, halts (step_limit, at time t) and returns false.
  bool count_work(double t) {
    if (++work > options.max_steps)
      return halt(NonlinearStatus::step_limit, "stopped at t = " + std::to_string(t) +
                                                   " s: max_steps = " + std::to_string(options.max_steps) + " reached");
    return true;
  }
  /// count_work, then the wall-clock cap (time_limit); false: halted.
  bool within_budget(double t) {
    if (!count_work(t)) return false;
    if (wall() > options.max_wall_time_s)
      return halt(NonlinearStatus::time_limit, "stopped at t = " + std::to_string(t) + " s: max_wall_time_s = " +
                                                   std::to_string(options.max_wall_time_s) + " reached");
    return true;
  }

  /// One accepted step [ta, tb] of a dense stepper with state rate `rate(x, dx, t)`: y at tb, and
  /// the interior extremum when y' changes sign (its value at ta kept in `rates_prev`, NaN:
  /// unknown). `command_extremum` (continuous controller; a no-op when sampled, u held) is called
  /// at each interior extremum of the command, where u_c' changes sign, located the same way.
  template <class Dense, class Rate, class CommandExtremum>
  void note_step(Dense& dense, double ta, double tb, const State& xb, std::array<double, 2>& rates_prev, Rate&& rate,
                 CommandExtremum&& command_extremum, bool continuous_command) {
    ext_x_.resize(xb.size());
    ext_dx_.resize(xb.size());
    auto rates = [&](const double* xs, double time) -> std::array<double, 2> {
      rate(xs, ext_dx_.data(), time);
      return {model.pm ? model.pm->output_rate(xs, ext_dx_.data()) : model.output(ext_dx_.data()),
              continuous_command ? model.command_rate(xs, ext_dx_.data()) : 0.0};
    };
    if (std::isnan(rates_prev[0])) {
      dense.calc_state(ta, ext_x_);
      rates_prev = rates(ext_x_.data(), ta);
    }
    const std::array<double, 2> rates_b = rates(xb.data(), tb);
    for (std::size_t which = 0; which < 2; ++which) {
      if (!(tb > ta) || !(rates_prev[which] * rates_b[which] < 0.0)) continue;
      auto f = [&](double time) {
        dense.calc_state(time, ext_x_);
        return rates(ext_x_.data(), time)[which];
      };
      boost::uintmax_t iterations = 60;
      const auto [lo, hi] = boost::math::tools::toms748_solve(f, ta, tb, rates_prev[which], rates_b[which],
                                                             boost::math::tools::eps_tolerance<double>(50), iterations);
      for (double te : {lo, hi}) {
        dense.calc_state(te, ext_x_);
        if (which == 0) exact_y.emplace_back(te, model.output(ext_x_.data()));
        else command_extremum(ext_x_.data());
      }
    }
    exact_y.emplace_back(tb, model.output(xb.data()));
    rates_prev = rates_b;
  }

 private:
  State ext_x_, ext_dx_;  // note_step's scratch
};

/// The continuous controller's hybrid integration with located switches (continuous_run.cpp);
/// false: stopped (status and note set in run.result).
bool run_continuous(RunState& run);

/// The sampled controller's run (sampled_run.cpp): difference equations at the samples, the
/// zero-order hold (with slew), the plant integrated between the hold's switches; false: stopped.
bool run_sampled(RunState& run, const Controller& controller);

}  // namespace specloop::nonlinear_loop
