// Exact ZOH step simulation and step metrics with between-sample refinement.
//
// A step input is constant between samples, so x[k+1] = Φ·x[k] + Γ·r is exact at the samples
// (Φ = e^{Ah}, Γ = ∫₀ʰ e^{Aτ}dτ·B, both from one exponential of the augmented matrix
// [[A, B], [0, 0]]·h). The state derivative x' = A·x + B·r is exact at every sample too, so
// each output is known with its slope at both ends of each interval; peaks, band crossings
// and integrals between samples use the cubic Hermite interpolant of those four numbers.
#include "specloop/response.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace specloop {

std::string_view status_name(StepStatus s) {
  switch (s) {
    case StepStatus::ok: return "ok";
    case StepStatus::unstable: return "unstable";
    case StepStatus::zero_final_value: return "zero final value";
    case StepStatus::numerical_failure: return "numerical failure";
  }
  return "?";
}

TimeGrid choose_time_grid(const std::vector<Complex>& poles, const TimeGridRules& rules) {
  TimeGrid grid;
  const int min_intervals = rules.min_samples - 1, max_intervals = rules.max_samples - 1;
  if (poles.empty()) {  // a static loop: nothing moves; a short grid keeps the code uniform
    grid.step_s = 1.0 / min_intervals;
    grid.fine_intervals = min_intervals;
    grid.samples = rules.min_samples;
    return grid;
  }
  const double decay = std::log(1.0 / rules.decay_fraction);
  double slowest = std::numeric_limits<double>::infinity(), fastest = 0.0;
  for (const Complex& p : poles) {
    slowest = std::min(slowest, -p.real());
    fastest = std::max(fastest, std::abs(p));
  }
  const double horizon = decay / slowest;
  const double coarse = horizon / min_intervals;
  // Fast modes: those the coarse step would not resolve. They need the fine step only until
  // they have decayed like the slowest one does by the horizon.
  double fast_alive = 0.0;
  for (const Complex& p : poles)
    if (std::abs(p) * coarse > rules.max_step_pole_product) fast_alive = std::max(fast_alive, decay / -p.real());
  if (fast_alive == 0.0) {
    grid.step_s = coarse;
    grid.fine_intervals = min_intervals;
  } else {
    const double fine = rules.max_step_pole_product / fastest;
    const double t1 = std::min(fast_alive, horizon);
    int fine_n = static_cast<int>(std::ceil(t1 / fine));
    int coarse_n = t1 < horizon ? static_cast<int>(std::ceil((horizon - t1) / coarse)) : 0;
    if (fine_n + coarse_n > max_intervals) {  // the cap: loosen the fine step
      fine_n = std::max(1, max_intervals - coarse_n);
    }
    grid.step_s = t1 / fine_n;
    grid.fine_intervals = fine_n;
    grid.coarse_intervals = coarse_n;
    grid.coarse_step_s = coarse_n > 0 ? (horizon - t1) / coarse_n : 0.0;
  }
  grid.samples = grid.fine_intervals + grid.coarse_intervals + 1;
  return grid;
}

