// The controller's filters (controller.notch, controller.measurement_filter; README "Filters"): the
// evaluator's two-input loop u = N·K·(r − F·y) is the loop close_loop(plant, C·F·N, C_r·N) builds
// from the transfer functions (its allocation-free hot path: test_hot_path.cpp); a searched notch
// lands near the demo carriage's belt resonance.
#include <catch2/catch.hpp>
#include <cmath>
#include <string>

#include "specloop/design/design.hpp"

using namespace specloop;

namespace {
const std::string kCarriage = "[plant]\npoles = [0.0, -2.0, [-0.6, 30.0]]\ngain = 900.0\n";
}  // namespace

TEST_CASE("the evaluator's filtered loop is the one measure_design builds", "[evaluate][filters]") {
  // Same candidate: the evaluator's metrics (fixed-storage cascade [F | K | N]) against the design
  // measurement (observable form of C·F·N and C_r·N), to the simulator's rounding.
  const Spec spec = parse_spec(kCarriage +
                                   "[controller]\nstructure = \"pid\"\nnotch = { frequency = 29.0, depth = 0.05, width = 0.4 }\n"
                                   "measurement_filter = { order = 1, time_constant = 0.004 }\n"
                                   "[requirements]\novershoot_max_pct = 5.0\n[search]\nmargin_pct = 0\n",
                               "specs/unit.toml");
  const Problem problem = make_problem(spec, characterize(spec));
  const SearchOptions options = search_options(spec);
  CandidateEvaluator evaluator(problem, options);
  const std::vector<double> x{12.0, 0.5, 1.5};  // Kp, ω0, ζc: a stable PID on this plant
  const CandidateOutcome out = evaluator.evaluate(problem, x.data());
  REQUIRE(out.stable);
  const Design d = measure_design(problem, DesignRole::optimized, controller_from(problem, x));
  REQUIRE(d.status == StepStatus::ok);
  CHECK(evaluator.metrics().overshoot_pct == Approx(d.simulated.overshoot_pct).epsilon(1e-7).margin(1e-9));
  CHECK(evaluator.metrics().settling_time_s.value_or(0.0) == Approx(d.simulated.settling_time_s.value_or(0.0)).epsilon(1e-6));
  REQUIRE(d.controller.notch);
  CHECK(d.controller.transfer.denominator.degree() == 2 + 2 + 1);  // PID, notch, first-order filter
}

TEST_CASE("a searched notch lands near the carriage's belt resonance", "[design][filters]") {
  const Spec spec = parse_spec(kCarriage +
                                   "[controller]\nstructure = \"pid\"\nnotch = \"search\"\n"
                                   "[requirements]\novershoot_max_pct = 5.0\nsettling_time_max = 1.0\n"
                                   "gain_margin_min_db = 6.0\nphase_margin_min_deg = 40.0\n"
                                   // the evaluation budget, not the 20 s wall-time cap, ends the
                                   // search, also in the 30× slower sanitizer build
                                   "[search]\nmax_time = 3600\n",
                               "specs/unit.toml");
  const DesignRun run = run_design(spec);
  const Design* best = nullptr;
  for (const Design& d : run.designs)
    if (d.role == DesignRole::optimized) best = &d;
  REQUIRE(best != nullptr);
  REQUIRE(best->controller.notch);
  CHECK(best->controller.notch_searched);
  // The resonance's natural frequency √(0.6² + 30²) ≈ 30.006 rad/s; the notch within ±20 %.
  const double wn = std::hypot(0.6, 30.0);
  INFO("notch at " << best->controller.notch->frequency << " rad/s");
  std::string checks;
  for (const RequirementCheck& c : best->checks)
    checks += c.requirement.key + " = " + (c.value ? std::to_string(*c.value) : "none") + (c.met ? " met; " : " MISSED; ");
  INFO(checks);
  CHECK(std::abs(best->controller.notch->frequency / wn - 1.0) < 0.2);
  CHECK(best->meets_all);
}
