// The nonlinear loop with a continuous controller: the hybrid integration with located switches
// (nonlinear.hpp; the method in nonlinear.cpp's header comment), with the delay line when the loop
// has a transport delay, on either dense-output stepper.
#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <string>

#include <boost/numeric/odeint.hpp>

#include "sim/dense_stepping.hpp"
#include "sim/loop_model.hpp"
#include "sim/nonlinear_run.hpp"

namespace specloop::nonlinear_loop {
namespace {

// One integration over the horizon with the dense stepper `Dense` (odeint's dopri5 or
// ImplicitDense): restarts at the break points and at located mode switches, the output samples
// recorded on the dense output, the applied u stored in the delay line.
template <class Dense>
class ContinuousIntegration {
 public:
  ContinuousIntegration(RunState& run, DelayLine& line, Dense& dense, double max_dt)
      : run_(run), model_(run.model), line_(line), dense_(dense),
        x_(static_cast<std::size_t>(run.model.size), 0.0), xe_(x_), scratch_(x_) {
    dt_ = std::min(run.horizon / 4000.0, max_dt);
    if (run.options.first_step_s > 0.0) dt_ = std::min(dt_, run.options.first_step_s);
    if (model_.rate) {  // the actuator starts at rest at u = 0 and must slew to the command at 0+
      const double us = std::clamp(model_.command(x_.data()), model_.umin, model_.umax);
      modes_.rate = us > 0.0 ? RateMode::up : (us < 0.0 ? RateMode::down : RateMode::tracking);
    }
  }

  // The whole horizon; false: stopped (status and note set).
  bool run() {
    try {
      while (t_ < run_.horizon) {
        const double delay = run_.delay;
        if (delay > 0.0 && t_ + delay < run_.horizon) run_.breaks.insert(t_ + delay);  // a restart reaches the plant L later
        const double t_end = *run_.breaks.upper_bound(t_);
        const bool inclusive = !(delay > 0.0) || t_end >= run_.horizon;
        const double disturbance = run_.disturbance_at(t_);
        restart(t_end, disturbance);
        if (!integrate_piece(t_end, inclusive, disturbance)) return false;
      }
    } catch (const boost::numeric::odeint::odeint_error& e) {
      if (!all_finite(dense_.current_state()))
        return run_.halt(NonlinearStatus::non_finite, std::string("the state became non-finite: ") + e.what());
      return run_.halt(NonlinearStatus::step_limit, std::string("the integrator gave up: ") + e.what());
    } catch (const PlantEvaluationError& e) {
      return run_.halt(NonlinearStatus::non_finite,
                       std::string(e.what()) + " (integrating from t = " + std::to_string(dense_.current_time()) + " s)");
    }
    return true;
  }

 private:
  // A new piece at t_ (up to t_end): the noise value of the piece, the delay line's window, the
  // modes consistent with the state, the peaks and samples at the restart.
  void restart(double t_end, double disturbance) {
    const double noise_now = run_.noise.at(t_);
    if (noise_now != model_.n) {
      // A new noise value steps the command; a rate-limited actuator that was tracking
      // must slew from where it was, not jump with it.
      const double before = model_.applied(x_.data(), modes_);
      model_.n = noise_now;
      const double target = std::clamp(model_.command(x_.data()), model_.umin, model_.umax);
      if (model_.rate && modes_.rate == RateMode::tracking && target != before) {
        modes_.rate = target > before ? RateMode::up : RateMode::down;
        x_[static_cast<std::size_t>(model_.ua_index)] = before;
      }
    }
    line_.lo = t_ - run_.delay;
    line_.hi = t_end - run_.delay;
    for (int i = 0; i < 4; ++i) {  // a chosen mode can imply another (e.g. tracking at too steep a slope)
      modes_ = model_.choose(x_.data(), modes_, disturbance, scratch_.data(), i < 2, t_);
      if (model_.consistent(x_.data(), modes_, disturbance, scratch_.data(), t_)) break;
    }
    note_peaks(x_.data());  // right limit at the restart (0+: the kick)
    record_until(t_, true, [&](double) { return x_.data(); });
  }

  // Steps with the modes held from t_ until t_end, or until a located switch; false: stopped.
  bool integrate_piece(double t_end, bool inclusive, double disturbance) {
    const HeldModeSystem system{&model_, modes_, disturbance};
    std::array<double, 2> rates_prev{std::numeric_limits<double>::quiet_NaN(), 0.0};  // y', u_c' jump at a restart
    auto command_extremum = [&](const double* xs) { note_peaks(xs); };
    auto loop_rate = [&](const double* xs, double* dx, double time) {
      model_.derivative(xs, dx, modes_, disturbance, time);
    };
    run_.exact_y.emplace_back(t_, model_.output(x_.data()));
    dense_.initialize(x_, t_, std::min(dt_, t_end - t_));
    while (true) {
      if (!run_.within_budget(dense_.current_time())) return false;
      const auto [ta, tb] = step_within_domain(dense_, system, run_.work, run_.domain_retries);
      ++run_.result.steps;
      dt_ = dense_.current_time_step();
      const double tc = std::min(tb, t_end);
      if (tb <= t_end) xe_ = dense_.current_state();
      else dense_.calc_state(tc, xe_);
      if (!all_finite(xe_))
        return run_.halt(NonlinearStatus::non_finite, "the state became non-finite near t = " + std::to_string(tc) + " s");
      if (!model_.consistent(xe_.data(), modes_, disturbance, scratch_.data(), tc)) {
        const double hi = locate_switch(ta, tc, disturbance);
        store(ta, hi);
        record_until(hi, true, [&](double ts) { return dense_at(ts); });
        account(ta, hi);
        dense_.calc_state(hi, x_);
        note_peaks(x_.data());  // left limit at the switch
        run_.note_step(dense_, ta, hi, x_, rates_prev, loop_rate, command_extremum, true);
        t_ = hi;
        ++run_.result.switches;
        return true;
      }
      note_peaks(xe_.data());
      run_.note_step(dense_, ta, tc, xe_, rates_prev, loop_rate, command_extremum, true);
      store(ta, tc);
      record_until(tc, inclusive || tb < t_end, [&](double ts) { return dense_at(ts); });
      account(ta, tc);
      if (tb >= t_end) {
        x_ = xe_;
        t_ = t_end;
        return true;
      }
    }
  }

