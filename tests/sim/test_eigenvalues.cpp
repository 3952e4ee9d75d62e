// The simulator's own small eigenvalue solver (small_eigenvalues) against Eigen's general one
// (EigenSolver: Hessenberg reduction + Francis QR, the solver it replaced in the hot path) on many
// random closed loops, and on matrices known to be hard for the QR iteration.
//
// Two properties, each with its reason:
// - backward error: every λ returned makes A − λI singular to within a few hundred ε·‖A‖
//   (σ_min(A − λI) ≤ 1e-13·‖A‖_F). Any method built from orthogonal similarities meets this,
//   however ill-conditioned the eigenvalue (a defective one moves by (ε‖A‖)^(1/k), but its
//   backward error stays at rounding), so it is the check that applies to every matrix;
// - agreement with Eigen's solver within the first-order perturbation bound of two backward
//   stable results, 2·(1e-13·‖A‖)·κ(λ) with κ the eigenvalue's condition number (Wilkinson,
//   The Algebraic Eigenvalue Problem, ch. 2), and on the hard matrices with the exact
//   eigenvalues (closed forms, or numpy-style companion roots of the characteristic polynomial).
#include <catch2/catch.hpp>
#include <algorithm>
#include <cmath>
#include <complex>
#include <numbers>
#include <random>

#include "specloop/core/lti.hpp"
#include "specloop/sim/eigenvalues.hpp"

using namespace specloop;

namespace {

double backward_error(const Eigen::MatrixXd& a, Complex lambda) {
  const int n = static_cast<int>(a.rows());
  Eigen::MatrixXcd shifted = a.cast<Complex>();
  for (int i = 0; i < n; ++i) shifted(i, i) -= lambda;
  const Eigen::JacobiSVD<Eigen::MatrixXcd> svd(shifted);
  return svd.singularValues()(n - 1) / std::max(a.norm(), 1e-300);
}

std::vector<Complex> solve(const Eigen::MatrixXd& a) {
  std::vector<Complex> v;
  REQUIRE(small_eigenvalues(a, v));
  REQUIRE(static_cast<int>(v.size()) == a.rows());
  return v;
}

// Each value matched to a distinct reference value within tol·max(1, |reference|).
bool same_set(std::vector<Complex> got, const std::vector<Complex>& reference, double tol) {
  for (const Complex& r : reference) {
    auto best = std::min_element(got.begin(), got.end(),
                                 [&](Complex x, Complex y) { return std::abs(x - r) < std::abs(y - r); });
    if (best == got.end() || std::abs(*best - r) > tol * std::max(1.0, std::abs(r))) return false;
    got.erase(best);
  }
  return got.empty();
}

// Conjugate pairs come as exact conjugates, each pair once.
bool pairs_exact(const std::vector<Complex>& v) {
  for (const Complex& x : v)
    if (x.imag() != 0.0 && std::count(v.begin(), v.end(), std::conj(x)) != std::count(v.begin(), v.end(), x))
      return false;
  return true;
}

}  // namespace

