// The exact step response between two samples (private to the sim layer): the cubic Hermite
// interpolant of the values and slopes at an interval's ends (Hermite), the exact Taylor series of
// the response about one end (ExactSeries), level crossings by TOMS 748 and the last exit from a
// band on either of them. The step metrics (step_metrics.cpp) read the response through these.
#pragma once

#include <boost/math/tools/toms748_solve.hpp>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <utility>

namespace specloop::exact_step {

// s in [a, b] where f.value(s) equals `level`, given g_a = f(a) − level and g_b = f(b) − level on
// opposite sides (or on it). TOMS 748 (Alefeld, Potra & Shi; Boost) brackets the root to a few
// ulps in about ten evaluations, where bisection needed fifty; not bracketed (rounding at the
// band edge): plain bisection.
template <class F>
double level_crossing(const F& f, double level, double a, double b, double g_a, double g_b) {
  if (g_a == 0.0) return a;
  if (g_b == 0.0) return b;
  if ((g_a > 0.0) == (g_b > 0.0)) {
    double lo = a, hi = b;
    for (int i = 0; i < 50; ++i) {
      const double mid = 0.5 * (lo + hi);
      if ((f.value(mid) - level > 0.0) == (g_a > 0.0)) lo = mid; else hi = mid;
    }
    return 0.5 * (lo + hi);
  }
  std::uintmax_t iterations = 100;
  const auto [lo, hi] = boost::math::tools::toms748_solve([&](double x) { return f.value(x) - level; }, a, b, g_a, g_b,
                                                          boost::math::tools::eps_tolerance<double>(), iterations);
  return 0.5 * (lo + hi);
}

// The last s in [0, 1] at which f lies outside [lo, hi] (strictly), i.e. where it leaves that
// band for the last time within the interval; −1 when it stays inside throughout. f is monotone
// between its stationary points `st` (ascending, inside (0, 1)), so each piece, taken from the
// end, has at most one crossing of the edge its start violates.
template <class F>
double last_outside_of(const F& f, const double* st, int n, double f0, double f1, double lo, double hi) {
  double cuts[4] = {0.0, 0.0, 0.0, 1.0};
  for (int i = 0; i < n; ++i) cuts[1 + i] = st[i];
  cuts[1 + n] = 1.0;
  auto outside = [&](double v) { return v > hi || v < lo; };
  double v_end = f1;
  for (int piece = n; piece >= 0; --piece) {
    const double a = cuts[piece], b = cuts[piece + 1];
    if (outside(v_end)) return b;
    const double v_start = a == 0.0 ? f0 : f.value(a);
    if (outside(v_start)) {
      const double level = v_start > hi ? hi : lo;
      return level_crossing(f, level, a, b, v_start - level, v_end - level);
    }
    v_end = v_start;
  }
  return -1.0;
}

// The exact response on one sample interval [t_k, t_k + h], expanded about one of its ends
// t_b = t_k + s_b·h (s_b = 0 or 1). With the step input constant, x' = A·x + B·r gives
// x^(i+1) = A^i·x'(t_b), so y(t_k + s·h) = y_b + Σ_{i≥0} c_i ((s − s_b)·h)^{i+1}/(i+1)! with
// c_i = C·A^i·x'(t_b): the Taylor series of the exponential, which converges for every s and, on
// this grid (h·|p| ≤ 1), within a few dozen terms at most. Kept as a_i = c_i·h^{i+1}/(i+1)! so
// that value(s) = y_b + Σ a_i (s − s_b)^{i+1}. Used where a value between samples decides
// something (the peak, a hump at the band edge), instead of the cubic Hermite.
struct ExactSeries {
  static constexpr int kMaxTerms = 48;
  double base = 0.0;  // s_b
  double fb = 0.0;    // y_b
  double a[kMaxTerms] = {};
  int terms = 0;
  double value(double s) const {
    const double d = s - base;
    double v = 0.0;
    for (int j = terms - 1; j >= 0; --j) v = v * d + a[j];
    return fb + v * d;
  }
  double slope(double s) const {  // d/ds
    const double d = s - base;
    double v = 0.0;
    for (int j = terms - 1; j >= 0; --j) v = v * d + (j + 1) * a[j];
    return v;
  }
  double curvature(double s) const {  // d²/ds²
    const double d = s - base;
    double v = 0.0;
    for (int j = terms - 1; j >= 1; --j) v = v * d + (j + 1) * j * a[j];
    return v;
  }
  // The stationary point near s0 (Newton on the slope), kept within [0, 1]; s0 when Newton
  // does not settle there. From the Hermite's location (off by O(h⁴)) two steps reach 1e-12 of
  // the interval, where the value is exact to rounding (its error is quadratic in the location's).
  double stationary_near(double s0) const {
    double x = s0;
    for (int i = 0; i < 8; ++i) {
      const double c = curvature(x);
      if (c == 0.0) return s0;
      const double step = slope(x) / c;
      x -= step;
      if (!(x >= 0.0 && x <= 1.0)) return s0;
      if (std::abs(step) <= 1e-12) break;
    }
    return x;
  }
};

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
  // s in [a, b] where the interpolant equals `level`; its values at a and b lie on opposite sides
  // (or on it).
  double crossing(double level, double a = 0.0, double b = 1.0) const {
    return level_crossing(*this, level, a, b, (a == 0.0 ? f0 : value(a)) - level, (b == 1.0 ? f1 : value(b)) - level);
  }
  // The stationary points of the interpolant inside (0, 1), ascending; returns how many (0–2).
  int stationary(double (&s)[2]) const {
    const double a = 6 * f0 + 3 * h * d0 - 6 * f1 + 3 * h * d1;
    const double b = -6 * f0 - 4 * h * d0 + 6 * f1 - 2 * h * d1;
    const double c = h * d0;
    int n = 0;
    auto keep = [&](double r) {
      if (r > 0.0 && r < 1.0) s[n++] = r;
    };
    if (std::abs(a) > 1e-300) {
      const double disc = b * b - 4 * a * c;
      if (disc >= 0.0) {
        const double q = -0.5 * (b + std::copysign(std::sqrt(disc), b));
        if (q != 0.0) keep(c / q);
        keep(q / a);
      }
    } else if (std::abs(b) > 1e-300) {
      keep(-c / b);
    }
    if (n == 2 && s[0] > s[1]) std::swap(s[0], s[1]);
    return n;
  }
  // The last s in [0, 1] at which the interpolant lies outside [lo, hi]; −1 if never (last_outside_of).
  double last_outside(double lo, double hi) const {
    double st[2];
    const int n = stationary(st);
    return last_outside_of(*this, st, n, f0, f1, lo, hi);
  }
};

}  // namespace specloop::exact_step
