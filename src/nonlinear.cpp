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
#include "specloop/nonlinear.hpp"

#include <algorithm>
#include <array>
#include <chrono>
#include <cmath>
#include <limits>
#include <stdexcept>
#include <string>

#include <Eigen/Dense>
#include <boost/numeric/odeint.hpp>

namespace specloop {

std::string_view anti_windup_name(AntiWindup a) {
  switch (a) {
    case AntiWindup::none: return "none";
    case AntiWindup::clamping: return "clamping";
    case AntiWindup::back_calculation: return "back-calculation";
  }
  throw std::invalid_argument("anti_windup_name: not an AntiWindup value");
}

const std::vector<std::string>& anti_windup_names() {
  static const std::vector<std::string> names{"none", "clamping", "back-calculation"};
  return names;
}

std::optional<AntiWindup> parse_anti_windup(std::string_view name) {
  for (AntiWindup a : {AntiWindup::none, AntiWindup::clamping, AntiWindup::back_calculation})
    if (anti_windup_name(a) == name) return a;
  return std::nullopt;
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

namespace {

using State = std::vector<double>;

enum class RateMode { tracking, up, down };

struct Modes {
  int sat = 0;              // +1 command above max, −1 below min, 0 within the limits
  bool integrating = true;  // clamping: false while saturated and the error drives further in
  bool sliding = false;     // clamping: u_c held on the limit by partial integration (see below)
  RateMode rate = RateMode::tracking;
};

void fail(const std::string& what) { throw std::invalid_argument("simulate_nonlinear: " + what); }

// The closed loop with its modes' algebra. State layout: [plant | controller | applied u].
struct LoopModel {
  // Plant x' = Ap·x + Bp·(u + d), y = Cp·x.
  Eigen::MatrixXd ap;
  Eigen::VectorXd bp;
  Eigen::RowVectorXd cp;
  int np = 0;
  // Parallel controller.
  bool parallel = false;
  double kp = 0, ki = 0, kd = 0, tf = 0, b = 1, c = 1, tt = 1;
  int i_index = -1, d_index = -1;
  AntiWindup anti_windup = AntiWindup::none;
  // State-space controller on e = r − y.
  Eigen::MatrixXd ac;
  Eigen::VectorXd bc;
  Eigen::RowVectorXd cc;
  double dc = 0;
  int c_index = 0, nc = 0;
  // Actuator.
  double umin = 0, umax = 0, rate_max = 0;
  bool rate = false;
  int ua_index = -1;
  int size = 0;
  double r = 0;          // reference (after the step)
  double command_r = 0;  // ∂u_c/∂r

  double output(const double* x) const {
    double y = 0;
    for (int i = 0; i < np; ++i) y += cp(i) * x[i];
    return y;
  }
  // The part of u_c that is linear in the state (applied to x' it gives u_c').
  double command_linear(const double* x) const {
    const double y = output(x);
    if (parallel) {
      double u = -kp * y;
      if (i_index >= 0) u += x[i_index];
      if (d_index >= 0) u += kd / tf * (-y - x[d_index]);
      return u;
    }
    double u = -dc * y;
    for (int i = 0; i < nc; ++i) u += cc(i) * x[c_index + i];
    return u;
  }
  double command(const double* x) const { return command_linear(x) + command_r * r; }
  double saturated(double uc, const Modes& m) const { return m.sat > 0 ? umax : (m.sat < 0 ? umin : uc); }
  double applied(const double* x, const Modes& m) const {
    if (rate && m.rate != RateMode::tracking) return x[ua_index];
    return saturated(command(x), m);
  }

  void derivative(const double* x, double* dx, const Modes& m, double d) const {
    const double y = output(x), uc = command(x), us = saturated(uc, m);
    const double ua = (rate && m.rate != RateMode::tracking) ? x[ua_index] : us;
    const double e = r - y;
    for (int i = 0; i < np; ++i) {
      double s = bp(i) * (ua + d);
      for (int j = 0; j < np; ++j) s += ap(i, j) * x[j];
      dx[i] = s;
    }
    if (parallel) {
      if (i_index >= 0) {
        switch (anti_windup) {
          case AntiWindup::none: dx[i_index] = ki * e; break;
          case AntiWindup::clamping:
            if (m.sliding) {
              // Filippov sliding on the limit: neither integrating (u_c would re-enter the linear
              // region) nor frozen (u_c would leave the limit inward) is consistent, so the
              // integrator moves just enough to hold u_c' = 0.
              dx[i_index] = 0.0;
              if (d_index >= 0) dx[d_index] = (c * r - y - x[d_index]) / tf;
              dx[i_index] = -command_linear(dx);
            } else {
              dx[i_index] = m.integrating ? ki * e : 0.0;
            }
            break;
          case AntiWindup::back_calculation: dx[i_index] = ki * e + (ua - uc) / tt; break;
        }
      }
      if (d_index >= 0) dx[d_index] = (c * r - y - x[d_index]) / tf;
    } else {
      for (int i = 0; i < nc; ++i) {
        double s = bc(i) * e;
        for (int j = 0; j < nc; ++j) s += ac(i, j) * x[c_index + j];
        dx[c_index + i] = s;
      }
    }
    if (rate) dx[ua_index] = m.rate == RateMode::up ? rate_max : (m.rate == RateMode::down ? -rate_max : 0.0);
  }

  bool clamps() const { return parallel && i_index >= 0 && anti_windup == AntiWindup::clamping; }

  // True when the state is consistent with the held modes (no guard has changed sign).
  bool consistent(const double* x, const Modes& m, double d, State& scratch) const {
    const double uc = command(x);
    if (m.sliding) {
      // Sliding holds while the integration it needs lies between frozen and full:
      // 0 <= s·I' <= s·Ki·e (s = +1 on the upper limit, −1 on the lower).
      derivative(x, scratch.data(), m, d);
      const double s = m.sat, held = s * scratch[i_index], full = s * ki * (r - output(x));
      if (held < 0.0 || held > full) return false;
    } else {
      if (m.sat == 0 && (uc > umax + value_tolerance(umax) || uc < umin - value_tolerance(umin))) return false;
      if (m.sat > 0 && uc < umax - value_tolerance(umax)) return false;
      if (m.sat < 0 && uc > umin + value_tolerance(umin)) return false;
    }
    if (clamps() && m.sat != 0 && !m.sliding) {
      const double drive = ki * (r - output(x)) * m.sat;  // > 0: integrating pushes further in
      if (m.integrating && drive > 0) return false;
      if (!m.integrating && drive < 0) return false;
    }
    if (rate) {
      const double us = saturated(uc, m);
      if (m.rate == RateMode::up && x[ua_index] > us) return false;
      if (m.rate == RateMode::down && x[ua_index] < us) return false;
      if (m.rate == RateMode::tracking && m.sat == 0) {
        derivative(x, scratch.data(), m, d);
        if (std::abs(command_linear(scratch.data())) > rate_max) return false;
      }
    }
    return true;
  }

  static double value_tolerance(double limit) { return 1e-12 * std::max(1.0, std::abs(limit)); }

  // Modes consistent with the state x (at a switch, just past it); may set the applied-u state
  // when the actuator leaves tracking, and may move I by at most ~1e-7 to put u_c exactly on a
  // limit it is sliding on. `by_slope`: on a limit, decide from the slopes of u_c in each
  // candidate mode rather than from its value (which is ambiguous there).
  Modes choose(State& x, Modes m, double d, State& scratch, bool by_slope) const {
    const double uc = command(x.data());
    m.sat = uc > umax ? 1 : (uc < umin ? -1 : 0);
    m.sliding = false;
    if (clamps()) m.integrating = !(m.sat != 0 && ki * (r - output(x.data())) * m.sat > 0);
    const double near_hi = 1e-7 * std::max(1.0, std::abs(umax)), near_lo = 1e-7 * std::max(1.0, std::abs(umin));
    const int side = (std::isfinite(umax) && std::abs(uc - umax) <= near_hi) ? 1
                     : (std::isfinite(umin) && std::abs(uc - umin) <= near_lo) ? -1 : 0;
    if (by_slope && side != 0) {
      const double s = side, limit = side > 0 ? umax : umin;
      if (i_index >= 0 && clamps()) x[i_index] += limit - uc;  // project onto the limit
      Modes probe = m;
      probe.sat = side;
      probe.integrating = false;
      derivative(x.data(), scratch.data(), probe, d);
      if (clamps()) scratch[i_index] = 0.0;
      const double frozen = s * command_linear(scratch.data());  // s·u_c' with I frozen
      const double drive = clamps() ? s * ki * (r - output(x.data())) : 0.0;
      if (clamps() && drive > 0.0) {
        if (frozen >= 0.0) { m.sat = side; m.integrating = false; }
        else if (frozen + drive > 0.0) { m.sat = side; m.integrating = false; m.sliding = true; }
        else { m.sat = 0; m.integrating = true; }
      } else {
        probe.integrating = true;
        derivative(x.data(), scratch.data(), probe, d);
        const double slope = s * command_linear(scratch.data());
        m.sat = slope > 0.0 ? side : 0;
        m.integrating = true;
      }
    }
    if (rate) {
      const double us = saturated(uc, m);
      if (m.rate == RateMode::up && x[ua_index] >= us) m.rate = RateMode::tracking;
      if (m.rate == RateMode::down && x[ua_index] <= us) m.rate = RateMode::tracking;
      if (m.rate == RateMode::tracking && m.sat == 0) {
        derivative(x.data(), scratch.data(), m, d);
        const double slope = command_linear(scratch.data());
        if (std::abs(slope) > rate_max) {
          m.rate = slope > 0 ? RateMode::up : RateMode::down;
          x[ua_index] = us;
        }
      }
    }
    return m;
  }
};

// The functor odeint integrates: the loop with its modes held.
struct HeldModeSystem {
  const LoopModel* model;
  Modes modes;
  double disturbance;
  void operator()(const State& x, State& dxdt, double /*t*/) const {
    model->derivative(x.data(), dxdt.data(), modes, disturbance);
  }
};

bool all_finite(const State& x) {
  return std::all_of(x.begin(), x.end(), [](double v) { return std::isfinite(v); });
}

// Linear interpolation of the time where f crosses `level` between samples k−1 and k.
double crossing(const std::vector<double>& t, const std::vector<double>& f, int k, double level) {
  const double f0 = f[k - 1], f1 = f[k];
  if (f1 == f0) return t[k];
  return t[k - 1] + (level - f0) / (f1 - f0) * (t[k] - t[k - 1]);
}

// StepMetrics from samples (definitions in README.md, "Metric definitions"); y∞ given.
StepMetrics measure(const std::vector<double>& t, const std::vector<double>& y, const std::vector<double>& u,
                    double y_inf, double amplitude, double band) {
  StepMetrics m;
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  const int K = static_cast<int>(t.size());
  std::vector<double> yn(t.size());
  for (int k = 0; k < K; ++k) yn[k] = y[k] / y_inf;
  const auto hi = std::max_element(yn.begin(), yn.end());
  if (*hi > 1.0 + 1e-9) {
    m.overshoot_pct = (*hi - 1.0) * 100.0;
    m.peak_time_s = t[hi - yn.begin()];
  }
  m.undershoot_pct = std::max(0.0, -*std::min_element(yn.begin(), yn.end())) * 100.0;
  int k10 = -1, k90 = -1;
  for (int k = 0; k < K && k90 < 0; ++k) {
    if (k10 < 0 && yn[k] >= 0.1) k10 = k;
    if (yn[k] >= 0.9) k90 = k;
  }
  if (k10 >= 0 && k90 >= 0) {
    const double t10 = k10 == 0 ? t[0] : crossing(t, yn, k10, 0.1);
    const double t90 = k90 == 0 ? t[0] : crossing(t, yn, k90, 0.9);
    m.rise_time_s = t90 - t10;
  }
  for (int k = 0; k < K; ++k) {
    const bool inside = std::abs(yn[k] - 1.0) <= band;
    const bool jumped = k > 0 && (yn[k] - 1.0) * (yn[k - 1] - 1.0) < 0.0;
    if (inside || jumped) {
      m.band_entry_time_s = k == 0 ? t[0] : crossing(t, yn, k, yn[k - 1] < 1.0 ? 1.0 - band : 1.0 + band);
      break;
    }
  }
  int k_out = -1;
  for (int k = K - 1; k >= 0; --k)
    if (std::abs(yn[k] - 1.0) > band) { k_out = k; break; }
  if (k_out < 0) m.settling_time_s = t[0];
  else if (k_out < K - 1) m.settling_time_s = crossing(t, yn, k_out + 1, yn[k_out] > 1.0 ? 1.0 + band : 1.0 - band);
  for (int k = 0; k < K; ++k) m.effort_peak = std::max(m.effort_peak, std::abs(u[k]));
  for (int k = 1; k < K; ++k) {
    const double h = t[k] - t[k - 1];
    const double e0 = y_inf - y[k - 1], e1 = y_inf - y[k];
    m.iae += 0.5 * h * (std::abs(e0) + std::abs(e1));
    m.ise += 0.5 * h * (e0 * e0 + e1 * e1);
    m.itae += 0.5 * h * (t[k - 1] * std::abs(e0) + t[k] * std::abs(e1));
  }
  return m;
}

}  // namespace

NonlinearResult simulate_nonlinear(const StateSpace& plant, const Controller& controller, const ActuatorModel& actuator,
                                   const LoopOptions& options, double amplitude, double band_fraction) {
  using std::to_string;
  // ---- Input checks: malformed input is rejected before any work, naming the field.
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

  NonlinearResult result;
  LoopModel model;
  model.ap = plant.A;
  model.bp = plant.B;
  model.cp = plant.C.row(0);
  model.np = plant.states();
  model.r = amplitude;
  model.umin = actuator.min;
  model.umax = actuator.max;
  int size = model.np;

  if (controller.parallel) {
    const ParallelGains& g = *controller.parallel;
    if (!std::isfinite(g.kp) || !std::isfinite(g.ki) || !std::isfinite(g.kd) || !std::isfinite(g.tf))
      fail("controller: non-finite parallel gain");
    if (g.kd != 0.0 && !(g.tf > 0.0)) fail("controller: derivative action needs a filter time Tf > 0");
    model.parallel = true;
    model.kp = g.kp;
    model.ki = g.ki;
    model.kd = g.kd;
    model.tf = g.tf;
    model.b = options.setpoint_weight;
    model.c = options.derivative_weight;
    model.anti_windup = options.anti_windup;
    if (g.ki != 0.0) model.i_index = size++;
    if (g.kd != 0.0) model.d_index = size++;
    model.command_r = g.kp * model.b + (g.kd != 0.0 ? g.kd / g.tf * model.c : 0.0);
    if (g.ki != 0.0 && options.anti_windup == AntiWindup::back_calculation) {
      if (options.tracking_time_s) {
        model.tt = *options.tracking_time_s;
      } else {
        // Default tracking time (Åström & Hägglund, Advanced PID Control, 2006, anti-windup
        // section; recalled from memory): Tt = √(Ti·Td) with derivative action, else Ti.
        if (!(g.kp > 0.0 && g.ki > 0.0)) fail("tracking_time_s: no default without Kp > 0 and Ki > 0; give it explicitly");
        const double ti = g.kp / g.ki;
        model.tt = g.kd > 0.0 ? std::sqrt(ti * g.kd / g.kp) : ti;
      }
      result.notes.push_back("back-calculation tracking time Tt = " + to_string(model.tt) + " s");
    }
    if (g.ki == 0.0 && options.anti_windup != AntiWindup::none)
      result.notes.push_back("no integral action: anti-windup has nothing to act on");
  } else {
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
    result.notes.push_back("controller has no parallel form: C(s) realized as a state space acting on e = r - y; "
                           "no anti-windup, set-point and derivative weights not applied");
  }
  if (actuator.rate_max) {
    model.rate = true;
    model.rate_max = *actuator.rate_max;
    model.ua_index = size++;
  }
  model.size = size;

  // ---- y∞ of the linear loop (final-value theorem) and the default horizon.
  const StateSpace linear = close_loop(plant, realize(controller.transfer));
  double y_inf = std::numeric_limits<double>::quiet_NaN();
  double horizon = options.horizon_s;
  {
    Eigen::FullPivLU<Eigen::MatrixXd> lu(linear.A);
    if (lu.isInvertible()) y_inf = amplitude * (linear.D(0) - linear.C.row(0).dot(lu.solve(linear.B)));
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
      }
    }
  }
  if (!std::isfinite(horizon) || !(horizon > 0.0)) fail("horizon_s: expected a finite number > 0");

