// result.json must rebuild the loop alone: every spec key that changes a number is written under
// "spec" (the spec as normalized), and "plant" is the plant as specified. The list of keys is
// README.md's spec key table, read here, so that a key added to the reader and the README without
// a JSON field fails this test. Plants are invented (a conveyor, a heater, a buffer tank).
#include <catch2/catch.hpp>
#include <fstream>
#include <map>
#include <regex>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "specloop/design/design.hpp"
#include "specloop/output/json_io.hpp"
#include "specloop/spec/spec.hpp"

using namespace specloop;
using nlohmann::json;

namespace {

// A spec as sections of "key = value" lines, in order; "" is the top level.
using Sections = std::vector<std::pair<std::string, std::vector<std::pair<std::string, std::string>>>>;

Sections zeros_poles_base() {
  return {{"", {{"title", "\"Key coverage\""}}},
          {"plant", {{"zeros", "[-9.0]"}, {"poles", "[-1.2, [-4.0, 3.0], -40.0]"}, {"gain", "160.0"}}},
          {"actuator", {{"min", "-24.0"}, {"max", "24.0"}}},
          {"controller", {{"structure", "\"pid\""}}},
          {"requirements", {{"overshoot_max_pct", "12.0"}}},
          {"reference", {{"amplitude", "1.0"}}}};
}

Sections polynomial_base() {
  return {{"plant", {{"numerator", "[2.5]"}, {"denominator", "[450.0, 243.0, 34.0, 1.0]"}}},
          {"controller", {{"structure", "\"pi\""}}},
          {"requirements", {{"overshoot_max_pct", "8.0"}}}};
}

Sections expression_base() {
  return {{"plant.nonlinear",
           {{"states", "[\"level\", \"flow\"]"},
            {"derivatives", "[\"(flow - orifice*sqrt(level))/area\", \"(pump_flow*u - flow)/spin_up\"]"},
            {"output", "\"level\""},
            {"parameters", "{ area = 0.25, orifice = 0.006, pump_flow = 0.012, spin_up = 6.0 }"}}},
          {"plant.nonlinear.operating_point", {{"level", "0.8"}, {"flow", "0.005"}, {"u", "0.5"}}},
          {"actuator", {{"min", "0.0"}, {"max", "1.0"}}},
          {"controller", {{"structure", "\"pi\""}}},
          {"requirements", {{"overshoot_max_pct", "10.0"}}},
          {"reference", {{"amplitude", "0.25"}}}};
}

// Sets key = value in a section (replacing the key, or adding the key or the section).
void set(Sections& spec, const std::string& section, const std::string& key, const std::string& value) {
  for (auto& [name, lines] : spec) {
    if (name != section) continue;
    for (auto& line : lines)
      if (line.first == key) {
        line.second = value;
        return;
      }
    lines.emplace_back(key, value);
    return;
  }
  spec.push_back({section, {{key, value}}});
}

std::string text_of(const Sections& spec) {
  std::ostringstream out;
  for (const auto& [name, lines] : spec) {
    if (!name.empty()) out << "[" << name << "]\n";
    for (const auto& [key, value] : lines) out << key << " = " << value << "\n";
  }
  return out.str();
}

// One spec key set to a value other than its default, and where spec_json must show it.
struct Mutation {
  std::string readme_key;  // as in README's key table
  int base;                // 0 zeros/poles, 1 numerator/denominator, 2 expression plant
  std::vector<std::tuple<std::string, std::string, std::string>> lines;  // section, key, value
  std::string pointer;     // JSON pointer into spec_json
};

const std::vector<Mutation>& mutations() {
  static const std::vector<Mutation> list = {
      {"title", 0, {{"", "title", "\"Other title\""}}, "/title"},
      {"plant.zeros", 0, {{"plant", "zeros", "[-8.0]"}}, "/plant/zeros"},
      {"plant.poles", 0, {{"plant", "poles", "[-1.3, [-4.0, 3.0], -40.0]"}}, "/plant/poles"},
      {"plant.gain", 0, {{"plant", "gain", "150.0"}}, "/plant/gain"},
      {"plant.numerator", 1, {{"plant", "numerator", "[2.0]"}}, "/plant/numerator"},
      {"plant.denominator", 1, {{"plant", "denominator", "[450.0, 243.0, 35.0, 1.0]"}}, "/plant/denominator"},
      {"plant.nonlinear.states", 2,
       {{"plant.nonlinear", "states", "[\"flow\", \"level\"]"},
        {"plant.nonlinear", "derivatives", "[\"(pump_flow*u - flow)/spin_up\", \"(flow - orifice*sqrt(level))/area\"]"}},
       "/plant/nonlinear/states"},
      {"plant.nonlinear.derivatives", 2,
       {{"plant.nonlinear", "derivatives", "[\"(flow - orifice*sqrt(level))/area\", \"(pump_flow*u - flow)/(2*spin_up)\"]"}},
       "/plant/nonlinear/derivatives"},
      {"plant.nonlinear.output", 2, {{"plant.nonlinear", "output", "\"2*level\""}}, "/plant/nonlinear/output"},
      {"plant.nonlinear.parameters.<name>", 2,
       {{"plant.nonlinear", "parameters", "{ area = 0.3, orifice = 0.006, pump_flow = 0.012, spin_up = 6.0 }"}},
       "/plant/nonlinear/parameters/area"},
      {"plant.nonlinear.operating_point.<state>", 2, {{"plant.nonlinear.operating_point", "level", "0.9"}},
       "/plant/nonlinear/operating_point/level"},
      {"plant.nonlinear.operating_point.u", 2, {{"plant.nonlinear.operating_point", "u", "0.55"}},
       "/plant/nonlinear/operating_point/u"},
      {"plant.delay", 0, {{"plant", "delay", "0.1"}}, "/plant/delay"},
      {"actuator.min", 0, {{"actuator", "min", "-20.0"}}, "/actuator/min"},
      {"actuator.max", 0, {{"actuator", "max", "20.0"}}, "/actuator/max"},
      {"controller.structure", 0, {{"controller", "structure", "\"pi\""}}, "/controller/structure"},
      {"controller.derivative_filter", 0, {{"controller", "derivative_filter", "5.0"}}, "/controller/derivative_filter"},
      {"controller.setpoint_weight", 0, {{"controller", "setpoint_weight", "0.5"}}, "/controller/setpoint_weight"},
      {"controller.derivative_on", 0, {{"controller", "derivative_on", "\"measurement\""}}, "/controller/derivative_on"},
      {"controller.sample_time", 0, {{"controller", "sample_time", "0.01"}}, "/controller/sample_time"},
      {"controller.anti_windup", 0, {{"controller", "anti_windup", "\"back-calculation\""}}, "/controller/anti_windup"},
      {"controller.tracking_time", 0, {{"controller", "tracking_time", "0.3"}}, "/controller/tracking_time"},
      {"actuator.rate_max", 0, {{"actuator", "rate_max", "100.0"}}, "/actuator/rate_max"},
      {"disturbance.time", 0, {{"disturbance", "time", "2.0"}}, "/disturbance/time"},
      {"disturbance.size", 0, {{"disturbance", "size", "0.5"}}, "/disturbance/size"},
      {"disturbance.noise_rms", 0, {{"disturbance", "noise_rms", "0.01"}}, "/disturbance/noise_rms"},
      {"disturbance.noise_period", 0, {{"disturbance", "noise_period", "0.02"}}, "/disturbance/noise_period"},
      {"disturbance.seed", 0, {{"disturbance", "seed", "7"}}, "/disturbance/seed"},
      {"requirements.overshoot_max_pct", 0, {{"requirements", "overshoot_max_pct", "10.0"}}, "/requirements/overshoot_max_pct"},
      {"requirements.peak_time_ratio", 0, {{"requirements", "peak_time_ratio", "0.6"}}, "/requirements/peak_time_ratio"},
      {"requirements.peak_time_max", 0, {{"requirements", "peak_time_max", "1.0"}}, "/requirements/peak_time_max"},
      {"requirements.settling_time_max", 0, {{"requirements", "settling_time_max", "2.0"}}, "/requirements/settling_time_max"},
      {"requirements.rise_time_max", 0, {{"requirements", "rise_time_max", "0.5"}}, "/requirements/rise_time_max"},
      {"requirements.settling_band_pct", 0, {{"requirements", "settling_band_pct", "5.0"}}, "/requirements/settling_band_pct"},
      {"requirements.steady_state_error_max", 0, {{"requirements", "steady_state_error_max", "0.0"}},
       "/requirements/steady_state_error_max"},
      {"requirements.effort_max", 0, {{"requirements", "effort_max", "24.0"}}, "/requirements/effort_max"},
      {"requirements.undershoot_max_pct", 0, {{"requirements", "undershoot_max_pct", "5.0"}}, "/requirements/undershoot_max_pct"},
      {"requirements.phase_margin_min_deg", 0, {{"requirements", "phase_margin_min_deg", "45.0"}},
       "/requirements/phase_margin_min_deg"},
      {"requirements.gain_margin_min_db", 0, {{"requirements", "gain_margin_min_db", "6.0"}}, "/requirements/gain_margin_min_db"},
      {"requirements.sensitivity_peak_max", 0, {{"requirements", "sensitivity_peak_max", "1.6"}},
       "/requirements/sensitivity_peak_max"},
      {"requirements.load_iae_max", 0, {{"requirements", "load_iae_max", "2.5"}}, "/requirements/load_iae_max"},
      {"requirements.load_peak_max", 0, {{"requirements", "load_peak_max", "0.4"}}, "/requirements/load_peak_max"},
      {"requirements.load_recovery_time_max", 0, {{"requirements", "load_recovery_time_max", "8.0"}},
       "/requirements/load_recovery_time_max"},
      {"requirements.noise_gain_max", 0, {{"requirements", "noise_gain_max", "30.0"}}, "/requirements/noise_gain_max"},
      {"requirements.complementary_peak_max", 0, {{"requirements", "complementary_peak_max", "1.3"}},
       "/requirements/complementary_peak_max"},
      {"reference.amplitude", 0, {{"reference", "amplitude", "2.0"}}, "/reference/amplitude"},
      {"search.objective", 0, {{"search", "objective", "\"iae\""}}, "/search/objective"},
      {"search.seed", 0, {{"search", "seed", "3"}}, "/search/seed"},
      {"search.max_evaluations", 0, {{"search", "max_evaluations", "100"}}, "/search/max_evaluations"},
      {"search.max_time", 0, {{"search", "max_time", "5.0"}}, "/search/max_time"},
      {"search.simulate", 0, {{"search", "simulate", "\"nonlinear\""}}, "/search/simulate"},
      {"search.margin_pct", 0, {{"search", "margin_pct", "3.0"}}, "/search/margin_pct"},
      {"search.bounds.<parameter>", 0, {{"search.bounds", "gain", "[0.1, 10.0]"}}, "/search/bounds/gain"},
      {"sweep.vary", 0, {{"sweep", "vary", "[\"plant.gain=100:200:3\"]"}}, "/sweep/vary"},
      {"rules.simc_tau_c", 0, {{"rules", "simc_tau_c", "0.4"}}, "/rules/simc_tau_c"},
      {"units.output", 0, {{"units", "output", "\"m/s\""}}, "/units/output"},
      {"units.input", 0, {{"units", "input", "\"V\""}}, "/units/input"},
      {"units.time", 0, {{"units", "time", "\"min\""}}, "/units/time"},
      {"controller.notch", 0, {{"controller", "notch", "{ frequency = 3.0, depth = 0.1, width = 0.3 }"}},
       "/controller/notch/frequency"},
      {"controller.notch.frequency", 0, {{"controller", "notch", "{ frequency = 4.0, depth = 0.1, width = 0.3 }"}},
       "/controller/notch/frequency"},
      {"controller.notch.depth", 0, {{"controller", "notch", "{ frequency = 3.0, depth = 0.2, width = 0.3 }"}},
       "/controller/notch/depth"},
      {"controller.notch.width", 0, {{"controller", "notch", "{ frequency = 3.0, depth = 0.1, width = 0.5 }"}},
       "/controller/notch/width"},
      {"controller.measurement_filter", 0, {{"controller", "measurement_filter", "\"search\""}},
       "/controller/measurement_filter"},
      {"controller.measurement_filter.order", 0,
       {{"controller", "measurement_filter", "{ order = 2, time_constant = 0.01 }"}}, "/controller/measurement_filter/order"},
      {"controller.measurement_filter.time_constant", 0,
       {{"controller", "measurement_filter", "{ order = 1, time_constant = 0.02 }"}},
       "/controller/measurement_filter/time_constant"},
      {"search.tune_setpoint_weight", 0,
       {{"controller", "structure", "\"pi\""}, {"search", "tune_setpoint_weight", "true"}},
       "/search/tune_setpoint_weight"},
      {"search.objective_at", 0,
       {{"search", "objective_at", "\"worst\""}, {"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}},
       "/search/objective_at"},
      {"uncertainty.<plant key>", 0, {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}}, "/uncertainty/ranges/0/high"},
      {"uncertainty.samples", 0, {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "samples", "12"}},
       "/uncertainty/samples"},
      {"uncertainty.seed", 0, {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "seed", "12"}},
       "/uncertainty/seed"},
      {"uncertainty.mode", 0, {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "mode", "\"yield\""}},
       "/uncertainty/mode"},
      {"uncertainty.yield_min_pct", 0,
       {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "mode", "\"yield\""},
        {"uncertainty", "yield_min_pct", "90.0"}},
       "/uncertainty/yield_min_pct"},
      {"uncertainty.verify_samples", 0,
       {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "verify_samples", "300"}},
       "/uncertainty/verify_samples"},
      {"uncertainty.scale", 0, {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "scale", "0.5"}},
       "/uncertainty/scale"},
      {"uncertainty.max_corners", 0,
       {{"uncertainty", "\"plant.gain\"", "[120.0, 200.0]"}, {"uncertainty", "max_corners", "8"}},
       "/uncertainty/max_corners"},
  };
  return list;
}

