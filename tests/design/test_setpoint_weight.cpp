// The set-point weight b as a search variable (search.tune_setpoint_weight), and the second-order
// diagnosis of a pair damped so close to ζ = 1 that its predicted overshoot underflows (a class of
// loop the search reaches once b is free: found as a NaN in result.json).
#include <catch2/catch.hpp>

#include <cmath>
#include <string>

#include "specloop/design/design.hpp"

using namespace specloop;

namespace {

// An invented annealing-zone heater (two lags); the PI's proportional kick is what the effort
// objective pays for, so a searched b below 1 lowers it.
std::string heater_spec(bool tuned) {
  return std::string("title = \"zone heater\"\n[plant]\npoles = [-0.025, -0.125]\ngain = 0.05\n"
                     "[controller]\nstructure = \"pi\"\n"
                     "[requirements]\novershoot_max_pct = 5.0\nsettling_time_max = 40.0\nsensitivity_peak_max = 1.6\n"
                     "[reference]\namplitude = 10.0\n[search]\nobjective = \"effort\"\n") +
         (tuned ? "tune_setpoint_weight = true\n" : "");
}

}  // namespace

TEST_CASE("a searched set-point weight is one more search parameter, and the design runs with it", "[setpoint_weight]") {
  const DesignRun fixed = run_design(parse_spec(heater_spec(false), "fixed.toml"));
  const DesignRun tuned = run_design(parse_spec(heater_spec(true), "tuned.toml"));
  REQUIRE(fixed.met);
  REQUIRE(tuned.met);
  REQUIRE(tuned.problem.parameters.size() == fixed.problem.parameters.size() + 1);
  CHECK(tuned.problem.parameters.back().name == kSetpointWeightParameter);
  const Design* a = fixed.find(DesignRole::optimized);
  const Design* b = tuned.find(DesignRole::optimized);
  REQUIRE(a);
  REQUIRE(b);
  CHECK_FALSE(a->controller.setpoint_weight);
  REQUIRE(b->controller.setpoint_weight);
  const double w = *b->controller.setpoint_weight;
  CHECK(w >= 0.01);
  CHECK(w < 1.0);  // the kick is what the objective pays for
  // The fixed-b design lies inside the tuned search space: the tuned optimum is no worse (the
  // search's relative tolerance aside).
  const auto effort = [](const Design& d) { return d.simulated.command_peak.value_or(d.simulated.effort_peak); };
  CHECK(effort(*b) <= effort(*a) * (1.0 + 1e-3));
  // The reference path is C_r = Kp·b + Ki/s (Åström & Hägglund's set-point weighting): at t = 0⁺
  // the command jumps by Kp·b·r, read off C_r's high-frequency gain.
  const ParallelGains& g = *b->controller.parallel;
  const TransferFunction& cr = b->reference_path;
  REQUIRE(cr.numerator.degree() == cr.denominator.degree());
  CHECK(cr.numerator.leading() / cr.denominator.leading() == Approx(g.kp * w).epsilon(1e-12));
  // The hand designs keep the spec's b (1).
  for (const Design& d : tuned.designs)
    if (d.role != DesignRole::optimized) CHECK_FALSE(d.controller.setpoint_weight);
}

TEST_CASE("tune_setpoint_weight is refused where b cannot act or is fixed", "[setpoint_weight][spec]") {
  const std::string plant = "[plant]\npoles = [-1.0]\ngain = 1.0\n[requirements]\novershoot_max_pct = 5.0\n";
  const auto refused = [&](const std::string& text, const std::string& what) {
    INFO(text);
    try {
      (void)parse_spec(text, "w.toml");
      FAIL("accepted");
    } catch (const SpecError& e) {
      CHECK_THAT(std::string(e.what()), Catch::Contains(what));
    }
  };
  refused(plant + "[controller]\nstructure = \"lead\"\n[search]\ntune_setpoint_weight = true\n", "integral action");
  refused(plant + "[controller]\nstructure = \"pi\"\nsetpoint_weight = 0.5\n[search]\ntune_setpoint_weight = true\n",
          "give one of them");
  refused(plant + "[controller]\nstructure = \"pi\"\n[search]\ntune_setpoint_weight = 1\n", "true or false");
  refused(plant + "[controller]\nstructure = \"pi\"\n[search]\ntune_setpoint_weight = true\n"
                  "[search.bounds]\nsetpoint_weight = [0.1, 1.5]\n",
          "<= 1");
  refused(plant + "[controller]\nstructure = \"pi\"\n[search.bounds]\nsetpoint_weight = [0.1, 0.9]\n", "no parameter");
  // Accepted: its own bounds within (0, 1].
  const Spec ok = parse_spec(plant + "[controller]\nstructure = \"pid\"\n[search]\ntune_setpoint_weight = true\n"
                                     "[search.bounds]\nsetpoint_weight = [0.2, 0.9]\n",
                             "w.toml");
  CHECK(ok.search.tune_setpoint_weight);
}

TEST_CASE("a pair damped to within rounding of ζ = 1 gets a finite overshoot error", "[dominance]") {
  // K/(s(s + 2)) under P gain K = 1 + 1e-12: T(s) = K/(s² + 2s + K), the pair −1 ± j1e-6 with
  // ζ = 1/√K, whose predicted overshoot exp(−πζ/√(1 − ζ²)) ≈ exp(−π·1e6) underflows to 0; the
  // simulated one is 0 too.
  const double k = 1.0 + 1e-12;
  const TransferFunction plant(Polynomial(std::vector<double>{1.0}), Polynomial(std::vector<double>{1.0, 2.0, 0.0}));
  const TransferFunction t(Polynomial(std::vector<double>{k}), Polynomial(std::vector<double>{1.0, 2.0, k}));
  const Complex pair(-1.0, std::sqrt(k - 1.0));
  const SecondOrderPrediction pred = predict_second_order(pair, 0.02);
  StepMetrics sim;
  StepSimulator stepper;
  REQUIRE(stepper.simulate(close_loop(realize(plant), static_gain(k)), 1.0, 0.02, sim) == StepStatus::ok);
  const DominanceDiagnosis d = diagnose_dominance(t, pair, pred, sim);
  CHECK(std::isfinite(d.overshoot_error_pct));
  CHECK(std::abs(d.overshoot_error_pct) <= 10.0);  // both "no overshoot": they agree
}
