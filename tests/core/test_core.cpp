// Polynomials, transfer functions, realizations and the closed loop, checked against hand
// algebra and standard definitions.
#include <catch2/catch.hpp>
#include <cmath>

#include "specloop/core/lti.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

TEST_CASE("polynomial arithmetic and evaluation", "[polynomial]") {
  const Polynomial a({1.0, 3.0, 2.0});  // (s + 1)(s + 2)
  const Polynomial b({1.0, -1.0});      // s − 1
  CHECK((a * b).coefficients == std::vector<double>{1.0, 2.0, -1.0, -2.0});
  CHECK((a + b).coefficients == std::vector<double>{1.0, 4.0, 1.0});
  CHECK((a - a).is_zero());
  CHECK((a - a).degree() == 0);
  CHECK(a(2.0) == 12.0);
  const Complex v = a(Complex(0.0, 1.0));  // −1 + 3j + 2
  CHECK(v == Complex(1.0, 3.0));
  CHECK(a.derivative().coefficients == std::vector<double>{2.0, 3.0});
  CHECK(Polynomial({0.0, 0.0, 1.0, 5.0}).degree() == 1);
}

TEST_CASE("roots through the companion matrix reproduce the polynomial", "[polynomial]") {
  const std::vector<Complex> truth{{-0.5, 0.0}, {-2.0, 3.0}, {-2.0, -3.0}, {-40.0, 0.0}, {0.0, 0.0}};
  const Polynomial p = Polynomial::from_roots(truth, 2.5);
  CHECK(p.leading() == 2.5);
  CHECK(p.roots_at_origin() == 1);
  auto r = p.roots();
  REQUIRE(r.size() == truth.size());
  auto sorted = truth;
  sort_roots(sorted);
  for (std::size_t i = 0; i < r.size(); ++i) CHECK(std::abs(r[i] - sorted[i]) < 1e-10 * std::max(1.0, std::abs(sorted[i])));
  // Conjugate pairs are exact conjugates; real roots have no imaginary dust.
  CHECK(r[2] == std::conj(r[3]));
  CHECK(r[1].imag() == 0.0);
  CHECK_THROWS(Polynomial({0.0}).roots());
}

TEST_CASE("transfer function: type, DC gain and static error constants", "[lti]") {
  // Standard definitions (e.g. Ogata, Modern Control Engineering, steady-state errors):
  // Kp = lim G, Kv = lim s·G, Ka = lim s²·G as s → 0.
  const auto type0 = TransferFunction::from_zeros_poles({{-4.0, 0.0}}, {{-1.0, 0.0}, {-2.0, 0.0}}, 3.0);
  CHECK(type0.system_type() == 0);
  CHECK_THAT(type0.dc_gain(), WithinRel(3.0 * 4.0 / 2.0, 1e-14));
  const auto k0 = error_constants(type0);
  CHECK_THAT(k0.position, WithinRel(6.0, 1e-14));
  CHECK(k0.velocity == 0.0);

  const auto type1 = TransferFunction::from_zeros_poles({}, {{0.0, 0.0}, {-5.0, 0.0}}, 10.0);
  CHECK(type1.system_type() == 1);
  CHECK(std::isinf(type1.dc_gain()));
  const auto k1 = error_constants(type1);
  CHECK(std::isinf(k1.position));
  CHECK_THAT(k1.velocity, WithinRel(2.0, 1e-14));
  CHECK(k1.acceleration == 0.0);

  const auto type2 = TransferFunction(Polynomial({1.0, 1.0}), Polynomial({1.0, 3.0, 0.0, 0.0}));
  CHECK(type2.system_type() == 2);
  CHECK_THAT(error_constants(type2).acceleration, WithinRel(1.0 / 3.0, 1e-14));
  CHECK(TransferFunction(Polynomial({1.0, 0.0}), Polynomial({1.0, 1.0})).system_type() == -1);
}

namespace {
// Frequency response of a realization: C (jωI − A)⁻¹ B + D, first output.
Complex evaluate(const StateSpace& ss, Complex s, int output = 0) {
  const int n = ss.states();
  if (n == 0) return ss.D(output);
  Eigen::MatrixXcd m = s * Eigen::MatrixXcd::Identity(n, n) - ss.A.cast<Complex>();
  Eigen::VectorXcd x = m.partialPivLu().solve(ss.B.cast<Complex>());
  return ss.C.row(output).cast<Complex>().dot(x) + ss.D(output);  // dot conjugates the left side: C is real
}
}  // namespace