Sections base_of(int which) {
  return which == 0 ? zeros_poles_base() : which == 1 ? polynomial_base() : expression_base();
}

// The keys of README.md's "Spec file reference" table (first column, each `key` in it).
std::set<std::string> readme_spec_keys() {
  std::ifstream in(std::string(SPECLOOP_SOURCE_DIR) + "/README.md");
  REQUIRE(in.good());
  std::set<std::string> keys;
  std::string line;
  bool in_section = false;
  const std::regex code("`([^`]+)`");
  while (std::getline(in, line)) {
    if (line.rfind("## ", 0) == 0) in_section = line == "## Spec file reference";
    if (!in_section || line.rfind("| `", 0) != 0) continue;
    const std::string first = line.substr(1, line.find('|', 1) - 1);
    for (auto it = std::sregex_iterator(first.begin(), first.end(), code); it != std::sregex_iterator(); ++it)
      keys.insert((*it)[1].str());
  }
  return keys;
}

}  // namespace

TEST_CASE("every spec key of the README is written to result.json's spec", "[json]") {
  const std::set<std::string> documented = readme_spec_keys();
  REQUIRE(documented.size() > 40);  // the table was found
  std::set<std::string> covered;
  for (const Mutation& m : mutations()) covered.insert(m.readme_key);
  for (const std::string& key : documented) {
    INFO("README key " << key << " has no entry in this test's mutation list");
    CHECK(covered.count(key) == 1);
  }
  for (const std::string& key : covered) {
    INFO("mutation " << key << " names no key of README's spec table");
    CHECK(documented.count(key) == 1);
  }
}

