// Root-locus facts against the standard construction rules, and the ζ-line crossings.
#include <catch2/catch.hpp>
#include <cmath>

#include "specloop/characterize.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

TEST_CASE("asymptotes: centroid (Σp − Σz)/(n − m) and angles (2q+1)·180°/(n − m)", "[locus]") {
  // Standard root-locus rules (e.g. Ogata, Modern Control Engineering, root-locus construction).
  const auto g = TransferFunction::from_zeros_poles({{-3.0, 0.0}}, {{0.0, 0.0}, {-1.0, 0.0}, {-2.0, 1.0}, {-2.0, -1.0}}, 1.0);
  const auto a = locus_asymptotes(g);
  CHECK_THAT(a.centroid, WithinAbs((0.0 - 1.0 - 2.0 - 2.0 - (-3.0)) / 3.0, 1e-12));
  REQUIRE(a.angles_deg.size() == 3);
  CHECK_THAT(a.angles_deg[0], WithinAbs(60.0, 1e-12));
  CHECK_THAT(a.angles_deg[1], WithinAbs(180.0, 1e-12));
  CHECK_THAT(a.angles_deg[2], WithinAbs(300.0, 1e-12));
}

TEST_CASE("breakaway points where dK/ds = 0", "[locus]") {
  // 1/(s(s + a)): breakaway at −a/2 (analytic).
  const auto two = TransferFunction(Polynomial({1.0}), Polynomial({1.0, 4.0, 0.0}));
  auto b2 = locus_breakaway_points(two);
  REQUIRE(b2.size() == 1);
  CHECK_THAT(b2[0], WithinAbs(-2.0, 1e-12));
  // 1/(s(s + 1)(s + 2)): 3s² + 6s + 2 = 0 → s = −1 ± 1/√3; only −1 + 1/√3 has K > 0 (analytic).
  const auto three = TransferFunction(Polynomial({1.0}), Polynomial({1.0, 3.0, 2.0, 0.0}));
  auto b3 = locus_breakaway_points(three);
  REQUIRE(b3.size() == 1);
  CHECK_THAT(b3[0], WithinAbs(-1.0 + 1.0 / std::sqrt(3.0), 1e-12));
  // (s + 3)/(s(s + 1)): break-away and break-in at −3 ± √6 (analytic: s² + 6s + 3 = 0).
  const auto with_zero = TransferFunction(Polynomial({1.0, 3.0}), Polynomial({1.0, 1.0, 0.0}));
  auto bz = locus_breakaway_points(with_zero);
  REQUIRE(bz.size() == 2);
  CHECK_THAT(bz[0], WithinAbs(-3.0 + std::sqrt(6.0), 1e-12));
  CHECK_THAT(bz[1], WithinAbs(-3.0 - std::sqrt(6.0), 1e-12));
}

TEST_CASE("ζ-line crossing of 1/(s(s + a)) matches the analytic gain", "[locus]") {
  // K/(s² + a s + K): σ = a/2 fixed, ζ = (a/2)/√K → K = (a/(2ζ))² (analytic).
  const double a = 4.0, zeta = 0.5;
  const auto g = TransferFunction(Polynomial({1.0}), Polynomial({1.0, a, 0.0}));
  const auto c = damping_line_crossings(g, zeta);
  REQUIRE(c.size() == 1);
  CHECK_THAT(c[0].gain, WithinRel(std::pow(a / (2 * zeta), 2), 1e-10));
  CHECK_THAT(c[0].pair_pole.real(), WithinAbs(-a / 2, 1e-10));
  CHECK(c[0].stable);
}

TEST_CASE("every crossing satisfies the characteristic equation and lies on the ζ-line", "[locus]") {
  const auto g = TransferFunction::from_zeros_poles({{-4.0, 0.0}}, {{-1.5, 0.0}, {-3.0, 2.0}, {-3.0, -2.0}, {-15.0, 0.0}}, 20.0);
  for (const double zeta : {0.2, 0.5169, 0.7}) {
    const auto crossings = damping_line_crossings(g, zeta);
    REQUIRE_FALSE(crossings.empty());
    for (const auto& c : crossings) {
      const Complex s = c.pair_pole;
      const Complex residual = g.denominator(s) + c.gain * g.numerator(s);
      CHECK(std::abs(residual) <= 1e-9 * std::abs(g.denominator(s)));
      CHECK_THAT(-s.real() / std::abs(s), WithinAbs(zeta, 1e-10));
    }
  }
}

TEST_CASE("mode shares add up to the step response at t = 0", "[locus]") {
  // y(0) = y∞ + Σ residues = 0 for a strictly proper T: the signed residues sum to −y∞.
  const auto t = TransferFunction::from_zeros_poles({{-4.0, 0.0}}, {{-1.0, 0.0}, {-2.0, 3.0}, {-2.0, -3.0}, {-9.0, 0.0}}, 30.0);
  const auto shares = mode_shares(t);
  REQUIRE(shares.size() == 3);
  double total = 0.0;
  for (const auto& m : shares) {
    REQUIRE(m.share);
    total += *m.share;
  }
  CHECK(total >= 1.0 - 1e-9);  // triangle inequality on Σ residues = −y∞
}
