// The spec-key table (spec_keys) against the reader: every listed key is accepted with a valid
// value and read (a value of the wrong type is refused naming that key), and a key or section
// that is not listed is refused as unknown. Also the [units] section. Invented examples only.
#include <catch2/catch.hpp>

#include <cmath>
#include <map>
#include <set>
#include <string>

#include <fmt/format.h>

#include "specloop/spec/requirement_catalogue.hpp"
#include "specloop/spec/spec.hpp"

using specloop::parse_spec;
using specloop::SpecError;
using specloop::spec_keys;

namespace {

std::string error_of(const std::string& text) {
  try {
    parse_spec(text, "keys.toml");
  } catch (const SpecError& error) {
    return error.what();
  }
  return "no error";
}

std::string replaced(std::string text, const std::string& value) {
  const auto at = text.find('@');
  REQUIRE(at != std::string::npos);
  return text.replace(at, 1, value);
}

const std::string kPlant = "[plant]\npoles = [-1.0, -4.0]\n";
const std::string kUncertain = "[uncertainty]\n\"plant.poles[1]\" = [-5.0, -3.0]\n";
const std::string kNonlinearHead =
    "[plant.nonlinear]\nstates = [\"level\"]\nderivatives = [\"(u - k*level)/area\"]\noutput = \"level\"\n";

/// A value inside a requirement's range: the middle of a finite range, else one beyond its end.
std::string inside_range(const specloop::RequirementRange& range) {
  if (!std::isinf(range.low) && !std::isinf(range.high)) return fmt::format("{}", (range.low + range.high) / 2.0);
  return fmt::format("{}", std::isinf(range.high) ? range.low + 1.0 : range.high - 1.0);
}

// For each key of the table: a spec with '@' where that key's value goes, and a valid value.
// A key added to the table without an entry here fails the first test below. The
// [requirements] keys come from the requirement catalogue, each with a value inside its range.
const std::map<std::string, std::pair<std::string, std::string>>& examples() {
  static const std::map<std::string, std::pair<std::string, std::string>> m = [] {
    std::map<std::string, std::pair<std::string, std::string>> rows{
      {"title", {"title = @\n" + kPlant, "\"Belt\""}},
      {"plant.zeros", {"[plant]\npoles = [-1.0, -4.0]\nzeros = @\n", "[-2.0]"}},
      {"plant.poles", {"[plant]\npoles = @\n", "[-1.0, [-2.0, 1.0]]"}},
      {"plant.gain", {"[plant]\npoles = [-1.0]\ngain = @\n", "3.5"}},
      {"plant.numerator", {"[plant]\nnumerator = @\ndenominator = [1.0, 3.0]\n", "[2.0]"}},
      {"plant.denominator", {"[plant]\nnumerator = [2.0]\ndenominator = @\n", "[1.0, 3.0]"}},
      {"plant.delay", {"[plant]\npoles = [-1.0]\ndelay = @\n", "0.1"}},
      {"plant.nonlinear.states",
       {"[plant.nonlinear]\nstates = @\nderivatives = [\"(u - k*level)/area\"]\noutput = \"level\"\n"
        "parameters = { k = 0.5, area = 2.0 }\noperating_point = { level = 1.0, u = 0.5 }\n",
        "[\"level\"]"}},
      {"plant.nonlinear.derivatives",
       {"[plant.nonlinear]\nstates = [\"level\"]\nderivatives = @\noutput = \"level\"\n"
        "parameters = { k = 0.5, area = 2.0 }\noperating_point = { level = 1.0, u = 0.5 }\n",
        "[\"(u - k*level)/area\"]"}},
      {"plant.nonlinear.output",
       {"[plant.nonlinear]\nstates = [\"level\"]\nderivatives = [\"(u - k*level)/area\"]\noutput = @\n"
        "parameters = { k = 0.5, area = 2.0 }\noperating_point = { level = 1.0, u = 0.5 }\n",
        "\"level\""}},
      {"plant.nonlinear.parameters.<name>",
       {kNonlinearHead + "parameters = { k = @, area = 2.0 }\noperating_point = { level = 1.0, u = 0.5 }\n", "0.5"}},
      {"plant.nonlinear.operating_point.<state>",
       {kNonlinearHead + "parameters = { k = 0.5, area = 2.0 }\noperating_point = { level = @, u = 0.5 }\n", "1.0"}},
      {"plant.nonlinear.operating_point.u",
       {kNonlinearHead + "parameters = { k = 0.5, area = 2.0 }\noperating_point = { level = 1.0, u = @ }\n", "0.5"}},
      {"actuator.min", {kPlant + "[actuator]\nmin = @\nmax = 5.0\n", "-5.0"}},
      {"actuator.max", {kPlant + "[actuator]\nmin = -5.0\nmax = @\n", "5.0"}},
      {"actuator.rate_max", {kPlant + "[actuator]\nrate_max = @\n", "20.0"}},
      {"controller.structure", {kPlant + "[controller]\nstructure = @\n", "\"pi\""}},
      {"controller.derivative_filter", {kPlant + "[controller]\nderivative_filter = @\n", "8.0"}},
      {"controller.anti_windup", {kPlant + "[controller]\nanti_windup = @\n", "\"back-calculation\""}},
      {"controller.tracking_time", {kPlant + "[controller]\nanti_windup = \"back-calculation\"\ntracking_time = @\n", "0.5"}},
      {"controller.sample_time", {kPlant + "[controller]\nsample_time = @\n", "0.01"}},
      {"controller.setpoint_weight", {kPlant + "[controller]\nsetpoint_weight = @\n", "0.5"}},
      {"controller.derivative_on", {kPlant + "[controller]\nderivative_on = @\n", "\"measurement\""}},
      {"controller.notch", {kPlant + "[controller]\nnotch = @\n", "{ frequency = 3.0, depth = 0.1, width = 0.3 }"}},
      {"controller.notch.frequency", {kPlant + "[controller.notch]\nfrequency = @\ndepth = 0.1\nwidth = 0.3\n", "3.0"}},
      {"controller.notch.depth", {kPlant + "[controller.notch]\nfrequency = 3.0\ndepth = @\nwidth = 0.3\n", "0.1"}},
      {"controller.notch.width", {kPlant + "[controller.notch]\nfrequency = 3.0\ndepth = 0.1\nwidth = @\n", "0.3"}},
      {"controller.measurement_filter", {kPlant + "[controller]\nmeasurement_filter = @\n", "\"search\""}},
      {"controller.measurement_filter.order",
       {kPlant + "[controller.measurement_filter]\norder = @\ntime_constant = 0.01\n", "2"}},
      {"controller.measurement_filter.time_constant",
       {kPlant + "[controller.measurement_filter]\norder = 1\ntime_constant = @\n", "0.01"}},
      {"reference.amplitude", {kPlant + "[reference]\namplitude = @\n", "2.0"}},
      {"search.objective", {kPlant + "[search]\nobjective = @\n", "\"iae\""}},
      {"search.seed", {kPlant + "[search]\nseed = @\n", "7"}},
      {"search.max_evaluations", {kPlant + "[search]\nmax_evaluations = @\n", "500"}},
      {"search.max_time", {kPlant + "[search]\nmax_time = @\n", "5.0"}},
      {"search.simulate", {kPlant + "[search]\nsimulate = @\n", "\"nonlinear\""}},
      {"search.margin_pct", {kPlant + "[search]\nmargin_pct = @\n", "3.0"}},
      {"search.bounds.<parameter>", {kPlant + "[search.bounds]\ngain = @\n", "[0.1, 10.0]"}},
      {"search.tune_setpoint_weight", {kPlant + "[controller]\nstructure = \"pi\"\n[search]\ntune_setpoint_weight = @\n", "true"}},
      {"search.objective_at", {kPlant + "[search]\nobjective_at = @\n" + kUncertain, "\"worst\""}},
      {"uncertainty.<plant key>", {kPlant + "[uncertainty]\n\"plant.poles[0]\" = @\n", "[-1.5, -0.5]"}},
      {"uncertainty.samples", {kPlant + kUncertain + "samples = @\n", "32"}},
      {"uncertainty.seed", {kPlant + kUncertain + "seed = @\n", "5"}},
      {"uncertainty.mode", {kPlant + kUncertain + "mode = @\n", "\"yield\""}},
      {"uncertainty.yield_min_pct", {kPlant + kUncertain + "mode = \"yield\"\nyield_min_pct = @\n", "90.0"}},
      {"uncertainty.verify_samples", {kPlant + kUncertain + "verify_samples = @\n", "200"}},
      {"uncertainty.scale", {kPlant + kUncertain + "scale = @\n", "0.5"}},
      {"uncertainty.max_corners", {kPlant + kUncertain + "max_corners = @\n", "16"}},
      {"disturbance.time", {kPlant + "[disturbance]\ntime = @\nsize = 1.0\n", "3.0"}},
      {"disturbance.size", {kPlant + "[disturbance]\nsize = @\n", "1.0"}},
      {"disturbance.noise_rms", {kPlant + "[disturbance]\nnoise_rms = @\n", "0.01"}},
      {"disturbance.noise_period", {kPlant + "[disturbance]\nnoise_rms = 0.01\nnoise_period = @\n", "0.05"}},
      {"disturbance.seed", {kPlant + "[disturbance]\nnoise_rms = 0.01\nseed = @\n", "12"}},
      {"sweep.vary", {kPlant + "[sweep]\nvary = @\n", "[\"plant.poles[0]=-1:-2:3\"]"}},
      {"units.output", {kPlant + "[units]\noutput = @\n", "\"m/s\""}},
      {"units.input", {kPlant + "[units]\ninput = @\n", "\"V\""}},
      {"units.time", {kPlant + "[units]\ntime = @\n", "\"min\""}},
      {"rules.simc_tau_c", {kPlant + "[rules]\nsimc_tau_c = @\n", "0.5"}},
    };
    for (const specloop::RequirementEntry& entry : specloop::requirement_catalogue())
      rows[fmt::format("requirements.{}", entry.key)] = {fmt::format("{}[requirements]\n{} = @\n", kPlant, entry.key),
                                                         inside_range(entry.range)};
    return rows;
  }();
  return m;
}

// The dotted key an error names for a row (a free name stands for the one the example uses).
std::string named_key(const std::string& key) {
  if (key == "plant.nonlinear.parameters.<name>") return "plant.nonlinear.parameters.k";
  if (key == "plant.nonlinear.operating_point.<state>") return "plant.nonlinear.operating_point.level";
  if (key == "search.bounds.<parameter>") return "search.bounds.gain";
  if (key == "uncertainty.<plant key>") return "uncertainty.\"plant.poles[0]\"";
  return key;
}

}  // namespace