TEST_CASE("each spec key set to a non-default value changes spec_json", "[json]") {
  for (const Mutation& m : mutations()) {
    INFO("key " << m.readme_key << " at " << m.pointer);
    Sections base = base_of(m.base), changed = base_of(m.base);
    for (const auto& [section, key, value] : m.lines) set(changed, section, key, value);
    json before, after;
    REQUIRE_NOTHROW(before = spec_json(parse_spec(text_of(base), "specs/base.toml")));
    REQUIRE_NOTHROW(after = spec_json(parse_spec(text_of(changed), "specs/base.toml")));
    const json::json_pointer at(m.pointer);
    REQUIRE(after.contains(at));
    const json old = before.contains(at) ? before.at(at) : json(nullptr);
    CHECK(old != after.at(at));
  }
}

TEST_CASE("result.json: the plant as specified, the Padé approximant only in linear_model", "[json]") {
  // An invented heater G = 2/((8s + 1)(2s + 1)) with a 0.5 s transport delay; a short search.
  const Spec spec = parse_spec(
      "[plant]\nnumerator = [2.0]\ndenominator = [16.0, 10.0, 1.0]\ndelay = 0.5\n"
      "[actuator]\nmin = 0.0\nmax = 5.0\nrate_max = 20.0\n"
      "[controller]\nstructure = \"pi\"\nanti_windup = \"back-calculation\"\nsample_time = 0.05\n"
      "[requirements]\novershoot_max_pct = 10.0\n"
      "[disturbance]\nnoise_rms = 0.001\n"
      "[search]\nmax_evaluations = 40\n",
      "specs/heater.toml");
  const json out = result_json(run_design(spec));
  CHECK(out.at("plant").at("numerator") == json::array({2.0}));
  CHECK(out.at("plant").at("denominator") == json::array({16.0, 10.0, 1.0}));
  CHECK(out.at("plant").at("delay") == 0.5);
  // linear_model = G times the order-3 approximant: three more poles and zeros.
  CHECK(out.at("linear_model").at("delay_approximant_order") == 3);
  CHECK(out.at("linear_model").at("denominator").size() == 3 + 3);
  CHECK(out.at("linear_model").at("numerator").size() == 1 + 3);
  // What the nonlinear run used, for a rebuild: horizon, noise period (default rule: the sample
  // time), tracking time (default rule: Ti without derivative action).
  const json& nl = out.at("designs").at("optimized").at("nonlinear");
  CHECK(nl.at("horizon").get<double>() > 0.5);
  CHECK(nl.at("noise_period") == 0.05);
  const json& parallel = out.at("designs").at("optimized").at("controller").at("parallel");
  CHECK(nl.at("tracking_time").get<double>() ==
        Approx(parallel.at("kp").get<double>() / parallel.at("ki").get<double>()).epsilon(1e-12));
}
