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
    std::vector<double> a, b;
    for (const auto& [lo, hi] : problem.bounds) {
      a.push_back(std::sqrt(lo * hi));  // the bounds' geometric middle, and a point beside it
      b.push_back(std::sqrt(lo * hi) * 1.1);
    }
    evaluator.evaluate(problem, a.data());  // size the workspace for both grids (the storage
    evaluator.evaluate(problem, b.data());  // grows to the longest grid seen, then stays)
    testing::allocations = 0;
    testing::counting = true;
    const CandidateOutcome first = evaluator.evaluate(problem, b.data());
    const CandidateOutcome second = evaluator.evaluate(problem, a.data());
    testing::counting = false;
    INFO(structure << ": outcomes " << first.objective << ", " << second.objective);
    CHECK(testing::allocations.load() == 0);
  }
}