namespace {

// Cubic Hermite interpolant on one interval of length h: values f0, f1 and slopes d0, d1.
struct Hermite {
  double f0, f1, d0, d1, h;
  double value(double s) const {  // s in [0, 1]
    const double s2 = s * s, s3 = s2 * s;
    return (2 * s3 - 3 * s2 + 1) * f0 + (s3 - 2 * s2 + s) * h * d0 + (-2 * s3 + 3 * s2) * f1 +
           (s3 - s2) * h * d1;
  }
  // Extremum (max when sign = +1, min when −1) over [0, 1]; returns {value, s}.
  std::pair<double, double> extremum(double sign) const {
    // p'(s)·h = a s² + b s + c
    const double a = 6 * f0 + 3 * h * d0 - 6 * f1 + 3 * h * d1;
    const double b = -6 * f0 - 4 * h * d0 + 6 * f1 - 2 * h * d1;
    const double c = h * d0;
    std::pair<double, double> best{f0, 0.0};
    auto consider = [&](double s) {
      if (!(s >= 0.0 && s <= 1.0)) return;
      const double v = value(s);
      if (sign * v > sign * best.first) best = {v, s};
    };
    consider(1.0);
    if (std::abs(a) > 1e-300) {
      const double disc = b * b - 4 * a * c;
      if (disc >= 0.0) {
        const double q = -0.5 * (b + std::copysign(std::sqrt(disc), b));
        if (q != 0.0) consider(c / q);
        consider(q / a);
      }
    } else if (std::abs(b) > 1e-300) {
      consider(-c / b);
    }
    return best;
  }
  // s in [0, 1] where the interpolant equals `level`; f0 and f1 lie on opposite sides (or on it).
  double crossing(double level) const {
    double lo = 0.0, hi = 1.0;
    const double g0 = f0 - level;
    if (g0 == 0.0) return 0.0;
    for (int i = 0; i < 50; ++i) {
      const double mid = 0.5 * (lo + hi);
      const double g = value(mid) - level;
      if ((g > 0.0) == (g0 > 0.0)) lo = mid; else hi = mid;
    }
    return 0.5 * (lo + hi);
  }
};

// Padé(6,6) coefficients of the exponential (Moler & Van Loan, "Nineteen dubious ways...").
constexpr double kPade[7] = {1.0, 1.0 / 2, 5.0 / 44, 1.0 / 66, 1.0 / 792, 1.0 / 15840, 1.0 / 665280};

// Writes samples [0, count) of y and u, and the states themselves (column-major, N per sample,
// for slopes computed on demand), starting from x_io, which is left at the state after the last
// sample (ready for the next segment). Four interleaved chains (samples k, k+1, k+2, k+3 stepped
// by Φ⁴ with Γ₄ = (Φ³ + Φ² + Φ + I)·Γ) shorten the dependency chain that bounds the loop's speed:
// one 4×4 matrix-vector product has a latency of about 20 cycles, four in flight hide it.
template <int N>
void recur_fixed(const Eigen::MatrixXd& phi_dyn, const Eigen::VectorXd& gamma_dyn,
                 const Eigen::MatrixXd& out_dyn, const Eigen::VectorXd& oc_dyn, Eigen::VectorXd& x_io,
                 int samples, double* y, double* u, double* states) {
  using Vec = Eigen::Matrix<double, N, 1>;
  using Mat = Eigen::Matrix<double, N, N>;
  constexpr int kChains = 4;
  const Mat phi = phi_dyn;
  const Vec gamma = gamma_dyn;
  const Mat phi2 = phi * phi;
  const Mat phi4 = phi2 * phi2;
  const Vec gamma4 = phi2 * (phi * gamma + gamma) + phi * gamma + gamma;
  const Eigen::Matrix<double, 1, N> cy = out_dyn.row(0), cu = out_dyn.row(2);
  const double oy = oc_dyn(0), ou = oc_dyn(2);
  Vec c[kChains];
  c[0] = x_io;
  for (int j = 1; j < kChains; ++j) c[j] = phi * c[j - 1] + gamma;
  int k = 0;
  for (; k + kChains <= samples; k += kChains) {
    for (int j = 0; j < kChains; ++j) {
      Eigen::Map<Vec>(states + (k + j) * N) = c[j];
      y[k + j] = cy.dot(c[j]) + oy;
      u[k + j] = cu.dot(c[j]) + ou;
    }
    for (int j = 0; j < kChains; ++j) c[j] = phi4 * c[j] + gamma4;
  }
  const int rest = samples - k;  // 0..3 samples left: they sit in c[0 .. rest − 1]
  for (int j = 0; j < rest; ++j) {
    Eigen::Map<Vec>(states + (k + j) * N) = c[j];
    y[k + j] = cy.dot(c[j]) + oy;
    u[k + j] = cu.dot(c[j]) + ou;
  }
  x_io = c[rest];  // the state at sample `samples`
}

}  // namespace