TEST_CASE("spec keys: the table and the examples name the same keys, each once", "[spec][keys]") {
  std::set<std::string> listed;
  for (const auto& k : spec_keys()) {
    CHECK(listed.insert(std::string(k.key)).second);
    CHECK(!k.unit.empty());
    CHECK(!k.default_value.empty());
    CHECK(!k.meaning.empty());
  }
  std::set<std::string> with_example;
  for (const auto& [key, example] : examples()) with_example.insert(key);
  CHECK(listed == with_example);
}

TEST_CASE("spec keys: every listed key is accepted with a valid value", "[spec][keys]") {
  for (const auto& [key, example] : examples()) {
    INFO(key);
    CHECK(error_of(replaced(example.first, example.second)) == "no error");
  }
}

TEST_CASE("spec keys: every listed key is read (a boolean is refused, naming the key)", "[spec][keys]") {
  // Every key but the one boolean (search.tune_setpoint_weight, given a number instead) refuses a
  // boolean, so a reader that looks at the key must refuse it.
  for (const auto& [key, example] : examples()) {
    INFO(key);
    const bool boolean_key = key == "search.tune_setpoint_weight";
    const std::string error = error_of(replaced(example.first, boolean_key ? "1" : "true"));
    CHECK(error.find("keys.toml:") == 0);
    CHECK(error.find(named_key(key) + ":") != std::string::npos);
  }
}

