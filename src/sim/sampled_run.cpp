// The nonlinear loop with a sampled controller (nonlinear.hpp, "Sampled controller"): the
// difference equations at t = k·Ts with their anti-windup, the zero-order hold (with slew) as
// knots of a piecewise-linear applied u, and the plant integrated piece by piece between the
// hold's switches (shifted by the delay) on either dense-output stepper.
#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <boost/numeric/odeint.hpp>

#include "sim/dense_stepping.hpp"
#include "sim/discretization.hpp"
#include "sim/loop_model.hpp"
#include "sim/nonlinear_run.hpp"

namespace specloop::nonlinear_loop {
namespace {

// A filter's difference equation in direct form (newest first in the histories).
struct Section {
  DiscreteSection eq;
  std::vector<double> in, out;  // x[k−1], x[k−2], …; y[k−1], y[k−2], …
  explicit Section(DiscreteSection e)
      : eq(std::move(e)), in(eq.num.size() > 1 ? eq.num.size() - 1 : 0, 0.0), out(eq.den.size() - 1, 0.0) {}
  // The output for the input x at this sample, the histories untouched.
  double peek(double x) const {
    double y = eq.num[0] * x;
    for (std::size_t j = 1; j < eq.num.size(); ++j) y += eq.num[j] * in[j - 1];
    for (std::size_t j = 1; j < eq.den.size(); ++j) y -= eq.den[j] * out[j - 1];
    return y;
  }
  // The sample taken: x in, y out.
  void commit(double x, double y) {
    if (!in.empty()) {
      std::rotate(in.rbegin(), in.rbegin() + 1, in.rend());
      in[0] = x;
    }
    if (!out.empty()) {
      std::rotate(out.rbegin(), out.rbegin() + 1, out.rend());
      out[0] = y;
    }
  }
};

// The controller as difference equations, with its anti-windup at the samples.
struct SampledController : PidLaw {
  double ts = 0.0;
  bool parallel = false;
  double a_d = 0, g_d = 0;  // derivative: D[k] = a_d·D[k−1] + g_d·(v[k] − v[k−1])
  // A parallel law with filters: F on the measurement, N after the PID (empty: absent).
  std::optional<Section> filter, notch;
  double umin = 0, umax = 0;
  // Parallel-form states.
  double integral = 0, deriv = 0, e_prev = 0, v_prev = 0, uc_prev = 0;
  double ua_prev = 0;  // applied value at the end of the previous period (back-calculation)
  // Direct form (Tustin of C(s) on e): newest first.
  std::vector<double> num, den, e_hist, u_hist;
  // Two inputs (a controller with filters: u = N·(C_r·r − C·F·y)): e_hist holds y, r_hist r.
  bool two_input = false;
  std::vector<double> rnum, r_hist;
  DifferenceEquation equation;

  // The last update: the command as first computed (with the integral increment) and whether
  // the conditional integration then held the integrator. A command beyond a limit at a sample is
  // saturation even when holding the integrator brings the returned command back within it.
  double tentative = 0.0;
  bool held = false;

