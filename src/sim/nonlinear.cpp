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
// every restart time s adds the break point s + L. Sampled controller: run_sampled below.
#include "specloop/sim/nonlinear.hpp"

#include <algorithm>
#include <array>
#include <chrono>
#include <cmath>
#include <limits>
#include <random>
#include <set>
#include <stdexcept>
#include <string>

#include <Eigen/Dense>
#include <boost/math/tools/roots.hpp>
#include <boost/numeric/odeint.hpp>

#include "sim/implicit_stepper.hpp"

namespace specloop {

std::vector<double> gaussian_sequence(double rms, std::uint64_t seed, std::size_t count) {
  std::mt19937_64 bits(seed);
  const auto uniform = [&] {  // in (0, 1]: 53 random bits, never 0 (log below)
    return (static_cast<double>(bits() >> 11) + 1.0) * 0x1.0p-53;
  };
  std::vector<double> out;
  out.reserve(count + 1);
  while (out.size() < count) {
    const double radius = rms * std::sqrt(-2.0 * std::log(uniform())), angle = 2.0 * M_PI * uniform();
    out.push_back(radius * std::cos(angle));
    out.push_back(radius * std::sin(angle));
  }
  out.resize(count);
  return out;
}

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
  double value(double tau) const {
    const bool right = tau <= lo;
    const double q = right ? lo : std::min(tau, hi);
    if (q < 0.0 || (q == 0.0 && !right) || segments.empty()) return 0.0;  // at rest before t = 0
    auto it = right ? std::upper_bound(segments.begin(), segments.end(), q, [](double v, const Segment& s) { return v < s.t1; })
                    : std::lower_bound(segments.begin(), segments.end(), q, [](const Segment& s, double v) { return s.t1 < v; });
    if (it == segments.end()) --it;
    return interpolate(*it, tau);
  }
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
  double n = 0;          // measurement noise held over the current piece: the controller reads y + n
  double command_n = 0;  // −∂u_c/∂n
  const DelayLine* delay = nullptr;  // set: the plant input is the applied u delayed

  double output(const double* x) const {
    if (pm) return pm->output(x);
    double y = 0;
    for (int i = 0; i < np; ++i) y += cp(i) * x[i];
    return y;
  }
  // The control error as the controller sees it (through the noisy measurement).
  double error(const double* x) const { return r - output(x) - n; }
  // The part of u_c that is linear in the state and the output.
  double command_linear(const double* x) const { return command_linear(x, output(x)); }
  // u_c' along the loop's state rate xdot at x (the command's linear part applied to x', y').
  double command_rate(const double* x, const double* xdot) const {
    return command_linear(xdot, pm ? pm->output_rate(x, xdot) : output(xdot));
  }
  double command_linear(const double* x, double y) const {
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
    const double e = r - y - n;
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
      if (i_index >= 0) {
        switch (anti_windup) {
          case AntiWindup::none: dx[i_index] = ki * e; break;
          case AntiWindup::conditional_integration:
            if (m.sliding) {
              // Filippov sliding on the limit: neither integrating (u_c would re-enter the linear
              // region) nor frozen (u_c would leave the limit inward) is consistent, so the
              // integrator moves just enough to hold u_c' = 0.
              dx[i_index] = 0.0;
              if (d_index >= 0) dx[d_index] = (c * r - y - n - x[d_index]) / tf;
              dx[i_index] = -command_rate(x, dx);
            } else {
              dx[i_index] = m.integrating ? ki * e : 0.0;
            }
            break;
          case AntiWindup::back_calculation: dx[i_index] = ki * e + (ua - uc) / tt; break;
        }
      }
      if (d_index >= 0) dx[d_index] = (c * r - y - n - x[d_index]) / tf;
    } else {
      for (int i = 0; i < nc; ++i) {
        double s = bc(i) * e;
        for (int j = 0; j < nc; ++j) s += ac(i, j) * x[c_index + j];
        dx[c_index + i] = s;
      }
    }
    if (rate) dx[ua_index] = m.rate == RateMode::up ? rate_max : (m.rate == RateMode::down ? -rate_max : 0.0);
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

// One dense-output step that survives a plant model evaluated outside its domain at a trial
// stage: the step is retried from the same (accepted) state with a step ten times smaller, up to
// kDomainRetries times per step and kDomainRetriesPerRun over a run (a trajectory that really
// reaches the domain's edge, like a tank draining empty, would otherwise crawl along it); a
// failure at the accepted state itself, or past either budget, is rethrown (the simulation
// reports it as non_finite). Each retry counts as work.
constexpr int kDomainRetries = 12;
constexpr int kDomainRetriesPerRun = 200;
template <typename Dense, typename System>
std::pair<double, double> step_within_domain(Dense& dense, System& system, int& work, int& retries) {
  for (int attempt = 0;; ++attempt) {
    try {
      return dense.do_step(system);
    } catch (const PlantEvaluationError&) {
      if (attempt >= kDomainRetries || retries >= kDomainRetriesPerRun) throw;
      ++retries;
      ++work;
      const State x = dense.current_state();
      dense.initialize(x, dense.current_time(), dense.current_time_step() / 10.0);
    }
  }
}

// The functor odeint integrates: the loop with its modes held.
struct HeldModeSystem {
  const LoopModel* model;
  Modes modes;
  double disturbance;
  void evaluate(const double* x, double* dxdt, double t) const { model->derivative(x, dxdt, modes, disturbance, t); }
  void operator()(const State& x, State& dxdt, double t) const { evaluate(x.data(), dxdt.data(), t); }
  bool time_varying() const { return model->delay != nullptr; }  // the delayed input
};

// The implicit stepper behind odeint's dense-output interface, on the same State.
class ImplicitDense {
 public:
  ImplicitDense(std::size_t n, double atol, double rtol, double max_dt) : stepper_(n, atol, rtol, max_dt), state_(n) {}
  void initialize(const State& x, double t, double dt) { stepper_.initialize(x.data(), t, dt); }
  template <class System>  // evaluate(x, dxdt, t) and time_varying()
  std::pair<double, double> do_step(const System& system) {
    stepper_.set_system([](const void* c, const double* x, double* dx, double t) {
      static_cast<const System*>(c)->evaluate(x, dx, t);
    }, &system, system.time_varying());
    return stepper_.do_step();
  }
  void calc_state(double t, State& x) const { stepper_.calc_state(t, x.data()); }
  const State& current_state() {
    std::copy(stepper_.current_state(), stepper_.current_state() + state_.size(), state_.begin());
    return state_;
  }
  double current_time() const { return stepper_.current_time(); }
  double current_time_step() const { return stepper_.current_time_step(); }

