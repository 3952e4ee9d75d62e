// Root-locus facts against the standard construction rules, and the ζ-line crossings.
#include <catch2/catch.hpp>
#include <cmath>

#include "specloop/design/characterize.hpp"

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

TEST_CASE("mode contributions are signed and add up to the final value", "[locus][modes]") {
  // T(s) = 6/((s + 1)(s + 2)(s + 3)): by partial fractions (worked by hand, common practice)
  // y(t) = 1 − 3e^{−t} + 3e^{−2t} − e^{−3t}, so the contributions −(term at t = 0)/y∞ are
  // +300 %, −300 %, +100 %: sizes 700 %, sum 100 %.
  const auto t = TransferFunction::from_zeros_poles({}, {{-1.0, 0.0}, {-2.0, 0.0}, {-3.0, 0.0}}, 6.0);
  const auto modes = mode_shares(t);
  REQUIRE(modes.size() == 3);
  double sum = 0.0;
  for (const auto& m : modes) {
    REQUIRE(m.contribution);
    REQUIRE(m.share);
    CHECK_THAT(std::abs(*m.contribution), WithinRel(*m.share, 1e-12));  // a real pole: size = |contribution|
    const double want = m.pole.real() == Approx(-1.0) ? 3.0 : m.pole.real() == Approx(-2.0) ? -3.0 : 1.0;
    CHECK_THAT(*m.contribution, WithinAbs(want, 1e-9));
    sum += *m.contribution;
  }
  CHECK_THAT(sum, WithinAbs(1.0, 1e-12));
  CHECK_THAT(contribution_total(t), WithinAbs(1.0, 0.0));
  const auto note = cancellation_note(modes, 1.0);
  REQUIRE(note);
  CHECK(note->find("700 %") != std::string::npos);
  CHECK(note->find("100 %") != std::string::npos);
}

TEST_CASE("mode contributions of a pair: 2·Re of the residue, and the sum with a zero", "[locus][modes]") {
  // T(s) = 5/(s² + 2s + 5) = 5/((s + 1)² + 4): y(t) = 1 − e^{−t}(cos 2t + ½ sin 2t) (standard
  // second-order step response, common practice): the pair's term is −1 at t = 0 → +100 %,
  // its amplitude √(1 + ¼) = 111.8 %.
  const auto pair = TransferFunction(Polynomial({5.0}), Polynomial({1.0, 2.0, 5.0}));
  const auto modes = mode_shares(pair);
  REQUIRE(modes.size() == 1);
  REQUIRE(modes[0].contribution);
  CHECK_THAT(*modes[0].contribution, WithinAbs(1.0, 1e-12));
  CHECK_THAT(*modes[0].share, WithinAbs(std::sqrt(1.25), 1e-12));
  CHECK_FALSE(cancellation_note(modes, 1.0));
  // A zero close to a pole, poles spread: whatever the sizes, the signed sum is 1 (y(0) = 0).
  const auto t = TransferFunction::from_zeros_poles({{-1.05, 0.0}, {-20.0, 0.0}},
                                                    {{-1.0, 0.0}, {-2.0, 3.0}, {-2.0, -3.0}, {-9.0, 0.0}, {-40.0, 0.0}}, 900.0);
  double sum = 0.0;
  for (const auto& m : mode_shares(t)) {
    REQUIRE(m.contribution);
    sum += *m.contribution;
  }
  CHECK_THAT(sum, WithinAbs(1.0, 1e-9));
  // A loop with a direct feedthrough jumps at t = 0: the contributions add up to 1 − T(∞)/T(0).
  const auto feedthrough = TransferFunction(Polynomial({1.0, 3.0}), Polynomial({2.0, 4.0}));  // (s + 3)/(2s + 4): T(∞) = ½, T(0) = ¾
  double feedthrough_sum = 0.0;
  for (const auto& m : mode_shares(feedthrough)) feedthrough_sum += m.contribution.value_or(0.0);
  CHECK_THAT(contribution_total(feedthrough), WithinAbs(1.0 - 0.5 / 0.75, 1e-15));
  CHECK_THAT(feedthrough_sum, WithinAbs(1.0 - 0.5 / 0.75, 1e-12));
}