StepSimulator::StepSimulator(TimeGridRules rules) : rules_(rules) {}

void StepSimulator::prepare(int n, int samples) {
  if (n != states_) {
    const int m = n + 1;
    eigen_ = Eigen::EigenSolver<Eigen::MatrixXd>(n);
    lu_state_ = Eigen::PartialPivLU<Eigen::MatrixXd>(n);
    lu_pade_ = Eigen::PartialPivLU<Eigen::MatrixXd>(m);
    for (Eigen::MatrixXd* mat : {&augmented_, &power2_, &power4_, &power6_, &even_, &odd_, &numer_, &denom_, &expo_})
      mat->resize(m, m);
    phi_.resize(n, n);
    outputs_.resize(4, n);
    gamma_.resize(n);
    out_const_.resize(4);
    x_.resize(n);
    x_next_.resize(n);
    solve_.resize(n);
    poles_.reserve(static_cast<std::size_t>(n));
    states_ = n;
  }
  if (static_cast<int>(y_.size()) < samples) {
    for (auto* v : {&t_, &y_, &u_}) v->resize(static_cast<std::size_t>(samples));
  }
  if (states_store_.size() < static_cast<std::size_t>(samples) * static_cast<std::size_t>(n))
    states_store_.resize(static_cast<std::size_t>(samples) * static_cast<std::size_t>(n));
}

void StepSimulator::discretize(const StateSpace& loop, double amplitude, double h, Eigen::MatrixXd& phi,
                               Eigen::VectorXd& gamma) {
  const int n = loop.states();
  // Augmented exponential: exp([[A, B·r], [0, 0]]·h) = [[Φ, Γ·r], [0, 1]].
  augmented_.setZero();
  augmented_.topLeftCorner(n, n) = loop.A * h;
  augmented_.topRightCorner(n, 1) = loop.B * (amplitude * h);
  // Scaling and squaring with a Padé(6,6) approximant: scale so the norm is at most 1/2.
  const double norm = augmented_.cwiseAbs().rowwise().sum().maxCoeff();
  int squarings = 0;
  if (norm > 0.5) squarings = static_cast<int>(std::ceil(std::log2(norm / 0.5)));
  augmented_ *= std::ldexp(1.0, -squarings);
  power2_.noalias() = augmented_ * augmented_;
  power4_.noalias() = power2_ * power2_;
  power6_.noalias() = power4_ * power2_;
  even_ = kPade[2] * power2_ + kPade[4] * power4_ + kPade[6] * power6_;
  even_.diagonal().array() += kPade[0];
  numer_ = kPade[1] * Eigen::MatrixXd::Identity(n + 1, n + 1) + kPade[3] * power2_ + kPade[5] * power4_;
  odd_.noalias() = augmented_ * numer_;
  numer_ = even_ + odd_;
  denom_ = even_ - odd_;
  lu_pade_.compute(denom_);
  expo_ = lu_pade_.solve(numer_);
  for (int i = 0; i < squarings; ++i) {
    power2_.noalias() = expo_ * expo_;
    expo_.swap(power2_);
  }
  phi = expo_.topLeftCorner(n, n);
  gamma = expo_.topRightCorner(n, 1);
  // Outputs and their slopes: y = C_y x + D_y r, y' = C_y A x + C_y B r (likewise u).
  outputs_.row(0) = loop.C.row(0);
  outputs_.row(1).noalias() = loop.C.row(0) * loop.A;
  outputs_.row(2) = loop.C.row(1);
  outputs_.row(3).noalias() = loop.C.row(1) * loop.A;
  out_const_(0) = loop.D(0) * amplitude;
  out_const_(1) = loop.C.row(0).dot(loop.B) * amplitude;
  out_const_(2) = loop.D(1) * amplitude;
  out_const_(3) = loop.C.row(1).dot(loop.B) * amplitude;
}

