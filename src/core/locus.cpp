// Root locus by continuation in the gain, and the loop's frequency response (locus.hpp).
#include "specloop/core/locus.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <stdexcept>

namespace specloop {

namespace {

std::vector<Complex> poles_at(const TransferFunction& loop, double k) {
  return (loop.denominator + k * loop.numerator).roots();
}

// Orders `next` so that next[b] is the pole nearest prev[b] (greedy over the closest pairs).
std::vector<Complex> match(const std::vector<Complex>& prev, std::vector<Complex> next) {
  const std::size_t n = prev.size();
  if (next.size() != n) return next;
  std::vector<Complex> out(n);
  std::vector<bool> used_prev(n, false), used_next(n, false);
  for (std::size_t round = 0; round < n; ++round) {
    double best = std::numeric_limits<double>::infinity();
    std::size_t bi = 0, bj = 0;
    for (std::size_t i = 0; i < n; ++i) {
      if (used_prev[i]) continue;
      for (std::size_t j = 0; j < n; ++j) {
        if (used_next[j]) continue;
        const double d = std::abs(prev[i] - next[j]);
        if (d < best) { best = d; bi = i; bj = j; }
      }
    }
    used_prev[bi] = used_next[bj] = true;
    out[bi] = next[bj];
  }
  return out;
}

double largest_move(const std::vector<Complex>& a, const std::vector<Complex>& b) {
  double m = 0.0;
  for (std::size_t i = 0; i < std::min(a.size(), b.size()); ++i) m = std::max(m, std::abs(a[i] - b[i]));
  return m;
}

}  // namespace

RootLocus trace_root_locus(const TransferFunction& loop, double k_min, double k_max, int points, double max_jump) {
  if (!(k_min > 0.0 && k_min < 1.0 && k_max > 1.0 && std::isfinite(k_max)) || points < 2)
    throw std::invalid_argument("trace_root_locus: needs 0 < k_min < 1 < k_max and points >= 2");
  if (loop.numerator.degree() > loop.denominator.degree())
    throw std::invalid_argument("trace_root_locus: the loop must be proper");
  // Starting grid: geometric on both sides of 1, with 1 itself.
  std::vector<double> grid;
  const int below = std::max(1, points / 2), above = std::max(1, points - below);
  for (int i = 0; i < below; ++i) grid.push_back(k_min * std::pow(1.0 / k_min, static_cast<double>(i) / below));
  grid.push_back(1.0);
  for (int i = 1; i <= above; ++i) grid.push_back(std::pow(k_max, static_cast<double>(i) / above));
  // Overall scale: the spread of the open-loop poles and zeros and of the end points.
  double scale = 1e-12;
  for (const Complex& z : loop.denominator.roots()) scale = std::max(scale, std::abs(z));
  if (!loop.numerator.is_zero())
    for (const Complex& z : loop.numerator.roots()) scale = std::max(scale, std::abs(z));
  for (const Complex& z : poles_at(loop, k_max)) scale = std::max(scale, std::abs(z));
  const double jump = max_jump * scale;

  RootLocus locus;
  locus.gains.push_back(grid.front());
  locus.poles.push_back(poles_at(loop, grid.front()));
  sort_roots(locus.poles.back());
  for (std::size_t g = 1; g < grid.size(); ++g) {
    // Refine [previous gain, grid[g]] by geometric halving while a branch jumps.
    std::vector<double> pending{grid[g]};
    while (!pending.empty()) {
      const double k = pending.back();
      std::vector<Complex> next = match(locus.poles.back(), poles_at(loop, k));
      const double k0 = locus.gains.back();
      if (largest_move(locus.poles.back(), next) > jump && k / k0 > 1.0 + 1e-9 && pending.size() < 13) {
        pending.push_back(std::sqrt(k0 * k));
        continue;
      }
      locus.gains.push_back(k);
      locus.poles.push_back(std::move(next));
      pending.pop_back();
    }
  }
  return locus;
}

FrequencySeries loop_frequency_response(const TransferFunction& loop, double omega_min, double omega_max, int points) {
  if (!(omega_min > 0.0 && omega_max > omega_min && std::isfinite(omega_max)) || points < 2)
    throw std::invalid_argument("loop_frequency_response: needs 0 < omega_min < omega_max and points >= 2");
  FrequencySeries f;
  double previous = 0.0;
  for (int i = 0; i < points; ++i) {
    const double w = omega_min * std::pow(omega_max / omega_min, static_cast<double>(i) / (points - 1));
    const Complex v = loop(Complex(0.0, w));
    double phase = std::arg(v) * 180.0 / std::numbers::pi;
    if (i == 0) {
      if (phase > 0.0) phase -= 360.0;  // integrators and lags read as negative phase
    } else {
      phase += 360.0 * std::round((previous - phase) / 360.0);
    }
    previous = phase;
    f.omega_rad_s.push_back(w);
    f.magnitude_db.push_back(20.0 * std::log10(std::abs(v)));
    f.phase_deg.push_back(phase);
  }
  return f;
}

}  // namespace specloop
