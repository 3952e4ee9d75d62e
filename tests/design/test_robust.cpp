// Robust design over the plant's uncertainty (scenarios.hpp, robust.hpp): the worst case of P
// control of a first-order lag with an uncertain gain against its closed form, and the scenario
// plants themselves — Latin-hypercube strata, corners, seeds, the verification sample, refused
// plants — and Wilson's interval against its closed form at the ends.
#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <fmt/format.h>
#include <set>
#include <string>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/design/robust.hpp"

using namespace specloop;
using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

namespace {

Problem problem_from(const std::string& text) {
  const Spec spec = parse_spec(text, "tests/robust_unit.toml");
  return make_problem(spec, characterize(spec));
}

/// The worst case of requirement `key` (its check and scenario); null when there is none.
const WorstCase* worst_of(const RobustAssessment& a, const Problem& p, const std::string& key) {
  for (std::size_t q = 0; q < p.requirements.size() && q < a.worst.size(); ++q)
    if (p.requirements[q].key == key) return &a.worst[q];
  return nullptr;
}

UncertaintyBox box_of(std::vector<double> low, std::vector<double> high) {
  UncertaintyBox box;
  for (std::size_t k = 0; k < low.size(); ++k) {
    box.keys.push_back(fmt::format("plant.poles[{}]", k));
    box.nominal.push_back(0.5 * (low[k] + high[k]));
  }
  box.low = std::move(low);
  box.high = std::move(high);
  return box;
}

/// The conveyor-like plant of the scenario tests (invented), with an [uncertainty] section.
std::string ranged_spec(const std::string& uncertainty) {
  return "[plant]\nzeros = [-9.0]\npoles = [-1.2, [-4.0, 3.0], -40.0]\ngain = 160.0\n"
         "[controller]\nstructure = \"pid\"\n[requirements]\novershoot_max_pct = 12.0\nsettling_time_max = 2.0\n"
         "[uncertainty]\n" +
         uncertainty;
}

}  // namespace

TEST_CASE("robust P control of a first-order lag: the worst case is the low-gain corner, in closed form",
          "[robust]") {
  // P control of G(s) = k/(T·s + 1) under unity feedback (common practice): the closed loop is
  // K·k/(T·s + 1 + K·k), first order with time constant τ = T/(1 + K·k) and final value
  // r·K·k/(1 + K·k). So e∞ = 1/(1 + K·k); y(t) = y∞·(1 − e^{−t/τ}) never overshoots; it leaves
  // the band y∞ ± b·|y∞| for the last time (README "Metric definitions": settling time) when
  // e^{−t/τ} = b, at t = τ·ln(1/b); it reaches 10 % and 90 % of y∞ at τ·ln(10/9) and τ·ln 10, so
  // the rise time is τ·ln 9. Every one of these grows as k falls: the worst plant of the box is
  // the low-gain corner k1 (scenario 1: the set is nominal, corners all-low first, …).
  const double T = 2.5, k1 = 1.5, k2 = 4.0, k0 = 2.0, K = 3.0, band = 0.02;
  const Problem p = problem_from(fmt::format(
      "[plant]\nnumerator = [{}]\ndenominator = [{}, 1.0]\n[controller]\nstructure = \"p\"\n"
      "[requirements]\novershoot_max_pct = 5.0\nsettling_time_max = 10.0\nrise_time_max = 10.0\n"
      "steady_state_error_max = 0.5\n[uncertainty]\n\"plant.numerator[0]\" = [{}, {}]\nsamples = 12\n"
      "verify_samples = 20\n",
      k0, T, k1, k2));
  RobustRun robust;
  robust.box = uncertainty_box(p.spec.uncertainty);
  robust.scenarios = scenario_set(p);
  robust.verification = verification_plants(p);
  REQUIRE(robust.scenarios.size() == 1 + 2 + 12);
  REQUIRE(robust.scenarios[1].kind == ScenarioKind::corner);
  REQUIRE(robust.scenarios[1].values == std::vector<double>{k1});
  const Controller c = make_controller(Structure::p, {K}, 10.0);
  // claimed = true: verified on the fresh plants too (and confirmed on its worst plants).
  const RobustAssessment a = assess_over_scenarios(robust, p, DesignRole::optimized, c, 1, true, false);

  const double tau = T / (1.0 + K * k1);
  const WorstCase* sse = worst_of(a, p, "steady_state_error_max");
  REQUIRE(sse);
  REQUIRE(sse->check.value);
  CHECK_THAT(*sse->check.value, WithinRel(1.0 / (1.0 + K * k1), 1e-12));
  CHECK(sse->scenario == 1);
  const WorstCase* settling = worst_of(a, p, "settling_time_max");
  REQUIRE(settling);
  REQUIRE(settling->check.value);
  CHECK_THAT(*settling->check.value, WithinRel(tau * std::log(1.0 / band), 1e-9));
  CHECK(settling->scenario == 1);
  const WorstCase* rise = worst_of(a, p, "rise_time_max");
  REQUIRE(rise);
  REQUIRE(rise->check.value);
  CHECK_THAT(*rise->check.value, WithinRel(tau * std::log(9.0), 1e-9));
  CHECK(rise->scenario == 1);
  const WorstCase* overshoot = worst_of(a, p, "overshoot_max_pct");
  REQUIRE(overshoot);
  REQUIRE(overshoot->check.value);
  CHECK_THAT(*overshoot->check.value, WithinAbs(0.0, 1e-9));
  // Every plant is stable and meets these loose limits; the claim says so.
  CHECK(!a.unstable_scenario);
  CHECK(a.set_all.met == a.set_all.of);
  CHECK(a.verification.met == 20);
  CHECK(a.holds);
  // Each plant of the set against its own closed form (the gain its values give).
  for (std::size_t i = 0; i < robust.scenarios.size(); ++i) {
    const double k = robust.scenarios[i].values[0];
    INFO(fmt::format("scenario {} (k = {})", i, k));
    REQUIRE(a.set[i].stable);
    for (const RequirementCheck& r : a.set[i].checks) {
      if (r.requirement.key == "settling_time_max")
        CHECK_THAT(*r.value, WithinRel(T / (1.0 + K * k) * std::log(1.0 / band), 1e-9));
      if (r.requirement.key == "steady_state_error_max") CHECK_THAT(*r.value, WithinRel(1.0 / (1.0 + K * k), 1e-12));
    }
  }
}