TEST_CASE("small eigenvalue solver agrees with Eigen's on random closed loops", "[eigenvalues]") {
  std::mt19937_64 rng(20240611);
  std::uniform_real_distribution<double> unit(0.0, 1.0);
  int tight = 0, total = 0;
  for (int trial = 0; trial < 3000; ++trial) {
    // A plant of 1 … 7 poles, magnitudes 1e-2 … 1e3 (every third trial) or 0.1 … 100, real or
    // in pairs of damping 0.02 … 1, sometimes a zero; a P, PI, PID or lead controller of random
    // gain (stable or not).
    const int order = 1 + trial % 7;
    const bool wide = trial % 3 == 0;
    std::vector<Complex> poles, zeros;
    for (int k = 0; k < order;) {
      const double mag = wide ? std::pow(10.0, -2.0 + 5.0 * unit(rng)) : std::pow(10.0, -1.0 + 3.0 * unit(rng));
      if (order - k >= 2 && unit(rng) < 0.5) {
        const double zeta = 0.02 + 0.98 * unit(rng);
        poles.emplace_back(-zeta * mag, mag * std::sqrt(1.0 - zeta * zeta));
        poles.push_back(std::conj(poles.back()));
        k += 2;
      } else {
        poles.emplace_back(-mag, 0.0);
        k += 1;
      }
    }
    if (order > 1 && unit(rng) < 0.3) zeros.emplace_back(-std::pow(10.0, -1.0 + 3.0 * unit(rng)), 0.0);
    const auto plant = TransferFunction::from_zeros_poles(zeros, poles, 1.0);
    const double k = std::abs(plant.denominator.constant() / plant.numerator.constant()) * std::pow(10.0, -1.0 + 3.0 * unit(rng));
    const double z = std::pow(10.0, -2.0 + 3.0 * unit(rng));
    TransferFunction c;
    switch (trial % 4) {
      case 0: c = TransferFunction(Polynomial({k}), Polynomial({1.0})); break;
      case 1: c = TransferFunction(Polynomial({k, k * z}), Polynomial({1.0, 0.0})); break;
      case 2: c = TransferFunction(Polynomial({k, 1.4 * k * z, k * z * z}), Polynomial({0.1 / z, 1.0, 0.0})); break;
      default: c = TransferFunction(Polynomial({k / z, k}), Polynomial({0.1 / z, 1.0})); break;
    }
    const StateSpace loop = close_loop(realize(plant), realize(c));
    const Eigen::MatrixXd& a = loop.A;
    INFO("trial " << trial << ", " << a.rows() << " states");
    const std::vector<Complex> ours = solve(a);
    CHECK(pairs_exact(ours));
    for (const Complex& l : ours) CHECK(backward_error(a, l) <= 1e-13);
    // Agreement: first-order perturbation theory bounds the distance between two backward-stable
    // results by (their backward errors, 1e-13·‖A‖ each, summed)·κ(λ), κ = ‖y‖‖x‖/|yᴴx| the
    // eigenvalue's condition number (from Eigen's eigenvectors; ×10 for that estimate's own error).
    // The random loops include very nonnormal ones (κ up to 1e13), where the bound is loose;
    // `tight` counts the eigenvalues where it is below 1e-6·max(1, |λ|), the pole tolerance of
    // tests/check_scipy_step.py.
    const Eigen::EigenSolver<Eigen::MatrixXd> reference(a, true);
    const Eigen::MatrixXcd right = reference.eigenvectors();
    const Eigen::MatrixXcd left = right.inverse();
    std::vector<Complex> unmatched = ours;
    for (int i = 0; i < a.rows(); ++i) {
      const Complex r = reference.eigenvalues()(i);
      const double kappa = left.row(i).norm() * right.col(i).norm();
      const double bound = 10.0 * 2e-13 * a.norm() * kappa;
      const auto nearest = std::min_element(unmatched.begin(), unmatched.end(), [&](Complex x, Complex y) {
        return std::abs(x - r) < std::abs(y - r);
      });
      INFO("reference " << r << ", kappa " << kappa << ", bound " << bound);
      REQUIRE(nearest != unmatched.end());
      CHECK(std::abs(*nearest - r) <= bound);
      if (bound <= 1e-6 * std::max(1.0, std::abs(r))) ++tight;
      ++total;
      unmatched.erase(nearest);
    }
  }
  CHECK(tight * 2 >= total);  // most of the comparisons are sharp (about 60 % with this seed)
}

