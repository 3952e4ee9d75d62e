// The sampled loop's exact step response and its metrics between the samples (see
// sampled_loop.hpp for the method).
#include "specloop/sim/sampled_loop.hpp"

#include <algorithm>
#include <array>
#include <boost/math/tools/roots.hpp>
#include <cmath>
#include <limits>
#include <numbers>
#include <optional>
#include <unsupported/Eigen/MatrixFunctions>

namespace specloop {

void zero_order_hold(const Eigen::MatrixXd& a, const Eigen::VectorXd& b, double h, Eigen::MatrixXd& phi,
                     Eigen::VectorXd& gamma) {
  const Eigen::Index n = a.rows();
  Eigen::MatrixXd aug = Eigen::MatrixXd::Zero(n + 1, n + 1);
  aug.topLeftCorner(n, n) = a * h;
  aug.topRightCorner(n, 1) = b * h;
  const Eigen::MatrixXd e = aug.exp();
  phi = e.topLeftCorner(n, n);
  gamma = e.topRightCorner(n, 1);
}

namespace {

constexpr double kDecay = 1e-4;        // horizon: the slowest mode decayed to this fraction
constexpr int kSegmentSamples = 1000;  // about this many samples in each of the two segments
constexpr int kMaxSubsteps = 64;       // sub-steps per period, at most
constexpr double kResolve = 0.1;       // h·ρ between recorded samples, at most (within the caps)

// The cubic Hermite interpolant on one interval, in s ∈ [0, 1]: p(s) = a0 + a1·s + a2·s² + a3·s³.
struct Cubic {
  double a0, a1, a2, a3, t0, h;
  Cubic(double y0, double y1, double d0, double d1, double start, double step) : t0(start), h(step) {
    a0 = y0;
    a1 = step * d0;
    a2 = 3.0 * (y1 - y0) - step * (2.0 * d0 + d1);
    a3 = 2.0 * (y0 - y1) + step * (d0 + d1);
  }
  double at(double s) const { return a0 + s * (a1 + s * (a2 + s * a3)); }
  // Interior stationary points in (0, 1), increasing.
  int stationary(std::array<double, 2>& s) const {
    int n = 0;
    const double qa = 3.0 * a3, qb = 2.0 * a2, qc = a1;
    auto take = [&](double r) {
      if (r > 0.0 && r < 1.0) s[static_cast<std::size_t>(n++)] = r;
    };
    if (std::abs(qa) <= 1e-14 * (std::abs(qb) + std::abs(qc))) {
      if (qb != 0.0) take(-qc / qb);
    } else {
      const double disc = qb * qb - 4.0 * qa * qc;
      if (disc >= 0.0) {
        const double root = std::sqrt(disc);
        const double q = -0.5 * (qb + (qb >= 0.0 ? root : -root));
        if (q != 0.0) {
          take(q / qa);
          take(qc / q);
        } else {
          take(0.0);
        }
      }
    }
    if (n == 2 && s[0] > s[1]) std::swap(s[0], s[1]);
    return n;
  }
  // Break points 0, the stationary points, 1: p is monotone between neighbours.
  int pieces(std::array<double, 4>& b) const {
    std::array<double, 2> st{};
    const int n = stationary(st);
    b[0] = 0.0;
    for (int i = 0; i < n; ++i) b[static_cast<std::size_t>(i + 1)] = st[static_cast<std::size_t>(i)];
    b[static_cast<std::size_t>(n + 1)] = 1.0;
    return n + 2;
  }
  double max() const {
    std::array<double, 2> st{};
    double m = std::max(at(0.0), at(1.0));
    for (int i = 0, n = stationary(st); i < n; ++i) m = std::max(m, at(st[static_cast<std::size_t>(i)]));
    return m;
  }
  double min() const {
    std::array<double, 2> st{};
    double m = std::min(at(0.0), at(1.0));
    for (int i = 0, n = stationary(st); i < n; ++i) m = std::min(m, at(st[static_cast<std::size_t>(i)]));
    return m;
  }
  // Root of p − level on a monotone piece [lo, hi] with a sign change (TOMS 748).
  double root(double level, double lo, double hi) const {
    const auto f = [&](double s) { return at(s) - level; };
    const double flo = f(lo), fhi = f(hi);
    if (flo == 0.0) return lo;
    if (fhi == 0.0) return hi;
    boost::uintmax_t iterations = 60;
    const auto [a, b] =
        boost::math::tools::toms748_solve(f, lo, hi, flo, fhi, boost::math::tools::eps_tolerance<double>(50), iterations);
    return 0.5 * (a + b);
  }
  // First (or last) s where p crosses `level` (sign change of p − level, or touching it from a
  // strict side); empty when it does not.
  std::optional<double> crossing(double level, bool first) const {
    std::array<double, 4> b{};
    const int n = pieces(b);
    std::optional<double> found;
    for (int i = 0; i + 1 < n; ++i) {
      const double lo = b[static_cast<std::size_t>(i)], hi = b[static_cast<std::size_t>(i + 1)];
      const double flo = at(lo) - level, fhi = at(hi) - level;
      if ((flo < 0.0) == (fhi < 0.0) && flo != 0.0 && fhi != 0.0) continue;
      const double r = root(level, lo, hi);
      if (first) return r;
      found = r;
    }
    return found;
  }
  double time(double s) const { return t0 + s * h; }
};

// Three-point Gauss–Legendre nodes and weights on [−1, 1] (exact for polynomials of degree 5).
constexpr double kGaussNodes[3] = {-0.7745966692414834, 0.0, 0.7745966692414834};
constexpr double kGaussWeights[3] = {5.0 / 9.0, 8.0 / 9.0, 5.0 / 9.0};

}  // namespace

double SampledStepSimulator::instability() const {
  double r = 0.0;
  for (const Complex& p : poles_) r = std::max(r, std::abs(p) - 1.0);
  return std::max(0.0, r);
}

StepStatus SampledStepSimulator::simulate(const StateSpace& plant, const DifferenceEquation& eq, double amplitude,
                                          double band, StepMetrics& m, StepTrace* trace) {
  m = StepMetrics{};
  failure_.clear();
  poles_.clear();
  horizon_ = 0.0;
  auto fail = [&](const std::string& why) {
    failure_ = why;
    return StepStatus::numerical_failure;
  };
  const double ts = eq.sample_time_s;
  if (!(ts > 0.0) || !std::isfinite(ts)) return fail("sample time not a finite number > 0");
  if (plant.outputs() != 1 || plant.states() < 1) return fail("plant not single-input single-output");
  if (plant.D(0) != 0.0) return fail("plant not strictly proper (a direct feedthrough)");
  const int n = plant.states();
  // Controller in transposed direct form: u[k] = rn0·r − mn0·y[k] + s1[k];
  // s_i[k+1] = s_{i+1}[k] + rn_i·r − mn_i·y[k] − a_i·u[k].
  const std::size_t len = std::max({eq.reference_numerator.size(), eq.measurement_numerator.size(), eq.denominator.size()});
  std::vector<double> rn(len, 0.0), mn(len, 0.0), a(len, 0.0);
  std::copy(eq.reference_numerator.begin(), eq.reference_numerator.end(), rn.begin());
  std::copy(eq.measurement_numerator.begin(), eq.measurement_numerator.end(), mn.begin());
  std::copy(eq.denominator.begin(), eq.denominator.end(), a.begin());
  if (a[0] != 1.0) return fail("difference equation denominator must start with 1");
  const int mc = static_cast<int>(len) - 1;
  const int dim = n + mc;

  Eigen::MatrixXd phi;
  Eigen::VectorXd gamma;
  zero_order_hold(plant.A, plant.B, ts, phi, gamma);
  const Eigen::RowVectorXd c = plant.C.row(0);
  // u = Ku·z + ku·r; y = Ky·z (D = 0).
  Eigen::RowVectorXd ku_row = Eigen::RowVectorXd::Zero(dim), ky_row = Eigen::RowVectorXd::Zero(dim);
  ky_row.head(n) = c;
  ku_row.head(n) = -mn[0] * c;
  if (mc > 0) ku_row(n) = 1.0;
  const double ku = rn[0];
  Eigen::MatrixXd mm = Eigen::MatrixXd::Zero(dim, dim);
  Eigen::VectorXd nn = Eigen::VectorXd::Zero(dim);
  mm.topLeftCorner(n, n) = phi;
  mm.topRows(n) += gamma * ku_row;
  nn.head(n) = gamma * ku;
  for (int i = 1; i <= mc; ++i) {
    const int row = n + i - 1;
    if (i < mc) mm(row, row + 1) += 1.0;
    mm.row(row) += -mn[static_cast<std::size_t>(i)] * ky_row - a[static_cast<std::size_t>(i)] * ku_row;
    nn(row) = rn[static_cast<std::size_t>(i)] - a[static_cast<std::size_t>(i)] * ku;
  }
  if (!mm.allFinite() || !nn.allFinite()) return fail("non-finite entry in the discrete loop");

  Eigen::EigenSolver<Eigen::MatrixXd> es(mm, false);
  if (es.info() != Eigen::Success) return fail("eigenvalues of the discrete loop not found");
  double slowest = std::numeric_limits<double>::infinity();
  for (Eigen::Index i = 0; i < dim; ++i) {
    const Complex l = es.eigenvalues()(i);
    poles_.push_back(l);
  }
  for (const Complex& l : poles_) {
    if (!(std::abs(l) < 1.0 - 1e-12)) return StepStatus::unstable;
    if (std::abs(l) > 0.0) slowest = std::min(slowest, -std::log(std::abs(l)) / ts);
  }
  // y∞ from the discrete loop's fixed point z∞ = (I − M)⁻¹·N·r.
  const Eigen::VectorXd z_inf = (Eigen::MatrixXd::Identity(dim, dim) - mm).partialPivLu().solve(nn * amplitude);
  const double y_inf = ky_row.dot(z_inf);
  if (!std::isfinite(y_inf)) return fail("non-finite final value");
  if (std::abs(y_inf) <= 1e-12 * std::abs(amplitude)) return StepStatus::zero_final_value;

  // Horizon and grid from the modes' continuous-equivalent decay rates σ = −ln|λ|/Ts and
  // speeds ρ = |ln λ|/Ts (at most the Nyquist rate π/Ts; a mode at λ = 0 dies within a few periods).
  const double nyquist = std::numbers::pi / ts;
  std::vector<double> sigma, speed;
  for (const Complex& l : poles_) {
    const bool dead = !(std::abs(l) > 0.0);
    sigma.push_back(dead ? std::numeric_limits<double>::infinity() : -std::log(std::abs(l)) / ts);
    speed.push_back(dead ? nyquist : std::min(std::abs(std::log(l)) / ts, nyquist));
  }
  const double slow = std::isfinite(slowest) ? slowest : 1.0 / ts;  // all modes deadbeat
  const double horizon_wanted = std::max(std::log(1.0 / kDecay) / slow, 20.0 * ts);
  const double periods_wanted = std::ceil(horizon_wanted / ts - 1e-9);
  if (periods_wanted > static_cast<double>(kMaxPeriods))
    return fail("the horizon needs more than " + std::to_string(kMaxPeriods) + " controller periods");
  const long periods = static_cast<long>(periods_wanted);
  horizon_ = static_cast<double>(periods) * ts;
  // First segment: while the modes faster than 4× the slowest are alive (each decayed to 1e-4).
  double fast_until = 10.0 * ts, fast_speed = 0.0, slow_speed = 0.0;
  for (std::size_t i = 0; i < poles_.size(); ++i) {
    if (sigma[i] >= 4.0 * slow) {
      if (std::isfinite(sigma[i])) fast_until = std::max(fast_until, std::log(1.0 / kDecay) / sigma[i]);
      fast_speed = std::max(fast_speed, speed[i]);
    } else {
      slow_speed = std::max(slow_speed, speed[i]);
    }
  }
  fast_speed = std::max(fast_speed, slow_speed);
  const long fine_periods = std::min(periods, static_cast<long>(std::ceil(fast_until / ts)));
  Eigen::EigenSolver<Eigen::MatrixXd> ep(plant.A, false);
  const double plant_speed = ep.info() == Eigen::Success ? ep.eigenvalues().cwiseAbs().maxCoeff() : 0.0;
  // Resolution: between recorded samples h·ρ ≤ kResolve for the modes alive there (the cubic
  // Hermite interpolant's error is O((h·ρ)⁴)). Sub-steps resolve the plant between samples when a
  // period is long against its modes (or the first segment has few periods); otherwise a segment
  // jumps q periods per sample.
  const double fine_speed = std::max(plant_speed, fast_speed);
  int substeps = 1, coarse_substeps = 1;
  long q1 = 1;
  if (ts * fine_speed > kResolve || fine_periods <= kSegmentSamples) {
    substeps = static_cast<int>(std::ceil(std::max(ts * plant_speed / kResolve, static_cast<double>(kSegmentSamples) /
                                                                                    static_cast<double>(std::max(1L, fine_periods)))));
    substeps = std::clamp(substeps, 1, kMaxSubsteps);
  } else {
    q1 = std::max(1L, std::min(static_cast<long>(std::floor(kResolve / (ts * fine_speed))), fine_periods / kSegmentSamples));
  }
  const long coarse_periods = periods - fine_periods;
  long q2 = 1;
  if (coarse_periods > kSegmentSamples && slow_speed > 0.0)
    q2 = std::max(1L, std::min(static_cast<long>(std::floor(kResolve / (ts * slow_speed))), coarse_periods / kSegmentSamples));
  if (q2 == 1 && coarse_periods > 0) {
    coarse_substeps = static_cast<int>(std::ceil(ts * plant_speed / kResolve));
    coarse_substeps = std::clamp(coarse_substeps, 1, std::max(1, static_cast<int>(std::min<long>(kMaxSubsteps, 8L * kSegmentSamples / coarse_periods))));
  }
  Eigen::MatrixXd phi_h, phi_h2;
  Eigen::VectorXd gamma_h, gamma_h2;
  zero_order_hold(plant.A, plant.B, ts / substeps, phi_h, gamma_h);
  zero_order_hold(plant.A, plant.B, ts / coarse_substeps, phi_h2, gamma_h2);
  const Eigen::RowVectorXd ca = c * plant.A;
  const double cb = c.dot(plant.B);

  // Stepping on z = [x; s] with plain row-major arrays: for the few states of a loop, Eigen's
  // dynamic-size products cost more in dispatch than in arithmetic.
  const std::size_t ud = static_cast<std::size_t>(dim), un = static_cast<std::size_t>(n);
  auto flat = [](const Eigen::MatrixXd& mat) {
    std::vector<double> out(static_cast<std::size_t>(mat.rows() * mat.cols()));
    for (Eigen::Index i = 0; i < mat.rows(); ++i)
      for (Eigen::Index j = 0; j < mat.cols(); ++j) out[static_cast<std::size_t>(i * mat.cols() + j)] = mat(i, j);
    return out;
  };
  // Jumps of q − 1 periods: z ← M^{q−1}·z + (Σ_{i<q−1} M^i)·N·r, by binary powering.
  auto jump_for = [&](long q) {
    Eigen::MatrixXd power = Eigen::MatrixXd::Identity(dim, dim), sum = Eigen::MatrixXd::Zero(dim, dim);
    Eigen::MatrixXd base = mm, base_sum = Eigen::MatrixXd::Identity(dim, dim);  // M^a, Σ_{i<a} M^i for a = 2^bit
    for (long e = q - 1; e > 0; e >>= 1) {
      if (e & 1) {
        sum = sum + power * base_sum;
        power = power * base;
      }
      base_sum = base_sum + base * base_sum;
      base = base * base;
    }
    return std::make_pair(flat(power), Eigen::VectorXd(sum * nn * amplitude));
  };
  const std::vector<double> mv = flat(mm), ph1 = flat(phi_h), ph2 = flat(phi_h2);
  std::vector<double> nv(ud), gh1(un), gh2(un), cv(un), cav(un), kuv(ud), z(ud, 0.0), zn(ud), xs(un), xn(un);
  for (std::size_t i = 0; i < ud; ++i) {
    nv[i] = nn(static_cast<Eigen::Index>(i)) * amplitude;
    kuv[i] = ku_row(static_cast<Eigen::Index>(i));
  }
  for (std::size_t i = 0; i < un; ++i) {
    gh1[i] = gamma_h(static_cast<Eigen::Index>(i));
    gh2[i] = gamma_h2(static_cast<Eigen::Index>(i));
    cv[i] = c(static_cast<Eigen::Index>(i));
    cav[i] = ca(static_cast<Eigen::Index>(i));
  }
  auto dot = [](const std::vector<double>& row, const std::vector<double>& v, std::size_t size) {
    double acc = 0.0;
    for (std::size_t i = 0; i < size; ++i) acc += row[i] * v[i];
    return acc;
  };
  auto apply = [&](const std::vector<double>& mat, const std::vector<double>& add) {  // z ← mat·z + add
    for (std::size_t i = 0; i < ud; ++i) {
      double v = add[i];
      const double* r = mat.data() + i * ud;
      for (std::size_t j = 0; j < ud; ++j) v += r[j] * z[j];
      zn[i] = v;
    }
    z.swap(zn);
  };
  const double u_r = ku * amplitude;
  auto control = [&] { return dot(kuv, z, ud) + u_r; };

  const std::size_t expected =
      static_cast<std::size_t>(fine_periods / q1 * substeps + coarse_periods / q2 * coarse_substeps + 4);
  for (auto* v : {&t_, &y_, &u_, &slope_right_, &slope_left_}) {
    v->clear();
    v->reserve(expected);
  }
  double u_peak = 0.0;
  double u_prev = 0.0;  // the control in force before the current sample (0: the loop at rest)
  auto record = [&](double tk, double u) {
    const double cax = dot(cav, z, un);
    t_.push_back(tk);
    y_.push_back(dot(cv, z, un));
    u_.push_back(u);
    slope_right_.push_back(cax + cb * u);
    slope_left_.push_back(cax + cb * u_prev);
  };
  // One segment [from, to) in periods, a sample every q periods (q = 1: every period, with the
  // sub-steps between samples).
  auto segment = [&](long from, long to, long q, int subs, const std::vector<double>& ph, const std::vector<double>& gh) {
    const double h = ts / subs;
    const auto jump = q > 1 ? jump_for(q) : std::make_pair(std::vector<double>{}, Eigen::VectorXd{});
    std::vector<double> jump_add(ud, 0.0);
    for (std::size_t i = 0; q > 1 && i < ud; ++i) jump_add[i] = jump.second(static_cast<Eigen::Index>(i));
    for (long k = from; k < to;) {
      const double tk = static_cast<double>(k) * ts;
      double u = control();
      u_peak = std::max(u_peak, std::abs(u));
      record(tk, u);
      if (subs > 1) {  // the plant between this sample and the next, under the held u
        std::copy(z.begin(), z.begin() + static_cast<std::ptrdiff_t>(un), xs.begin());
        for (int j = 1; j < subs; ++j) {
          for (std::size_t i = 0; i < un; ++i) {
            double v = gh[i] * u;
            const double* r = ph.data() + i * un;
            for (std::size_t l = 0; l < un; ++l) v += r[l] * xs[l];
            xn[i] = v;
          }
          xs.swap(xn);
          const double slope = dot(cav, xs, un) + cb * u;
          t_.push_back(tk + j * h);
          y_.push_back(dot(cv, xs, un));
          u_.push_back(u);
          slope_right_.push_back(slope);
          slope_left_.push_back(slope);
        }
      }
      const long step = std::min(q, to - k);
      if (step > 1) {
        if (step == q) {
          apply(jump.first, jump_add);
        } else {
          for (long i = 0; i + 1 < step; ++i) apply(mv, nv);
        }
        u = control();
        u_peak = std::max(u_peak, std::abs(u));
      }
      u_prev = u;
      apply(mv, nv);
      k += step;
    }
  };
  fine_step_ = static_cast<double>(q1) * ts / substeps;
  fine_until_ = static_cast<double>(fine_periods) * ts;
  segment(0, fine_periods, q1, substeps, ph1, gh1);
  segment(fine_periods, periods, q2, coarse_substeps, ph2, gh2);
  {  // the last sample, at the horizon (left limits: the next control is not applied)
    const double u_last = u_prev;
    record(horizon_, u_last);
    slope_right_.back() = slope_left_.back();
    u_.back() = u_last;
  }
  for (double v : y_)
    if (!std::isfinite(v)) return fail("non-finite output sample");

  // Metrics on the interpolant.
  const std::size_t count = t_.size();
  const double inv = 1.0 / y_inf;
  // Work in the normalized output v = y/y∞ (the band and the levels are in these units).
  auto cubic = [&](std::size_t j) {
    const double dt = t_[j + 1] - t_[j];
    return Cubic(y_[j] * inv, y_[j + 1] * inv, slope_right_[j] * inv, slope_left_[j + 1] * inv, t_[j], dt);
  };
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  m.effort_peak = u_peak;
  double vmax = y_[0] * inv, vmin = vmax, tmax = 0.0;
  std::optional<double> t10, t90, entry;
  for (std::size_t j = 0; j + 1 < count; ++j) {
    const Cubic p = cubic(j);
    std::array<double, 4> b{};
    const int nb = p.pieces(b);
    double pmax = -std::numeric_limits<double>::infinity(), pmin = -pmax;
    for (int i = 0; i < nb; ++i) {
      const double v = p.at(b[static_cast<std::size_t>(i)]);
      if (v > vmax) {
        vmax = v;
        tmax = p.time(b[static_cast<std::size_t>(i)]);
      }
      vmin = std::min(vmin, v);
      pmax = std::max(pmax, v);
      pmin = std::min(pmin, v);
    }
    if (!t10 && pmax >= 0.1) t10 = p.at(0.0) >= 0.1 ? p.t0 : p.time(p.crossing(0.1, true).value_or(0.0));
    if (!t90 && pmax >= 0.9) t90 = p.at(0.0) >= 0.9 ? p.t0 : p.time(p.crossing(0.9, true).value_or(0.0));
    if (!entry) {
      if (std::abs(p.at(0.0) - 1.0) <= band) {
        entry = p.t0;
      } else if (pmax >= 1.0 - band && pmin <= 1.0 + band) {
        const bool from_below = p.at(0.0) < 1.0;
        const auto at = p.crossing(from_below ? 1.0 - band : 1.0 + band, true);
        if (at) entry = p.time(*at);
      }
    }
    // Integrals of e = y∞ − y, split where e changes sign.
    std::array<double, 6> cuts{};
    std::size_t ncuts = 1;
    for (int i = 0; i + 1 < nb && (pmax > 1.0 && pmin < 1.0); ++i) {
      const double lo = b[static_cast<std::size_t>(i)], hi = b[static_cast<std::size_t>(i + 1)];
      const double flo = p.at(lo) - 1.0, fhi = p.at(hi) - 1.0;
      if ((flo < 0.0) != (fhi < 0.0) && flo != 0.0 && fhi != 0.0) cuts[ncuts++] = p.root(1.0, lo, hi);
    }
    cuts[ncuts++] = 1.0;
    for (std::size_t i = 0; i + 1 < ncuts; ++i) {
      const double lo = cuts[i], hi = cuts[i + 1];
      if (!(hi > lo)) continue;
      // p is normalized: e = y∞·(1 − p). One pass of three nodes for the three integrals.
      const double mid = 0.5 * (lo + hi), half = 0.5 * (hi - lo);
      for (int q = 0; q < 3; ++q) {
        const double sq = mid + half * kGaussNodes[q], w = kGaussWeights[q] * half * p.h;
        const double e = std::abs(y_inf * (1.0 - p.at(sq)));
        m.iae += w * e;
        m.ise += w * e * e;
        m.itae += w * p.time(sq) * e;
      }
    }
  }
  if (vmax > 1.0 + 1e-9) {
    m.overshoot_pct = (vmax - 1.0) * 100.0;
    // The latest hump within kPeakTieFraction of the highest is the peak time's (StepMetrics),
    // then the highest hump after it. The break points of the pieces (each sample once) form a
    // piecewise monotone sequence; its local maxima beyond y∞ are the humps, in time order.
    double next_v = -std::numeric_limits<double>::infinity();
    double prev = next_v, cur_v = next_v, cur_t = 0.0;
    auto on_max = [&](double v, double tt) {
      if (v >= vmax - kPeakTieFraction && tt >= tmax) {
        tmax = tt;
        next_v = -std::numeric_limits<double>::infinity();
        m.next_peak_time_s.reset();
      } else if (tt > tmax && v > next_v) {
        next_v = v;
        m.next_peak_time_s = tt;
      }
    };
    auto visit = [&](double v, double tt) {
      if (cur_v > 1.0 && cur_v >= prev && cur_v >= v) on_max(cur_v, cur_t);
      prev = cur_v;
      cur_v = v;
      cur_t = tt;
    };
    for (std::size_t j = 0; j + 1 < count; ++j) {
      const Cubic p = cubic(j);
      std::array<double, 4> b{};
      const int nb = p.pieces(b);
      for (int i = 0; i + 1 < nb; ++i) visit(p.at(b[static_cast<std::size_t>(i)]), p.time(b[static_cast<std::size_t>(i)]));
    }
    visit(y_[count - 1] * inv, t_[count - 1]);
    if (m.next_peak_time_s) m.next_peak_gap_pct = std::max(0.0, (vmax - next_v) * 100.0);
    m.peak_time_s = tmax;
    // The deepest fall below y∞ after the peak (StepMetrics::post_peak_dip_pct).
    double after_min = vmax;
    for (std::size_t j = 0; j + 1 < count; ++j) {
      if (t_[j + 1] <= tmax) continue;
      const Cubic p = cubic(j);
      std::array<double, 4> b{};
      const int nb = p.pieces(b);
      for (int i = 0; i < nb; ++i)
        if (p.time(b[static_cast<std::size_t>(i)]) > tmax) after_min = std::min(after_min, p.at(b[static_cast<std::size_t>(i)]));
    }
    m.post_peak_dip_pct = std::max(0.0, 1.0 - after_min) * 100.0;
  }
  m.undershoot_pct = std::max(0.0, -vmin) * 100.0;
  if (t10 && t90) m.rise_time_s = *t90 - *t10;
  m.band_entry_time_s = entry;
  // Settling: the last time the interpolant is outside the band.
  if (std::abs(y_[count - 1] * inv - 1.0) > band) {
    m.settling_time_s.reset();
  } else {
    m.settling_time_s = 0.0;
    for (std::size_t j = count - 1; j-- > 0;) {
      const Cubic p = cubic(j);
      const bool above = p.max() > 1.0 + band, below = p.min() < 1.0 - band;
      if (!above && !below) continue;
      double last = 0.0;
      if (above) last = std::max(last, p.crossing(1.0 + band, false).value_or(0.0));
      if (below) last = std::max(last, p.crossing(1.0 - band, false).value_or(0.0));
      m.settling_time_s = p.time(last);
      break;
    }
  }
  if (!std::isfinite(m.overshoot_pct) || !std::isfinite(m.itae) || !std::isfinite(m.effort_peak))
    return fail("non-finite metric");
  if (trace) {
    trace->time_s = t_;
    trace->output = y_;
    trace->effort = u_;
  }
  return StepStatus::ok;
}

}  // namespace specloop
