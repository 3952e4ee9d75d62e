// The nonlinear loop's step metrics from its samples and the integrator's exact points (see
// sample_metrics.hpp).
#include "sim/sample_metrics.hpp"

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <limits>

namespace specloop::nonlinear_loop {
namespace {

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

// The samples normalized by y∞, yn = y/y∞, with the sample-extremum tests the parabola reading uses.
struct Normalized {
  const std::vector<double>& t;
  std::vector<double> yn;
  int count;
  Normalized(const std::vector<double>& times, const std::vector<double>& y, double y_inf)
      : t(times), yn(times.size()), count(static_cast<int>(times.size())) {
    for (int k = 0; k < count; ++k) yn[k] = y[k] / y_inf;
  }
  // How far an extremum between samples can pass sample k: the parabola's excess over the sample
  // is at most a quarter of the second difference, so half of it is generous.
  double reach(int k) const { return 0.5 * std::abs(2.0 * yn[k] - yn[k - 1] - yn[k + 1]); }
  bool is_max(int k) const { return yn[k] >= yn[k - 1] && yn[k] >= yn[k + 1]; }
  bool is_min(int k) const { return yn[k] <= yn[k - 1] && yn[k] <= yn[k + 1]; }
};

using TimedValues = std::vector<std::pair<double, double>>;

// The samples and the integrator's exact points (y normalized) as one time series, one point per
// time: a step end that is also a restart or a sample is listed twice, and two equal neighbours
// on a falling slope would read as a hump (the tied-peak rule would take it).
TimedValues merged_series(const Normalized& s, double y_inf, const TimedValues& exact) {
  TimedValues series;
  series.reserve(s.t.size() + exact.size());
  for (int k = 0; k < s.count; ++k) series.emplace_back(s.t[k], s.yn[k]);
  const auto mid = series.size();
  for (const auto& [te, ye] : exact) series.emplace_back(te, ye / y_inf);
  std::inplace_merge(series.begin(), series.begin() + static_cast<std::ptrdiff_t>(mid), series.end(),
                     [](const auto& p, const auto& q) { return p.first < q.first; });
  // One entry per instant: the two streams' times of one instant can differ by a rounding
  // (3.25 and 3.2500000000000004), and two values there, equal but for their last bits, would make
  // a spurious hump on a monotonic stretch.
  series.erase(std::unique(series.begin(), series.end(),
                           [](const auto& p, const auto& q) {
                             return std::abs(q.first - p.first) <= 1e-12 * std::max(std::abs(p.first), std::abs(q.first));
                           }),
               series.end());
  return series;
}

// Peak, peak time, next peak, dip after the peak and undershoot from the merged series: the
// integrator's own values, so no parabola is needed (its vertex misses a sharp or skewed extremum
// by up to 1e-3 of y∞); the series' local maxima and minima are the humps and dips.
void extrema_from_series(const TimedValues& series, StepMetrics& m) {
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
}

// The same extrema from the samples alone: the parabola through the three samples around each
// sample extremum that could matter.
void extrema_from_parabolas(const Normalized& s, StepMetrics& m) {
  const std::vector<double>& t = s.t;
  const std::vector<double>& yn = s.yn;
  const int K = s.count;
  const int k_hi = static_cast<int>(std::max_element(yn.begin(), yn.end()) - yn.begin());
  double peak = yn[k_hi], t_peak = t[k_hi];
  for (int k = 1; k + 1 < K; ++k) {
    if (!s.is_max(k) || yn[k] + s.reach(k) < peak) continue;
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
      if (t[k] <= t_peak || !s.is_max(k) || yn[k] + s.reach(k) < peak - kPeakTieFraction) continue;
      const Vertex v = parabola_vertex(t, yn, k);
      if (v.v >= peak - kPeakTieFraction && v.t > t_peak) t_peak = v.t;
    }
    m.peak_time_s = t_peak;
    double next = -std::numeric_limits<double>::infinity();
    for (int k = 1; k + 1 < K; ++k) {
      if (t[k] <= t_peak || !s.is_max(k) || yn[k] <= 1.0 || yn[k] + s.reach(k) < next) continue;
      const Vertex v = parabola_vertex(t, yn, k);
      if (v.t > t_peak && v.v > next) {
        next = v.v;
        m.next_peak_time_s = v.t;
      }
    }
    if (m.next_peak_time_s) m.next_peak_gap_pct = std::max(0.0, (peak - next) * 100.0);
    double dip = 1.0;  // lowest yn after the peak
    for (int k = 1; k + 1 < K; ++k) {
      if (t[k + 1] <= t_peak || !s.is_min(k) || yn[k] - s.reach(k) > dip) continue;
      const Vertex v = parabola_vertex(t, yn, k);
      if (v.t > t_peak) dip = std::min(dip, std::min(v.v, yn[k]));
    }
    m.post_peak_dip_pct = (1.0 - dip) * 100.0;
  }
  double low = *std::min_element(yn.begin(), yn.end());
  for (int k = 1; k + 1 < K; ++k)
    if (yn[k] < 0.0 && s.is_min(k) && yn[k] - s.reach(k) < low) low = std::min(low, parabola_vertex(t, yn, k).v);
  m.undershoot_pct = std::max(0.0, -low) * 100.0;
}

// Rise time (first reach of 10 % to first reach of 90 %) and the first entry into the band (the
// first sample inside it, or the first interval that jumps across it).
void rise_and_band_entry(const Normalized& s, double band, StepMetrics& m) {
  const std::vector<double>& t = s.t;
  const std::vector<double>& yn = s.yn;
  const int K = s.count;
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
}

// The settling time: the last exit from the band, at the samples or, for a hump beyond the band
// between samples inside it, where its parabola re-enters (the last such hump from the end).
void settling_from_samples(const Normalized& s, double band, StepMetrics& m) {
  const std::vector<double>& t = s.t;
  const std::vector<double>& yn = s.yn;
  const int K = s.count;
  int k_out = -1;
  for (int k = K - 1; k >= 0; --k)
    if (std::abs(yn[k] - 1.0) > band) { k_out = k; break; }
  if (k_out >= K - 1) return;
  double last = k_out < 0 ? t[0] : crossing(t, yn, k_out + 1, yn[k_out] > 1.0 ? 1.0 + band : 1.0 - band);
  for (int k = K - 2; k > std::max(k_out, 0); --k) {
    const double dev = yn[k] - 1.0;
    if (std::abs(dev) + s.reach(k) <= band || !(dev > 0.0 ? s.is_max(k) : s.is_min(k))) continue;
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

// The effort peak at the samples and the integrals of e = y∞ − y by the trapezoid rule.
void effort_and_integrals(const std::vector<double>& t, const std::vector<double>& y, const std::vector<double>& u,
                          double y_inf, StepMetrics& m) {
  const int K = static_cast<int>(t.size());
  for (int k = 0; k < K; ++k) m.effort_peak = std::max(m.effort_peak, std::abs(u[k]));
  for (int k = 1; k < K; ++k) {
    const double h = t[k] - t[k - 1];
    const double e0 = y_inf - y[k - 1], e1 = y_inf - y[k];
    m.iae += 0.5 * h * (std::abs(e0) + std::abs(e1));
    m.ise += 0.5 * h * (e0 * e0 + e1 * e1);
    m.itae += 0.5 * h * (t[k - 1] * std::abs(e0) + t[k] * std::abs(e1));
  }
}

}  // namespace

StepMetrics metrics_from_samples(const std::vector<double>& t, const std::vector<double>& y, const std::vector<double>& u,
                                 double y_inf, double amplitude, double band, const TimedValues& exact) {
  StepMetrics m;
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  const Normalized s(t, y, y_inf);
  if (!exact.empty()) {
    extrema_from_series(merged_series(s, y_inf, exact), m);
  } else {
    extrema_from_parabolas(s, m);
  }
  rise_and_band_entry(s, band, m);
  settling_from_samples(s, band, m);
  effort_and_integrals(t, y, u, y_inf, m);
  return m;
}

void add_load_metrics(const std::vector<double>& t, const std::vector<double>& y, double y_inf, double from_s,
                      double band, bool settles, const std::vector<std::pair<double, double>>& exact, StepMetrics& m) {
  const std::size_t n = std::min(t.size(), y.size());
  std::size_t first = 0;
  while (first < n && t[first] < from_s) ++first;
  if (first >= n) return;
  double peak = 0.0;
  for (std::size_t k = first; k < n; ++k) peak = std::max(peak, std::abs(y[k] - y_inf));
  for (const auto& [te, ye] : exact)
    if (te >= from_s) peak = std::max(peak, std::abs(ye - y_inf));
  m.load_peak = peak;
  if (!settles) return;
  // ∫|e| of the linear interpolant between (ta, ea) and (tb, eb).
  auto piece = [](double ta, double ea, double tb, double eb) {
    const double h = tb - ta;
    if ((ea >= 0.0) == (eb >= 0.0)) return 0.5 * h * (std::abs(ea) + std::abs(eb));
    const double tc = h * std::abs(ea) / (std::abs(ea) + std::abs(eb));
    return 0.5 * (tc * std::abs(ea) + (h - tc) * std::abs(eb));
  };
  double iae = 0.0;
  if (first > 0 && t[first] > from_s) {
    const double w = (from_s - t[first - 1]) / (t[first] - t[first - 1]);
    const double e0 = (1.0 - w) * (y[first - 1] - y_inf) + w * (y[first] - y_inf);
    iae += piece(from_s, e0, t[first], y[first] - y_inf);
  }
  for (std::size_t k = first; k + 1 < n; ++k) iae += piece(t[k], y[k] - y_inf, t[k + 1], y[k + 1] - y_inf);
  m.load_iae = iae;
  std::size_t last = n;  // the last sample outside the band
  for (std::size_t k = n; k-- > first;)
    if (std::abs(y[k] - y_inf) > band) {
      last = k;
      break;
    }
  if (last == n) {
    m.load_recovery_time_s = 0.0;
  } else if (last + 1 < n) {
    const double a = std::abs(y[last] - y_inf), b = std::abs(y[last + 1] - y_inf);
    const double at = t[last] + (t[last + 1] - t[last]) * (a - band) / (a - b);
    m.load_recovery_time_s = std::max(0.0, at - from_s);
  }
}

}  // namespace specloop::nonlinear_loop
