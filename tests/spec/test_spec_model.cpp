// The spec's two halves: read_spec (reading and range checks only) and model_spec (the nonlinear
// plant's compilation, equilibrium and linearization, then the checks that need them), and that
// parse_spec is the two in a row. The tank is an invented example, checked against its closed
// form: dh/dt = (a·u − k·√h)/A has its equilibrium at h0 = (a·u0/k)² and the linearization
// G(s) = (a/A) / (s + k/(2·A·√h0)).
#include <catch2/catch.hpp>

#include <string>

#include "specloop/sim/expression_plant.hpp"
#include "specloop/spec/spec.hpp"

using specloop::model_spec;
using specloop::parse_spec;
using specloop::read_spec;
using specloop::SpecError;

namespace {

// a = 0.05, k = 0.02, A = 0.8, u0 = 0.4: h0 = 1, G(s) = 0.0625 / (s + 0.0125).
const std::string kTank =
    "title = \"Tank\"\n"                                       // line 1
    "[plant.nonlinear]\n"                                      // 2
    "states = [\"level\"]\n"                                   // 3
    "derivatives = [\"(0.05*u - 0.02*sqrt(level))/0.8\"]\n"    // 4
    "output = \"level\"\n"                                     // 5
    "[plant.nonlinear.operating_point]\n"                      // 6
    "level = 0.5\n"                                            // 7
    "u = 0.4\n";                                               // 8

std::string error_of(const auto& call) {
  try {
    call();
  } catch (const SpecError& error) {
    return error.what();
  }
  return "no error";
}

}  // namespace

TEST_CASE("read_spec reads a nonlinear plant without modelling it; model_spec models it", "[spec][model]") {
  const specloop::SpecAsRead read = read_spec(kTank, "tank.toml");
  REQUIRE(read.spec.plant.nonlinear);
  CHECK(read.spec.plant.nonlinear->model == nullptr);
  CHECK(read.spec.plant.nonlinear->states == std::vector<std::string>{"level"});
  CHECK(read.spec.plant.numerator.empty());
  CHECK(read.spec.plant.denominator.empty());
  CHECK(read.spec.plant.nonlinear->equilibrium.empty());

  const specloop::Spec spec = model_spec(read);
  const auto& nl = *spec.plant.nonlinear;
  REQUIRE(nl.model != nullptr);
  CHECK(nl.model->states() == 1);
  REQUIRE(nl.equilibrium.size() == 1);
  CHECK(nl.equilibrium[0] == Approx(1.0).epsilon(1e-9));
  CHECK(nl.input == 0.4);
  CHECK(nl.state_guess == std::vector<double>{0.5});
  // G(s) = 0.0625 / (s + 0.0125), normalized however transfer_function_of leaves it.
  REQUIRE(spec.plant.denominator.size() == 2);
  REQUIRE(spec.plant.numerator.size() == 1);
  CHECK(spec.plant.denominator[1] / spec.plant.denominator[0] == Approx(0.0125).epsilon(1e-7));
  CHECK(spec.plant.numerator[0] / spec.plant.denominator[0] == Approx(0.0625).epsilon(1e-7));
  REQUIRE(spec.plant.poles.size() == 1);
  CHECK(spec.plant.poles[0].real() == Approx(-0.0125).epsilon(1e-7));

  // parse_spec is the two halves in a row.
  const specloop::Spec parsed = parse_spec(kTank, "tank.toml");
  CHECK(parsed.plant.numerator == spec.plant.numerator);
  CHECK(parsed.plant.denominator == spec.plant.denominator);
  CHECK(parsed.plant.nonlinear->equilibrium == nl.equilibrium);
  CHECK(parsed.plant.nonlinear->a == nl.a);
}

TEST_CASE("model_spec models each copy of a read spec alike (the read spec is not changed)", "[spec][model]") {
  const specloop::SpecAsRead read = read_spec(kTank, "tank.toml");
  const specloop::Spec first = model_spec(read);
  const specloop::Spec second = model_spec(read);
  CHECK(first.plant.numerator == second.plant.numerator);
  CHECK(first.plant.nonlinear->model != second.plant.nonlinear->model);  // each spec its own model
  CHECK(read.spec.plant.nonlinear->model == nullptr);
}

TEST_CASE("read_spec checks a linear plant completely", "[spec][model]") {
  const std::string conveyor = "[plant]\npoles = [-1.0, -4.0]\ngain = 2.0\n[controller]\nsample_time = 0.01\n";
  const specloop::SpecAsRead read = read_spec(conveyor, "conveyor.toml");
  CHECK(read.spec.plant.denominator == std::vector<double>{1.0, 5.0, 4.0});
  CHECK(model_spec(read).plant.denominator == read.spec.plant.denominator);
  // A sample period below 1e-4 of the fastest time constant (1/4 s) is refused while reading.
  CHECK_THAT(error_of([] { (void)read_spec("[plant]\npoles = [-1.0, -4.0]\n[controller]\nsample_time = 1e-6\n", "c.toml"); }),
             Catch::Contains("c.toml:4:1: controller.sample_time: expected a sample period in s >= 2.5e-05"));
}

TEST_CASE("the checks that need the linearization wait for model_spec, with the reader's lines", "[spec][model]") {
  // No equilibrium: f = 1 + u² > 0 everywhere.
  std::string text = kTank;
  text.replace(text.find("(0.05*u - 0.02*sqrt(level))/0.8"), 31, "1 + u*u");
  specloop::SpecAsRead read = read_spec(text, "tank.toml");
  read.spec.path = "renamed by the caller";  // messages keep naming the file read_spec was given
  const std::string modelled = error_of([&] { (void)model_spec(read); });
  CHECK_THAT(modelled, Catch::StartsWith("tank.toml:6:1: plant.nonlinear.operating_point: no equilibrium found"));
  CHECK(error_of([&] { (void)parse_spec(text, "tank.toml"); }) == modelled);

  // A sample period checked against the linearization's pole (0.0125 rad/s: at least 8 ms).
  const std::string sampled = kTank + "[controller]\nsample_time = 1e-3\n";
  CHECK(error_of([&] { (void)read_spec(sampled, "tank.toml"); }) == "no error");
  const std::string refused = error_of([&] { (void)parse_spec(sampled, "tank.toml"); });
  CHECK_THAT(refused, Catch::StartsWith("tank.toml:10:1: controller.sample_time: expected a sample period in s >= 0.008"));
  CHECK(error_of([&] { (void)model_spec(read_spec(sampled, "tank.toml")); }) == refused);

  // The operating point's u against absolute actuator limits.
  const std::string limited = kTank + "[actuator]\nmin = 0.5\nmax = 1.0\n";
  CHECK(error_of([&] { (void)read_spec(limited, "tank.toml"); }) == "no error");
  CHECK_THAT(error_of([&] { (void)parse_spec(limited, "tank.toml"); }),
             Catch::StartsWith("tank.toml:8:1: plant.nonlinear.operating_point.u: 0.4 lies outside the actuator limits "
                               "[0.5, 1]"));
}