 private:
  detail::ImplicitDenseStepper stepper_;
  State state_;
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

// The parabola through three samples (k − 1, k, k + 1) of f: its vertex {time, value} when the
// vertex lies within [t_{k−1}, t_{k+1}], else the sample itself. The local interpolant that puts
// an extremum between samples back where it is (error O(h³) on a smooth response).
struct Vertex {
  double t, v;
  double a, b, c;  // f ≈ a·(τ − t_k)² + b·(τ − t_k) + c near t_k
};
Vertex parabola_vertex(const std::vector<double>& t, const std::vector<double>& f, int k) {
  const double h0 = t[k] - t[k - 1], h1 = t[k + 1] - t[k];
  const double d0 = (f[k] - f[k - 1]) / h0, d1 = (f[k + 1] - f[k]) / h1;
  const double a = (d1 - d0) / (h0 + h1);
  const double b = d0 + a * h0;  // slope at t_k
  Vertex v{t[k], f[k], a, b, f[k]};
  if (a != 0.0) {
    const double tau = -b / (2.0 * a);
    if (tau >= -h0 && tau <= h1) {
      v.t = t[k] + tau;
      v.v = f[k] + b * tau + a * tau * tau;
    }
  }
  return v;
}

// StepMetrics from samples (definitions in README.md, "Metric definitions"); y∞ given. Extrema
// between samples (the peak, the dip after it, a hump that leaves the band between two samples
// inside it) come from the parabola through the three samples around each sample extremum that
// could matter, not from the samples alone.
StepMetrics measure(const std::vector<double>& t, const std::vector<double>& y, const std::vector<double>& u,
                    double y_inf, double amplitude, double band, const std::vector<std::pair<double, double>>& exact) {
  StepMetrics m;
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  const int K = static_cast<int>(t.size());
  std::vector<double> yn(t.size());
  for (int k = 0; k < K; ++k) yn[k] = y[k] / y_inf;
  // Sample extrema of yn (interior samples only) that can carry an extremum between samples; the
  // parabola's excess over the sample is at most a quarter of the second difference, so
  // `reach` (half of it) is generous.
  auto reach = [&](int k) { return 0.5 * std::abs(2.0 * yn[k] - yn[k - 1] - yn[k + 1]); };
  auto is_max = [&](int k) { return yn[k] >= yn[k - 1] && yn[k] >= yn[k + 1]; };
  auto is_min = [&](int k) { return yn[k] <= yn[k - 1] && yn[k] <= yn[k + 1]; };
  if (!exact.empty()) {
    // `exact`: y at every step end, switch and restart and at every y' = 0 located inside a step
    // on the dense output — the integrator's own values, so no parabola is needed (its vertex
    // misses a sharp or skewed extremum by up to 1e-3 of y∞). Merged with the samples into one
    // time series; its local maxima and minima are the humps and dips.
    std::vector<std::pair<double, double>> series;
    series.reserve(t.size() + exact.size());
    for (int k = 0; k < K; ++k) series.emplace_back(t[k], yn[k]);
    const auto mid = series.size();
    for (const auto& [te, ye] : exact) series.emplace_back(te, ye / y_inf);
    std::inplace_merge(series.begin(), series.begin() + static_cast<std::ptrdiff_t>(mid), series.end(),
                       [](const auto& p, const auto& q) { return p.first < q.first; });
    // One point per time: a step end that is also a restart or a sample is listed twice, and two
    // equal neighbours on a falling slope would read as a hump (the tied-peak rule would take it).
    series.erase(std::unique(series.begin(), series.end(), [](const auto& p, const auto& q) { return p.first == q.first; }),
                 series.end());
    const std::size_t n = series.size();
    auto local_max = [&](std::size_t i) {
      return i > 0 && i + 1 < n && series[i].second >= series[i - 1].second && series[i].second >= series[i + 1].second;
    };
    std::size_t i_hi = 0;
    for (std::size_t i = 1; i < n; ++i)
      if (series[i].second > series[i_hi].second) i_hi = i;
    const double peak = series[i_hi].second;
    if (peak > 1.0 + 1e-9) {
      m.overshoot_pct = (peak - 1.0) * 100.0;
      // The latest hump within kPeakTieFraction of the highest is the peak time's (StepMetrics),
      // then the highest hump after it.
      std::size_t i_peak = i_hi;
      for (std::size_t i = i_hi + 1; i < n; ++i)
        if (local_max(i) && series[i].second >= peak - kPeakTieFraction) i_peak = i;
      const double t_peak = series[i_peak].first;
      m.peak_time_s = t_peak;
      double next = -std::numeric_limits<double>::infinity(), dip = 1.0;
      for (std::size_t i = i_peak + 1; i < n; ++i) {
        if (series[i].first <= t_peak) continue;
        dip = std::min(dip, series[i].second);
        if (local_max(i) && series[i].second > 1.0 && series[i].second > next) {
          next = series[i].second;
          m.next_peak_time_s = series[i].first;
        }
      }
      if (m.next_peak_time_s) m.next_peak_gap_pct = std::max(0.0, (peak - next) * 100.0);
      m.post_peak_dip_pct = (1.0 - dip) * 100.0;
    }
    double low = 0.0;
    for (const auto& [ts, v] : series) low = std::min(low, v);
    m.undershoot_pct = -low * 100.0;
  } else {
    const int k_hi = static_cast<int>(std::max_element(yn.begin(), yn.end()) - yn.begin());
    double peak = yn[k_hi], t_peak = t[k_hi];
    for (int k = 1; k + 1 < K; ++k) {
      if (!is_max(k) || yn[k] + reach(k) < peak) continue;
      const Vertex v = parabola_vertex(t, yn, k);
      if (v.v > peak) {
        peak = v.v;
        t_peak = v.t;
      }
    }
    if (peak > 1.0 + 1e-9) {
      m.overshoot_pct = (peak - 1.0) * 100.0;
      // The latest hump within kPeakTieFraction of the highest is the peak time's (StepMetrics),
      // then the highest hump after it.
      for (int k = 1; k + 1 < K; ++k) {
        if (t[k] <= t_peak || !is_max(k) || yn[k] + reach(k) < peak - kPeakTieFraction) continue;
        const Vertex v = parabola_vertex(t, yn, k);
        if (v.v >= peak - kPeakTieFraction && v.t > t_peak) t_peak = v.t;
      }
      m.peak_time_s = t_peak;
      double next = -std::numeric_limits<double>::infinity();
      for (int k = 1; k + 1 < K; ++k) {
        if (t[k] <= t_peak || !is_max(k) || yn[k] <= 1.0 || yn[k] + reach(k) < next) continue;
        const Vertex v = parabola_vertex(t, yn, k);
        if (v.t > t_peak && v.v > next) {
          next = v.v;
          m.next_peak_time_s = v.t;
        }
      }
      if (m.next_peak_time_s) m.next_peak_gap_pct = std::max(0.0, (peak - next) * 100.0);
      double dip = 1.0;  // lowest yn after the peak
      for (int k = 1; k + 1 < K; ++k) {
        if (t[k + 1] <= t_peak || !is_min(k) || yn[k] - reach(k) > dip) continue;
        const Vertex v = parabola_vertex(t, yn, k);
        if (v.t > t_peak) dip = std::min(dip, std::min(v.v, yn[k]));
      }
      m.post_peak_dip_pct = (1.0 - dip) * 100.0;
    }
    double low = *std::min_element(yn.begin(), yn.end());
    for (int k = 1; k + 1 < K; ++k)
      if (yn[k] < 0.0 && is_min(k) && yn[k] - reach(k) < low) low = std::min(low, parabola_vertex(t, yn, k).v);
    m.undershoot_pct = std::max(0.0, -low) * 100.0;
  }
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
  if (k_out < K - 1) {
    double last = k_out < 0 ? t[0] : crossing(t, yn, k_out + 1, yn[k_out] > 1.0 ? 1.0 + band : 1.0 - band);
    // A hump beyond the band between samples inside it: the last one found from the end.
    for (int k = K - 2; k > std::max(k_out, 0); --k) {
      const double dev = yn[k] - 1.0;
      if (std::abs(dev) + reach(k) <= band || !(dev > 0.0 ? is_max(k) : is_min(k))) continue;
      const Vertex v = parabola_vertex(t, yn, k);
      const double edge = dev > 0.0 ? 1.0 + band : 1.0 - band;
      if (!(dev > 0.0 ? v.v > edge : v.v < edge)) continue;
      // The later root of a·τ² + b·τ + (c − edge) = 0 (τ from t_k): where the hump re-enters.
      const double disc = v.b * v.b - 4.0 * v.a * (v.c - edge);
      const double tau = (-v.b + std::copysign(std::sqrt(std::max(0.0, disc)), v.a)) / (2.0 * v.a);
      last = std::max(last, std::min(t[k + 1], t[k] + std::max(tau, v.t - t[k])));
      break;
    }
    m.settling_time_s = last;
  }
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

// ---- Sampled controller ----------------------------------------------------------------------

// Polynomials in w = z⁻¹, lowest power first.
std::vector<double> poly_mul(const std::vector<double>& a, const std::vector<double>& b) {
  std::vector<double> c(a.size() + b.size() - 1, 0.0);
  for (std::size_t i = 0; i < a.size(); ++i)
    for (std::size_t j = 0; j < b.size(); ++j) c[i + j] += a[i] * b[j];
  return c;
}
std::vector<double> poly_add(std::vector<double> a, const std::vector<double>& b, double scale) {
  if (a.size() < b.size()) a.resize(b.size(), 0.0);
  for (std::size_t i = 0; i < b.size(); ++i) a[i] += scale * b[i];
  return a;
}

// Tustin image of N(s)/D(s) (coefficients highest power first, proper): s = (2/Ts)(1 − w)/(1 + w)
// with w = z⁻¹; both multiplied by (1 + w)^n, n = deg D. Returns {num, den} with den[0] = 1.
std::pair<std::vector<double>, std::vector<double>> tustin_of(const Polynomial& num, const Polynomial& den, double ts) {
  const int n = den.degree();
  auto image = [&](const Polynomial& p) {
    std::vector<double> out(static_cast<std::size_t>(n) + 1, 0.0);
    const int deg = p.degree();
    for (int i = 0; i <= deg; ++i) {  // the s^i term
      const double coef = p.coefficients[static_cast<std::size_t>(deg - i)] * std::pow(2.0 / ts, i);
      std::vector<double> term{coef};
      for (int k = 0; k < i; ++k) term = poly_mul(term, {1.0, -1.0});
      for (int k = i; k < n; ++k) term = poly_mul(term, {1.0, 1.0});
      out = poly_add(out, term, 1.0);
    }
    return out;
  };
  std::vector<double> nz = image(num), dz = image(den);
  const double d0 = dz[0];
  if (!(std::abs(d0) > 0.0) || !std::isfinite(d0)) fail("controller: the Tustin image has a zero leading denominator coefficient");
  for (double& v : nz) v /= d0;
  for (double& v : dz) v /= d0;
  return {nz, dz};
}

// The controller as difference equations, with its anti-windup at the samples.
struct SampledController : PidLaw {
  double ts = 0.0;
  bool parallel = false;
  double a_d = 0;
  double umin = 0, umax = 0;
  // Parallel-form states.
  double integral = 0, deriv = 0, e_prev = 0, v_prev = 0, uc_prev = 0;
  double ua_prev = 0;  // applied value at the end of the previous period (back-calculation)
  // Direct form (Tustin of C(s) on e): newest first.
  std::vector<double> num, den, e_hist, u_hist;
  DifferenceEquation equation;

  // The last update: the command as first computed (with the integral increment) and whether
  // the conditional integration then held the integrator. A command beyond a limit at a sample is
  // saturation even when holding the integrator brings the returned command back within it.
  double tentative = 0.0;
  bool held = false;

  double update(double r, double y) {
    held = false;
    if (parallel) {
      const double e = r - y, v = c * r - y;
      const double p = kp * (b * r - y);
      double di = ki != 0.0 ? ki * ts / 2.0 * (e + e_prev) : 0.0;
      if (ki != 0.0 && anti_windup == AntiWindup::back_calculation) di += ts / tt * (ua_prev - uc_prev);
      const double dn = kd != 0.0 ? a_d * deriv + kd / (tf + ts) * (v - v_prev) : 0.0;
      double uc = p + integral + di + dn;
      tentative = uc;
      if (ki != 0.0 && anti_windup == AntiWindup::conditional_integration && ((uc > umax && di > 0.0) || (uc < umin && di < 0.0))) {
        di = 0.0;  // conditional integration: the increment would push further into the limit
        uc = p + integral + dn;
        held = true;
      }
      integral += di;
      deriv = dn;
      e_prev = e;
      v_prev = v;
      uc_prev = uc;
      return uc;
    }
    std::rotate(e_hist.rbegin(), e_hist.rbegin() + 1, e_hist.rend());
    e_hist[0] = r - y;
    double uc = 0.0;
    for (std::size_t j = 0; j < num.size(); ++j) uc += num[j] * e_hist[j];
    for (std::size_t j = 1; j < den.size(); ++j) uc -= den[j] * u_hist[j - 1];
    tentative = uc;
    std::rotate(u_hist.rbegin(), u_hist.rbegin() + 1, u_hist.rend());
    if (!u_hist.empty()) u_hist[0] = uc;
    uc_prev = uc;
    return uc;
  }
};

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

// Whether the sampled controller runs the parallel law (PID family) or Tustin of the whole C(s).
bool samples_parallel_law(const Controller& controller) {
  const Structure st = controller.structure;
  return controller.parallel && st != Structure::lead && st != Structure::lag && st != Structure::lead_lag;
}

SampledController make_sampled(const Controller& controller, const LoopModel& model, double ts) {
  SampledController sc;
  sc.ts = ts;
  sc.umin = model.umin;
  sc.umax = model.umax;
  sc.equation = controller_difference_equation(controller, ts, model.b, model.c);
  if (samples_parallel_law(controller)) {
    sc.parallel = true;
    static_cast<PidLaw&>(sc) = model;
    sc.a_d = sc.kd != 0.0 ? sc.tf / (sc.tf + ts) : 0.0;
  } else {
    sc.num = sc.equation.measurement_numerator;
    sc.den = sc.equation.denominator;
    sc.e_hist.assign(sc.num.size(), 0.0);
    sc.u_hist.assign(sc.den.size() > 1 ? sc.den.size() - 1 : 0, 0.0);
  }
  return sc;
}

// The applied u from time t on (until the next knot): value + slope·(τ − t).
struct Knot {
  double t, plant_t;  // at the actuator, and at the plant (t + L)
  double value, slope;
};

}  // namespace

DifferenceEquation controller_difference_equation(const Controller& controller, double ts, double setpoint_weight,
                                                  double derivative_weight) {
  if (!(std::isfinite(ts) && ts > 0.0)) fail("sample_time_s: expected a finite number > 0");
  DifferenceEquation eq;
  eq.sample_time_s = ts;
  if (samples_parallel_law(controller)) {
    const ParallelGains& g = *controller.parallel;
    const double a_d = g.kd != 0.0 ? g.filter_time / (g.filter_time + ts) : 0.0;
    const std::vector<double> den_i = g.ki != 0.0 ? std::vector<double>{1.0, -1.0} : std::vector<double>{1.0};
    const std::vector<double> den_d = g.kd != 0.0 ? std::vector<double>{1.0, -a_d} : std::vector<double>{1.0};
    const std::vector<double> den = poly_mul(den_i, den_d);
    auto numerator = [&](double pw, double dw) {
      std::vector<double> n = poly_add({}, den, g.kp * pw);
      if (g.ki != 0.0) n = poly_add(n, poly_mul({1.0, 1.0}, den_d), g.ki * ts / 2.0);
      if (g.kd != 0.0) n = poly_add(n, poly_mul({1.0, -1.0}, den_i), g.kd / (g.filter_time + ts) * dw);
      return n;
    };
    eq.reference_numerator = numerator(setpoint_weight, derivative_weight);
    eq.measurement_numerator = numerator(1.0, 1.0);
    eq.denominator = den;
    eq.method = "proportional: direct; integral: Tustin (bilinear); derivative: backward difference on the filtered term Kd*s/(Tf*s + 1)";
  } else {
    const TransferFunction& tf = controller.transfer;
    if (!tf.is_proper()) fail("controller: C(s) must be proper for a sampled controller");
    auto [nz, dz] = tustin_of(tf.numerator, tf.denominator, ts);
    eq.reference_numerator = nz;
    eq.measurement_numerator = nz;
    eq.denominator = dz;
    eq.method = "Tustin (bilinear) transform of C(s), acting on e = r - y";
  }
  return eq;
}

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
  if (!std::isfinite(options.delay_s) || options.delay_s < 0.0)
    fail("delay_s: expected a finite number >= 0, got " + to_string(options.delay_s));
  if (!std::isfinite(options.sample_time_s) || options.sample_time_s < 0.0)
    fail("sample_time_s: expected a finite number >= 0 (0: continuous controller), got " + to_string(options.sample_time_s));
  if (!std::isfinite(options.noise_rms) || options.noise_rms < 0.0)
    fail("noise_rms: expected a finite number >= 0, got " + to_string(options.noise_rms));
  if (!std::isfinite(options.noise_period_s)) fail("noise_period_s: expected a finite number");
  const double delay = options.delay_s, period = options.sample_time_s;

