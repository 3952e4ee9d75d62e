// The nonlinear loop's algebra (private to the sim layer): the closed loop plant → controller →
// actuator with its discrete modes (saturated, integrator frozen or sliding, actuator slewing), the
// right-hand side with the modes held, the guards that say when a mode no longer holds, and the
// delay line that feeds the plant the applied u of the past. simulate_nonlinear (nonlinear.cpp)
// builds a LoopModel; continuous_run.cpp and sampled_run.cpp integrate it.
#pragma once

#include <algorithm>
#include <array>
#include <cmath>
#include <vector>

#include <Eigen/Dense>

#include "specloop/sim/nonlinear.hpp"

namespace specloop::nonlinear_loop {

using State = std::vector<double>;

enum class RateMode { tracking, up, down };

struct Modes {
  int sat = 0;              // +1 command above max, −1 below min, 0 within the limits
  bool integrating = true;  // clamping: false while saturated and the error drives further in
  bool sliding = false;     // clamping: u_c held on the limit by partial integration (see below)
  RateMode rate = RateMode::tracking;
};

// The applied u over the integrated past, for a transport delay (method of steps).
struct DelayLine {
  static constexpr int nodes = 6;  // equally spaced in each piece: degree-5 interpolation
  struct Segment {
    double t0, t1;
    std::array<double, nodes> u;
  };
  double delay = 0.0;
  std::vector<Segment> segments;  // contiguous, increasing, from t = 0
  // Window of delayed times τ = t − L of the integration piece under way; inside it u has no
  // jump. At its left end the right limit is used, elsewhere the left limit; outside it the
  // polynomial of the segment at the nearer end is extended (smooth for the stepper's stages
  // that fall past a piece end).
  double lo = 0.0, hi = 0.0;

