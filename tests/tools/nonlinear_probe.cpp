// nonlinear_probe: a test-only window onto simulate_nonlinear (saturation, rate limit,
// anti-windup).
//
// Reads one JSON object from stdin:
//   {"plant":      {"numerator": [...], "denominator": [...]},       highest power first
//                  or {"nonlinear": {"states": [...], "derivatives": [...], "output": "...",
//                                    "parameters": {...}, "operating_point": {<state>: guess, "u": u0}}}
//                  (an ExpressionPlant: the equilibrium is found from the guess with u = u0, the
//                  loop runs in deviation variables around it; actuator limits, amplitude and all
//                  printed traces are then deviations too),
//    "controller": {"structure": "pi", "series": [...], "derivative_filter": 10,
//                   "notch": {"frequency": 30, "depth": 0.1, "width": 0.3},        optional
//                   "measurement_filter": {"order": 1, "time_constant": 0.01}},    optional
//    "actuator":   {"min": -1, "max": 1, "rate_max": 0.5},             all optional
//    "options":    {"anti_windup": "conditional-integration", "setpoint_weight": 1, "derivative_weight": 1,
//                   "tracking_time_s": 1, "disturbance_time_s": 0, "disturbance_size": 0,
//                   "horizon_s": 10, "output_step_s": 0.01, "sample_times_s": [...],
//                   "max_steps": 1000000, "relative_tolerance": 1e-8, "absolute_tolerance": 1e-10,
//                   "delay_s": 0, "sample_time_s": 0, "noise_rms": 0, "noise_period_s": 0,
//                   "noise_seed": 1, "stepper": "dopri5" | "rosenbrock4"},
//    "amplitude":  1.0, "band_pct": 2.0}
// and prints {"status", "notes", "steps", "switches", "saturated_fraction", "rate_limited_fraction",
// "command_excess_max", "integrator_held_fraction", "measured", "stepper", "noise", "time", "output", "control", "command", "plant_input",
// "metrics", "difference_equation", "operating_point"}
// (operating_point: {"states": [...], "u", "y"} for a nonlinear plant, else null; metrics null unless
// the status is "ok"; difference_equation null for a continuous controller, else
// {"sample_time_s", "reference_numerator", "measurement_numerator", "denominator", "method"}).
// Exit codes: 0 printed a result (whatever the status), 2 malformed input (message on stderr).
#include <cmath>
#include <cstdint>
#include <iostream>
#include <memory>
#include <optional>
#include <stdexcept>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "specloop/sim/expression_plant.hpp"
#include "specloop/output/json_io.hpp"
#include "probe_io.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace {

using nlohmann::json;
using namespace specloop;

using probe::InputError;

void only_keys(const json& obj, const std::string& where, std::initializer_list<const char*> keys) {
  if (!obj.is_object()) throw InputError(where + ": expected an object");
  for (const auto& item : obj.items()) {
    bool known = false;
    for (const char* k : keys) known = known || item.key() == k;
    if (!known) throw InputError(where + "." + item.key() + ": unknown key");
  }
}

double number(const json& v, const std::string& where) {
  if (!v.is_number()) throw InputError(where + ": expected a number, got " + v.dump());
  const double x = v.get<double>();
  if (!std::isfinite(x)) throw InputError(where + ": non-finite");
  return x;
}

std::vector<double> numbers(const json& v, const std::string& where) {
  if (!v.is_array() || v.empty()) throw InputError(where + ": expected a non-empty array of numbers");
  std::vector<double> out;
  for (const json& e : v) out.push_back(number(e, where));
  return out;
}