TEST_CASE("Latin hypercube: each key's range cut into n strata, each stratum used exactly once", "[robust][scenarios]") {
  // The defining property of a Latin hypercube sample (McKay, Beckman & Conover, Technometrics 21
  // (1979) 239–245): along every coordinate, each of the n equal strata holds exactly one point.
  const UncertaintyBox box = box_of({150.0, 2.7, -1.5}, {170.0, 3.3, -0.9});
  for (const int n : {1, 2, 7, 64, 500}) {
    for (const std::uint64_t seed : {1ull, 2ull, 977ull}) {
      const auto points = latin_hypercube(box, n, seed);
      REQUIRE(points.size() == static_cast<std::size_t>(n));
      for (std::size_t k = 0; k < box.size(); ++k) {
        std::vector<int> used(static_cast<std::size_t>(n), 0);
        for (const auto& v : points) {
          REQUIRE(v.size() == box.size());
          REQUIRE(v[k] >= box.low[k]);
          REQUIRE(v[k] < box.high[k]);
          const double u = (v[k] - box.low[k]) / (box.high[k] - box.low[k]) * n;
          const auto stratum = static_cast<std::size_t>(std::floor(u));
          REQUIRE(stratum < used.size());
          ++used[stratum];
        }
        INFO(fmt::format("n = {}, seed = {}, key {}", n, seed, k));
        CHECK(std::all_of(used.begin(), used.end(), [](int c) { return c == 1; }));
      }
    }
  }
  CHECK(latin_hypercube(box, 0, 1).empty());
}