  static double interpolate(const Segment& s, double tau) {
    const double h = s.t1 - s.t0;
    if (!(h > 0.0)) return s.u[0];
    const double th = (tau - s.t0) / h * (nodes - 1);  // in node units
    double v = 0.0;
    for (int j = 0; j < nodes; ++j) {
      double w = 1.0;
      for (int i = 0; i < nodes; ++i)
        if (i != j) w *= (th - i) / static_cast<double>(j - i);
      v += w * s.u[static_cast<std::size_t>(j)];
    }
    return v;
  }
  // The segment holding q: the first whose end is past q (right limit) or at or past it (left
  // limit), else the last. The stepper's stages ask near the previous answer, so that segment and
  // the next are tried before the binary search (the same segment either way).
  std::size_t segment_of(double q, bool right) const {
    const auto holds = [&](std::size_t i) {
      if (i >= segments.size()) return false;
      const bool here = right ? q < segments[i].t1 : !(segments[i].t1 < q);
      const bool before = i == 0 || (right ? !(q < segments[i - 1].t1) : segments[i - 1].t1 < q);
      return here && before;
    };
    const std::size_t last = segments.size() - 1;
    if (right ? !(q < segments[last].t1) : segments[last].t1 < q) return last;  // past the end: the last one
    if (holds(hint)) return hint;
    if (holds(hint + 1)) return ++hint;
    auto it = right ? std::upper_bound(segments.begin(), segments.end(), q, [](double v, const Segment& s) { return v < s.t1; })
                    : std::lower_bound(segments.begin(), segments.end(), q, [](const Segment& s, double v) { return s.t1 < v; });
    if (it == segments.end()) --it;
    hint = static_cast<std::size_t>(it - segments.begin());
    return hint;
  }
  double value(double tau) const {
    const bool right = tau <= lo;
    const double q = right ? lo : std::min(tau, hi);
    if (q < 0.0 || (q == 0.0 && !right) || segments.empty()) return 0.0;  // at rest before t = 0
    return interpolate(segments[segment_of(q, right)], tau);
  }
  mutable std::size_t hint = 0;  // the segment of the last lookup
};

// The parallel control law u = Kp·(b·r − y) + I + Kd·D(c·r − y), shared by the continuous loop
// and the sampled controller.
struct PidLaw {
  double kp = 0, ki = 0, kd = 0, tf = 0, b = 1, c = 1, tt = 1;
  AntiWindup anti_windup = AntiWindup::none;
};

// The closed loop with its modes' algebra. State layout: [plant | controller | applied u].
struct LoopModel : PidLaw {
  // Plant x' = Ap·x + Bp·(u + d), y = Cp·x.
  Eigen::MatrixXd ap;
  Eigen::VectorXd bp;
  Eigen::RowVectorXd cp;
  int np = 0;
  const PlantModel* pm = nullptr;  // set: a nonlinear plant (deviation variables) replaces Ap, Bp, Cp
  // Parallel controller.
  bool parallel = false;
  int i_index = -1, d_index = -1;
  // Its filters as their own states (controller.measurement_filter, controller.notch):
  // u_c = N·v, v = Kp·(b·r − y_f) + I + Kd·D(c·r − y_f), I' = Ki·(r − y_f), y_f = F·(y + n).
  // F: order 1, f' = (y + n − f)/Tf; order 2, with the states (y_f, Tf·y_f'),
  //    f0' = f1/Tf, f1' = (2·(y + n − f0) − 2·f1)/Tf.
  // N: the states (ωn²·z, ωn·z'), z'' + 2ζp·ωn·z' + ωn²·z = v, so that
  //    q0' = ωn·q1, q1' = ωn·(v − q0 − 2ζp·q1), u_c = v + 2(ζz − ζp)·q1 (biproper, D = 1).
  int f_index = -1, f_order = 0;
  double f_time = 0;
  int n_index = -1;
  double n_freq = 0, n_zeta_p = 0, n_zeta_z = 0;
  // State-space controller on e = r − y.
  Eigen::MatrixXd ac;
  Eigen::VectorXd bc;
  Eigen::RowVectorXd cc;
  double dc = 0;
  int c_index = 0, nc = 0;
  // Two inputs (a controller with filters, u = N·(C_r·r − C·F·y)): x_c' = A·x_c + br·r − bc·(y + n).
  bool two_input = false;
  Eigen::VectorXd br;
  // Actuator.
  double umin = 0, umax = 0, rate_max = 0;
  bool rate = false;
  int ua_index = -1;
  int size = 0;
  double r = 0;          // reference (after the step)
  double command_r = 0;  // ∂u_c/∂r
  double n = 0;          // measurement noise held over the current piece: the controller reads y + n
  double command_n = 0;  // −∂u_c/∂n
  const DelayLine* delay = nullptr;  // set: the plant input is the applied u delayed

  double output(const double* x) const {
    if (pm) return pm->output(x);
    double y = 0;
    for (int i = 0; i < np; ++i) y += cp(i) * x[i];
    return y;
  }
  // The measurement as the PID reads it: y_f = F·(y + n), or y + n without F (y the output at x).
  double measured(const double* x, double y) const { return f_index >= 0 ? x[f_index] : y + n; }
  double measured(const double* x) const { return measured(x, output(x)); }
  // The control error as the controller sees it (through the noisy, filtered measurement).
  double error(const double* x) const { return r - measured(x); }
  // The part of u_c that is linear in the state and the output.
  double command_linear(const double* x) const { return command_linear(x, output(x)); }
  // u_c' along the loop's state rate xdot at x (the command's linear part applied to x', y').
  double command_rate(const double* x, const double* xdot) const {
    return command_linear(xdot, pm ? pm->output_rate(x, xdot) : output(xdot));
  }
  double command_linear(const double* x, double y) const {
    if (parallel) {
      double u = pid_linear(x, y);
      if (n_index >= 0) u += 2.0 * (n_zeta_z - n_zeta_p) * x[n_index + 1];
      return u;
    }
    double u = -dc * y;
    for (int i = 0; i < nc; ++i) u += cc(i) * x[c_index + i];
    return u;
  }
  // The PID's output v's part linear in the state and the output (before the notch).
  double pid_linear(const double* x, double y) const {
    const double yl = f_index >= 0 ? x[f_index] : y;
    double u = -kp * yl;
    if (i_index >= 0) u += x[i_index];
    if (d_index >= 0) u += kd / tf * (-yl - x[d_index]);
    return u;
  }
  double command(const double* x) const { return command_linear(x) + command_r * r - command_n * n; }
  double saturated(double uc, const Modes& m) const { return m.sat > 0 ? umax : (m.sat < 0 ? umin : uc); }
  double applied(const double* x, const Modes& m) const {
    if (rate && m.rate != RateMode::tracking) return x[ua_index];
    return saturated(command(x), m);
  }