int run() {
  const json in = probe::read_stdin_json();
  only_keys(in, "input", {"plant", "controller", "actuator", "options", "amplitude", "band_pct"});
  const json& p = in.at("plant");
  only_keys(p, "plant", {"numerator", "denominator", "nonlinear"});
  TransferFunction plant_tf;
  std::shared_ptr<ExpressionPlant> expression_plant;
  json operating_point = nullptr;
  if (p.contains("nonlinear")) {
    const json& nl = p["nonlinear"];
    only_keys(nl, "plant.nonlinear", {"states", "derivatives", "output", "parameters", "operating_point"});
    ExpressionDefinition def;
    def.states = nl.at("states").get<std::vector<std::string>>();
    def.derivatives = nl.at("derivatives").get<std::vector<std::string>>();
    def.output = nl.at("output").get<std::string>();
    if (nl.contains("parameters"))
      for (const auto& item : nl["parameters"].items())
        def.parameters.emplace_back(item.key(), number(item.value(), "plant.nonlinear.parameters." + item.key()));
    try {
      expression_plant = std::make_shared<ExpressionPlant>(def);
    } catch (const ExpressionError& e) {
      throw InputError(std::string("plant.nonlinear: ") + e.what());
    }
    const json& op = nl.at("operating_point");
    std::vector<double> guess;
    for (const auto& name : def.states) guess.push_back(number(op.at(name), "plant.nonlinear.operating_point." + name));
    const double u0 = number(op.at("u"), "plant.nonlinear.operating_point.u");
    const Equilibrium eq = expression_plant->find_equilibrium(guess, u0);
    expression_plant->set_operating_point(eq.states, u0);
    plant_tf = transfer_function_of(expression_plant->jacobians_at(eq.states, u0).model);
    operating_point = {{"states", eq.states}, {"u", u0}, {"y", eq.output}};
  } else {
    plant_tf = TransferFunction(Polynomial(numbers(p.at("numerator"), "plant.numerator")),
                                Polynomial(numbers(p.at("denominator"), "plant.denominator")));
  }
  const json& c = in.at("controller");
  only_keys(c, "controller", {"structure", "series", "derivative_filter", "notch", "measurement_filter"});
  const auto structure = parse_structure(c.at("structure").get<std::string>());
  if (!structure) throw InputError("controller.structure: unknown name");
  Controller controller =
      make_controller(*structure, numbers(c.at("series"), "controller.series"),
                      c.contains("derivative_filter") ? number(c["derivative_filter"], "controller.derivative_filter") : 10.0);
  std::optional<NotchFilter> notch;
  std::optional<MeasurementFilter> measurement;
  if (c.contains("notch")) {
    const json& n = c["notch"];
    only_keys(n, "controller.notch", {"frequency", "depth", "width"});
    notch = NotchFilter{number(n.at("frequency"), "controller.notch.frequency"), number(n.at("depth"), "controller.notch.depth"),
                        number(n.at("width"), "controller.notch.width")};
  }
  if (c.contains("measurement_filter")) {
    const json& f = c["measurement_filter"];
    only_keys(f, "controller.measurement_filter", {"order", "time_constant"});
    measurement = MeasurementFilter{f.at("order").get<int>(),
                                    number(f.at("time_constant"), "controller.measurement_filter.time_constant")};
  }
  if (notch || measurement) {
    try {
      controller = with_filters(std::move(controller), notch, measurement);
    } catch (const std::invalid_argument& e) {
      throw InputError(std::string("controller: ") + e.what());
    }
  }

  ActuatorModel act;
  if (in.contains("actuator")) {
    const json& a = in["actuator"];
    only_keys(a, "actuator", {"min", "max", "rate_max"});
    if (a.contains("min")) act.min = number(a["min"], "actuator.min");
    if (a.contains("max")) act.max = number(a["max"], "actuator.max");
    if (a.contains("rate_max")) act.rate_max = number(a["rate_max"], "actuator.rate_max");
  }
  LoopOptions opt;
  if (in.contains("options")) {
    const json& o = in["options"];
    only_keys(o, "options", {"anti_windup", "setpoint_weight", "derivative_weight", "tracking_time_s",
                             "disturbance_time_s", "disturbance_size", "horizon_s", "output_step_s", "sample_times_s",
                             "max_steps", "relative_tolerance", "absolute_tolerance", "delay_s", "sample_time_s",
                             "noise_rms", "noise_period_s", "noise_seed", "stepper"});
    if (o.contains("anti_windup")) {
      const auto aw = parse_anti_windup(o["anti_windup"].get<std::string>());
      if (!aw) throw InputError("options.anti_windup: expected none, conditional-integration or back-calculation");
      opt.anti_windup = *aw;
    }
    auto set = [&](const char* key, double& field) {
      if (o.contains(key)) field = number(o[key], std::string("options.") + key);
    };
    set("setpoint_weight", opt.setpoint_weight);
    set("derivative_weight", opt.derivative_weight);
    set("disturbance_time_s", opt.disturbance_time_s);
    set("disturbance_size", opt.disturbance_size);
    set("horizon_s", opt.horizon_s);
    set("output_step_s", opt.output_step_s);
    set("relative_tolerance", opt.relative_tolerance);
    set("absolute_tolerance", opt.absolute_tolerance);
    set("delay_s", opt.delay_s);
    set("sample_time_s", opt.sample_time_s);
    if (o.contains("tracking_time_s")) opt.tracking_time_s = number(o["tracking_time_s"], "options.tracking_time_s");
    if (o.contains("sample_times_s")) opt.sample_times_s = numbers(o["sample_times_s"], "options.sample_times_s");
    if (o.contains("max_steps")) opt.max_steps = o["max_steps"].get<int>();
    set("noise_rms", opt.noise_rms);
    set("noise_period_s", opt.noise_period_s);
    if (o.contains("noise_seed")) opt.noise_seed = o["noise_seed"].get<std::uint64_t>();
    if (o.contains("stepper")) {
      const std::string name = o["stepper"].get<std::string>();
      if (name != "dopri5" && name != "rosenbrock4") throw InputError("options.stepper: expected dopri5 or rosenbrock4");
      opt.stepper = name == "dopri5" ? NonlinearStepper::dopri5 : NonlinearStepper::rosenbrock4;
    }
  }
  opt.plant_model = expression_plant;
  const double amplitude = in.contains("amplitude") ? number(in["amplitude"], "amplitude") : 1.0;
  const double band_pct = in.contains("band_pct") ? number(in["band_pct"], "band_pct") : 2.0;

  const NonlinearResult r = simulate_nonlinear(realize(plant_tf), controller, act, opt, amplitude, band_pct / 100.0);
  json out;
  out["status"] = std::string(status_name(r.status));
  out["notes"] = r.notes;
  out["steps"] = r.steps;
  out["switches"] = r.switches;
  out["saturated_fraction"] = r.saturated_fraction;
  out["rate_limited_fraction"] = r.rate_limited_fraction;
  out["command_excess_max"] = r.command_excess_max;
  out["integrator_held_fraction"] = r.integrator_held_fraction;
  out["measured"] = r.measured;
  out["stepper"] = std::string(stepper_name(r.stepper));
  // The noise values the loop used, one per noise period over [0, horizon] (the sequence is a
  // prefix of any longer one with the same seed), when both are given explicitly.
  out["noise"] = json::array();
  if (opt.noise_rms > 0.0 && opt.noise_period_s > 0.0 && opt.horizon_s > 0.0)
    out["noise"] = gaussian_sequence(opt.noise_rms, opt.noise_seed,
                                     static_cast<std::size_t>(std::floor(opt.horizon_s / opt.noise_period_s)) + 1);
  out["time"] = r.time_s;
  out["output"] = r.output;
  out["control"] = r.control;
  out["command"] = r.command;
  out["plant_input"] = r.plant_input;
  if (r.difference_equation) {
    const DifferenceEquation& d = *r.difference_equation;
    out["difference_equation"] = {{"sample_time_s", d.sample_time_s}, {"reference_numerator", d.reference_numerator},
                                  {"measurement_numerator", d.measurement_numerator}, {"denominator", d.denominator},
                                  {"method", d.method}};
  } else {
    out["difference_equation"] = nullptr;
  }
  out["operating_point"] = operating_point;
  out["metrics"] = r.status == NonlinearStatus::ok ? metrics_json(r.metrics) : json(nullptr);
  std::cout << out.dump() << "\n";
  return 0;
}

}  // namespace

int main() { return probe::run_main("nonlinear_probe", run); }