TEST_CASE("the cascade realization has the transfer function it came from", "[lti]") {
  const std::vector<TransferFunction> cases{
      TransferFunction::from_zeros_poles({{-4.0, 0.0}}, {{-1.5, 0.0}, {-3.0, 2.0}, {-3.0, -2.0}, {-15.0, 0.0}}, 20.0),
      TransferFunction::from_zeros_poles({{-1.0, 5.0}, {-1.0, -5.0}}, {{-0.2, 0.0}, {-300.0, 0.0}, {0.0, 0.0}}, 7.0),
      TransferFunction::from_zeros_poles({{2.0, 0.0}}, {{-1.0, 0.0}, {-1.0, 0.0}, {-1.0, 0.0}}, -1.0),
      TransferFunction(Polynomial({2.0, 3.0, 1.0}), Polynomial({1.0, 4.0, 8.0})),  // biproper
  };
  for (const auto& g : cases) {
    const StateSpace ss = realize(g);
    CHECK(ss.states() == g.denominator.degree());
    for (double w : {0.01, 0.3, 1.0, 4.0, 50.0, 900.0}) {
      const Complex s(0.1, w);
      const Complex want = g(s);
      CHECK(std::abs(evaluate(ss, s) - want) <= 1e-10 * std::max(1.0, std::abs(want)));
    }
  }
  CHECK_THROWS_AS(realize(TransferFunction(Polynomial({1.0, 0.0, 0.0}), Polynomial({1.0, 1.0}))), std::invalid_argument);
}

TEST_CASE("closed loop: T = L/(1+L) and U = C/(1+L) from both the realization and the polynomials", "[lti]") {
  const auto plant = TransferFunction::from_zeros_poles({{-4.0, 0.0}}, {{-1.5, 0.0}, {-3.0, 2.0}, {-3.0, -2.0}}, 20.0);
  const auto controller = TransferFunction::from_zeros_poles({{-2.0, 0.0}}, {{-20.0, 0.0}}, 8.0);  // a lead
  const StateSpace loop = close_loop(realize(plant), realize(controller));
  const ClosedLoopTF tf = close_loop(plant, controller);
  for (double w : {0.0, 0.5, 2.0, 10.0, 100.0}) {
    const Complex s(0.05, w);
    const Complex l = plant(s) * controller(s);
    CHECK(std::abs(evaluate(loop, s, 0) - l / (1.0 + l)) < 1e-10);
    CHECK(std::abs(evaluate(loop, s, 1) - controller(s) / (1.0 + l)) < 1e-10);
    CHECK(std::abs(tf.output(s) - l / (1.0 + l)) < 1e-10);
    CHECK(std::abs(tf.effort(s) - controller(s) / (1.0 + l)) < 1e-10);
  }
  // The loop's poles are the roots of the characteristic polynomial.
  Eigen::EigenSolver<Eigen::MatrixXd> es(loop.A);
  auto from_matrix = std::vector<Complex>(es.eigenvalues().begin(), es.eigenvalues().end());
  sort_roots(from_matrix);
  const auto from_poly = tf.output.poles();
  REQUIRE(from_matrix.size() == from_poly.size());
  for (std::size_t i = 0; i < from_poly.size(); ++i) CHECK(std::abs(from_matrix[i] - from_poly[i]) < 1e-8);
  CHECK_THROWS_AS(close_loop(static_gain(1.0), static_gain(-1.0)), std::domain_error);
}

TEST_CASE("delay approximant: the [3/3] Padé coefficients, all-pass, phase close to −ωL", "[lti]") {
  // e^{−x} ≈ (1 − x/2 + x²/10 − x³/120)/(1 + x/2 + x²/10 + x³/120) (the classical [3/3] Padé
  // approximant; Baker & Graves-Morris, Padé Approximants).
  const double L = 0.4;
  const TransferFunction d = delay_approximant(L, 3);
  const auto& den = d.denominator.coefficients;
  const auto& num = d.numerator.coefficients;
  REQUIRE(den.size() == 4);
  CHECK_THAT(den[0], WithinRel(std::pow(L, 3) / 120.0, 1e-14));
  CHECK_THAT(den[1], WithinRel(L * L / 10.0, 1e-14));
  CHECK_THAT(den[2], WithinRel(L / 2.0, 1e-14));
  CHECK(den[3] == 1.0);
  CHECK_THAT(num[0], WithinRel(-std::pow(L, 3) / 120.0, 1e-14));
  CHECK_THAT(num[2], WithinRel(-L / 2.0, 1e-14));
  for (double w : {0.1, 1.0, 5.0, 20.0}) {
    const Complex v = d(Complex(0.0, w));
    CHECK_THAT(std::abs(v), WithinAbs(1.0, 1e-12));  // all-pass
  }
  // Phase error at ω·L = 1 is small for order 3 (series remainder ~ (ωL)^7/100800·2).
  const Complex v = d(Complex(0.0, 1.0 / L));
  CHECK_THAT(std::arg(v), WithinAbs(-1.0, 1e-4));
  CHECK(delay_approximant(0.0, 3).numerator.coefficients == std::vector<double>{1.0});
  CHECK_THROWS(delay_approximant(-1.0, 3));
}
