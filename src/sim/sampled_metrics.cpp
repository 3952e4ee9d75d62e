// The sampled loop's metrics on the cubic Hermite interpolant of its recorded output (see
// sampled_metrics.hpp): extremes at the interpolant's stationary points, crossings by TOMS 748 on
// its monotone pieces, integrals by three-point Gauss–Legendre split where e changes sign.
#include "sim/sampled_metrics.hpp"

#include <algorithm>
#include <array>
#include <boost/math/tools/roots.hpp>
#include <cmath>
#include <cstddef>
#include <limits>
#include <optional>

namespace specloop::sampled_step {
namespace {

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

// The measurement: the normalized output v = y/y∞ (the band and the levels are in these units)
// interval by interval, and what the passes over the intervals carry.
class InterpolantMeasure {
 public:
  InterpolantMeasure(const OutputSamples& samples, double y_inf, double band)
      : s_(samples), y_inf_(y_inf), inv_(1.0 / y_inf), band_(band), count_(samples.t.size()),
        vmax_(samples.y[0] * inv_), vmin_(vmax_) {}

  void measure(StepMetrics& m) {
    for (std::size_t j = 0; j + 1 < count_; ++j) first_pass_on(cubic(j), m);
    if (vmax_ > 1.0 + 1e-9) {
      m.overshoot_pct = (vmax_ - 1.0) * 100.0;
      humps(m);
      post_peak_dip(m);
    }
    m.undershoot_pct = std::max(0.0, -vmin_) * 100.0;
    if (t10_ && t90_) m.rise_time_s = *t90_ - *t10_;
    m.band_entry_time_s = entry_;
    settling(m);
  }

 private:
  Cubic cubic(std::size_t j) const {
    const double dt = s_.t[j + 1] - s_.t[j];
    return Cubic(s_.y[j] * inv_, s_.y[j + 1] * inv_, s_.slope_right[j] * inv_, s_.slope_left[j + 1] * inv_, s_.t[j], dt);
  }

  // One interval of the first pass: the extremes so far, the first reaches of 10 % and 90 %, the
  // band entry, the integrals.
  void first_pass_on(const Cubic& p, StepMetrics& m) {
    std::array<double, 4> b{};
    const int nb = p.pieces(b);
    double pmax = -std::numeric_limits<double>::infinity(), pmin = -pmax;
    for (int i = 0; i < nb; ++i) {
      const double v = p.at(b[static_cast<std::size_t>(i)]);
      if (v > vmax_) {
        vmax_ = v;
        tmax_ = p.time(b[static_cast<std::size_t>(i)]);
      }
      vmin_ = std::min(vmin_, v);
      pmax = std::max(pmax, v);
      pmin = std::min(pmin, v);
    }
    if (!t10_ && pmax >= 0.1) t10_ = p.at(0.0) >= 0.1 ? p.t0 : p.time(p.crossing(0.1, true).value_or(0.0));
    if (!t90_ && pmax >= 0.9) t90_ = p.at(0.0) >= 0.9 ? p.t0 : p.time(p.crossing(0.9, true).value_or(0.0));
    if (!entry_) {
      if (std::abs(p.at(0.0) - 1.0) <= band_) {
        entry_ = p.t0;
      } else if (pmax >= 1.0 - band_ && pmin <= 1.0 + band_) {
        const bool from_below = p.at(0.0) < 1.0;
        const auto at = p.crossing(from_below ? 1.0 - band_ : 1.0 + band_, true);
        if (at) entry_ = p.time(*at);
      }
    }
    integrate(p, b, nb, pmax, pmin, m);
  }

  // Integrals of e = y∞ − y over one interval, split where e changes sign.
  void integrate(const Cubic& p, const std::array<double, 4>& b, int nb, double pmax, double pmin, StepMetrics& m) const {
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
        const double e = std::abs(y_inf_ * (1.0 - p.at(sq)));
        m.iae += w * e;
        m.ise += w * e * e;
        m.itae += w * p.time(sq) * e;
      }
    }
  }

