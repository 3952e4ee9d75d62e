// Exact loop margins from polynomial roots.
//
// With s = jω: P(s)·Q(−s) = E(s²) + s·O(s²), so P(jω)·conj(Q(jω)) = E(−ω²) + jω·O(−ω²), a pair
// of real polynomials in x = ω². Phase crossovers of L = N/D are the positive roots of O(−x)
// (N·conj(D) real) where E(−x) < 0; gain crossovers are the positive roots of
// |N|² − |D|² (in x); the sensitivity peak is the largest value of |D|²/|D + N|² (in x) over its
// stationary points and the ends x = 0 and x → ∞.
#include "specloop/margins.hpp"

#include <cmath>
#include <limits>
#include <numbers>

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

  // Phase crossovers.
  const auto [e, o] = even_odd_in_minus_x(n * reflected(d));
  for (double x : positive_real_roots(o)) {
    if (!(e(x) < 0.0)) continue;
    const double w = std::sqrt(x);
    const double magnitude = std::abs(at(w));
    const double gm_db = -20.0 * std::log10(magnitude);
    if (!m.gain_margin_db || gm_db < *m.gain_margin_db) {
      m.gain_margin_db = gm_db;
      m.phase_crossover_rad_s = w;
    }
  }

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
  return m;
}

}  // namespace specloop