TEST_CASE("box corners: all 2^d when they fit, else a deterministic subset with all-low and all-high", "[robust][scenarios]") {
  const auto is_corner = [](const UncertaintyBox& box, const std::vector<double>& v) {
    for (std::size_t k = 0; k < box.size(); ++k)
      if (v[k] != box.low[k] && v[k] != box.high[k]) return false;
    return true;
  };
  SECTION("every corner when 2^d <= max_corners") {
    const UncertaintyBox box = box_of({1.0, 2.0, 3.0}, {1.5, 2.5, 3.5});
    for (const int max_corners : {8, 9, 64}) {
      const auto corners = box_corners(box, max_corners, 1);
      CHECK(corners.size() == 8);
      CHECK(std::set<std::vector<double>>(corners.begin(), corners.end()).size() == 8);
      for (const auto& v : corners) CHECK(is_corner(box, v));
    }
  }
  SECTION("a subset of max_corners otherwise") {
    const UncertaintyBox box = box_of({1, 2, 3, 4, 5, 6, 7}, {1.5, 2.5, 3.5, 4.5, 5.5, 6.5, 7.5});  // 128 corners
    const std::vector<double> all_low = box.low, all_high = box.high;
    for (const int max_corners : {2, 3, 10, 16, 40, 127}) {
      INFO("max_corners = " << max_corners);
      const auto corners = box_corners(box, max_corners, 5);
      CHECK(corners.size() == static_cast<std::size_t>(max_corners));
      CHECK(std::set<std::vector<double>>(corners.begin(), corners.end()).size() == corners.size());
      for (const auto& v : corners) CHECK(is_corner(box, v));
      CHECK(std::find(corners.begin(), corners.end(), all_low) != corners.end());
      CHECK(std::find(corners.begin(), corners.end(), all_high) != corners.end());
      CHECK(box_corners(box, max_corners, 5) == corners);  // deterministic
    }
    // With room for them (2 + 2·7 = 16): each key alone at its high end, and each alone at its low end.
    const auto corners = box_corners(box, 16, 5);
    for (std::size_t k = 0; k < box.size(); ++k) {
      std::vector<double> one = all_low, all_but_one = all_high;
      one[k] = box.high[k];
      all_but_one[k] = box.low[k];
      CHECK(std::find(corners.begin(), corners.end(), one) != corners.end());
      CHECK(std::find(corners.begin(), corners.end(), all_but_one) != corners.end());
    }
    CHECK(box_corners(box, 128, 5).size() == 128);
  }
}

TEST_CASE("scenario plants: the same seed gives the same plants, another seed others, and fresh plants are new",
          "[robust][scenarios]") {
  const std::string ranges = "\"plant.gain\" = [150.0, 170.0]\n\"plant.poles[1][1]\" = [2.7, 3.3]\nsamples = 20\n"
                             "verify_samples = 50\n";
  const Problem a = problem_from(ranged_spec(ranges + "seed = 4\n"));
  const Problem b = problem_from(ranged_spec(ranges + "seed = 4\n"));
  const Problem other = problem_from(ranged_spec(ranges + "seed = 5\n"));
  const auto values = [](const std::vector<Scenario>& set) {
    std::vector<std::vector<double>> v;
    for (const Scenario& s : set) v.push_back(s.values);
    return v;
  };
  const auto set_a = scenario_set(a), set_b = scenario_set(b), set_other = scenario_set(other);
  REQUIRE(set_a.size() == 1 + 4 + 20);
  CHECK(values(set_a) == values(set_b));
  CHECK(values(verification_plants(a)) == values(verification_plants(b)));
  // The nominal and the corners do not depend on the seed; every sample does.
  for (std::size_t i = 0; i < set_a.size(); ++i) {
    INFO("scenario " << i);
    if (set_a[i].kind == ScenarioKind::sample) CHECK(set_a[i].values != set_other[i].values);
    else CHECK(set_a[i].values == set_other[i].values);
  }
  const auto fresh = values(verification_plants(a)), fresh_other = values(verification_plants(other));
  REQUIRE(fresh.size() == 50);
  CHECK(fresh != fresh_other);
  // The fresh plants are none of the set's, and inside the box.
  const auto set_values = values(set_a);
  const std::set<std::vector<double>> in_set(set_values.begin(), set_values.end());
  for (const auto& v : fresh) {
    CHECK(in_set.count(v) == 0);
    CHECK((v[0] >= 150.0 && v[0] < 170.0 && v[1] >= 2.7 && v[1] < 3.3));
  }
  // Each scenario's plant is the spec's plant with its values: gain and the pair's imaginary part.
  for (const Scenario& s : set_a) {
    const std::vector<Complex> poles = s.problem.plant.poles();
    const bool has_pair = std::any_of(poles.begin(), poles.end(), [&](Complex q) {
      return std::abs(q - Complex(-4.0, s.values[1])) <= 1e-9 * std::abs(q);
    });
    CHECK(has_pair);
    CHECK_THAT(s.problem.plant.numerator.leading() / s.problem.plant.denominator.leading(), WithinRel(s.values[0], 1e-12));
  }
}

