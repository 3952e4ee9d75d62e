// Real polynomial arithmetic; roots through Eigen's companion-matrix solver.
#include "specloop/core/polynomial.hpp"

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <stdexcept>
#include <unsupported/Eigen/Polynomials>

namespace specloop {

namespace {
void trim(std::vector<double>& c) {
  std::size_t first = 0;
  while (first + 1 < c.size() && c[first] == 0.0) ++first;
  c.erase(c.begin(), c.begin() + static_cast<std::ptrdiff_t>(first));
  if (c.empty()) c.push_back(0.0);
}
}  // namespace

Polynomial::Polynomial(std::vector<double> c) : coefficients(std::move(c)) { trim(coefficients); }

bool Polynomial::is_zero() const {
  return std::all_of(coefficients.begin(), coefficients.end(), [](double v) { return v == 0.0; });
}

double Polynomial::operator()(double s) const {
  double acc = 0.0;
  for (double c : coefficients) acc = acc * s + c;
  return acc;
}

Complex Polynomial::operator()(Complex s) const {
  Complex acc = 0.0;
  for (double c : coefficients) acc = acc * s + c;
  return acc;
}

Polynomial Polynomial::derivative() const {
  const int n = degree();
  if (n == 0) return Polynomial({0.0});
  std::vector<double> d(static_cast<std::size_t>(n));
  for (int i = 0; i < n; ++i) d[static_cast<std::size_t>(i)] = coefficients[static_cast<std::size_t>(i)] * (n - i);
  return Polynomial(std::move(d));
}

int Polynomial::roots_at_origin() const {
  if (is_zero()) return 0;
  int count = 0;
  for (auto it = coefficients.rbegin(); it != coefficients.rend() && *it == 0.0; ++it) ++count;
  return count;
}

std::vector<Complex> Polynomial::roots() const {
  if (is_zero()) throw std::invalid_argument("roots of the zero polynomial are undefined");
  const int zeros_at_origin = roots_at_origin();
  std::vector<double> c(coefficients.begin(), coefficients.end() - zeros_at_origin);
  std::vector<Complex> out(static_cast<std::size_t>(zeros_at_origin), Complex(0.0, 0.0));
  const int n = static_cast<int>(c.size()) - 1;
  if (n == 1) {
    out.emplace_back(-c[1] / c[0], 0.0);
  } else if (n > 1) {
    Eigen::VectorXd lowest_first(n + 1);
    for (int i = 0; i <= n; ++i) lowest_first(i) = c[static_cast<std::size_t>(n - i)];
    Eigen::PolynomialSolver<double, Eigen::Dynamic> solver(lowest_first);
    const auto& r = solver.roots();
    // Make conjugate pairs exact: the companion eigenvalues of a real matrix already come in
    // pairs; snap tiny imaginary parts of real roots to zero.
    for (int i = 0; i < r.size(); ++i) {
      Complex z = r(i);
      if (std::abs(z.imag()) <= 1e-12 * std::max(1.0, std::abs(z))) z.imag(0.0);
      out.push_back(z);
    }
  }
  sort_roots(out);
  return out;
}

Polynomial Polynomial::from_roots(const std::vector<Complex>& roots, double gain) {
  std::vector<Complex> acc{Complex(gain, 0.0)};
  for (const Complex& r : roots) {
    std::vector<Complex> next(acc.size() + 1, Complex(0.0, 0.0));
    for (std::size_t i = 0; i < acc.size(); ++i) {
      next[i] += acc[i];
      next[i + 1] -= acc[i] * r;
    }
    acc = std::move(next);
  }
  std::vector<double> real(acc.size());
  for (std::size_t i = 0; i < acc.size(); ++i) real[i] = acc[i].real();
  return Polynomial(std::move(real));
}

Polynomial operator+(const Polynomial& a, const Polynomial& b) {
  const auto& x = a.coefficients;
  const auto& y = b.coefficients;
  std::vector<double> out(std::max(x.size(), y.size()), 0.0);
  std::copy(x.begin(), x.end(), out.end() - static_cast<std::ptrdiff_t>(x.size()));
  for (std::size_t i = 0; i < y.size(); ++i) out[out.size() - y.size() + i] += y[i];
  return Polynomial(std::move(out));
}

Polynomial operator-(const Polynomial& a, const Polynomial& b) { return a + (-1.0) * b; }

Polynomial operator*(const Polynomial& a, const Polynomial& b) {
  const auto& x = a.coefficients;
  const auto& y = b.coefficients;
  std::vector<double> out(x.size() + y.size() - 1, 0.0);
  for (std::size_t i = 0; i < x.size(); ++i)
    for (std::size_t j = 0; j < y.size(); ++j) out[i + j] += x[i] * y[j];
  return Polynomial(std::move(out));
}

Polynomial operator*(double k, const Polynomial& a) {
  std::vector<double> out = a.coefficients;
  for (double& v : out) v *= k;
  return Polynomial(std::move(out));
}

void sort_roots(std::vector<Complex>& roots) {
  std::sort(roots.begin(), roots.end(), [](const Complex& a, const Complex& b) {
    if (a.real() != b.real()) return a.real() > b.real();
    return a.imag() > b.imag();
  });
}

}  // namespace specloop