  void derivative(const double* x, double* dx, const Modes& m, double d, double t) const {
    const double y = output(x), uc = command(x), us = saturated(uc, m);
    const double ua = (rate && m.rate != RateMode::tracking) ? x[ua_index] : us;
    const double up = delay ? delay->value(t - delay->delay) : ua;
    const double e = f_index >= 0 ? r - x[f_index] : r - y - n;  // F is only set for the parallel law
    if (pm) {
      pm->derivative(x, up + d, dx);
    } else {
      for (int i = 0; i < np; ++i) {
        double s = bp(i) * (up + d);
        for (int j = 0; j < np; ++j) s += ap(i, j) * x[j];
        dx[i] = s;
      }
    }
    if (parallel) {
      filter_derivatives(x, dx, y);
      if (i_index >= 0) {
        switch (anti_windup) {
          case AntiWindup::none: dx[i_index] = ki * e; break;
          case AntiWindup::conditional_integration:
            if (m.sliding) {
              // Filippov sliding on the limit: neither integrating (u_c would re-enter the linear
              // region) nor frozen (u_c would leave the limit inward) is consistent, so the
              // integrator moves just enough to hold u_c' = 0.
              dx[i_index] = 0.0;
              dx[i_index] = -command_rate(x, dx);  // ∂u_c/∂I = 1 (the notch's D = 1)
            } else {
              dx[i_index] = m.integrating ? ki * e : 0.0;
            }
            break;
          case AntiWindup::back_calculation: dx[i_index] = ki * e + (ua - uc) / tt; break;
        }
      }
    } else {
      for (int i = 0; i < nc; ++i) {
        double s = two_input ? br(i) * r - bc(i) * (y + n) : bc(i) * e;
        for (int j = 0; j < nc; ++j) s += ac(i, j) * x[c_index + j];
        dx[c_index + i] = s;
      }
    }
    if (rate) dx[ua_index] = m.rate == RateMode::up ? rate_max : (m.rate == RateMode::down ? -rate_max : 0.0);
  }

  // The rates of the PID's derivative state and of the filters' states (everything of the
  // parallel controller but its integrator), at x with output y.
  void filter_derivatives(const double* x, double* dx, double y) const {
    const double ym = y + n, yf = measured(x, y);
    if (d_index >= 0) dx[d_index] = (c * r - yf - x[d_index]) / tf;
    if (f_index >= 0) {
      if (f_order == 2) {
        dx[f_index] = x[f_index + 1] / f_time;
        dx[f_index + 1] = 2.0 * (ym - x[f_index] - x[f_index + 1]) / f_time;
      } else {
        dx[f_index] = (ym - x[f_index]) / f_time;
      }
    }
    if (n_index >= 0) {
      const double v = pid_linear(x, y) + command_r * r - command_n * n;
      dx[n_index] = n_freq * x[n_index + 1];
      dx[n_index + 1] = n_freq * (v - x[n_index] - 2.0 * n_zeta_p * x[n_index + 1]);
    }
  }

  bool clamps() const { return parallel && i_index >= 0 && anti_windup == AntiWindup::conditional_integration; }