  // The switch inside the step [ta, tc], by bisection on the dense output (consistent at lo, not
  // at hi) to a few ulps of t; returns hi.
  double locate_switch(double ta, double tc, double disturbance) {
    double lo = ta, hi = tc;
    for (int it = 0; it < 200 && hi - lo > 4.0 * std::numeric_limits<double>::epsilon() * std::max(1.0, hi); ++it) {
      const double mid = 0.5 * (lo + hi);
      dense_.calc_state(mid, xe_);
      if (model_.consistent(xe_.data(), modes_, disturbance, scratch_.data(), mid)) lo = mid;
      else hi = mid;
    }
    return hi;
  }

  // Records the output samples up to t_end (inclusive or not) from the state `state_at(t)` gives.
  // Samples at a break point are recorded after the restart there (right limits of the delayed
  // input); without delay every piece is inclusive.
  template <class StateAt>
  void record_until(double t_end, bool inclusive, StateAt&& state_at) {
    const std::vector<double>& samples = run_.samples;
    NonlinearResult& result = run_.result;
    while (run_.next_sample < samples.size() &&
           (inclusive ? samples[run_.next_sample] <= t_end : samples[run_.next_sample] < t_end)) {
      const double ts = samples[run_.next_sample++];
      const double* xs = state_at(ts);
      result.time_s.push_back(ts);
      // One output evaluation per sample (an expression plant's output is a parser call).
      const double y = model_.output(xs);
      const double uc = model_.command_linear(xs, y) + model_.command_r * model_.r - model_.command_n * model_.n;
      result.output.push_back(y);
      result.command.push_back(uc);
      const double ua = (model_.rate && modes_.rate != RateMode::tracking) ? xs[model_.ua_index] : model_.saturated(uc, modes_);
      result.control.push_back(ua);
      result.plant_input.push_back(run_.delay > 0.0 ? line_.value(ts - run_.delay) : ua);
    }
  }

  const double* dense_at(double ts) {
    dense_.calc_state(ts, scratch_);
    return scratch_.data();
  }

  // Stores the applied u of [t0, t1] (inside the dense stepper's current step) in the line.
  void store(double t0, double t1) {
    if (!(run_.delay > 0.0) || !(t1 > t0)) return;
    DelayLine::Segment seg{t0, t1, {}};
    for (int j = 0; j < DelayLine::nodes; ++j) {
      const double tj = j == DelayLine::nodes - 1 ? t1 : t0 + (t1 - t0) * j / (DelayLine::nodes - 1);
      seg.u[static_cast<std::size_t>(j)] = model_.applied(dense_at(tj), modes_);
    }
    line_.segments.push_back(seg);
  }

  void note_peaks(const double* xs) {
    run_.peak_command = std::max(run_.peak_command, std::abs(model_.command(xs)));
    run_.peak_applied = std::max(run_.peak_applied, std::abs(model_.applied(xs, modes_)));
  }

  // The time [ta, tb] spent in the held modes: saturated, slewing, integrator held.
  void account(double ta, double tb) {
    if (modes_.sat != 0) run_.saturated_time += tb - ta;
    if (modes_.rate != RateMode::tracking) run_.slewing_time += tb - ta;
    if (model_.clamps() && (!modes_.integrating || modes_.sliding)) run_.held_time += tb - ta;
  }

  RunState& run_;
  LoopModel& model_;
  DelayLine& line_;
  Dense& dense_;
  State x_, xe_, scratch_;  // the state at t_, at a step's end, scratch
  Modes modes_;
  double dt_ = 0.0;  // the stepper's next trial step
  double t_ = 0.0;
};

}  // namespace

bool run_continuous(RunState& run) {
  DelayLine line;
  line.delay = run.delay;
  if (run.delay > 0.0) run.model.delay = &line;
  double max_dt = run.horizon / 100.0;  // bounds how far a double switch can hide inside one step
  if (run.delay > 0.0) max_dt = std::min(max_dt, run.delay);  // method of steps: stages need only the past
  const LoopOptions& options = run.options;
  bool completed = false;
  if (run.result.stepper == NonlinearStepper::rosenbrock4) {
    ImplicitDense dense(static_cast<std::size_t>(run.model.size), options.absolute_tolerance, options.relative_tolerance,
                        max_dt);
    completed = ContinuousIntegration<ImplicitDense>(run, line, dense, max_dt).run();
  } else {
    auto dense = make_dopri5(options.absolute_tolerance, options.relative_tolerance, max_dt);
    completed = ContinuousIntegration<decltype(dense)>(run, line, dense, max_dt).run();
  }
  run.model.delay = nullptr;  // the line ends here
  return completed;
}

}  // namespace specloop::nonlinear_loop