TEST_CASE("scenario plants the reader refuses: a SpecError naming the values", "[robust][scenarios]") {
  // A pole range whose low end is beyond what the numerics honour (README: every nonzero pole
  // magnitude in [1e-5, 1e5]): the corner there is not a valid plant.
  const Problem p = problem_from(ranged_spec("\"plant.poles[2]\" = [-2.0e5, -30.0]\nsamples = 4\nverify_samples = 5\n"));
  try {
    (void)scenario_set(p);
    FAIL("scenario_set accepted a plant with a pole at -2e5");
  } catch (const SpecError& e) {
    CHECK_THAT(e.what(), Contains("plant.poles[2] = -200000"));
    CHECK_THAT(e.what(), Contains("is not a valid plant"));
    CHECK_THAT(e.what(), Contains("1e5"));
  }
  std::vector<double> values{-1.0e6};
  CHECK_THROWS_WITH(scenario_problem(p, values), Contains("plant.poles[2] = -1e+06"));
}

TEST_CASE("a scenario delay too short for the numerics is set to 0 (README: its value then says 0)", "[robust][scenarios]") {
  // An invented dryer: lags of 50 s and 4 s, 2 s of transport delay, the delay's range from 0.
  const Problem p = problem_from(
      "[plant]\npoles = [-0.02, -0.25]\ngain = 0.04\ndelay = 2.0\n[controller]\nstructure = \"pi\"\n"
      "[requirements]\novershoot_max_pct = 10.0\n[uncertainty]\n\"plant.delay\" = [0.0, 4.0]\nsamples = 4\n"
      "verify_samples = 5\n");
  SECTION("a delay whose Padé poles exceed 1e5 rad/s") {
    std::vector<double> values{1.0e-6};
    const Problem s = scenario_problem(p, values);
    CHECK(values[0] == 0.0);
    CHECK(s.spec.plant.delay_s == 0.0);
    CHECK(s.plant.denominator.degree() == 2);
  }
  SECTION("a delay the numerics honour is kept") {
    std::vector<double> values{0.5};
    const Problem s = scenario_problem(p, values);
    CHECK(values[0] == 0.5);
    CHECK(s.spec.plant.delay_s == 0.5);
    CHECK(s.plant.denominator.degree() == 2 + 3);  // the order-3 Padé approximant (README "plant.delay")
  }
}

TEST_CASE("a scenario delay too short for the spread rule is set to 0 like one too short for the magnitude rule",
          "[robust][scenarios]") {
  const Problem p = problem_from(
      "[plant]\npoles = [-0.02, -0.25]\ngain = 0.04\ndelay = 2.0\n[controller]\nstructure = \"pi\"\n"
      "[requirements]\novershoot_max_pct = 10.0\n[uncertainty]\n\"plant.delay\" = [0.0, 4.0]\nsamples = 4\n"
      "verify_samples = 5\n");
  // 1e-4 s puts the approximant's poles near 4e4–5e4 rad/s: inside [1e-5, 1e5], but 2.5e6 times
  // the 0.02 rad/s lag, beyond the spread of 1e6 the reader honours. A range from 0 admits such
  // draws as much as the shorter ones: the same "negligible" rule must apply (KNOWN PRODUCT BUG
  // on this branch: scenario_problem throws, and `design` ends with exit 2 on such a draw).
  std::vector<double> values{1.0e-4};
  Problem s;
  REQUIRE_NOTHROW(s = scenario_problem(p, values));
  CHECK(values[0] == 0.0);
  CHECK(s.spec.plant.delay_s == 0.0);
}

TEST_CASE("Wilson's interval at its closed-form ends", "[robust]") {
  // Wilson (JASA 22 (1927) 209–212): the score interval (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²))/(1 + z²/n).
  // For p̂ = 1 its lower end is n/(n + z²) and its upper end 1; for p̂ = 0 it is [0, z²/(n + z²)].
  const double z = 1.959963984540054;
  for (const int n : {1, 7, 20, 300, 1000}) {
    INFO("n = " << n);
    const ProportionInterval all = wilson_interval(n, n);
    CHECK_THAT(all.low_pct, WithinRel(100.0 * n / (n + z * z), 1e-12));
    CHECK_THAT(all.high_pct, WithinAbs(100.0, 1e-12));
    const ProportionInterval none = wilson_interval(0, n);
    CHECK_THAT(none.low_pct, WithinAbs(0.0, 1e-12));
    CHECK_THAT(none.high_pct, WithinRel(100.0 * z * z / (n + z * z), 1e-12));
  }
  // Symmetry: k of n and n − k of n mirror each other about 50 %.
  const ProportionInterval a = wilson_interval(3, 40), b = wilson_interval(37, 40);
  CHECK_THAT(a.low_pct, WithinAbs(100.0 - b.high_pct, 1e-12));
  CHECK_THAT(a.high_pct, WithinAbs(100.0 - b.low_pct, 1e-12));
  const ProportionInterval nothing = wilson_interval(0, 0);
  CHECK(nothing.low_pct == 0.0);
  CHECK(nothing.high_pct == 100.0);
}