TEST_CASE("small eigenvalue solver on matrices that are hard for the QR iteration", "[eigenvalues]") {
  auto check = [](const Eigen::MatrixXd& a, const std::vector<Complex>& expected, double tol) {
    const std::vector<Complex> ours = solve(a);
    CHECK(pairs_exact(ours));
    for (const Complex& l : ours) CHECK(backward_error(a, l) <= 1e-13);
    CHECK(same_set(ours, expected, tol));
  };
  const double pi = std::numbers::pi;
  SECTION("cyclic permutations: every eigenvalue on the unit circle, equally far from any real shift") {
    for (int n = 2; n <= 8; ++n) {
      Eigen::MatrixXd p = Eigen::MatrixXd::Zero(n, n);
      for (int i = 0; i < n; ++i) p((i + 1) % n, i) = 1.0;
      std::vector<Complex> roots;
      for (int k = 0; k < n; ++k) roots.push_back(std::polar(1.0, 2.0 * pi * k / n));
      INFO("n = " << n);
      check(p, roots, 1e-12);
    }
  }
  SECTION("two pairs symmetric about their mean (the benchmark loop's spectrum: the shifts stall)") {
    // Characteristic polynomial (s + 1)(s + 2)(s² + 3s + 6.25) + 16, even in s + 1.5.
    const TransferFunction plant(Polynomial({8.0}),
                                 Polynomial({1.0, 1.0}) * Polynomial({1.0, 2.0}) * Polynomial({1.0, 3.0, 6.25}));
    const StateSpace loop = close_loop(realize(plant), static_gain(2.0));
    const Polynomial characteristic = plant.denominator + Polynomial({16.0});
    check(loop.A, characteristic.roots(), 1e-12);
  }
  SECTION("a Jordan block in a rotated basis (defective: the eigenvalue moves by about ε^(1/n))") {
    std::mt19937_64 rng(7);
    std::normal_distribution<double> normal;
    for (int n = 2; n <= 6; ++n) {
      Eigen::MatrixXd j = -2.0 * Eigen::MatrixXd::Identity(n, n);
      for (int i = 0; i + 1 < n; ++i) j(i, i + 1) = 1.0;
      Eigen::MatrixXd r(n, n);
      for (int i = 0; i < n; ++i)
        for (int k = 0; k < n; ++k) r(i, k) = normal(rng);
      const Eigen::MatrixXd q = Eigen::HouseholderQR<Eigen::MatrixXd>(r).householderQ();
      INFO("n = " << n);
      check(q * j * q.transpose(), std::vector<Complex>(static_cast<std::size_t>(n), Complex(-2.0, 0.0)),
            4.0 * std::pow(1e-15, 1.0 / n));
    }
  }
  SECTION("zero, diagonal, already triangular, a 1 × 1 and an empty matrix") {
    check(Eigen::MatrixXd::Zero(5, 5), std::vector<Complex>(5, Complex(0.0, 0.0)), 0.0);
    Eigen::MatrixXd d = Eigen::MatrixXd::Zero(4, 4);
    d.diagonal() << -1.0, -1e-3, -1e4, 2.0;
    check(d, {-1.0, -1e-3, -1e4, 2.0}, 0.0);
    Eigen::MatrixXd t = Eigen::MatrixXd::Zero(3, 3);
    t << -1.0, 5.0, 7.0, 0.0, -2.0, 9.0, 0.0, 0.0, -3.0;
    check(t, {-1.0, -2.0, -3.0}, 1e-15);
    check(Eigen::MatrixXd::Constant(1, 1, -7.5), {-7.5}, 0.0);
    std::vector<Complex> none;
    CHECK(small_eigenvalues(Eigen::MatrixXd(0, 0), none));
    CHECK(none.empty());
  }
  SECTION("a stiff loop: poles from 1e-3 to 1e6 (the graded matrices of the unusual plants)") {
    const auto plant = TransferFunction::from_zeros_poles({}, {Complex(-1e-3, 0.0), Complex(-2.0, 0.0), Complex(-1e6, 0.0)}, 2e6);
    const StateSpace loop = close_loop(realize(plant), static_gain(1.0));
    const Polynomial characteristic = plant.denominator + plant.numerator;
    check(loop.A, characteristic.roots(), 1e-9);
  }
}

TEST_CASE("small eigenvalue solver refuses what it cannot take", "[eigenvalues]") {
  std::vector<Complex> v{Complex(1.0, 0.0)};
  CHECK_FALSE(small_eigenvalues(Eigen::MatrixXd::Identity(kSmallEigenCapacity + 1, kSmallEigenCapacity + 1), v));
  Eigen::MatrixXd nan = Eigen::MatrixXd::Identity(3, 3);
  nan(1, 2) = std::numeric_limits<double>::quiet_NaN();
  CHECK_FALSE(small_eigenvalues(nan, v));
  Eigen::MatrixXd inf = Eigen::MatrixXd::Identity(3, 3);
  inf(0, 0) = std::numeric_limits<double>::infinity();
  CHECK_FALSE(small_eigenvalues(inf, v));
  CHECK_FALSE(small_eigenvalues(Eigen::MatrixXd::Zero(2, 3), v));
  CHECK(v.size() == 1);  // unchanged on refusal
}