  double update(double r, double y) {
    held = false;
    if (parallel) {
      const double ym = y;
      if (filter) {
        y = filter->peek(ym);
        filter->commit(ym, y);
      }
      const double e = r - y, v = c * r - y;
      const double p = kp * (b * r - y);
      double di = ki != 0.0 ? ki * ts / 2.0 * (e + e_prev) : 0.0;
      if (ki != 0.0 && anti_windup == AntiWindup::back_calculation) di += ts / tt * (ua_prev - uc_prev);
      const double dn = kd != 0.0 ? a_d * deriv + g_d * (v - v_prev) : 0.0;
      // The command after N: N's direct term N_d(∞) > 0 (the notch's numerator and denominator are
      // positive on the real axis), so an increment moves u_c the way it moves the PID's output.
      auto after_notch = [&](double pid) { return notch ? notch->peek(pid) : pid; };
      double pid = p + integral + di + dn, uc = after_notch(pid);
      tentative = uc;
      if (ki != 0.0 && anti_windup == AntiWindup::conditional_integration && ((uc > umax && di > 0.0) || (uc < umin && di < 0.0))) {
        di = 0.0;  // conditional integration: the increment would push further into the limit
        pid = p + integral + dn;
        uc = after_notch(pid);
        held = true;
      }
      if (notch) notch->commit(pid, uc);
      integral += di;
      deriv = dn;
      e_prev = e;
      v_prev = v;
      uc_prev = uc;
      return uc;
    }
    std::rotate(e_hist.rbegin(), e_hist.rbegin() + 1, e_hist.rend());
    double uc = 0.0;
    if (two_input) {
      e_hist[0] = y;
      std::rotate(r_hist.rbegin(), r_hist.rbegin() + 1, r_hist.rend());
      r_hist[0] = r;
      for (std::size_t j = 0; j < rnum.size(); ++j) uc += rnum[j] * r_hist[j];
      for (std::size_t j = 0; j < num.size(); ++j) uc -= num[j] * e_hist[j];
    } else {
      e_hist[0] = r - y;
      for (std::size_t j = 0; j < num.size(); ++j) uc += num[j] * e_hist[j];
    }
    for (std::size_t j = 1; j < den.size(); ++j) uc -= den[j] * u_hist[j - 1];
    tentative = uc;
    std::rotate(u_hist.rbegin(), u_hist.rbegin() + 1, u_hist.rend());
    if (!u_hist.empty()) u_hist[0] = uc;
    uc_prev = uc;
    return uc;
  }
};

SampledController make_sampled(const Controller& controller, const LoopModel& model, double ts) {
  SampledController sc;
  sc.ts = ts;
  sc.umin = model.umin;
  sc.umax = model.umax;
  sc.equation = controller_difference_equation(controller, ts, model.b, model.c);
  if (samples_parallel_law(controller)) {
    sc.parallel = true;
    static_cast<PidLaw&>(sc) = model;
    sc.a_d = sc.kd != 0.0 ? sc.tf / (sc.tf + ts) : 0.0;  // backward difference
    sc.g_d = sc.kd != 0.0 ? sc.kd / (sc.tf + ts) : 0.0;
  } else if (samples_filtered_parallel_law(controller)) {
    // As the linear sampled loop (controller_difference_equation): the PID's terms by Tustin
    // (Tustin of a sum is the sum of the terms' images), F by Tustin, N by Tustin prewarped.
    sc.parallel = true;
    static_cast<PidLaw&>(sc) = model;
    sc.a_d = sc.kd != 0.0 ? (2.0 * sc.tf - ts) / (2.0 * sc.tf + ts) : 0.0;
    sc.g_d = sc.kd != 0.0 ? 2.0 * sc.kd / (2.0 * sc.tf + ts) : 0.0;
    if (controller.measurement_filter) sc.filter.emplace(measurement_filter_section(*controller.measurement_filter, ts));
    if (controller.notch) sc.notch.emplace(notch_section(*controller.notch, ts));
  } else {
    sc.num = sc.equation.measurement_numerator;
    sc.den = sc.equation.denominator;
    sc.e_hist.assign(sc.num.size(), 0.0);
    if (controller.notch || controller.measurement_filter) {
      sc.two_input = true;
      sc.rnum = sc.equation.reference_numerator;
      sc.r_hist.assign(sc.rnum.size(), 0.0);
    }
    sc.u_hist.assign(sc.den.size() > 1 ? sc.den.size() - 1 : 0, 0.0);
  }
  return sc;
}

// The applied u from time t on (until the next knot): value + slope·(τ − t).
struct Knot {
  double t, plant_t;  // at the actuator, and at the plant (t + L)
  double value, slope;
};

// The plant alone under the held (possibly slewing) input u0 + slope·(t − t0), plus the
// disturbance d: the system integrated between the hold's switches.
struct PlantSystem {
  const LoopModel* m;
  double u0, slope, t0, d;
  void evaluate(const double* xs, double* dx, double time) const {
    const double u = u0 + slope * (time - t0) + d;
    if (m->pm) {
      m->pm->derivative(xs, u, dx);
      return;
    }
    for (int i = 0; i < m->np; ++i) {
      double v = m->bp(i) * u;
      for (int j = 0; j < m->np; ++j) v += m->ap(i, j) * xs[j];
      dx[i] = v;
    }
  }
  void operator()(const State& xs, State& dx, double time) const { evaluate(xs.data(), dx.data(), time); }
  bool time_varying() const { return slope != 0.0; }  // a slewing input
};

// One run over the horizon with the dense stepper `Dense` (odeint's dopri5 or ImplicitDense):
// the controller's samples when due, the output samples, the plant between break points.
template <class Dense>
class SampledIntegration {
 public:
  SampledIntegration(RunState& run, SampledController& ctl, Dense& dense)
      : run_(run), model_(run.model), ctl_(ctl), dense_(dense), x_(static_cast<std::size_t>(run.model.np), 0.0),
        xe_(x_), scratch_(x_) {
    dt_ = std::min(run.horizon / 4000.0, run.period);
    if (run.options.first_step_s > 0.0) dt_ = std::min(dt_, run.options.first_step_s);
  }

