// Compensator parameterizations agree with each other, and the exact margins agree with
// analytic values for simple loops.
#include <catch2/catch.hpp>
#include <cmath>
#include <numbers>

#include "specloop/core/compensator.hpp"
#include "specloop/core/margins.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {
Complex parallel_value(const ParallelGains& g, Complex s) {
  Complex c = g.kp;
  if (g.ki != 0.0) c += g.ki / s;
  if (g.kd != 0.0) c += g.kd * s / (g.filter_time * s + 1.0);
  return c;
}
Complex standard_value(const StandardForm& f, Complex s) {
  Complex c = 1.0;
  if (f.has_integral) c += 1.0 / (f.ti * s);
  if (f.has_derivative) c += f.td * s / (f.td / f.n * s + 1.0);
  return f.kp * c;
}
}  // namespace

TEST_CASE("series, parallel and standard forms describe the same controller", "[compensator]") {
  const double n = 8.0;
  const std::vector<std::pair<Structure, std::vector<double>>> cases{
      {Structure::p, {2.5}},
      {Structure::pi, {1.2, 0.4}},
      {Structure::pd, {3.0, 2.0}},
      {Structure::pid, {2.0, 1.5, 1.3}},   // two real zeros
      {Structure::pid, {2.0, 1.5, 0.5}},   // a complex zero pair
      {Structure::lead, {1.5, 2.0, 6.0}},
  };
  for (const auto& [structure, values] : cases) {
    const Controller c = make_controller(structure, values, n);
    REQUIRE(c.parallel);
    REQUIRE(c.standard);
    for (double w : {0.05, 0.7, 3.0, 40.0}) {
      const Complex s(0.2, w);
      const Complex want = c.transfer(s);
      CHECK(std::abs(parallel_value(*c.parallel, s) - want) <= 1e-10 * std::abs(want));
      CHECK(std::abs(standard_value(*c.standard, s) - want) <= 1e-10 * std::abs(want));
    }
    if (structure == Structure::pd || structure == Structure::pid) {
      // Åström–Hägglund's filtered derivative: Tf = Kd/(N·Kp).
      CHECK_THAT(c.parallel->filter_time, WithinRel(c.parallel->kd / (n * c.parallel->kp), 1e-12));
    }
  }
}

TEST_CASE("PID zeros are the roots of s² + 2ζc·ω0·s + ω0²", "[compensator]") {
  const Controller c = make_controller(Structure::pid, {1.0, 2.0, 0.6}, 10.0);
  const auto zeros = c.transfer.zeros();
  REQUIRE(zeros.size() == 2);
  for (const Complex& z : zeros) {
    CHECK_THAT(std::abs(z), WithinRel(2.0, 1e-10));
    CHECK_THAT(-z.real() / std::abs(z), WithinRel(0.6, 1e-10));
  }
  CHECK(c.transfer.poles().front() == Complex(0.0, 0.0));  // the integrator
  CHECK_THROWS_AS(make_controller(Structure::pid, {1.0, 2.0, 0.2}, 10.0), std::invalid_argument);  // ζc < 1/√11
}

TEST_CASE("lag and lead-lag shapes", "[compensator]") {
  const Controller lag = make_controller(Structure::lag, {2.0, 0.5, 10.0}, 10.0);
  CHECK_THAT(lag.transfer.dc_gain(), WithinRel(20.0, 1e-12));  // DC gain boosted by β
  CHECK_THAT(std::abs(lag.transfer(Complex(0.0, 1e6))), WithinRel(2.0, 1e-5));
  CHECK_FALSE(lag.parallel);
  const Controller ll = make_controller(Structure::lead_lag, {3.0, 2.0, 5.0, 0.2, 8.0}, 10.0);
  CHECK_THAT(ll.transfer.dc_gain(), WithinRel(3.0 * 8.0, 1e-12));
  CHECK(ll.transfer.zeros().size() == 2);
  CHECK_THROWS_AS(make_controller(Structure::lead, {1.0, 2.0, 0.5}, 10.0), std::invalid_argument);
  CHECK_THROWS_AS(make_controller(Structure::pi, {1.0}, 10.0), std::invalid_argument);
  CHECK_THROWS_AS(make_controller(Structure::pi, {1.0, std::nan("")}, 10.0), std::invalid_argument);
}

TEST_CASE("gain margin of K/(s(s+1)(s+2)): phase crossover at √2, GM = 6/K", "[margins]") {
  // Routh–Hurwitz on s³ + 3s² + 2s + K: the loop is marginal at K = 6, oscillating at ω = √2.
  const TransferFunction loop(Polynomial({1.5}), Polynomial({1.0, 3.0, 2.0, 0.0}));
  const Margins m = loop_margins(loop);
  REQUIRE(m.gain_margin_db);
  CHECK_THAT(*m.gain_margin_db, WithinAbs(20.0 * std::log10(6.0 / 1.5), 1e-9));
  CHECK_THAT(*m.phase_crossover_rad_s, WithinRel(std::sqrt(2.0), 1e-10));
  REQUIRE(m.phase_margin_deg);
  REQUIRE(m.delay_margin_s);
  CHECK_THAT(*m.delay_margin_s, WithinRel(*m.phase_margin_deg * std::numbers::pi / 180.0 / *m.gain_crossover_rad_s, 1e-12));
}

TEST_CASE("phase margin of ωn²/(s(s + 2ζωn)) matches the closed form", "[margins]") {
  // Ogata, Modern Control Engineering (frequency-domain analysis): ω_gc = ωn·√(√(1 + 4ζ⁴) − 2ζ²),
  // PM = atan(2ζ/√(√(1 + 4ζ⁴) − 2ζ²)).
  for (double zeta : {0.2, 0.5, 0.8}) {
    const double wn = 3.0;
    const TransferFunction loop(Polynomial({wn * wn}), Polynomial({1.0, 2 * zeta * wn, 0.0}));
    const Margins m = loop_margins(loop);
    const double root = std::sqrt(std::sqrt(1 + 4 * std::pow(zeta, 4)) - 2 * zeta * zeta);
    REQUIRE(m.phase_margin_deg);
    CHECK_THAT(*m.gain_crossover_rad_s, WithinRel(wn * root, 1e-9));
    CHECK_THAT(*m.phase_margin_deg, WithinAbs(std::atan(2 * zeta / root) * 180.0 / std::numbers::pi, 1e-8));
    CHECK_FALSE(m.gain_margin_db);  // phase never reaches −180°: infinite gain margin
  }
}

TEST_CASE("sensitivity peak against a dense frequency scan", "[margins]") {
  const std::vector<TransferFunction> loops{
      TransferFunction(Polynomial({1.0}), Polynomial({1.0, 1.0, 0.0})),
      TransferFunction(Polynomial({1.5}), Polynomial({1.0, 3.0, 2.0, 0.0})),
      TransferFunction(Polynomial({4.0, 8.0}), Polynomial({1.0, 0.6, 9.0, 0.0})),
  };
  for (const auto& loop : loops) {
    const Margins m = loop_margins(loop);
    double peak = 0.0;
    for (int i = 0; i <= 200000; ++i) {
      const double w = std::pow(10.0, -3.0 + 6.0 * i / 200000.0);
      peak = std::max(peak, 1.0 / std::abs(1.0 + loop(Complex(0.0, w))));
    }
    CHECK_THAT(m.sensitivity_peak, WithinRel(peak, 1e-4));  // scan spacing 7e-5 decades
    CHECK(m.sensitivity_peak >= peak);
  }
}
