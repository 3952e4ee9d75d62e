// CandidateEvaluator (the search's cost evaluation) against the same evaluation composed by hand
// from the library's public pieces: the loop closed with realize (roots), simulated by a
// StepSimulator of its own, judged with the tightened requirements; and on a scenario plant
// against an evaluator whose nominal problem has that plant. The reference for the pieces
// themselves (simulation, metrics, requirement values) is checked elsewhere against closed forms
// and SciPy; this checks that the evaluator puts them together as documented.
#include <catch2/catch.hpp>
#include <cmath>
#include <string>

#include "specloop/design/design.hpp"
#include "specloop/design/evaluate.hpp"

using namespace specloop;

namespace {

Problem problem_for(const std::string& plant, const std::string& structure, const std::string& requirements) {
  const Spec spec = parse_spec("[plant]\n" + plant + "\n[controller]\nstructure = \"" + structure + "\"\n" +
                                   "[requirements]\n" + requirements + "\n",
                               "specs/unit.toml");
  return make_problem(spec, characterize(spec));
}

// The documented evaluation, composed from the public pieces (continuous, unweighted loop).
CandidateOutcome by_hand(const Problem& p, const SearchOptions& o, const std::vector<double>& params) {
  std::vector<double> num, den;
  controller_polynomials(p.spec.controller.structure, params.data(), p.spec.controller.derivative_filter, p.action,
                         num, den);
  const TransferFunction c{Polynomial(num), Polynomial(den)};
  StepSimulator sim;
  StepMetrics m;
  CandidateOutcome out;
  const double band = p.band_fraction * (1.0 - p.search_margin);
  if (sim.simulate(close_loop(p.plant_realization, realize(c)), p.spec.reference.amplitude, band, m) != StepStatus::ok)
    return out;
  out.stable = true;
  for (const Requirement& r : p.requirements)
    out.violation += requirement_violation(tightened(r, p.search_margin),
                                           requirement_value(tightened(r, p.search_margin), m, std::nullopt,
                                                             p.reference_peak_time_s, p.band_fraction * 100.0,
                                                             p.search_margin));
  out.objective = tracking_objective(o.objective, m, p.spec.reference.amplitude, p.tracking_window_s);
  out.effort_peak = m.effort_peak;
  return out;
}

}  // namespace

TEST_CASE("the evaluator composes controller, loop, simulation and requirements as documented", "[evaluate]") {
  const std::string plant = "poles = [-1.0, -2.0, [-1.5, 2.0]]\ngain = 8.0";
  const std::string requirements = "overshoot_max_pct = 20.0\nsettling_time_max = 6.0\nrise_time_max = 3.0";
  SECTION("P: realize's section is a static gain either way, so the outcome is the same bit for bit") {
    const Problem p = problem_for(plant, "p", requirements);
    const SearchOptions o = search_options(p.spec);
    CandidateEvaluator evaluator(p, o);
    for (double k : {0.3, 0.8, 2.0}) {
      const CandidateOutcome got = evaluator.evaluate(p, &k), want = by_hand(p, o, {k});
      INFO("K = " << k);
      REQUIRE(got.stable == want.stable);
      CHECK(got.objective == want.objective);
      CHECK(got.violation == want.violation);
      CHECK(got.effort_peak == want.effort_peak);
    }
    const double unstable = 30.0;
    CHECK_FALSE(evaluator.evaluate(p, &unstable).stable);
    CHECK(evaluator.evaluate(p, &unstable).objective >= 1e9);  // the barrier
  }
  SECTION("PID: the section built from the coefficients instead of the roots: equal to rounding") {
    const Problem p = problem_for(plant, "pid", requirements);
    const SearchOptions o = search_options(p.spec);
    CandidateEvaluator evaluator(p, o);
    for (const std::vector<double>& x : {std::vector<double>{0.5, 1.0, 0.9}, std::vector<double>{1.0, 1.5, 0.8},
                                         std::vector<double>{0.3, 0.7, 1.6}}) {
      const CandidateOutcome got = evaluator.evaluate(p, x.data()), want = by_hand(p, o, x);
      REQUIRE(got.stable == want.stable);
      CHECK_THAT(got.objective, Catch::Matchers::WithinRel(want.objective, 1e-9));
      CHECK_THAT(got.violation, Catch::Matchers::WithinAbs(want.violation, 1e-9));
      CHECK_THAT(got.effort_peak, Catch::Matchers::WithinRel(want.effort_peak, 1e-9));
    }
  }
}

TEST_CASE("a scenario plant is simulated, the nominal problem's requirements judge it", "[evaluate]") {
  const std::string requirements = "overshoot_max_pct = 20.0\nsettling_time_max = 6.0\npeak_time_ratio = 1.5";
  const Problem nominal = problem_for("poles = [-1.0, -2.0, [-1.5, 2.0]]\ngain = 8.0", "pi", requirements);
  // The scenario: the same problem with the plant fields replaced (gain 20 % up, a slower pole).
  Problem other = problem_for("poles = [-0.8, -2.0, [-1.5, 2.0]]\ngain = 9.6", "pi", requirements);
  Problem scenario = nominal;
  scenario.plant = other.plant;
  scenario.plant_realization = other.plant_realization;
  // What the evaluation must equal: an evaluator whose nominal problem has the scenario's plant and
  // the nominal's requirement readings (reference peak time, tracking window).
  other.reference_peak_time_s = nominal.reference_peak_time_s;
  other.tracking_window_s = nominal.tracking_window_s;
  const SearchOptions o = search_options(nominal.spec);
  CandidateEvaluator evaluator(nominal, o), reference(other, o);
  const std::vector<double> x{0.4, 0.9};
  const CandidateOutcome on_nominal = evaluator.evaluate(nominal, x.data());
  const CandidateOutcome on_scenario = evaluator.evaluate(scenario, x.data());
  const CandidateOutcome expected = reference.evaluate(other, x.data());
  REQUIRE(on_scenario.stable);
  REQUIRE(expected.stable);
  CHECK(on_scenario.objective == expected.objective);
  CHECK(on_scenario.violation == expected.violation);
  CHECK(on_scenario.effort_peak == expected.effort_peak);
  CHECK(on_scenario.objective != on_nominal.objective);  // the plant mattered
  // And the workspace carries nothing over: the nominal again gives the nominal's outcome.
  const CandidateOutcome again = evaluator.evaluate(nominal, x.data());
  CHECK(again.objective == on_nominal.objective);
  CHECK(again.violation == on_nominal.violation);
}