TEST_CASE("robust search: with only some corners in the set, worse corners are found and join it", "[robust]") {
  // An invented belt drive (a lag, a resonant pair, a fast pole, a zero) with six ranged keys (64
  // corners) and max_corners = 8: the set starts with all-low, all-high and six one-key corners.
  // Each worst-case round walks from the corner with the least room to neighbouring corners with
  // less (one key flipped at a time); those join the set.
  const Problem p = problem_from(
      "[plant]\nzeros = [-9.0]\npoles = [-1.2, [-4.0, 3.0], -40.0]\ngain = 160.0\n"
      "[actuator]\nmin = -24.0\nmax = 24.0\n"
      "[controller]\nstructure = \"pid\"\nderivative_filter = 5.0\n"
      "[requirements]\novershoot_max_pct = 12.0\npeak_time_ratio = 0.7\nsettling_time_max = 2.0\n"
      "steady_state_error_max = 0.0\neffort_max = 24.0\n"
      "[search]\nmax_evaluations = 300\nmax_time = 3600\n"
      "[uncertainty]\n\"plant.gain\" = [150.0, 170.0]\n\"plant.poles[0]\" = [-1.3, -1.1]\n"
      "\"plant.poles[1][0]\" = [-4.2, -3.8]\n\"plant.poles[1][1]\" = [2.8, 3.2]\n\"plant.poles[2]\" = [-44.0, -36.0]\n"
      "\"plant.zeros[0]\" = [-9.5, -8.5]\nsamples = 4\nmax_corners = 8\nverify_samples = 10\n");
  std::vector<Scenario> set = scenario_set(p);
  const std::size_t before = set.size();
  REQUIRE(before == 1 + 8 + 4);
  RobustSearchLog log;
  const SearchResult r = optimize_over_scenarios(p, set, {4.0, 2.6, 1.0}, search_options(p.spec), 1, log);
  CHECK(log.corners_found == set.size() - before);
  CHECK(log.corners_found >= 1);  // the walk moves whenever a neighbouring corner has less room
  const UncertaintyBox box = uncertainty_box(p.spec.uncertainty);
  std::set<std::vector<double>> seen;
  for (std::size_t i = before; i < set.size(); ++i) {
    CHECK(set[i].kind == ScenarioKind::corner);
    for (std::size_t k = 0; k < box.size(); ++k)
      CHECK((set[i].values[k] == box.low[k] || set[i].values[k] == box.high[k]));
    CHECK(seen.insert(set[i].values).second);  // no corner twice
  }
  for (std::size_t i = 1; i < before; ++i) CHECK(seen.count(set[i].values) == 0);
  CHECK(r.controller.series.size() == 3);
  // What the walk guarantees for the final design: no corner next to the set's corner with the
  // least room (one key flipped) has less room, in the set or not.
  const auto room = [&](const Problem& plant) {
    const Design d = measure_design(plant, DesignRole::optimized, r.controller);
    double least = 1e300;
    for (const RequirementCheck& c : d.checks) least = std::min(least, c.slack);
    return d.status == StepStatus::ok ? least : -1e300;
  };
  std::size_t tightest = 0;
  double least = 1e300;
  for (std::size_t i = 0; i < set.size(); ++i)
    if (set[i].kind == ScenarioKind::corner && room(set[i].problem) < least) tightest = i, least = room(set[i].problem);
  for (std::size_t k = 0; k < box.size(); ++k) {
    std::vector<double> values = set[tightest].values;
    values[k] = values[k] == box.low[k] ? box.high[k] : box.low[k];
    CHECK(room(scenario_problem(p, values)) >= least);
  }
}