  // ---- Sample times.
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
  for (std::vector<double>* v : {&result.time_s, &result.output, &result.control, &result.command})
    v->reserve(samples.size());

  // ---- Pieces between known discontinuities.
  std::vector<std::pair<double, double>> pieces;  // (end time, disturbance during the piece)
  const double td = options.disturbance_time_s, dsize = options.disturbance_size;
  if (dsize != 0.0 && td > 0.0 && td < horizon) {
    pieces.emplace_back(td, 0.0);
    pieces.emplace_back(horizon, dsize);
  } else {
    pieces.emplace_back(horizon, (dsize != 0.0 && td <= 0.0) ? dsize : 0.0);
  }
  if (dsize != 0.0 && td >= horizon) result.notes.push_back("disturbance_time_s is at or beyond the horizon: no disturbance simulated");

  State x(static_cast<std::size_t>(size), 0.0), xe(x), scratch(x);
  std::size_t next_sample = 0;
  auto record_until = [&](double t_end, const Modes& m, auto&& state_at) {
    while (next_sample < samples.size() && samples[next_sample] <= t_end) {
      const double ts = samples[next_sample++];
      const State& xs = state_at(ts);
      result.time_s.push_back(ts);
      result.output.push_back(model.output(xs.data()));
      result.command.push_back(model.command(xs.data()));
      result.control.push_back(model.applied(xs.data(), m));
    }
  };