  // The latest hump within kPeakTieFraction of the highest is the peak time's (StepMetrics),
  // then the highest hump after it. The break points of the pieces (each sample once) form a
  // piecewise monotone sequence; its local maxima beyond y∞ are the humps, in time order.
  void humps(StepMetrics& m) {
    double next_v = -std::numeric_limits<double>::infinity();
    double prev = next_v, cur_v = next_v, cur_t = 0.0;
    auto on_max = [&](double v, double tt) {
      if (v >= vmax_ - kPeakTieFraction && tt >= tmax_) {
        tmax_ = tt;
        next_v = -std::numeric_limits<double>::infinity();
        m.next_peak_time_s.reset();
      } else if (tt > tmax_ && v > next_v) {
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
    for (std::size_t j = 0; j + 1 < count_; ++j) {
      const Cubic p = cubic(j);
      std::array<double, 4> b{};
      const int nb = p.pieces(b);
      for (int i = 0; i + 1 < nb; ++i) visit(p.at(b[static_cast<std::size_t>(i)]), p.time(b[static_cast<std::size_t>(i)]));
    }
    visit(s_.y[count_ - 1] * inv_, s_.t[count_ - 1]);
    if (m.next_peak_time_s) m.next_peak_gap_pct = std::max(0.0, (vmax_ - next_v) * 100.0);
    m.peak_time_s = tmax_;
  }

  // The deepest fall below y∞ after the peak (StepMetrics::post_peak_dip_pct).
  void post_peak_dip(StepMetrics& m) const {
    double after_min = vmax_;
    for (std::size_t j = 0; j + 1 < count_; ++j) {
      if (s_.t[j + 1] <= tmax_) continue;
      const Cubic p = cubic(j);
      std::array<double, 4> b{};
      const int nb = p.pieces(b);
      for (int i = 0; i < nb; ++i)
        if (p.time(b[static_cast<std::size_t>(i)]) > tmax_) after_min = std::min(after_min, p.at(b[static_cast<std::size_t>(i)]));
    }
    m.post_peak_dip_pct = std::max(0.0, 1.0 - after_min) * 100.0;
  }

  // Settling: the last time the interpolant is outside the band.
  void settling(StepMetrics& m) const {
    if (std::abs(s_.y[count_ - 1] * inv_ - 1.0) > band_) {
      m.settling_time_s.reset();
      return;
    }
    m.settling_time_s = 0.0;
    for (std::size_t j = count_ - 1; j-- > 0;) {
      const Cubic p = cubic(j);
      const bool above = p.max() > 1.0 + band_, below = p.min() < 1.0 - band_;
      if (!above && !below) continue;
      double last = 0.0;
      if (above) last = std::max(last, p.crossing(1.0 + band_, false).value_or(0.0));
      if (below) last = std::max(last, p.crossing(1.0 - band_, false).value_or(0.0));
      m.settling_time_s = p.time(last);
      break;
    }
  }

  const OutputSamples& s_;
  double y_inf_, inv_, band_;
  std::size_t count_;
  double vmax_, vmin_, tmax_ = 0.0;  // the normalized output's extremes so far, the highest's time
  std::optional<double> t10_, t90_, entry_;
};

}  // namespace

void measure_interpolant(const OutputSamples& samples, double y_inf, double band, StepMetrics& m) {
  InterpolantMeasure(samples, y_inf, band).measure(m);
}

double peak_magnitude(const OutputSamples& samples) {
  const std::size_t count = samples.t.size();
  double peak = count > 0 ? std::abs(samples.y[count - 1]) : 0.0;
  for (std::size_t j = 0; j + 1 < count; ++j) {
    const Cubic p(samples.y[j], samples.y[j + 1], samples.slope_right[j], samples.slope_left[j + 1], samples.t[j],
                  samples.t[j + 1] - samples.t[j]);
    peak = std::max({peak, std::abs(p.max()), std::abs(p.min())});
  }
  return peak;
}

}  // namespace specloop::sampled_step
