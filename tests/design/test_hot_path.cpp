// The search's cost evaluation (CandidateEvaluator::evaluate: controller polynomials, realization,
// closed loop, simulation, metrics, requirements, objective) allocates nothing once its storage
// has the loop's size and the longest grid seen, on the continuous loop with a set-point weight
// of 1 — the search's hot path. The counter is tests/sim/test_hot_path.cpp's
// (allocation_counter.hpp).
#include <catch2/catch.hpp>
#include <string>

#include "../sim/allocation_counter.hpp"
#include "specloop/design/design.hpp"

using namespace specloop;

namespace {

// The allocations of two evaluations — at the bounds' geometric middle b·1.1 and a = the middle —
// after `warm` alternating ones sized the workspace (the storage grows to the longest grid seen,
// then stays).
struct Counted {
  long allocations = 0;
  CandidateOutcome first, second;
  std::string note() const { return "outcomes " + std::to_string(first.objective) + ", " + std::to_string(second.objective); }
};
Counted allocations_after_warmup(const Problem& problem, CandidateEvaluator& evaluator, int warm) {
  std::vector<double> a, b;
  for (const auto& [lo, hi] : problem.bounds) {
    a.push_back(std::sqrt(lo * hi));
    b.push_back(std::sqrt(lo * hi) * 1.1);
  }
  for (int i = 0; i < warm; ++i) evaluator.evaluate(problem, (i % 2 == 0 ? a : b).data());
  Counted c;
  testing::allocations = 0;
  testing::counting = true;
  c.first = evaluator.evaluate(problem, b.data());
  c.second = evaluator.evaluate(problem, a.data());
  testing::counting = false;
  c.allocations = testing::allocations.load();
  return c;
}

}  // namespace

TEST_CASE("the search's cost evaluation allocates nothing after the first call", "[evaluate][hot-path]") {
  // P (a static controller), PID (two controller states) and lead-lag on a fourth-order plant,
  // with step requirements only (margin requirements would compute the margins, which allocate).
  for (const char* structure : {"p", "pid", "lead-lag"}) {
    const Spec spec = parse_spec(std::string("[plant]\npoles = [-1.0, -2.0, [-1.5, 2.0]]\ngain = 8.0\n"
                                             "[controller]\nstructure = \"") +
                                     structure + "\"\n[requirements]\novershoot_max_pct = 20.0\nsettling_time_max = 6.0\n",
                                 "specs/unit.toml");
    const Problem problem = make_problem(spec, characterize(spec));
    const SearchOptions options = search_options(spec);
    CandidateEvaluator evaluator(problem, options);
    const Counted counted = allocations_after_warmup(problem, evaluator, 2);
    INFO(structure << ": " << counted.note());
    CHECK(counted.allocations == 0);
  }
}

TEST_CASE("a regulator's cost evaluation, with the load response's second simulation, allocates nothing",
          "[evaluate][hot-path][regulation]") {
  // PI and PID minimizing the load IAE with load requirements (no margin requirement: those
  // allocate), also with a set-point weight of 1 given explicitly and a load size.
  for (const char* structure : {"pi", "pid"}) {
    const Spec spec = parse_spec(std::string("[plant]\npoles = [-1.0, -2.0, [-1.5, 2.0]]\ngain = 8.0\n"
                                             "[controller]\nstructure = \"") +
                                     structure +
                                     "\"\n[requirements]\novershoot_max_pct = 20.0\nload_peak_max = 0.5\n"
                                     "load_recovery_time_max = 20.0\n[search]\nobjective = \"load_iae\"\n"
                                     "[disturbance]\nsize = 0.3\ntime = 10.0\n",
                                 "specs/unit.toml");
    const Problem problem = make_problem(spec, characterize(spec));
    REQUIRE(problem.needs_load);
    const SearchOptions options = search_options(spec);
    CandidateEvaluator evaluator(problem, options);
    const Counted counted = allocations_after_warmup(problem, evaluator, 2);
    INFO(structure << ": " << counted.note());
    CHECK(counted.allocations == 0);
    // The load response was measured (a stable candidate carries it).
    if (counted.second.stable) CHECK(evaluator.metrics().load_peak.has_value());
  }
}

TEST_CASE("the cost evaluation with a notch and a measurement filter allocates nothing", "[evaluate][hot-path][filters]") {
  for (const char* filters : {"notch = \"search\"\n", "measurement_filter = { order = 2, time_constant = 0.003 }\n",
                              "notch = \"search\"\nmeasurement_filter = \"search\"\n"}) {
    // The demo carriage's belt resonance (tests/design/test_filters.cpp).
    const Spec spec = parse_spec(std::string("[plant]\npoles = [0.0, -2.0, [-0.6, 30.0]]\ngain = 900.0\n"
                                             "[controller]\nstructure = \"pid\"\n") +
                                     filters + "[requirements]\novershoot_max_pct = 5.0\nsettling_time_max = 1.0\n",
                                 "specs/unit.toml");
    const Problem problem = make_problem(spec, characterize(spec));
    const SearchOptions options = search_options(spec);
    CandidateEvaluator evaluator(problem, options);
    const Counted counted = allocations_after_warmup(problem, evaluator, 3);
    INFO(filters << ": " << counted.note());
    CHECK(counted.allocations == 0);
  }
}

TEST_CASE("the load loop is the set-point loop's A driven at the plant input", "[regulation]") {
  // y_d/d = G/(1 + C·G): for G = 2/(s + 1), C = 3 (P) the load loop is 2/(s + 7): DC gain 2/7,
  // pole −7; with the offset 0.5 the simulation's final value is 0.5 + 0.3·2/7.
  const StateSpace plant = realize(TransferFunction(Polynomial({2.0}), Polynomial({1.0, 1.0})));
  const StateSpace controller = static_gain(3.0);
  StateSpace load, set_point;
  load_loop_into(plant, controller, 0.3, 0.5, load);
  close_loop_into(plant, controller, set_point);
  CHECK(load.A.isApprox(set_point.A));
  CHECK(load.A(0, 0) == Approx(-7.0));
  StepSimulator sim(kLoadGridRules);  // to 1e-9 of the slowest mode: y(T) is y∞ within that
  StepMetrics m;
  REQUIRE(sim.simulate(load, 1.0, 0.02, m) == StepStatus::ok);
  CHECK(m.final_value == Approx(0.5 + 0.3 * 2.0 / 7.0).epsilon(1e-12));
  CHECK(m.effort_peak == Approx(0.3 * 2.0 / 7.0).epsilon(2e-9));  // row 1: y itself, monotone to its final value
  CHECK(m.iae == Approx(0.3 * 2.0 / 7.0 / 7.0).epsilon(1e-8));    // ∫|y − y∞| = |y∞|/7 for a single pole at −7
}