void StepSimulator::recur(int n, int first, int count) {
  double* y = y_.data() + first;
  double* u = u_.data() + first;
  double* states = states_store_.data() + static_cast<std::size_t>(first) * static_cast<std::size_t>(n);
  switch (n) {
    case 1: return recur_fixed<1>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 2: return recur_fixed<2>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 3: return recur_fixed<3>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 4: return recur_fixed<4>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 5: return recur_fixed<5>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 6: return recur_fixed<6>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 7: return recur_fixed<7>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 8: return recur_fixed<8>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    default: break;
  }
  for (int k = 0; k < count; ++k) {
    Eigen::Map<Eigen::VectorXd>(states + static_cast<std::ptrdiff_t>(k) * n, n) = x_;
    y[k] = outputs_.row(0).dot(x_) + out_const_(0);
    u[k] = outputs_.row(2).dot(x_) + out_const_(2);
    x_next_.noalias() = phi_ * x_;
    x_next_ += gamma_;
    x_.swap(x_next_);
  }
}

bool StepSimulator::eigenvalues(const Eigen::MatrixXd& a) {
  eigen_.compute(a, false);
  if (eigen_.info() != Eigen::Success) return false;
  for (int i = 0; i < a.rows(); ++i) poles_.push_back(eigen_.eigenvalues()(i));
  return true;
}

double StepSimulator::slope(int row, int k) const {
  if (states_ == 0) return 0.0;
  const Eigen::Map<const Eigen::VectorXd> x(states_store_.data() + static_cast<std::size_t>(k) * static_cast<std::size_t>(states_), states_);
  return outputs_.row(row).dot(x) + out_const_(row);
}