  // The whole horizon; false: stopped (status and note set).
  bool run() {
    const double period = run_.period, horizon = run_.horizon;
    try {
      while (true) {
        while (static_cast<double>(k_) * period <= t_ && static_cast<double>(k_) * period <= horizon)
          if (!controller_sample()) return false;
        while (run_.next_sample < run_.samples.size() && run_.samples[run_.next_sample] <= t_)
          record(run_.samples[run_.next_sample++], x_);
        if (t_ >= horizon) break;
        const double t_end = *run_.breaks.upper_bound(t_);
        if (!run_.count_work(t_)) return false;
        ++run_.result.switches;
        if (t_end - t_ > 1e-13 * std::max(1.0, std::abs(t_))) {  // shorter pieces (rounding of k·Ts + L) are skipped
          if (!integrate_piece(t_end)) return false;
        }
        t_ = t_end;
      }
    } catch (const boost::numeric::odeint::odeint_error& e) {
      return run_.halt(NonlinearStatus::step_limit, std::string("the integrator gave up: ") + e.what());
    } catch (const PlantEvaluationError& e) {
      return run_.halt(NonlinearStatus::non_finite,
                       std::string(e.what()) + " (integrating from t = " + std::to_string(t_) + " s)");
    }
    return true;
  }

 private:
  // The controller's sample k_ at t = k_·Ts: reads y + noise, computes the command, holds it
  // (slewing with a rate limit) and adds the knots and break points; false: a non-finite command.
  bool controller_sample() {
    const double period = run_.period, horizon = run_.horizon;
    const double tk = static_cast<double>(k_) * period;
    const double y = model_.output(x_.data()) + run_.noise.at(tk);
    const double uc = ctl_.update(run_.amplitude, y);
    if (!std::isfinite(uc))
      return run_.halt(NonlinearStatus::non_finite, "the controller output became non-finite at t = " + std::to_string(tk) + " s");
    commands_.push_back(uc);
    run_.peak_command = std::max(run_.peak_command, std::abs(uc));
    // Saturated: the command beyond a limit at this sample, as first computed (before the
    // conditional integration held the integrator) or as returned.
    const double highest = std::max(ctl_.tentative, uc), low = std::min(ctl_.tentative, uc);
    if (highest > model_.umax || low < model_.umin) {
      run_.saturated_time += std::min(period, horizon - tk);
      run_.tentative_excess = std::max({run_.tentative_excess, highest - model_.umax, model_.umin - low});
    }
    if (ctl_.held) run_.held_time += std::min(period, horizon - tk);
    hold(tk, std::clamp(uc, model_.umin, model_.umax));
    ++k_;
    if (static_cast<double>(k_) * period < horizon) run_.breaks.insert(static_cast<double>(k_) * period);
    return true;
  }

  // The zero-order hold of `target` from tk: a knot there (and one where a slew reaches it), the
  // applied value at the period's end for back-calculation, the applied u's peak, the break points
  // where the knots reach the plant.
  void hold(double tk, double target) {
    const double period = run_.period, delay = run_.delay, horizon = run_.horizon;
    const double now = applied_at(tk);
    double end_value = target;
    if (model_.rate && target != now) {
      const double slope = target > now ? model_.rate_max : -model_.rate_max;
      const double reach = tk + (target - now) / slope;
      knots_.push_back({tk, tk + delay, now, slope});
      run_.slewing_time += std::min({reach, tk + period, horizon}) - tk;
      if (reach < tk + period) knots_.push_back({reach, reach + delay, target, 0.0});
      else end_value = now + slope * period;
    } else {
      knots_.push_back({tk, tk + delay, target, 0.0});
    }
    ctl_.ua_prev = end_value;
    // the applied u is piecewise linear between knots: its peak is at one (or at the horizon)
    for (std::size_t i = knots_.size() - (knots_.back().t > tk ? 2 : 1); i < knots_.size(); ++i)
      if (knots_[i].t < horizon) run_.peak_applied = std::max(run_.peak_applied, std::abs(knots_[i].value));
    for (std::size_t i = knots_.size() - (knots_.back().t > tk ? 2 : 1); i < knots_.size(); ++i)
      if (knots_[i].plant_t < horizon) run_.breaks.insert(knots_[i].plant_t);
  }