  // True when the state is consistent with the held modes (no guard has changed sign).
  bool consistent(const double* x, const Modes& m, double d, double* scratch, double t) const {
    const double uc = command(x);
    if (m.sliding) {
      // Sliding holds while the integration it needs lies between frozen and full:
      // 0 <= s·I' <= s·Ki·e (s = +1 on the upper limit, −1 on the lower).
      derivative(x, scratch, m, d, t);
      const double s = m.sat, held = s * scratch[i_index], full = s * ki * error(x);
      if (held < 0.0 || held > full) return false;
    } else {
      if (m.sat == 0 && (uc > umax + value_tolerance(umax) || uc < umin - value_tolerance(umin))) return false;
      if (m.sat > 0 && uc < umax - value_tolerance(umax)) return false;
      if (m.sat < 0 && uc > umin + value_tolerance(umin)) return false;
    }
    if (clamps() && m.sat != 0 && !m.sliding) {
      const double drive = ki * error(x) * m.sat;  // > 0: integrating pushes further in
      if (m.integrating && drive > 0) return false;
      if (!m.integrating && drive < 0) return false;
    }
    if (rate) {
      const double us = saturated(uc, m);
      if (m.rate == RateMode::up && x[ua_index] > us) return false;
      if (m.rate == RateMode::down && x[ua_index] < us) return false;
      if (m.rate == RateMode::tracking && m.sat == 0) {
        derivative(x, scratch, m, d, t);
        if (std::abs(command_rate(x, scratch)) > rate_max) return false;
      }
    }
    return true;
  }

  static double value_tolerance(double limit) { return 1e-12 * std::max(1.0, std::abs(limit)); }

  // Modes consistent with the state x (at a switch, just past it); may set the applied-u state
  // when the actuator leaves tracking, and may move I by at most ~1e-7 to put u_c exactly on a
  // limit it is sliding on. `by_slope`: on a limit, decide from the slopes of u_c in each
  // candidate mode rather than from its value (which is ambiguous there).
  Modes choose(double* x, Modes m, double d, double* scratch, bool by_slope, double t) const {
    const double uc = command(x);
    m.sat = uc > umax ? 1 : (uc < umin ? -1 : 0);
    m.sliding = false;
    if (clamps()) m.integrating = !(m.sat != 0 && ki * error(x) * m.sat > 0);
    const double near_hi = 1e-7 * std::max(1.0, std::abs(umax)), near_lo = 1e-7 * std::max(1.0, std::abs(umin));
    const int side = (std::isfinite(umax) && std::abs(uc - umax) <= near_hi) ? 1
                     : (std::isfinite(umin) && std::abs(uc - umin) <= near_lo) ? -1 : 0;
    if (by_slope && side != 0) {
      const double s = side, limit = side > 0 ? umax : umin;
      if (i_index >= 0 && clamps()) x[i_index] += limit - uc;  // project onto the limit
      Modes probe = m;
      probe.sat = side;
      probe.integrating = false;
      derivative(x, scratch, probe, d, t);
      if (clamps()) scratch[i_index] = 0.0;
      const double frozen = s * command_rate(x, scratch);  // s·u_c' with I frozen
      const double drive = clamps() ? s * ki * error(x) : 0.0;
      if (clamps() && drive > 0.0) {
        if (frozen >= 0.0) { m.sat = side; m.integrating = false; }
        else if (frozen + drive > 0.0) { m.sat = side; m.integrating = false; m.sliding = true; }
        else { m.sat = 0; m.integrating = true; }
      } else {
        probe.integrating = true;
        derivative(x, scratch, probe, d, t);
        const double slope = s * command_rate(x, scratch);
        m.sat = slope > 0.0 ? side : 0;
        m.integrating = true;
      }
    }
    if (rate) {
      const double us = saturated(uc, m);
      if (m.rate == RateMode::up && x[ua_index] >= us) m.rate = RateMode::tracking;
      if (m.rate == RateMode::down && x[ua_index] <= us) m.rate = RateMode::tracking;
      if (m.rate == RateMode::tracking && m.sat == 0) {
        derivative(x, scratch, m, d, t);
        const double slope = command_rate(x, scratch);
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
  void evaluate(const double* x, double* dxdt, double t) const { model->derivative(x, dxdt, modes, disturbance, t); }
  void operator()(const State& x, State& dxdt, double t) const { evaluate(x.data(), dxdt.data(), t); }
  bool time_varying() const { return model->delay != nullptr; }  // the delayed input
};

}  // namespace specloop::nonlinear_loop
