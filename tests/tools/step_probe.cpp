// step_probe: a test-only window onto the library's closed-loop step simulation.
//
// Reads one JSON object from stdin:
//   {"plant":      {"numerator": [...], "denominator": [...]},   coefficients, highest power first
//    "controller": {"numerator": [...], "denominator": [...]},   optional, default: gain 1
//    "amplitude":  1.0,                                           optional, step size (!= 0)
//    "band_pct":   2.0}                                           optional, settling band in % (0, 50)
// closes the unity-negative-feedback loop u = C·(r − y), y = P·u, simulates the step with
// StepSimulator and prints one JSON object:
//   {"status": "...", "metrics": {...} | null, "poles": [[re, im], ...], "states": n,
//    "step": h₁, "fine_intervals": n₁, "coarse_step": h₂, "coarse_intervals": n₂,
//    "horizon": T, "samples": n₁ + n₂ + 1, "time": [...], "output": [...], "effort": [...]}
// The time grid has two uniform segments (README, "Time grid"): t = k·h₁ for k = 0..n₁, then
// steps of h₂ up to T (n₂ = 0: a single segment). Grid fields and traces are null/empty unless
// the status is "ok".
// Exit codes: 0 printed a result (whatever the status), 2 malformed input (message on stderr).
#include <cmath>
#include <iostream>
#include <stdexcept>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "specloop/output/json_io.hpp"
#include "probe_io.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/sim/response.hpp"

namespace {

using nlohmann::json;
using namespace specloop;

using probe::InputError;

std::vector<double> coefficients(const json& owner, const std::string& where, const char* key) {
  const auto it = owner.find(key);
  if (it == owner.end()) throw InputError(where + "." + key + ": missing");
  if (!it->is_array() || it->empty()) throw InputError(where + "." + key + ": expected a non-empty array of numbers");
  std::vector<double> out;
  for (const json& v : *it) {
    if (!v.is_number()) throw InputError(where + "." + key + ": expected numbers, got " + v.dump());
    const double x = v.get<double>();
    if (!std::isfinite(x)) throw InputError(where + "." + key + ": non-finite coefficient");
    out.push_back(x);
  }
  return out;
}

TransferFunction transfer_function(const json& root, const std::string& key) {
  const json& section = root.at(key);
  if (!section.is_object()) throw InputError(key + ": expected an object with numerator and denominator");
  for (const auto& item : section.items())
    if (item.key() != "numerator" && item.key() != "denominator") throw InputError(key + "." + item.key() + ": unknown key");
  const Polynomial num(coefficients(section, key, "numerator"));
  const Polynomial den(coefficients(section, key, "denominator"));
  if (den.is_zero()) throw InputError(key + ".denominator: all zero");
  if (num.is_zero()) throw InputError(key + ".numerator: all zero");
  if (num.degree() > den.degree()) throw InputError(key + ": improper (numerator degree above denominator degree)");
  return TransferFunction(num, den);
}

double optional_number(const json& root, const char* key, double fallback) {
  const auto it = root.find(key);
  if (it == root.end()) return fallback;
  if (!it->is_number()) throw InputError(std::string(key) + ": expected a number, got " + it->dump());
  const double v = it->get<double>();
  if (!std::isfinite(v)) throw InputError(std::string(key) + ": non-finite");
  return v;
}

int run() {
  const json input = probe::read_stdin_json();
  if (!input.is_object()) throw InputError("expected one JSON object on stdin");
  for (const auto& item : input.items()) {
    const std::string& k = item.key();
    if (k != "plant" && k != "controller" && k != "amplitude" && k != "band_pct") throw InputError(k + ": unknown key");
  }
  if (!input.contains("plant")) throw InputError("plant: missing");
  const TransferFunction plant = transfer_function(input, "plant");
  const bool has_controller = input.contains("controller");
  const TransferFunction controller =
      has_controller ? transfer_function(input, "controller") : TransferFunction(Polynomial({1.0}), Polynomial({1.0}));
  const double amplitude = optional_number(input, "amplitude", 1.0);
  if (amplitude == 0.0) throw InputError("amplitude: must be nonzero");
  const double band_pct = optional_number(input, "band_pct", 2.0);
  if (!(band_pct > 0.0 && band_pct < 50.0)) throw InputError("band_pct: expected a number in (0, 50)");

  StateSpace loop;
  try {
    const StateSpace controller_ss = has_controller ? realize(controller) : static_gain(1.0);
    loop = close_loop(realize(plant), controller_ss);
  } catch (const std::domain_error& e) {
    throw InputError(std::string("loop: ") + e.what());
  }

  StepSimulator sim;
  StepMetrics metrics;
  StepTrace trace;
  const StepStatus status = sim.simulate(loop, amplitude, band_pct / 100.0, metrics, &trace);

  json out;
  out["status"] = std::string(status_name(status));
  out["poles"] = poles_json(sim.poles());
  out["states"] = loop.states();
  if (status == StepStatus::ok) {
    const TimeGrid& grid = sim.grid();
    out["metrics"] = metrics_json(metrics);
    out["step"] = grid.step_s;
    out["fine_intervals"] = grid.fine_intervals;
    out["coarse_step"] = grid.coarse_step_s;
    out["coarse_intervals"] = grid.coarse_intervals;
    out["horizon"] = grid.horizon_s();
    out["samples"] = grid.samples;
    out["time"] = trace.time_s;
    out["output"] = trace.output;
    out["effort"] = trace.effort;
  } else {
    out["metrics"] = nullptr;
    for (const char* key : {"step", "fine_intervals", "coarse_step", "coarse_intervals", "horizon"}) out[key] = nullptr;
    out["samples"] = 0;
    out["time"] = json::array();
    out["output"] = json::array();
    out["effort"] = json::array();
  }
  std::cout << out.dump() << "\n";
  return 0;
}

}  // namespace

int main() { return probe::run_main("step_probe", run); }