StepStatus StepSimulator::simulate(const StateSpace& loop, double amplitude, double band_fraction,
                                   StepMetrics& m, StepTrace* trace) {
  const int n = loop.states();
  if (n != states_) prepare(n, 0);
  m = StepMetrics{};

  // Stability first, from the poles.
  poles_.clear();
  if (n > 0) {
    if (!eigenvalues(loop.A)) return StepStatus::numerical_failure;
    sort_roots(poles_);
    if (!all_stable(poles_)) return StepStatus::unstable;
  }

  // Final value: y∞ = r·(D_y − C_y A⁻¹ B).
  double dc = loop.D(0);
  if (n > 0) {
    lu_state_.compute(loop.A);
    solve_ = lu_state_.solve(loop.B);
    dc -= loop.C.row(0).dot(solve_);
  }
  const double y_inf = amplitude * dc;
  if (!std::isfinite(y_inf)) return StepStatus::numerical_failure;
  if (std::abs(y_inf) <= 1e-12 * std::abs(amplitude)) return StepStatus::zero_final_value;
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  // Below 1e-12 the error is the DC-gain solve's rounding (a loop with an integrator): report 0.
  if (std::abs(m.steady_state_error) < 1e-12) m.steady_state_error = 0.0;

  grid_ = choose_time_grid(poles_, rules_);
  prepare(n, grid_.samples);
  const int K = grid_.samples;
  const int fine_samples = grid_.fine_intervals + 1;
  for (int k = 0; k < fine_samples; ++k) t_[k] = k * grid_.step_s;
  for (int k = fine_samples; k < K; ++k) t_[k] = t_[fine_samples - 1] + (k - fine_samples + 1) * grid_.coarse_step_s;
  if (n > 0) {
    // The fine segment writes samples 0 .. T₁ − h₁ and leaves x_ at T₁; the coarse segment
    // writes T₁ .. T with the coarse step. Without a coarse segment the fine one runs to T.
    discretize(loop, amplitude, grid_.step_s, phi_, gamma_);
    x_.setZero();
    if (grid_.coarse_intervals == 0) {
      recur(n, 0, fine_samples);
    } else {
      recur(n, 0, fine_samples - 1);
      discretize(loop, amplitude, grid_.coarse_step_s, phi_, gamma_);
      recur(n, fine_samples - 1, grid_.coarse_intervals + 1);
    }
  } else {
    for (int k = 0; k < grid_.samples; ++k) {
      y_[k] = loop.D(0) * amplitude;
      u_[k] = loop.D(1) * amplitude;
    }
  }
  const double* t = t_.data();
  const double* y = y_.data();
  const double* u = u_.data();
  if (!std::isfinite(y[K - 1]) || !std::isfinite(u[K - 1])) return StepStatus::numerical_failure;
  auto dy = [&](int k) { return slope(1, k); };  // exact y'(t_k)
  auto du = [&](int k) { return slope(3, k); };  // exact u'(t_k)

  // Extremes first as plain reductions (they vectorize), then their indices.
  const double inv = 1.0 / y_inf;
  // Four independent accumulators each, so the loop is not one long chain of dependent
  // comparisons (floating-point reductions are not reordered by the compiler on its own).
  double yh[4], yl[4], uh[4], ul[4];
  for (int j = 0; j < 4; ++j) yh[j] = yl[j] = y[0], uh[j] = ul[j] = u[0];
  int k4 = 0;
  for (; k4 + 4 <= K; k4 += 4)
    for (int j = 0; j < 4; ++j) {
      yh[j] = y[k4 + j] > yh[j] ? y[k4 + j] : yh[j];
      yl[j] = y[k4 + j] < yl[j] ? y[k4 + j] : yl[j];
      uh[j] = u[k4 + j] > uh[j] ? u[k4 + j] : uh[j];
      ul[j] = u[k4 + j] < ul[j] ? u[k4 + j] : ul[j];
    }
  for (; k4 < K; ++k4) {
    yh[0] = y[k4] > yh[0] ? y[k4] : yh[0];
    yl[0] = y[k4] < yl[0] ? y[k4] : yl[0];
    uh[0] = u[k4] > uh[0] ? u[k4] : uh[0];
    ul[0] = u[k4] < ul[0] ? u[k4] : ul[0];
  }
  const double y_hi = std::max({yh[0], yh[1], yh[2], yh[3]}), y_lo = std::min({yl[0], yl[1], yl[2], yl[3]});
  const double u_hi = std::max({uh[0], uh[1], uh[2], uh[3]}), u_lo = std::min({ul[0], ul[1], ul[2], ul[3]});
  if (!std::isfinite(y_hi) || !std::isfinite(y_lo) || !std::isfinite(u_hi) || !std::isfinite(u_lo))
    return StepStatus::numerical_failure;
  auto first_equal = [&](const double* f, double v) {
    int k = 0;
    while (f[k] != v) ++k;
    return k;
  };
  // Extremes of y/y∞ are extremes of y (y∞ > 0) or swapped (y∞ < 0).
  const int k_max = first_equal(y, y_inf > 0.0 ? y_hi : y_lo);
  const int k_min = first_equal(y, y_inf > 0.0 ? y_lo : y_hi);
  const int k_effort = first_equal(u, std::abs(u_hi) >= std::abs(u_lo) ? u_hi : u_lo);
  // Thresholds from the front, the last band exit from the back: each scan stops early.
  int k10 = -1, k90 = -1, k_entry = -1, k_outside = -1;
  for (int k = 0; k < K; ++k)
    if (y[k] * inv >= 0.1) { k10 = k; break; }
  for (int k = std::max(k10, 0); k10 >= 0 && k < K; ++k)
    if (y[k] * inv >= 0.9) { k90 = k; break; }
  // First entry into the band: the first sample inside it, or the first interval that jumps
  // across it (a fast rise can pass from below the band to above it between two samples).
  for (int k = 0; k < K; ++k) {
    const double yn = y[k] * inv;
    if (std::abs(yn - 1.0) <= band_fraction) { k_entry = k; break; }
    if (k > 0 && (yn - 1.0) * (y[k - 1] * inv - 1.0) < 0.0) { k_entry = k; break; }
  }
  for (int k = K - 1; k >= 0; --k)
    if (std::abs(y[k] * inv - 1.0) > band_fraction) { k_outside = k; break; }

  // Integrals of e = y∞ − y, per uniform segment: the trapezoid rule with the Hermite end
  // correction h²/12·(f'(a) − f'(b)) (exact for cubics). The corrections of neighbouring
  // intervals cancel, so only the ends of each run of constant sign need the slope; an interval
  // where e changes sign is split at its linear zero. The plain sums vectorize; the few
  // sign-change intervals are patched afterwards.
  double iae = 0.0, ise = 0.0, itae = 0.0;
  auto integrate_segment = [&](int first, int last, double h) {
    if (last <= first) return;
    const double c = h * h / 12.0;
    auto e = [&](int k) { return y_inf - y[k]; };
    auto de = [&](int k) { return -dy(k); };
    double e2[4] = {0, 0, 0, 0}, ab[4] = {0, 0, 0, 0}, tab[4] = {0, 0, 0, 0};  // independent partial sums
    int i = first;
    for (; i + 4 <= last + 1; i += 4)
      for (int j = 0; j < 4; ++j) {
        const double ei = y_inf - y[i + j];
        e2[j] += ei * ei;
        ab[j] += std::abs(ei);
        tab[j] += t[i + j] * std::abs(ei);
      }
    for (; i <= last; ++i) {
      const double ei = y_inf - y[i];
      e2[0] += ei * ei;
      ab[0] += std::abs(ei);
      tab[0] += t[i] * std::abs(ei);
    }
    const double sum_e2 = (e2[0] + e2[1]) + (e2[2] + e2[3]);
    const double sum_abs = (ab[0] + ab[1]) + (ab[2] + ab[3]);
    const double sum_tabs = (tab[0] + tab[1]) + (tab[2] + tab[3]);
    auto ends = [&](double f_first, double f_last) { return 0.5 * (f_first + f_last); };
    const double e_a = e(first), e_b = e(last);
    ise += h * (sum_e2 - ends(e_a * e_a, e_b * e_b)) + c * (2.0 * e_a * de(first) - 2.0 * e_b * de(last));
    iae += h * (sum_abs - ends(std::abs(e_a), std::abs(e_b)));
    itae += h * (sum_tabs - ends(t[first] * std::abs(e_a), t[last] * std::abs(e_b)));
    auto close_run = [&](int a, int b) {  // samples a..b share the sign of e(a)
      if (b <= a) return;
      const double sgn = e(a) >= 0.0 ? 1.0 : -1.0;
      iae += sgn * c * (de(a) - de(b));
      itae += sgn * c * ((e(a) + t[a] * de(a)) - (e(b) + t[b] * de(b)));
    };
    int run = first;
    bool positive = e_a >= 0.0;
    for (int k = first; k < last; ++k) {
      if ((y_inf - y[k + 1] >= 0.0) == positive) continue;
      positive = !positive;
      const double e0 = e(k), e1 = e(k + 1), split = e0 / (e0 - e1);
      // Replace this interval's trapezoid by the two triangles either side of the zero.
      iae += 0.5 * h * (std::abs(e0) * split + std::abs(e1) * (1.0 - split) - (std::abs(e0) + std::abs(e1)));
      itae += 0.5 * h * (t[k] * std::abs(e0) * split + t[k + 1] * std::abs(e1) * (1.0 - split) -
                         (t[k] * std::abs(e0) + t[k + 1] * std::abs(e1)));
      close_run(run, k);
      run = k + 1;
    }
    close_run(run, last);
  };
  const int fine_last = grid_.coarse_intervals > 0 ? grid_.fine_intervals : K - 1;
  integrate_segment(0, fine_last, grid_.step_s);
  if (grid_.coarse_intervals > 0) integrate_segment(fine_last, K - 1, grid_.coarse_step_s);
  m.iae = iae;
  m.ise = ise;
  m.itae = itae;

  auto interval_y = [&](int k) { return Hermite{y[k], y[k + 1], dy(k), dy(k + 1), t[k + 1] - t[k]}; };
  auto interval_u = [&](int k) { return Hermite{u[k], u[k + 1], du(k), du(k + 1), t[k + 1] - t[k]}; };
  // Refined extremum around sample k (intervals k−1..k and k..k+1). Returns {value, time}.
  auto refine_extremum = [&](const double* f, auto interval, int k, double sign) {
    std::pair<double, double> best{f[k], t[k]};
    for (int j : {k - 1, k}) {
      if (j < 0 || j + 1 >= K) continue;
      const auto [v, s] = interval(j).extremum(sign);
      if (sign * v > sign * best.first) best = {v, t[j] + s * (t[j + 1] - t[j])};
    }
    return best;
  };

  const double sign = y_inf > 0.0 ? 1.0 : -1.0;  // extremes of y/y∞ are extremes of sign·y
  const auto [y_peak, t_peak] = refine_extremum(y, interval_y, k_max, sign);
  const double peak_n = y_peak * inv;
  if (peak_n > 1.0 + 1e-9) {
    m.overshoot_pct = (peak_n - 1.0) * 100.0;
    m.peak_time_s = t_peak;
  }
  const auto [y_low, t_low] = refine_extremum(y, interval_y, k_min, -sign);
  (void)t_low;
  m.undershoot_pct = std::max(0.0, -y_low * inv) * 100.0;

  const auto [u_peak, t_u] = refine_extremum(u, interval_u, k_effort, u[k_effort] >= 0.0 ? 1.0 : -1.0);
  (void)t_u;
  m.effort_peak = std::abs(u_peak);

  auto crossing_time = [&](int k_after, double level_n) {
    // First sample at/above the level is k_after; the crossing is in (k_after − 1, k_after).
    if (k_after <= 0) return 0.0;
    const double s = interval_y(k_after - 1).crossing(level_n * y_inf);
    return t[k_after - 1] + s * (t[k_after] - t[k_after - 1]);
  };
  if (k10 >= 0 && k90 >= 0) m.rise_time_s = crossing_time(k90, 0.9) - crossing_time(k10, 0.1);
  if (k_entry == 0) {
    m.band_entry_time_s = 0.0;
  } else if (k_entry > 0) {
    const double side = (y[k_entry - 1] * inv > 1.0) ? 1.0 : -1.0;
    const double s = interval_y(k_entry - 1).crossing((1.0 + side * band_fraction) * y_inf);
    m.band_entry_time_s = t[k_entry - 1] + s * (t[k_entry] - t[k_entry - 1]);
  }

  if (k_outside < 0) {
    m.settling_time_s = 0.0;
  } else if (k_outside + 1 < K) {
    const double side = (y[k_outside] * inv > 1.0) ? 1.0 : -1.0;
    const double s = interval_y(k_outside).crossing((1.0 + side * band_fraction) * y_inf);
    m.settling_time_s = t[k_outside] + s * (t[k_outside + 1] - t[k_outside]);
  }

  if (!std::isfinite(m.overshoot_pct) || !std::isfinite(m.effort_peak) || !std::isfinite(m.itae))
    return StepStatus::numerical_failure;

  if (trace) {
    trace->output.assign(y, y + K);
    trace->effort.assign(u, u + K);
    trace->time_s.assign(t, t + K);
  }
  return StepStatus::ok;
}

}  // namespace specloop
