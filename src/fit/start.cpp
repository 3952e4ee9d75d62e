// Starting values for the fit (estimate.hpp): the published two-point methods on a single step,
// a first-order ARX least-squares fit otherwise, and each kind's conversion from them.
#include <algorithm>
#include <cmath>

#include "specloop/core/second_order.hpp"
#include "specloop/fit/estimate.hpp"

namespace specloop::fit {

namespace {

// The step's size and the response's final change (the mean of the last tenth, at least 5 samples).
struct StepView {
  double du = 0.0, final_dy = 0.0, t_step = 0.0;
};

std::optional<StepView> single_step(const PreparedData& d) {
  if (d.excitation != Excitation::step) return std::nullopt;
  const std::size_t n = d.dy.size();
  const std::size_t tail = std::max<std::size_t>(5, n / 10);
  double sum = 0.0;
  for (std::size_t k = n - tail; k < n; ++k) sum += d.dy[k];
  StepView s{d.du.back(), sum / double(tail), d.record.t[d.first_change]};
  if (s.du == 0.0 || s.final_dy == 0.0) return std::nullopt;
  return s;
}

// The first time after the step at which the response reaches `fraction` of its final change
// (linear interpolation between the samples around it), measured from the step.
std::optional<double> time_to_fraction(const PreparedData& d, const StepView& s, double fraction) {
  const auto& t = d.record.t;
  for (std::size_t k = d.first_change; k < d.dy.size(); ++k) {
    const double r = d.dy[k] / s.final_dy;
    if (r >= fraction) {
      if (k == d.first_change) return t[k] - s.t_step;
      const double r0 = d.dy[k - 1] / s.final_dy;
      const double a = r > r0 ? (fraction - r0) / (r - r0) : 1.0;
      return t[k - 1] + std::clamp(a, 0.0, 1.0) * (t[k] - t[k - 1]) - s.t_step;
    }
  }
  return std::nullopt;
}

// The sum of squares of dy − (k·s + c) with k and c by linear least squares (s a unit-gain response).
double gain_fit(const std::vector<double>& s, const std::vector<double>& dy, double& k) {
  const double n = double(s.size());
  double ss = 0, sy = 0, s1 = 0, y1 = 0, yy = 0;
  for (std::size_t i = 0; i < s.size(); ++i) {
    ss += s[i] * s[i];
    sy += s[i] * dy[i];
    s1 += s[i];
    y1 += dy[i];
    yy += dy[i] * dy[i];
  }
  const double det = ss * n - s1 * s1;
  if (!(det > 1e-300)) return INFINITY;
  k = (sy * n - s1 * y1) / det;
  const double c = (ss * y1 - s1 * sy) / det;
  return yy - k * sy - c * y1;
}

}  // namespace

FirstOrderGuess least_squares_first_order(const PreparedData& d, bool integrating) {
  const double h = d.median_dt, duration = d.record.t.back() - d.record.t.front();
  ResponseSimulator sim(d.record.t, d.du);
  std::vector<double> s;
  const ModelShape shape{integrating ? ModelKind::integrator_delay : ModelKind::first_order_delay, 0, 0};
  const auto sum_squares = [&](const FirstOrderGuess& g, double& k) {
    sim.simulate(realize(shape, std::vector<double>{1.0, g.T, g.L}), s);
    return gain_fit(s, d.dy, k);
  };
  // Candidates: the ARX fit, then a grid of T (log-spaced) and L (linear), k and the offset
  // solved linearly for each: the best by the simulated response's sum of squares.
  FirstOrderGuess best = arx_first_order(d, integrating);
  best.T = std::max(best.T, h);
  best.L = std::clamp(best.L, 0.0, 0.5 * duration);
  double k = best.k;
  double best_ssr = sum_squares(best, k);
  if (std::isfinite(best_ssr)) best.k = k;
  const double t_low = std::max(h, duration / 2000.0), t_high = duration;
  for (int i = 0; i < 24; ++i) {
    const double T = t_low * std::pow(t_high / t_low, i / 23.0);
    for (int j = 0; j <= 24; ++j) {
      const FirstOrderGuess g{1.0, T, 0.4 * duration * j / 24.0};
      const double ssr = sum_squares(g, k);
      if (ssr < best_ssr) {
        best_ssr = ssr;
        best = {k, g.T, g.L};
      }
    }
  }
  return best;
}

// C. L. Smith, Digital Computer Process Control (Intext, 1972): the 28.3 % / 63.2 % points of a
// first-order-plus-delay step response (values as commonly quoted; recalled from memory).
std::optional<FirstOrderGuess> smith_two_point(const PreparedData& d) {
  const auto s = single_step(d);
  if (!s) return std::nullopt;
  const auto t1 = time_to_fraction(d, *s, 0.283), t2 = time_to_fraction(d, *s, 0.632);
  if (!t1 || !t2 || !(*t2 > *t1)) return std::nullopt;
  FirstOrderGuess g;
  g.k = s->final_dy / s->du;
  g.T = 1.5 * (*t2 - *t1);
  g.L = *t2 - g.T;
  return g;
}

// K. R. Sundaresan and P. R. Krishnaswamy (1977), the two-point method on the 35.3 % / 85.3 %
// points of a first-order-plus-delay step response (constants as commonly quoted; recalled from
// memory, the journal reference not checked here).
std::optional<FirstOrderGuess> sundaresan_krishnaswamy(const PreparedData& d) {
  const auto s = single_step(d);
  if (!s) return std::nullopt;
  const auto t1 = time_to_fraction(d, *s, 0.353), t2 = time_to_fraction(d, *s, 0.853);
  if (!t1 || !t2 || !(*t2 > *t1)) return std::nullopt;
  FirstOrderGuess g;
  g.k = s->final_dy / s->du;
  g.T = 0.67 * (*t2 - *t1);
  g.L = 1.3 * *t1 - 0.29 * *t2;
  return g;
}

FirstOrderGuess arx_first_order(const PreparedData& d, bool integrating) {
  const std::size_t n = d.dy.size();
  const double h = d.median_dt;
  std::vector<double> y(n, 0.0);
  for (std::size_t k = 0; k < n; ++k) y[k] = integrating ? (k == 0 ? 0.0 : d.dy[k] - d.dy[k - 1]) : d.dy[k];
  const double duration = d.record.t.back() - d.record.t.front();
  const std::size_t max_delay = std::min<std::size_t>(n / 3, static_cast<std::size_t>(std::min(500.0, 0.5 * duration / h)));
  double best_ssr = INFINITY;
  FirstOrderGuess best{1.0, h, 0.0};
  for (std::size_t dl = 0; dl <= max_delay; ++dl) {
    double syy = 0, syu = 0, suu = 0, sy1y = 0, sy1u = 0, sy2 = 0;  // normal equations of [y_{k−1}, u_{k−1−d}]
    for (std::size_t k = dl + 1; k < n; ++k) {
      const double a = y[k - 1], b = d.du[k - 1 - dl], c = y[k];
      syy += a * a;
      syu += a * b;
      suu += b * b;
      sy1y += a * c;
      sy1u += b * c;
      sy2 += c * c;
    }
    const double det = syy * suu - syu * syu;
    if (!(det > 1e-300)) continue;
    const double a = (sy1y * suu - sy1u * syu) / det, b = (syy * sy1u - syu * sy1y) / det;
    const double ssr = sy2 - a * sy1y - b * sy1u;
    if (ssr < best_ssr && a > 0.0 && a < 1.0) {
      best_ssr = ssr;
      best.T = -h / std::log(a);
      best.k = b / (1.0 - a) / (integrating ? h : 1.0);
      best.L = double(dl) * h;
    }
  }
  return best;
}

namespace {

// poles-zeros: candidates from the first-order guess (k, T, L) — the time-constant sum T scaled
// by {0.5, 1, 2, 4} (a first-order fit to a record that never settles, a pseudo-random sequence,
// underestimates the slow lag), split as T·w_i with w halving or all equal, zero rates
// f·(j + 1)/T for f in {0.3, 1, 3, 10}, the delay L·{0.5, 1, 1.5}; each one's exact response
// with k and the offset refitted linearly. The best is the start; the best of each other scale,
// zero placement and delay are solved too (estimate.cpp keeps the lowest final cost). A single
// guess sent a lead to a local minimum with a zero and a pole running off together, a
// pseudo-random record to a pole–zero pair cancelling at the origin, and a noisy record to a
// neighbouring minimum of the delay.
std::vector<double> poles_zeros_starts(const PreparedData& d, const ModelShape& shape, const FirstOrderGuess& g,
                                       std::vector<std::vector<double>>& alternatives) {
  ResponseSimulator sim(d.record.t, d.du);
  std::vector<double> s;
  struct Candidate {
    double ssr;
    int scale, f, delay;  // indices into the grids below
    std::vector<double> v;
  };
  constexpr double kScales[] = {0.5, 1.0, 2.0, 4.0}, kZeroFactors[] = {0.3, 1.0, 3.0, 10.0}, kDelays[] = {0.5, 1.0, 1.5};
  const double max_delay = 0.9 * (d.record.t.back() - d.record.t.front());
  std::vector<Candidate> candidates;
  for (int si = 0; si < 4; ++si) {
    const double T = g.T * kScales[si];
    for (int spread = 0; spread < 2; ++spread) {
      double wsum = 0.0;
      for (int i = 0; i < shape.poles; ++i) wsum += spread == 0 ? std::pow(0.5, i) : 1.0;
      for (int fi = 0; fi < 4; ++fi) {
        for (int li = 0; li < 3; ++li) {
          if (g.L == 0.0 && li != 1) continue;
          std::vector<double> v{1.0};
          for (int i = 0; i < shape.poles; ++i)
            v.push_back(1.0 / (T * (spread == 0 ? std::pow(0.5, i) : 1.0 + 0.1 * i) / wsum));
          for (int j = 0; j < shape.zeros; ++j) v.push_back(kZeroFactors[fi] * (j + 1) / T);
          v.push_back(std::min(g.L * kDelays[li], max_delay));
          sim.simulate(realize(shape, v), s);
          double k = g.k;
          const double ssr = gain_fit(s, d.dy, k);
          v[0] = std::isfinite(k) && k != 0.0 ? k : g.k;
          candidates.push_back({std::isfinite(ssr) ? ssr : INFINITY, si, fi, li, v});
        }
        if (shape.zeros == 0) break;
      }
    }
  }
  std::stable_sort(candidates.begin(), candidates.end(), [](const Candidate& a, const Candidate& b) { return a.ssr < b.ssr; });
  const Candidate& best = candidates.front();
  // The best candidate of each other scale, zero placement and delay (first in the sorted list).
  std::vector<const Candidate*> chosen{&best};
  const auto add_best_where = [&](auto differs) {
    for (const Candidate& c : candidates)
      if (differs(c)) {
        if (std::find(chosen.begin(), chosen.end(), &c) == chosen.end()) {
          chosen.push_back(&c);
          alternatives.push_back(c.v);
        }
        return;
      }
  };
  for (int si = 0; si < 4; ++si)
    if (si != best.scale) add_best_where([&](const Candidate& c) { return c.scale == si; });
  if (shape.zeros > 0)
    for (int fi = 0; fi < 4; ++fi)
      if (fi != best.f) add_best_where([&](const Candidate& c) { return c.f == fi; });
  if (g.L > 0.0)
    for (int li = 0; li < 3; ++li)
      if (li != best.delay) add_best_where([&](const Candidate& c) { return c.delay == li; });
  return best.v;
}

}  // namespace

// Each kind from a first-order-plus-delay guess (k, T, L):
//   second-order-delay: T1 = 0.7·T, T2 = 0.3·T, L (the lags' sum kept);
//   underdamped-delay: on a step with overshoot, ζ from the overshoot and ωn from the peak time
//     (second_order.hpp), L from the guess; otherwise ζ = 0.8, ωn = 2/T;
//   integrator-delay: on a step, a line through the last 30 % (slope k·Δu, its crossing of the
//     operating point at L + T after the step, split evenly); otherwise ARX on the rate;
//   poles-zeros: a grid of candidates around the guess, the best few solved (poles_zeros_starts).
StartValues start_values(const PreparedData& d, const ModelShape& shape) {
  StartValues sv;
  const double h = d.median_dt;
  const auto smith = smith_two_point(d);
  const auto sk = sundaresan_krishnaswamy(d);
  FirstOrderGuess g;
  if (shape.kind == ModelKind::first_order_delay && smith) {
    g = *smith;
    sv.method = "smith-two-point";
  } else if (shape.kind != ModelKind::first_order_delay && sk) {
    g = *sk;
    sv.method = "sundaresan-krishnaswamy";
  } else {
    g = least_squares_first_order(d, false);
    sv.method = "least-squares";
  }
  g.T = std::max(g.T, h);
  g.L = std::max(g.L, 0.0);
  switch (shape.kind) {
    case ModelKind::first_order_delay: sv.values = {g.k, g.T, g.L}; break;
    case ModelKind::second_order_delay: sv.values = {g.k, 0.7 * g.T, 0.3 * g.T, g.L}; break;
    case ModelKind::underdamped_delay: {
      double zeta = 0.8, wn = 2.0 / g.T;
      if (d.excitation == Excitation::step) {
        const std::size_t n = d.dy.size(), tail = std::max<std::size_t>(5, n / 10);
        double final_dy = 0.0;
        for (std::size_t k = n - tail; k < n; ++k) final_dy += d.dy[k] / double(tail);
        std::size_t peak = d.first_change;
        for (std::size_t k = d.first_change; k < n; ++k)
          if (d.dy[k] / final_dy > d.dy[peak] / final_dy) peak = k;
        const double os = d.dy[peak] / final_dy - 1.0;
        const double tp = d.record.t[peak] - d.record.t[d.first_change] - g.L;
        if (os > 0.02 && tp > 0.0) {
          zeta = std::clamp(damping_from_overshoot(100.0 * os), 0.05, 0.95);
          wn = M_PI / (tp * std::sqrt(1.0 - zeta * zeta));
        }
      }
      sv.values = {g.k, wn, zeta, g.L};
      break;
    }
    case ModelKind::integrator_delay: {
      FirstOrderGuess gi;
      if (d.excitation == Excitation::step) {
        const std::size_t n = d.dy.size(), from = n - std::max<std::size_t>(5, 3 * n / 10);
        double st = 0, sy = 0, stt = 0, sty = 0;
        const double m = double(n - from);
        for (std::size_t k = from; k < n; ++k) {
          st += d.record.t[k];
          sy += d.dy[k];
        }
        for (std::size_t k = from; k < n; ++k) {
          stt += (d.record.t[k] - st / m) * (d.record.t[k] - st / m);
          sty += (d.record.t[k] - st / m) * (d.dy[k] - sy / m);
        }
        const double slope = sty / stt, intercept = sy / m - slope * st / m;
        const double lag = -intercept / slope - d.record.t[d.first_change];
        gi = {slope / d.du.back(), std::max(h, 0.5 * lag), std::max(0.0, 0.5 * lag)};
        sv.method = "least-squares";
      } else {
        gi = least_squares_first_order(d, true);
        sv.method = "least-squares";
      }
      sv.values = {gi.k, std::max(gi.T, h), std::max(gi.L, 0.0)};
      break;
    }
    case ModelKind::poles_zeros: {
      sv.values = poles_zeros_starts(d, shape, g, sv.alternatives);
      break;
    }
  }
  return sv;
}

}  // namespace specloop::fit