TEST_CASE("spec keys: a key or section not in the table is refused as unknown", "[spec][keys]") {
  for (const auto& [key, example] : examples()) {
    const auto dot = key.rfind('.');
    if (dot == std::string::npos || key.find('<') != std::string::npos) continue;
    // The same spec with the key spelt with a trailing "_x": not listed, so unknown.
    const std::string name = key.substr(dot + 1);
    std::string text = replaced(example.first, example.second);
    const auto at = text.find("\n" + name + " = ");
    const auto inline_at = text.find(" " + name + " = ");
    if (at != std::string::npos) text.insert(at + 1 + name.size(), "_x");
    else if (inline_at != std::string::npos) text.insert(inline_at + 1 + name.size(), "_x");
    else continue;
    INFO(key << "\n" << text);
    const std::string error = error_of(text);
    // "unknown key" (an operating point names its one valid set: "not a state or u").
    CHECK((error.find(key + "_x: unknown key") != std::string::npos ||
           error.find(key + "_x: not a state or u") != std::string::npos));
  }
  CHECK(error_of(kPlant + "[unit]\noutput = \"m\"\n").find("unit: unknown section; did you mean 'units'?") != std::string::npos);
  CHECK(error_of(kPlant + "[labels]\noutput = \"m\"\n").find("labels: unknown section; valid top-level names: title, plant, "
                                                            "actuator, controller, requirements, reference, search, "
                                                            "disturbance, sweep, uncertainty, rules, units") != std::string::npos);
}

TEST_CASE("units: names are read, defaults kept, bad names refused", "[spec][keys]") {
  const auto plain = parse_spec(kPlant, "keys.toml");
  CHECK(plain.units.output == "output units");
  CHECK(plain.units.input == "input units");
  CHECK(plain.units.time == "s");
  const auto named = parse_spec(kPlant + "[units]\noutput = \"m³/s\"\ninput = \"V\"\n", "keys.toml");
  CHECK(named.units.output == "m³/s");
  CHECK(named.units.input == "V");
  CHECK(named.units.time == "s");
  CHECK(error_of(kPlant + "[units]\noutput = \"\"\n") ==
        "keys.toml:4:1: units.output: expected a unit name such as \"m/s\": a non-empty string of at most 24 characters "
        "without control characters, got an empty name");
  CHECK(error_of(kPlant + "[units]\ntime = \"s\\n\"\n").find("units.time: expected a unit name") != std::string::npos);
  // 24 characters (code points, not bytes) are allowed, 25 are not.
  CHECK(error_of(kPlant + "[units]\noutput = \"m³/s m³/s m³/s m³/s m³/s\"\n") == "no error");
  CHECK(error_of(kPlant + "[units]\noutput = \"m³/s m³/s m³/s m³/s m³/s²\"\n").find("(25 characters)") != std::string::npos);
  CHECK(error_of(kPlant + "[units]\noutptu = \"m\"\n") == "keys.toml:4:1: units.outptu: unknown key; did you mean 'output'?");
}