  NonlinearResult result;
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

  if (controller.parallel) {
    const ParallelGains& g = *controller.parallel;
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
    model.command_n = model.dc;
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
  // C_r(0)/C(0): the set-point weight b acts at DC only without integral action (the integral
  // term acts on r − y), and only where the weights are applied at all.
  const bool weights_applied = model.parallel && (!(period > 0.0) || samples_parallel_law(controller));
  const double reference_weight_dc = weights_applied && model.ki == 0.0 ? model.b : 1.0;
  const double y_inf = amplitude * loop_dc_gain(plant, controller.transfer, reference_weight_dc);
  double horizon = options.horizon_s;
  {
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
        if (delay > 0.0) {
          horizon += delay;
          result.notes.push_back("default horizon from the delay-free loop, extended by delay_s");
        }
      }
    }
  }
  if (!std::isfinite(horizon) || !(horizon > 0.0)) fail("horizon_s: expected a finite number > 0");

  // ---- Stiffness estimate: the stepper for the continuous loop.
  {
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

  if (period > 0.0 && horizon / period > 1e8) fail("sample_time_s: more than 1e8 controller samples per horizon");

  // Measurement noise: a zero-order-held Gaussian sequence, one value per noise period.
  std::vector<double> noise;
  double noise_period = 0.0;
  if (options.noise_rms > 0.0) {
    noise_period = options.noise_period_s > 0.0 ? options.noise_period_s : (period > 0.0 ? period : horizon / 2000.0);
    result.noise_period_s = noise_period;
    if (horizon / noise_period > 1e6) fail("noise_period_s: more than 1e6 noise values per horizon");
    noise = gaussian_sequence(options.noise_rms, options.noise_seed,
                              static_cast<std::size_t>(std::floor(horizon / noise_period)) + 2);
    result.notes.push_back("measurement noise: " + to_string(options.noise_rms) + " rms, held for " +
                           to_string(noise_period) + " s per value, seed " + to_string(options.noise_seed) +
                           "; metrics read on the noise-free plant output");
  }
  auto noise_at = [&](double time) {
    if (noise.empty()) return 0.0;
    const auto k = static_cast<std::size_t>(std::max(0.0, std::floor(time / noise_period + 1e-9)));
    return noise[std::min(k, noise.size() - 1)];
  };

  const double td = options.disturbance_time_s, dsize = options.disturbance_size;
  if (dsize != 0.0 && td >= horizon) result.notes.push_back("disturbance_time_s is at or beyond the horizon: no disturbance simulated");
  auto disturbance_at = [&](double time) { return (dsize != 0.0 && td < horizon && time >= td) ? dsize : 0.0; };
  // Known discontinuities: the integration restarts at each.
  std::set<double> breaks{horizon};
  if (dsize != 0.0 && td > 0.0 && td < horizon) breaks.insert(td);
  if (!noise.empty() && !(period > 0.0))  // a continuous controller sees every new noise value
    for (std::size_t k = 1; static_cast<double>(k) * noise_period < horizon; ++k) breaks.insert(static_cast<double>(k) * noise_period);

  using Stepper = boost::numeric::odeint::runge_kutta_dopri5<State>;
  const auto started = std::chrono::steady_clock::now();
  auto wall = [&] { return std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count(); };
  int work = 0;  // accepted steps + restarts, against max_steps
  int domain_retries = 0;  // smaller-step retries after a plant model left its domain
  double saturated_time = 0.0, slewing_time = 0.0;
  double held_time = 0.0;          // the integrator held by conditional integration
  double tentative_excess = 0.0;   // sampled controller: command excess before the integrator was held
  auto stop = [&](NonlinearStatus s, const std::string& why) {
    result.status = s;
    result.notes.push_back(why);
    return result;
  };
  std::size_t next_sample = 0;
  // Peaks of the applied u and of the command, exact where they sit: at 0+ (the proportional and
  // derivative kick), at every switch and restart (both sides) and at every accepted step's end,
  // besides the output samples (a kick or a corner of the rate limit lies between samples).
  double peak_applied = 0.0, peak_command = 0.0;
  // y at every step end, switch and restart, and at every y' = 0 inside a step (located on the
  // dense output by TOMS 748): the extrema the metrics read, exact to the integrator's tolerance.
  std::vector<std::pair<double, double>> exact_y;
  // One accepted step [ta, tb] of a dense stepper with state rate `rate(x, dx, t)`: y at tb, and
  // the interior extremum when y' changes sign (its value at ta kept in `rates_prev`, NaN:
  // unknown). `command_extremum` (continuous controller; null: sampled, u held) is called at each
  // interior extremum of the command, where u_c' changes sign, located the same way.
  State ext_x, ext_dx;
  auto note_step = [&](auto& dense, double ta, double tb, const State& xb, std::array<double, 2>& rates_prev, auto&& rate,
                       auto&& command_extremum, bool continuous_command) {
    ext_x.resize(xb.size());
    ext_dx.resize(xb.size());
    auto rates = [&](const double* xs, double time) -> std::array<double, 2> {
      rate(xs, ext_dx.data(), time);
      return {model.pm ? model.pm->output_rate(xs, ext_dx.data()) : model.output(ext_dx.data()),
              continuous_command ? model.command_rate(xs, ext_dx.data()) : 0.0};
    };
    if (std::isnan(rates_prev[0])) {
      dense.calc_state(ta, ext_x);
      rates_prev = rates(ext_x.data(), ta);
    }
    const std::array<double, 2> rates_b = rates(xb.data(), tb);
    for (std::size_t which = 0; which < 2; ++which) {
      if (!(tb > ta) || !(rates_prev[which] * rates_b[which] < 0.0)) continue;
      auto f = [&](double time) {
        dense.calc_state(time, ext_x);
        return rates(ext_x.data(), time)[which];
      };
      boost::uintmax_t iterations = 60;
      const auto [lo, hi] = boost::math::tools::toms748_solve(f, ta, tb, rates_prev[which], rates_b[which],
                                                             boost::math::tools::eps_tolerance<double>(50), iterations);
      for (double te : {lo, hi}) {
        dense.calc_state(te, ext_x);
        if (which == 0) exact_y.emplace_back(te, model.output(ext_x.data()));
        else command_extremum(ext_x.data());
      }
    }
    exact_y.emplace_back(tb, model.output(xb.data()));
    rates_prev = rates_b;
  };

  if (period > 0.0) {
    // ---- Sampled controller: zero-order hold (with slew), plant integrated between switches.
    SampledController ctl = make_sampled(controller, model, period);
    result.difference_equation = ctl.equation;
    if (!ctl.parallel && controller.parallel) result.notes.push_back("sampled lead/lag: Tustin of C(s) on e = r - y; set-point and derivative weights and anti-windup not applied");
    const int np = model.np;
    State x(static_cast<std::size_t>(np), 0.0), xe(x), scratch(x);
    std::vector<Knot> knots{{-std::numeric_limits<double>::infinity(), -std::numeric_limits<double>::infinity(), 0.0, 0.0}};
    auto applied_at = [&](double tau) {  // right-continuous, at the actuator
      std::size_t k = knots.size() - 1;
      while (k > 0 && knots[k].t > tau) --k;
      return knots[k].slope == 0.0 ? knots[k].value : knots[k].value + knots[k].slope * (tau - knots[k].t);
    };
    auto plant_knot = [&](double time) -> const Knot& {  // right-continuous, at the plant
      std::size_t k = knots.size() - 1;
      while (k > 0 && knots[k].plant_t > time) --k;
      return knots[k];
    };
    std::vector<double> commands;  // u_c[k]
    auto record = [&](double ts, const State& xs) {
      result.time_s.push_back(ts);
      result.output.push_back(model.output(xs.data()));
      const auto k = static_cast<std::size_t>(std::max(0.0, std::floor(ts / period + 1e-9)));
      result.command.push_back(commands[std::min(k, commands.size() - 1)]);
      result.control.push_back(applied_at(ts));
      const Knot& kn = plant_knot(ts);
      result.plant_input.push_back(kn.slope == 0.0 ? kn.value : kn.value + kn.slope * (ts - kn.plant_t));
    };
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
    // The plant between the hold's switches, with either stepper; false: stopped (status set).
    auto integrate_held = [&](auto& dense) -> bool {
      auto halt = [&](NonlinearStatus s, const std::string& why) {
        stop(s, why);
        return false;
      };
      double dt = std::min(horizon / 4000.0, period);
      if (options.first_step_s > 0.0) dt = std::min(dt, options.first_step_s);
      long k = 0;
      double t = 0.0;
      try {
        while (true) {
          // Controller samples due now.
          while (static_cast<double>(k) * period <= t && static_cast<double>(k) * period <= horizon) {
            const double tk = static_cast<double>(k) * period;
            const double y = model.output(x.data()) + noise_at(tk);
            const double uc = ctl.update(amplitude, y);
            if (!std::isfinite(uc)) return halt(NonlinearStatus::non_finite, "the controller output became non-finite at t = " + to_string(tk) + " s");
            commands.push_back(uc);
            peak_command = std::max(peak_command, std::abs(uc));
            // Saturated: the command beyond a limit at this sample, as first computed (before the
            // conditional integration held the integrator) or as returned.
            const double highest = std::max(ctl.tentative, uc), low = std::min(ctl.tentative, uc);
            if (highest > model.umax || low < model.umin) {
              saturated_time += std::min(period, horizon - tk);
              tentative_excess = std::max({tentative_excess, highest - model.umax, model.umin - low});
            }
            if (ctl.held) held_time += std::min(period, horizon - tk);
            const double target = std::clamp(uc, model.umin, model.umax);
            const double now = applied_at(tk);
            double end_value = target;
            if (model.rate && target != now) {
              const double slope = target > now ? model.rate_max : -model.rate_max;
              const double reach = tk + (target - now) / slope;
              knots.push_back({tk, tk + delay, now, slope});
              slewing_time += std::min({reach, tk + period, horizon}) - tk;
              if (reach < tk + period) knots.push_back({reach, reach + delay, target, 0.0});
              else end_value = now + slope * period;
            } else {
              knots.push_back({tk, tk + delay, target, 0.0});
            }
            ctl.ua_prev = end_value;
            // the applied u is piecewise linear between knots: its peak is at one (or at the horizon)
            for (std::size_t i = knots.size() - (knots.back().t > tk ? 2 : 1); i < knots.size(); ++i)
              if (knots[i].t < horizon) peak_applied = std::max(peak_applied, std::abs(knots[i].value));
            for (std::size_t i = knots.size() - (knots.back().t > tk ? 2 : 1); i < knots.size(); ++i)
              if (knots[i].plant_t < horizon) breaks.insert(knots[i].plant_t);
            ++k;
            if (static_cast<double>(k) * period < horizon) breaks.insert(static_cast<double>(k) * period);
          }
          while (next_sample < samples.size() && samples[next_sample] <= t) record(samples[next_sample++], x);
          if (t >= horizon) break;
          const double t_end = *breaks.upper_bound(t);
          if (++work > options.max_steps)
            return halt(NonlinearStatus::step_limit, "stopped at t = " + to_string(t) + " s: max_steps = " + to_string(options.max_steps) + " reached");
          ++result.switches;
          if (t_end - t > 1e-13 * std::max(1.0, std::abs(t))) {  // shorter pieces (rounding of k·Ts + L) are skipped
            const Knot& kn = plant_knot(t);
            PlantSystem system{&model, kn.slope == 0.0 ? kn.value : kn.value + kn.slope * (t - kn.plant_t), kn.slope, t,
                               disturbance_at(t)};
            dense.initialize(x, t, std::min(dt, t_end - t));
            std::array<double, 2> rates_prev{std::numeric_limits<double>::quiet_NaN(), 0.0};  // y' jumps with the hold
            auto plant_rate = [&](const double* xs, double* dx, double time) { system.evaluate(xs, dx, time); };
            exact_y.emplace_back(t, model.output(x.data()));
            while (true) {
              if (++work > options.max_steps)
                return halt(NonlinearStatus::step_limit, "stopped at t = " + to_string(dense.current_time()) + " s: max_steps = " + to_string(options.max_steps) + " reached");
              if (wall() > options.max_wall_time_s)
                return halt(NonlinearStatus::time_limit, "stopped at t = " + to_string(dense.current_time()) + " s: max_wall_time_s = " + to_string(options.max_wall_time_s) + " reached");
              const auto [ta, tb] = step_within_domain(dense, system, work, domain_retries);
              ++result.steps;
              dt = dense.current_time_step();
              const double tc = std::min(tb, t_end);
              if (tb <= t_end) xe = dense.current_state();
              else dense.calc_state(tc, xe);
              if (!all_finite(xe)) return halt(NonlinearStatus::non_finite, "the state became non-finite near t = " + to_string(tc) + " s");
              note_step(dense, ta, tc, xe, rates_prev, plant_rate, [](const double*) {}, false);
              while (next_sample < samples.size() && samples[next_sample] < tc) {
                dense.calc_state(samples[next_sample], scratch);
                record(samples[next_sample++], scratch);
              }
              if (tb >= t_end) break;
            }
            x = xe;
          }
          t = t_end;
        }
      } catch (const boost::numeric::odeint::odeint_error& e) {
        return halt(NonlinearStatus::step_limit, std::string("the integrator gave up: ") + e.what());
      } catch (const PlantEvaluationError& e) {
        return halt(NonlinearStatus::non_finite, std::string(e.what()) + " (integrating from t = " + to_string(t) + " s)");
      }
      return true;
    };
    bool completed = false;
    if (result.stepper == NonlinearStepper::rosenbrock4) {
      ImplicitDense dense(static_cast<std::size_t>(np), options.absolute_tolerance, options.relative_tolerance, horizon / 100.0);
      completed = integrate_held(dense);
    } else {
      auto dense = boost::numeric::odeint::make_dense_output(options.absolute_tolerance, options.relative_tolerance,
                                                             horizon / 100.0, Stepper());
      completed = integrate_held(dense);
    }
    if (!completed) return result;
  } else {
    // ---- Continuous controller: hybrid integration with located switches (and delay line).
    DelayLine line;
    line.delay = delay;
    if (delay > 0.0) model.delay = &line;
    // Halts the run with a status (inside the integration below, which returns false then).
    auto halt = [&](NonlinearStatus s, const std::string& why) {
      result.status = s;
      result.notes.push_back(why);
      return false;
    };
    double max_dt = horizon / 100.0;  // bounds how far a double switch can hide inside one step
    if (delay > 0.0) max_dt = std::min(max_dt, delay);  // method of steps: stages need only the past

    // The hybrid integration, for either stepper: `dense` is odeint's dense-output stepper and
    // `step(dense, system)` advances it one step with the held-mode system.
    auto integrate = [&](auto& dense) {
      State x(static_cast<std::size_t>(size), 0.0), xe(x), scratch(x);
      // Samples at a break point are recorded after the restart there (right limits of the
      // delayed input); without delay every piece is inclusive as before.
      auto record_until = [&](double t_end, bool inclusive, const Modes& m, auto&& state_at) {
        while (next_sample < samples.size() && (inclusive ? samples[next_sample] <= t_end : samples[next_sample] < t_end)) {
          const double ts = samples[next_sample++];
          const double* xs = state_at(ts);
          result.time_s.push_back(ts);
          // One output evaluation per sample (an expression plant's output is a parser call).
          const double y = model.output(xs);
          const double uc = model.command_linear(xs, y) + model.command_r * model.r - model.command_n * model.n;
          result.output.push_back(y);
          result.command.push_back(uc);
          const double ua = (model.rate && m.rate != RateMode::tracking) ? xs[model.ua_index] : model.saturated(uc, m);
          result.control.push_back(ua);
          result.plant_input.push_back(delay > 0.0 ? line.value(ts - delay) : ua);
        }
      };
      auto dense_at = [&](double ts) -> const double* {
        dense.calc_state(ts, scratch);
        return scratch.data();
      };
      // Stores the applied u of [t0, t1] (inside the dense stepper's current step) in the line.
      auto store = [&](double t0, double t1, const Modes& m) {
        if (!(delay > 0.0) || !(t1 > t0)) return;
        DelayLine::Segment seg{t0, t1, {}};
        for (int j = 0; j < DelayLine::nodes; ++j) {
          const double tj = j == DelayLine::nodes - 1 ? t1 : t0 + (t1 - t0) * j / (DelayLine::nodes - 1);
          seg.u[static_cast<std::size_t>(j)] = model.applied(dense_at(tj), m);
        }
        line.segments.push_back(seg);
      };

      auto note_peaks = [&](const double* xs, const Modes& m) {
        peak_command = std::max(peak_command, std::abs(model.command(xs)));
        peak_applied = std::max(peak_applied, std::abs(model.applied(xs, m)));
      };
      double dt = std::min(horizon / 4000.0, max_dt);
      if (options.first_step_s > 0.0) dt = std::min(dt, options.first_step_s);
      Modes modes;
      if (model.rate) {  // the actuator starts at rest at u = 0 and must slew to the command at 0+
        const double us = std::clamp(model.command(x.data()), model.umin, model.umax);
        modes.rate = us > 0.0 ? RateMode::up : (us < 0.0 ? RateMode::down : RateMode::tracking);
      }
      double t = 0.0;
      try {
        while (t < horizon) {
          if (delay > 0.0 && t + delay < horizon) breaks.insert(t + delay);  // a restart reaches the plant L later
          const double t_end = *breaks.upper_bound(t);
          const bool inclusive = !(delay > 0.0) || t_end >= horizon;
          const double disturbance = disturbance_at(t);
          const double noise_now = noise_at(t);
          if (noise_now != model.n) {
            // A new noise value steps the command; a rate-limited actuator that was tracking
            // must slew from where it was, not jump with it.
            const double before = model.applied(x.data(), modes);
            model.n = noise_now;
            const double target = std::clamp(model.command(x.data()), model.umin, model.umax);
            if (model.rate && modes.rate == RateMode::tracking && target != before) {
              modes.rate = target > before ? RateMode::up : RateMode::down;
              x[static_cast<std::size_t>(model.ua_index)] = before;
            }
          }
          line.lo = t - delay;
          line.hi = t_end - delay;
          for (int i = 0; i < 4; ++i) {  // a chosen mode can imply another (e.g. tracking at too steep a slope)
            modes = model.choose(x.data(), modes, disturbance, scratch.data(), i < 2, t);
            if (model.consistent(x.data(), modes, disturbance, scratch.data(), t)) break;
          }
          note_peaks(x.data(), modes);  // right limit at the restart (0+: the kick)
          record_until(t, true, modes, [&](double) { return x.data(); });
          const HeldModeSystem system{&model, modes, disturbance};
          std::array<double, 2> rates_prev{std::numeric_limits<double>::quiet_NaN(), 0.0};  // y', u_c' jump at a restart
          auto command_extremum = [&](const double* xs) { note_peaks(xs, modes); };
          auto loop_rate = [&](const double* xs, double* dx, double time) {
            model.derivative(xs, dx, modes, disturbance, time);
          };
          exact_y.emplace_back(t, model.output(x.data()));
          dense.initialize(x, t, std::min(dt, t_end - t));
          while (true) {
            if (++work > options.max_steps)
              return halt(NonlinearStatus::step_limit, "stopped at t = " + to_string(dense.current_time()) +
                                                           " s: max_steps = " + to_string(options.max_steps) + " reached");
            if (wall() > options.max_wall_time_s)
              return halt(NonlinearStatus::time_limit, "stopped at t = " + to_string(dense.current_time()) +
                                                           " s: max_wall_time_s = " + to_string(options.max_wall_time_s) + " reached");
            const auto [ta, tb] = step_within_domain(dense, system, work, domain_retries);
            ++result.steps;
            dt = dense.current_time_step();
            const double tc = std::min(tb, t_end);
            if (tb <= t_end) xe = dense.current_state();
            else dense.calc_state(tc, xe);
            if (!all_finite(xe))
              return halt(NonlinearStatus::non_finite, "the state became non-finite near t = " + to_string(tc) + " s");
            if (!model.consistent(xe.data(), modes, disturbance, scratch.data(), tc)) {
              // Locate the switch: consistent at lo, not at hi.
              double lo = ta, hi = tc;
              for (int it = 0; it < 200 && hi - lo > 4.0 * std::numeric_limits<double>::epsilon() * std::max(1.0, hi); ++it) {
                const double mid = 0.5 * (lo + hi);
                dense.calc_state(mid, xe);
                if (model.consistent(xe.data(), modes, disturbance, scratch.data(), mid)) lo = mid;
                else hi = mid;
              }
              store(ta, hi, modes);
              record_until(hi, true, modes, dense_at);
              if (modes.sat != 0) saturated_time += hi - ta;
              if (modes.rate != RateMode::tracking) slewing_time += hi - ta;
              if (model.clamps() && (!modes.integrating || modes.sliding)) held_time += hi - ta;
              dense.calc_state(hi, x);
              note_peaks(x.data(), modes);  // left limit at the switch
              note_step(dense, ta, hi, x, rates_prev, loop_rate, command_extremum, true);
              t = hi;
              ++result.switches;
              break;
            }
            note_peaks(xe.data(), modes);
            note_step(dense, ta, tc, xe, rates_prev, loop_rate, command_extremum, true);
            store(ta, tc, modes);
            record_until(tc, inclusive || tb < t_end, modes, dense_at);
            if (modes.sat != 0) saturated_time += tc - ta;
            if (modes.rate != RateMode::tracking) slewing_time += tc - ta;
            if (model.clamps() && (!modes.integrating || modes.sliding)) held_time += tc - ta;
            if (tb >= t_end) {
              x = xe;
              t = t_end;
              break;
            }
          }
        }
      } catch (const boost::numeric::odeint::odeint_error& e) {
        if (!all_finite(dense.current_state()))
          return halt(NonlinearStatus::non_finite, std::string("the state became non-finite: ") + e.what());
        return halt(NonlinearStatus::step_limit, std::string("the integrator gave up: ") + e.what());
      } catch (const PlantEvaluationError& e) {
        return halt(NonlinearStatus::non_finite,
                    std::string(e.what()) + " (integrating from t = " + to_string(dense.current_time()) + " s)");
      }
      return true;
    };

    bool completed = false;
    if (result.stepper == NonlinearStepper::rosenbrock4) {
      ImplicitDense dense(static_cast<std::size_t>(size), options.absolute_tolerance, options.relative_tolerance, max_dt);
      completed = integrate(dense);
    } else {
      auto dense = boost::numeric::odeint::make_dense_output(options.absolute_tolerance, options.relative_tolerance, max_dt,
                                                             Stepper());
      completed = integrate(dense);
    }
    if (!completed) return result;
  }
  for (double v : result.output)
    if (!std::isfinite(v)) return stop(NonlinearStatus::non_finite, "a sampled output is non-finite");
  for (double v : result.control)
    if (!std::isfinite(v)) return stop(NonlinearStatus::non_finite, "a sampled control is non-finite");

  if (domain_retries > 0)
    result.notes.push_back(std::to_string(domain_retries) + " integrator step(s) retried smaller after a trial stage left the "
                           "plant model's domain");
  result.saturated_fraction = saturated_time / horizon;
  result.rate_limited_fraction = slewing_time / horizon;
  result.integrator_held_fraction = held_time / horizon;
  result.command_excess_max = tentative_excess;
  for (double uc : result.command)
    result.command_excess_max = std::max(result.command_excess_max, std::max(uc - model.umax, model.umin - uc));
  if (std::isfinite(y_inf) && std::abs(y_inf) > 1e-12 * std::abs(amplitude)) {
    result.metrics = measure(result.time_s, result.output, result.control, y_inf, amplitude, band_fraction, exact_y);
    result.metrics.effort_peak = std::max(result.metrics.effort_peak, peak_applied);
    double command_peak = peak_command;
    for (double uc : result.command) command_peak = std::max(command_peak, std::abs(uc));
    result.metrics.command_peak = command_peak;
    result.measured = true;
    result.notes.push_back("metrics relative to the linear loop's final value y_inf = " + to_string(y_inf));
  } else {
    result.notes.push_back("metrics not measured: the linear loop has no finite nonzero final value");
  }
  return result;
}

}  // namespace specloop
