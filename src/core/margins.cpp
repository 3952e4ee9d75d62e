// Exact loop margins from polynomial roots.
//
// With s = jω: P(s)·Q(−s) = E(s²) + s·O(s²), so P(jω)·conj(Q(jω)) = E(−ω²) + jω·O(−ω²), a pair
// of real polynomials in x = ω². The gains K where a root of D + K·N is on the imaginary axis
// are −D(0)/N(0) and −E(−x)/|N|² at the positive roots x of O(−x) (D·conj(N) real: the phase
// crossovers of L = N/D); the gain margins are the nearest of them above and below K = 1 that
// end the stable range containing 1 (stable_gain_set); gain crossovers are the positive roots of
// |N|² − |D|² (in x); the sensitivity peak is the largest value of |D|²/|D + N|² (in x) over its
// stationary points and the ends x = 0 and x → ∞, the complementary peak that of |N|²/|D + N|²,
// the noise gain that of |Nc·Dg|²/|Dc·Dg + Nc·Ng|².
#include "specloop/core/margins.hpp"

#include <algorithm>
#include <cmath>
#include <fmt/format.h>
#include <fmt/ranges.h>
#include <limits>
#include <numbers>
#include <tuple>

namespace specloop {

namespace {

// P(−s) from P(s).
Polynomial reflected(const Polynomial& p) {
  std::vector<double> c = p.coefficients;
  const int n = p.degree();
  for (int i = 0; i <= n; ++i)
    if ((n - i) % 2 == 1) c[static_cast<std::size_t>(i)] = -c[static_cast<std::size_t>(i)];
  return Polynomial(std::move(c));
}

// Splits R(s) = E(s²) + s·O(s²) and returns E(−x), O(−x) as polynomials in x.
std::pair<Polynomial, Polynomial> even_odd_in_minus_x(const Polynomial& r) {
  const int n = r.degree();
  std::vector<double> even((static_cast<std::size_t>(n) / 2) + 1, 0.0), odd((static_cast<std::size_t>(n) / 2) + 1, 0.0);
  // coefficient of s^k is r.coefficients[n − k]; (s²)^m → (−x)^m.
  for (int k = 0; k <= n; ++k) {
    const double c = r.coefficients[static_cast<std::size_t>(n - k)];
    const int m = k / 2;
    const double sign = (m % 2 == 0) ? 1.0 : -1.0;
    auto& target = (k % 2 == 0) ? even : odd;
    target[target.size() - 1 - static_cast<std::size_t>(m)] += sign * c;
  }
  return {Polynomial(even), Polynomial(odd)};
}

std::vector<double> positive_real_roots(const Polynomial& p) {
  std::vector<double> out;
  if (p.is_zero() || p.degree() == 0) return out;
  for (const Complex& r : p.roots()) {
    if (std::abs(r.imag()) > 1e-7 * std::max(1.0, std::abs(r))) continue;
    if (r.real() > 0.0) out.push_back(r.real());
  }
  return out;
}


// The largest value of sqrt(p(x)/q(x)) over x = ω² ≥ 0 (p, q squared magnitudes in ω², q > 0
// there) and where it occurs: at x = 0, a stationary point (a root of p'·q − p·q'), or x → ∞
// (+∞ rad/s) when the degrees match.
std::pair<double, double> magnitude_peak(const Polynomial& p, const Polynomial& q) {
  auto f = [&](double x) { return p(x) / q(x); };
  double peak = std::sqrt(f(0.0)), at = 0.0;
  for (double x : positive_real_roots(p.derivative() * q - p * q.derivative())) {
    const double v = std::sqrt(f(x));
    if (std::isfinite(v) && v > peak) {
      peak = v;
      at = std::sqrt(x);
    }
  }
  if (p.degree() == q.degree()) {
    const double v = std::sqrt(p.leading() / q.leading());
    if (v > peak) {
      peak = v;
      at = std::numeric_limits<double>::infinity();
    }
  }
  return {peak, at};
}

}  // namespace

double wrap_degrees(double degrees) {
  degrees = std::fmod(degrees, 360.0);
  if (degrees <= -180.0) degrees += 360.0;
  if (degrees > 180.0) degrees -= 360.0;
  return degrees;
}

Polynomial squared_magnitude_in_w2(const Polynomial& p) {
  return even_odd_in_minus_x(p * reflected(p)).first;
}

Margins loop_margins(const TransferFunction& loop) {
  Margins m;
  const Polynomial& n = loop.numerator;
  const Polynomial& d = loop.denominator;
  auto at = [&](double w) { return loop(Complex(0.0, w)); };

  // Gain crossovers.
  const Polynomial n2 = squared_magnitude_in_w2(n), d2 = squared_magnitude_in_w2(d);
  for (double x : positive_real_roots(n2 - d2)) {
    const double w = std::sqrt(x);
    const double pm = wrap_degrees(180.0 + std::arg(at(w)) * 180.0 / std::numbers::pi);
    if (!m.phase_margin_deg || pm < *m.phase_margin_deg) {
      m.phase_margin_deg = pm;
      m.gain_crossover_rad_s = w;
    }
    if (pm > 0.0) {
      const double dm = pm * std::numbers::pi / 180.0 / w;
      if (!m.delay_margin_s || dm < *m.delay_margin_s) m.delay_margin_s = dm;
    } else {
      m.delay_margin_s = 0.0;
    }
  }

  // Sensitivity peak: max of f(x) = |D|²/|D + N|² over x ≥ 0.
  const Polynomial s2 = squared_magnitude_in_w2(d + n);
  auto f = [&](double x) { return d2(x) / s2(x); };
  m.sensitivity_peak = std::sqrt(f(0.0));
  m.sensitivity_peak_rad_s = 0.0;
  auto consider = [&](double x, double w) {
    const double v = std::sqrt(f(x));
    if (std::isfinite(v) && v > m.sensitivity_peak) {
      m.sensitivity_peak = v;
      m.sensitivity_peak_rad_s = w;
    }
  };
  for (double x : positive_real_roots(d2.derivative() * s2 - d2 * s2.derivative())) consider(x, std::sqrt(x));
  // x → ∞: ratio of leading coefficients when the degrees match (a biproper loop).
  if (d2.degree() == s2.degree()) {
    const double v = std::sqrt(d2.leading() / s2.leading());
    if (v > m.sensitivity_peak) {
      m.sensitivity_peak = v;
      m.sensitivity_peak_rad_s = std::numeric_limits<double>::infinity();
    }
  }
  // Gain margins: the ends of the stable range of gain multipliers that contains K = 1 (the
  // nearest K above and below 1 where a closed-loop pole crosses the imaginary axis).
  const StableGainSet set = stable_gain_set(loop);
  if (const StableGainSet::Range* r = set.stable_at(1.0)) {
    if (std::isfinite(r->high)) {
      m.gain_margin_db = 20.0 * std::log10(r->high);
      m.phase_crossover_rad_s = r->high_frequency;
    }
    if (r->low > 0.0) {
      m.lower_gain_margin_db = 20.0 * std::log10(r->low);
      m.lower_phase_crossover_rad_s = r->low_frequency;
    }
  }
  return m;
}

Margins sensitivity_margins(const TransferFunction& loop) {
  Margins m;
  // loop_margins' computation of Ms (the same polynomials and operations, so the same bits).
  std::tie(m.sensitivity_peak, m.sensitivity_peak_rad_s) =
      magnitude_peak(squared_magnitude_in_w2(loop.denominator), squared_magnitude_in_w2(loop.denominator + loop.numerator));
  return m;
}

void add_closed_loop_peaks(Margins& m, const TransferFunction& controller, const TransferFunction& plant) {
  // T = L/(1 + L) = Nc·Ng / (Dc·Dg + Nc·Ng); C·S = C/(1 + C·G) = Nc·Dg / (Dc·Dg + Nc·Ng).
  const Polynomial loop_num = controller.numerator * plant.numerator;
  const Polynomial den = controller.denominator * plant.denominator + loop_num;
  const Polynomial den2 = squared_magnitude_in_w2(den);
  const auto [mt, mt_at] = magnitude_peak(squared_magnitude_in_w2(loop_num), den2);
  m.complementary_peak = mt;
  m.complementary_peak_rad_s = mt_at;
  const auto [mn, mn_at] = magnitude_peak(squared_magnitude_in_w2(controller.numerator * plant.denominator), den2);
  m.noise_gain = mn;
  m.noise_gain_rad_s = mn_at;
}

namespace {

// Where the roots of D + K·N lie: all strictly left, none right (some on the axis), or some right.
// A root counts as on the axis within 1e-7 of its magnitude (an exactly undamped pair of a loop
// with L(s) = L(−s) comes out of the companion matrix with a real part of rounding size).
StableGainSet::State closed_loop_state(const TransferFunction& loop, double k) {
  const Polynomial p = loop.denominator + k * loop.numerator;
  if (p.degree() == 0) return StableGainSet::State::stable;
  bool on_axis = false;
  for (const Complex& r : p.roots()) {
    const double tol = 1e-7 * std::abs(r);
    if (r.real() > tol) return StableGainSet::State::unstable;
    if (r.real() >= -tol) on_axis = true;
  }
  return on_axis ? StableGainSet::State::undamped : StableGainSet::State::stable;
}

}  // namespace

StableGainSet stable_gain_set(const TransferFunction& loop) {
  const Polynomial& n = loop.numerator;
  const Polynomial& d = loop.denominator;
  // Boundary gains with the frequency of the crossing.
  std::vector<std::pair<double, double>> cuts;
  auto add = [&](double k, double w) {
    if (k > 0.0 && std::isfinite(k)) cuts.emplace_back(k, w);
  };
  if (!n.is_zero()) {
    if (n(0.0) != 0.0) add(-d(0.0) / n(0.0), 0.0);
    const auto [e, o] = even_odd_in_minus_x(d * reflected(n));
    const Polynomial n2 = squared_magnitude_in_w2(n);
    for (double x : positive_real_roots(o)) {
      const double magnitude = n2(x);
      if (magnitude > 0.0) add(-e(x) / magnitude, std::sqrt(x));
    }
    if (n.degree() == d.degree()) add(-d.leading() / n.leading(), std::numeric_limits<double>::infinity());
  }
  std::sort(cuts.begin(), cuts.end());
  // Cuts closer than 1e-9 (relative) are one.
  std::vector<std::pair<double, double>> unique;
  for (const auto& c : cuts)
    if (unique.empty() || c.first > unique.back().first * (1.0 + 1e-9)) unique.push_back(c);
  StableGainSet set;
  const double inf = std::numeric_limits<double>::infinity();
  double low = 0.0, low_w = 0.0;
  for (std::size_t i = 0; i <= unique.size(); ++i) {
    const double high = i < unique.size() ? unique[i].first : inf;
    const double high_w = i < unique.size() ? unique[i].second : 0.0;
    const double probe = low == 0.0 ? (high == inf ? 1.0 : high / 2.0) : high == inf ? 2.0 * low : std::sqrt(low * high);
    const auto state = closed_loop_state(loop, probe);
    if (!set.ranges.empty() && set.ranges.back().state == state) {
      set.ranges.back().high = high;
      set.ranges.back().high_frequency = high_w;
    } else {
      set.ranges.push_back({low, high, low_w, high_w, state});
    }
    low = high;
    low_w = high_w;
  }
  return set;
}

const StableGainSet::Range* StableGainSet::stable_at(double k) const {
  for (const Range& r : ranges)
    if (r.state == State::stable && k > r.low && k < r.high) return &r;
  return nullptr;
}

bool StableGainSet::never_stable() const {
  return std::none_of(ranges.begin(), ranges.end(), [](const Range& r) { return r.state == State::stable; });
}

std::string StableGainSet::text(double action, const std::string& symbol) const {
  const bool reverse = action < 0.0;
  const std::string every = fmt::format("every {} {} 0", symbol, reverse ? "<" : ">");
  auto interval = [&](const Range& r) {
    auto shown = [&](double k) { return fmt::format("{:.4g}", reverse && k != 0.0 ? -k : k); };
    const std::string lo = shown(r.low);
    const std::string hi = std::isinf(r.high) ? (reverse ? "-∞" : "∞") : shown(r.high);
    return reverse ? fmt::format("({}, {})", hi, lo) : fmt::format("({}, {})", lo, hi);
  };
  auto list = [&](State state) {
    std::vector<std::string> parts;
    for (const Range& r : ranges)
      if (r.state == state) parts.push_back(interval(r));
    return fmt::format("{}", fmt::join(parts, " and "));
  };
  if (ranges.size() == 1) {
    switch (ranges.front().state) {
      case State::stable: return "stable for " + every;
      case State::unstable: return "unstable for " + every;
      case State::undamped:
        return "undamped for " + every + ": closed-loop poles stay on the imaginary axis (marginally stable, it "
                                         "never settles)";
    }
  }
  std::vector<std::string> parts;
  if (!never_stable()) parts.push_back(fmt::format("stable only for {} in {}", symbol, list(State::stable)));
  else parts.push_back("never stable");
  const bool any_undamped =
      std::any_of(ranges.begin(), ranges.end(), [](const Range& r) { return r.state == State::undamped; });
  if (any_undamped) parts.push_back(fmt::format("undamped (poles on the imaginary axis) for {} in {}", symbol, list(State::undamped)));
  parts.push_back(fmt::format("unstable for {} in {}", symbol, list(State::unstable)));
  return fmt::format("{}", fmt::join(parts, "; "));
}

}  // namespace specloop
