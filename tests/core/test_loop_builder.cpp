// The search's loop builder: realize_low_order (a controller's section from its coefficients)
// against realize (the same section from computed roots), and close_loop_into against close_loop.
// The reference for the realization is the transfer function itself: C·(sI − A)⁻¹·B + D evaluated
// at test frequencies must equal N(s)/D(s).
#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>
#include <random>

#include "specloop/core/compensator.hpp"
#include "specloop/core/lti.hpp"

using namespace specloop;

namespace {

// C·(sI − A)⁻¹·B + D at s.
Complex frequency_response(const StateSpace& ss, Complex s) {
  const int n = ss.states();
  Complex d = ss.D(0);
  if (n == 0) return d;
  Eigen::MatrixXcd m = -ss.A.cast<Complex>();
  for (int i = 0; i < n; ++i) m(i, i) += s;
  const Eigen::VectorXcd x = m.partialPivLu().solve(ss.B.cast<Complex>());
  return (ss.C.row(0).cast<Complex>() * x)(0) + d;
}

bool same_bits(const Eigen::MatrixXd& a, const Eigen::MatrixXd& b) {
  if (a.rows() != b.rows() || a.cols() != b.cols()) return false;
  for (Eigen::Index i = 0; i < a.size(); ++i)
    if (std::memcmp(&a.data()[i], &b.data()[i], sizeof(double)) != 0) return false;
  return true;
}

}  // namespace

TEST_CASE("realize_low_order builds realize's section from the coefficients", "[lti][loop-builder]") {
  // Every structure with random parameters and both actions: the section of realize (same shape,
  // entries equal to 1e-13 relative: realize's come from the computed roots, off by a few ulps),
  // and the transfer function N(s)/D(s) itself at five frequencies (1e-12 relative).
  std::mt19937_64 rng(99);
  std::uniform_real_distribution<double> log10_value(-2.0, 2.0);
  const Structure structures[] = {Structure::p,  Structure::pi,  Structure::pd,      Structure::pid,
                                  Structure::lead, Structure::lag, Structure::lead_lag};
  StateSpace reused;  // one output object across every size: in-place writing must resize it
  for (int trial = 0; trial < 700; ++trial) {
    const Structure s = structures[trial % 7];
    const std::size_t count = structure_parameters(s).size();
    std::vector<double> x(count);
    for (double& v : x) v = std::pow(10.0, log10_value(rng));
    if (s == Structure::pid) x[2] = 0.3 + 2.0 * (x[2] / 100.0);           // ζc from below to above 1
    if (s == Structure::lead || s == Structure::lag) x[2] = 1.0 + x[2];  // ratios above 1
    if (s == Structure::lead_lag) {
      x[2] = 1.0 + x[2];
      x[4] = 1.0 + x[4];
    }
    const double filter = 2.0 + trial % 10, action = trial % 2 ? 1.0 : -1.0;
    std::vector<double> num, den;
    controller_polynomials(s, x.data(), filter, action, num, den);
    const TransferFunction c{Polynomial(num), Polynomial(den)};
    realize_low_order(num, den, reused);
    const StateSpace reference = realize(c);
    INFO("trial " << trial << ", " << structure_name(s));
    REQUIRE(reused.states() == reference.states());
    auto close = [](const Eigen::MatrixXd& a, const Eigen::MatrixXd& b) {
      for (Eigen::Index i = 0; i < a.size(); ++i)
        if (std::abs(a.data()[i] - b.data()[i]) > 1e-13 * std::max(1.0, std::abs(b.data()[i]))) return false;
      return true;
    };
    CHECK(close(reused.A, reference.A));
    CHECK(close(reused.B, reference.B));
    CHECK(close(reused.C, reference.C));
    CHECK(close(reused.D, reference.D));
    for (double w : {0.0137, 0.29, 1.0, 7.3, 210.0}) {
      const Complex s_w(0.0, w), expected = c(s_w);
      CHECK(std::abs(frequency_response(reused, s_w) - expected) <= 1e-12 * std::abs(expected));
    }
  }
}

TEST_CASE("realize_low_order refuses what it does not build", "[lti][loop-builder]") {
  StateSpace out;
  CHECK_THROWS_AS(realize_low_order({1.0}, {1.0, 2.0, 3.0, 4.0}, out), std::invalid_argument);  // degree 3
  CHECK_THROWS_AS(realize_low_order({1.0, 2.0, 3.0}, {1.0, 2.0}, out), std::invalid_argument);  // improper
  CHECK_THROWS_AS(realize_low_order({0.0, 1.0}, {1.0, 2.0}, out), std::invalid_argument);       // zero leading
  CHECK_THROWS_AS(realize_low_order({1.0}, {}, out), std::invalid_argument);
}

TEST_CASE("close_loop_into writes close_loop's matrices bit for bit, reusing its storage", "[lti][loop-builder]") {
  std::mt19937_64 rng(7);
  std::uniform_real_distribution<double> value(0.1, 10.0);
  StateSpace reused;
  for (int trial = 0; trial < 200; ++trial) {
    std::vector<Complex> poles;
    for (int i = 0; i < 1 + trial % 6; ++i) poles.emplace_back(-value(rng), 0.0);
    const auto plant = realize(TransferFunction::from_zeros_poles({Complex(-value(rng), 0.0)}, poles, value(rng)));
    const StateSpace controller =
        trial % 4 == 0 ? static_gain(value(rng))
                       : realize(TransferFunction(Polynomial({value(rng), value(rng), value(rng)}),
                                                  Polynomial({0.01 * value(rng), 1.0, trial % 3 ? 0.0 : value(rng)})));
    const StateSpace expected = close_loop(plant, controller);
    close_loop_into(plant, controller, reused);  // the loop's size changes from trial to trial
    INFO("trial " << trial);
    CHECK(same_bits(reused.A, expected.A));
    CHECK(same_bits(reused.B, expected.B));
    CHECK(same_bits(reused.C, expected.C));
    CHECK(same_bits(reused.D, expected.D));
  }
}
