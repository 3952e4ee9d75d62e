// Real polynomials with coefficients stored highest power of s first (as written in spec files).
#pragma once

#include <complex>
#include <vector>

namespace specloop {

using Complex = std::complex<double>;

/// A real polynomial c[0]·s^n + c[1]·s^(n-1) + ... + c[n]. Leading zeros are removed by trim().
struct Polynomial {
  std::vector<double> coefficients{0.0};  // highest power first; never empty

  Polynomial() = default;
  explicit Polynomial(std::vector<double> c);

  /// Degree after trimming leading zeros; the zero polynomial has degree 0.
  int degree() const { return static_cast<int>(coefficients.size()) - 1; }
  double leading() const { return coefficients.front(); }
  /// Constant term c[n] = value at s = 0.
  double constant() const { return coefficients.back(); }
  bool is_zero() const;

  double operator()(double s) const;
  Complex operator()(Complex s) const;

  /// d/ds.
  Polynomial derivative() const;
  /// Roots (complex, conjugate pairs exact conjugates), from the eigenvalues of the balanced
  /// companion matrix (Eigen's polynomial solver).
  std::vector<Complex> roots() const;
  /// Number of roots at s = 0 (trailing zero coefficients).
  int roots_at_origin() const;

  /// Π (s − r) · gain; complex roots must come in conjugate pairs (the result is made real).
  static Polynomial from_roots(const std::vector<Complex>& roots, double gain = 1.0);
};

Polynomial operator+(const Polynomial& a, const Polynomial& b);
Polynomial operator-(const Polynomial& a, const Polynomial& b);
Polynomial operator*(const Polynomial& a, const Polynomial& b);
Polynomial operator*(double k, const Polynomial& a);

/// Sorts complex numbers rightmost first (real part descending), then by imaginary part
/// descending, so output order is stable and the slowest modes come first.
void sort_roots(std::vector<Complex>& roots);

}  // namespace specloop