  using Stepper = boost::numeric::odeint::runge_kutta_dopri5<State>;
  const double max_dt = horizon / 100.0;  // bounds how far a double switch can hide inside one step
  auto dense = boost::numeric::odeint::make_dense_output(options.absolute_tolerance, options.relative_tolerance, max_dt,
                                                         Stepper());
  const auto started = std::chrono::steady_clock::now();
  auto wall = [&] { return std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count(); };
  int work = 0;  // accepted steps + restarts, against max_steps
  double saturated_time = 0.0;
  double dt = std::min(horizon / 4000.0, max_dt);

  Modes modes;
  if (model.rate) {  // the actuator starts at rest at u = 0 and must slew to the command at 0+
    const double us = std::clamp(model.command(x.data()), model.umin, model.umax);
    modes.rate = us > 0.0 ? RateMode::up : (us < 0.0 ? RateMode::down : RateMode::tracking);
  }

  auto stop = [&](NonlinearStatus s, const std::string& why) {
    result.status = s;
    result.notes.push_back(why);
    return result;
  };

  double t = 0.0;
  try {
    for (const auto& [t_end, disturbance] : pieces) {
      while (t < t_end) {
        for (int i = 0; i < 4; ++i) {  // a chosen mode can imply another (e.g. tracking at too steep a slope)
          modes = model.choose(x, modes, disturbance, scratch, i < 2);
          if (model.consistent(x.data(), modes, disturbance, scratch)) break;
        }
        record_until(t, modes, [&](double) -> const State& { return x; });
        HeldModeSystem system{&model, modes, disturbance};
        dense.initialize(x, t, std::min(dt, t_end - t));
        while (true) {
          if (++work > options.max_steps)
            return stop(NonlinearStatus::step_limit, "stopped at t = " + to_string(dense.current_time()) +
                                                         " s: max_steps = " + to_string(options.max_steps) + " reached");
          if (wall() > options.max_wall_time_s)
            return stop(NonlinearStatus::time_limit, "stopped at t = " + to_string(dense.current_time()) +
                                                         " s: max_wall_time_s = " + to_string(options.max_wall_time_s) + " reached");
          const auto [ta, tb] = dense.do_step(system);
          ++result.steps;
          dt = dense.current_time_step();
          const double tc = std::min(tb, t_end);
          if (tb <= t_end) xe = dense.current_state();
          else dense.calc_state(tc, xe);
          if (!all_finite(xe))
            return stop(NonlinearStatus::non_finite, "the state became non-finite near t = " + to_string(tc) + " s");
          if (!model.consistent(xe.data(), modes, disturbance, scratch)) {
            // Locate the switch: consistent at lo, not at hi.
            double lo = ta, hi = tc;
            for (int it = 0; it < 200 && hi - lo > 4.0 * std::numeric_limits<double>::epsilon() * std::max(1.0, hi); ++it) {
              const double mid = 0.5 * (lo + hi);
              dense.calc_state(mid, xe);
              if (model.consistent(xe.data(), modes, disturbance, scratch)) lo = mid;
              else hi = mid;
            }
            record_until(hi, modes, [&](double ts) -> const State& { dense.calc_state(ts, scratch); return scratch; });
            if (modes.sat != 0) saturated_time += hi - ta;
            dense.calc_state(hi, x);
            t = hi;
            ++result.switches;
            break;
          }
          record_until(tc, modes, [&](double ts) -> const State& { dense.calc_state(ts, scratch); return scratch; });
          if (modes.sat != 0) saturated_time += tc - ta;
          if (tb >= t_end) {
            x = xe;
            t = t_end;
            break;
          }
        }
      }
    }
  } catch (const boost::numeric::odeint::odeint_error& e) {
    if (!all_finite(dense.current_state()))
      return stop(NonlinearStatus::non_finite, std::string("the state became non-finite: ") + e.what());
    return stop(NonlinearStatus::step_limit, std::string("the integrator gave up: ") + e.what());
  }
  for (double v : result.output)
    if (!std::isfinite(v)) return stop(NonlinearStatus::non_finite, "a sampled output is non-finite");
  for (double v : result.control)
    if (!std::isfinite(v)) return stop(NonlinearStatus::non_finite, "a sampled control is non-finite");

  result.saturated_fraction = saturated_time / horizon;
  if (std::isfinite(y_inf) && std::abs(y_inf) > 1e-12 * std::abs(amplitude)) {
    result.metrics = measure(result.time_s, result.output, result.control, y_inf, amplitude, band_fraction);
    result.notes.push_back("metrics relative to the linear loop's final value y_inf = " + to_string(y_inf));
  } else {
    result.notes.push_back("metrics not measured: the linear loop has no finite nonzero final value");
  }
  return result;
}

}  // namespace specloop