  // The plant from t_ to t_end under the input the knots give there; x_ ends at t_end. False: stopped.
  bool integrate_piece(double t_end) {
    const Knot& kn = plant_knot(t_);
    PlantSystem system{&model_, kn.slope == 0.0 ? kn.value : kn.value + kn.slope * (t_ - kn.plant_t), kn.slope, t_,
                       run_.disturbance_at(t_)};
    dense_.initialize(x_, t_, std::min(dt_, t_end - t_));
    std::array<double, 2> rates_prev{std::numeric_limits<double>::quiet_NaN(), 0.0};  // y' jumps with the hold
    auto plant_rate = [&](const double* xs, double* dx, double time) { system.evaluate(xs, dx, time); };
    run_.exact_y.emplace_back(t_, model_.output(x_.data()));
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
      run_.note_step(dense_, ta, tc, xe_, rates_prev, plant_rate, [](const double*) {}, false);
      while (run_.next_sample < run_.samples.size() && run_.samples[run_.next_sample] < tc) {
        dense_.calc_state(run_.samples[run_.next_sample], scratch_);
        record(run_.samples[run_.next_sample++], scratch_);
      }
      if (tb >= t_end) break;
    }
    x_ = xe_;
    return true;
  }

  // The applied u at tau, right-continuous, at the actuator.
  double applied_at(double tau) const {
    std::size_t k = knots_.size() - 1;
    while (k > 0 && knots_[k].t > tau) --k;
    return knots_[k].slope == 0.0 ? knots_[k].value : knots_[k].value + knots_[k].slope * (tau - knots_[k].t);
  }
  // The knot in force at the plant at `time`, right-continuous.
  const Knot& plant_knot(double time) const {
    std::size_t k = knots_.size() - 1;
    while (k > 0 && knots_[k].plant_t > time) --k;
    return knots_[k];
  }

  // Records the output sample at ts with the plant state xs.
  void record(double ts, const State& xs) {
    NonlinearResult& result = run_.result;
    result.time_s.push_back(ts);
    result.output.push_back(model_.output(xs.data()));
    const auto k = static_cast<std::size_t>(std::max(0.0, std::floor(ts / run_.period + 1e-9)));
    result.command.push_back(commands_[std::min(k, commands_.size() - 1)]);
    result.control.push_back(applied_at(ts));
    const Knot& kn = plant_knot(ts);
    result.plant_input.push_back(kn.slope == 0.0 ? kn.value : kn.value + kn.slope * (ts - kn.plant_t));
  }

  RunState& run_;
  const LoopModel& model_;
  SampledController& ctl_;
  Dense& dense_;
  State x_, xe_, scratch_;  // the plant state at t_, at a step's end, scratch
  std::vector<Knot> knots_{{-std::numeric_limits<double>::infinity(), -std::numeric_limits<double>::infinity(), 0.0, 0.0}};
  std::vector<double> commands_;  // u_c[k]
  double dt_ = 0.0;               // the stepper's next trial step
  double t_ = 0.0;
  long k_ = 0;                    // the next controller sample
};

}  // namespace

bool run_sampled(RunState& run, const Controller& controller) {
  SampledController ctl = make_sampled(controller, run.model, run.period);
  run.result.difference_equation = ctl.equation;
  if (ctl.filter || ctl.notch)
    run.result.notes.push_back("sampled controller with filters: the PID's terms by Tustin on F·y (F by Tustin), N after them "
                               "(Tustin prewarped at ωn); anti-windup on the integrator against the command after N");
  else if (ctl.two_input)
    run.result.notes.push_back("sampled controller with filters: its difference equation u = N·(C_r·r − C·F·y) as one "
                               "direct form; anti-windup not applied");
  else if (!ctl.parallel && controller.parallel)
    run.result.notes.push_back("sampled lead/lag: Tustin of C(s) on e = r - y; set-point and derivative weights and anti-windup not applied");
  const LoopOptions& options = run.options;
  if (run.result.stepper == NonlinearStepper::rosenbrock4) {
    ImplicitDense dense(static_cast<std::size_t>(run.model.np), options.absolute_tolerance, options.relative_tolerance,
                        run.horizon / 100.0);
    return SampledIntegration<ImplicitDense>(run, ctl, dense).run();
  }
  auto dense = make_dopri5(options.absolute_tolerance, options.relative_tolerance, run.horizon / 100.0);
  return SampledIntegration<decltype(dense)>(run, ctl, dense).run();
}

}  // namespace specloop::nonlinear_loop
