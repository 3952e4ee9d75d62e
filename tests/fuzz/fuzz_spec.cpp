// libFuzzer harness: the spec reader. Any bytes go to parse_spec as TOML text; the only allowed
// outcomes are a Spec that keeps every documented invariant (checked below: finite numbers in
// range, a proper plant whose two forms agree in size, a consistent nonlinear linearization) or a
// SpecError whose message names the file. Anything else (crash, sanitizer report, another
// exception, a broken invariant) is a bug.
#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdio>
#include <cstdint>
#include <string>
#include <string_view>

#include <fmt/format.h>
#include <toml++/toml.h>

#include "fuzz_common.hpp"
#include "specloop/core/compensator.hpp"
#include "specloop/sim/expression_plant.hpp"
#include "specloop/spec/spec.hpp"
#include "specloop/sweep/sweep.hpp"

namespace {

using specloop_fuzz::finite;
constexpr std::string_view kHarness = "fuzz_spec";
const std::string kPath = "fuzz.toml";

#define CHECK(condition, ...) SPECLOOP_FUZZ_CHECK(kHarness, condition, __VA_ARGS__)

void require_optional(const std::optional<double>& v, bool in_range, const char* key) {
  if (v) CHECK(finite(*v) && in_range, "{} = {} out of its documented range", key, *v);
}

void check_polynomial(const std::vector<double>& p, const char* name) {
  CHECK(!p.empty(), "plant.{} is empty", name);
  CHECK(p.front() != 0.0, "plant.{} has a zero leading coefficient", name);
  for (double c : p) CHECK(finite(c), "plant.{} has a non-finite coefficient {}", name, c);
}

// The load-time ranges (spec.hpp, kMinRate …): every nonzero pole and zero magnitude of an
// accepted plant lies in [kMinRate, kMaxRate] (1e-9 relative slack: the roots are recomputed
// from the expanded polynomial), so no number near the ends of the double range gets through.
void check_roots(const std::vector<std::complex<double>>& roots, std::size_t degree, const char* name) {
  CHECK(roots.size() == degree, "plant.{}: {} roots for a polynomial of degree {}", name, roots.size(), degree);
  for (const auto& r : roots) {
    CHECK(finite(r.real()) && finite(r.imag()), "plant.{} has a non-finite root ({}, {})", name, r.real(), r.imag());
    const double m = std::abs(r);
    CHECK(m == 0.0 || (m >= specloop::kMinRate * (1 - 1e-9) && m <= specloop::kMaxRate * (1 + 1e-9)),
          "plant.{} has a root of magnitude {} outside [kMinRate, kMaxRate]", name, m);
  }
}

void check_plant(const specloop::PlantSpec& plant) {
  check_polynomial(plant.numerator, "numerator");
  check_polynomial(plant.denominator, "denominator");
  CHECK(plant.numerator.size() <= plant.denominator.size(),
        "improper plant accepted: numerator degree {} > denominator degree {}", plant.numerator.size() - 1,
        plant.denominator.size() - 1);
  check_roots(plant.zeros, plant.numerator.size() - 1, "zeros");
  check_roots(plant.poles, plant.denominator.size() - 1, "poles");
  CHECK(finite(plant.gain) && plant.gain != 0.0, "plant.gain = {}", plant.gain);
  CHECK(finite(plant.delay_s) && plant.delay_s >= 0.0, "plant.delay = {}", plant.delay_s);
  if (!plant.nonlinear) return;
  const auto& nl = *plant.nonlinear;
  const std::size_t n = nl.states.size();
  CHECK(n > 0 && nl.derivatives.size() == n && nl.state_guess.size() == n && nl.equilibrium.size() == n,
        "nonlinear plant: sizes of states, derivatives, guess and equilibrium differ");
  CHECK(nl.a.size() == n && nl.b.size() == n && nl.c.size() == n, "nonlinear plant: Jacobian sizes differ");
  CHECK(finite(nl.input) && finite(nl.output_value) && finite(nl.residual) && finite(nl.d),
        "nonlinear plant: non-finite u0, y0, residual or D");
  for (std::size_t i = 0; i < n; ++i) {
    CHECK(finite(nl.equilibrium[i]) && finite(nl.b[i]) && finite(nl.c[i]),
          "nonlinear plant: non-finite equilibrium or Jacobian entry");
    CHECK(nl.a[i].size() == n, "nonlinear plant: A is not square");
    for (double v : nl.a[i]) CHECK(finite(v), "nonlinear plant: non-finite entry of A");
  }
  CHECK(nl.model != nullptr && nl.model->states() == static_cast<int>(n), "nonlinear plant: no compiled model");
  // The linearization is of order n at most.
  CHECK(plant.denominator.size() <= n + 1, "nonlinear plant: denominator degree above the state count");
}

void check_spec(const specloop::Spec& spec, std::string_view text) {
  CHECK(spec.path == kPath && spec.source_text == text, "path or source text not kept");
  check_plant(spec.plant);

  const auto& a = spec.actuator;
  if (a.limited) {
    CHECK(finite(a.min) && finite(a.max) && a.min < a.max, "actuator limits [{}, {}] not an interval", a.min, a.max);
    if (!spec.plant.nonlinear)
      CHECK(a.min <= 0.0 && a.max >= 0.0, "actuator range excludes u = 0 for a linear plant");
    else
      CHECK(spec.plant.nonlinear->input >= a.min && spec.plant.nonlinear->input <= a.max,
              "operating-point u outside the actuator range");
  } else {
    CHECK(a.min == -1e300 && a.max == 1e300, "unlimited actuator with limits set");
  }
  if (a.rate_max) CHECK(finite(*a.rate_max) && *a.rate_max > 0.0, "actuator.rate_max not > 0");

  const auto& c = spec.controller;
  CHECK(specloop::parse_structure(specloop::structure_name(c.structure)).has_value(), "structure not a name");
  CHECK(finite(c.derivative_filter) && c.derivative_filter > 0.0, "controller.derivative_filter not > 0");
  CHECK(finite(c.sample_time_s) && c.sample_time_s >= 0.0, "controller.sample_time negative");
  CHECK(finite(c.setpoint_weight) && c.setpoint_weight >= 0.0 && c.setpoint_weight <= 1.0,
          "controller.setpoint_weight outside [0, 1]");
  if (c.tracking_time_s) CHECK(finite(*c.tracking_time_s) && *c.tracking_time_s > 0.0, "tracking_time not > 0");

  const auto& r = spec.requirements;
  require_optional(r.overshoot_max_pct, r.overshoot_max_pct > 0.0 && r.overshoot_max_pct < 100.0, "overshoot_max_pct");
  require_optional(r.peak_time_ratio, r.peak_time_ratio > 0.0 && r.peak_time_ratio <= 10.0, "peak_time_ratio");
  require_optional(r.peak_time_max_s, r.peak_time_max_s > 0.0, "peak_time_max");
  require_optional(r.settling_time_max_s, r.settling_time_max_s > 0.0, "settling_time_max");
  require_optional(r.rise_time_max_s, r.rise_time_max_s > 0.0, "rise_time_max");
  CHECK(finite(r.settling_band_pct) && r.settling_band_pct > 0.0 && r.settling_band_pct < 50.0,
          "settling_band_pct outside (0, 50)");
  require_optional(r.steady_state_error_max, r.steady_state_error_max >= 0.0, "steady_state_error_max");
  require_optional(r.effort_max, r.effort_max > 0.0, "effort_max");
  require_optional(r.undershoot_max_pct, r.undershoot_max_pct >= 0.0 && r.undershoot_max_pct < 100.0,
                   "undershoot_max_pct");
  require_optional(r.phase_margin_min_deg, r.phase_margin_min_deg > 0.0 && r.phase_margin_min_deg < 90.0,
                   "phase_margin_min_deg");
  require_optional(r.gain_margin_min_db, r.gain_margin_min_db > 0.0 && r.gain_margin_min_db < 60.0,
                   "gain_margin_min_db");
  require_optional(r.sensitivity_peak_max, r.sensitivity_peak_max > 1.0, "sensitivity_peak_max");
  require_optional(r.load_iae_max, r.load_iae_max > 0.0, "load_iae_max");
  require_optional(r.load_peak_max, r.load_peak_max > 0.0, "load_peak_max");
  require_optional(r.load_recovery_time_max_s, r.load_recovery_time_max_s > 0.0, "load_recovery_time_max");
  require_optional(r.noise_gain_max, r.noise_gain_max > 0.0, "noise_gain_max");
  require_optional(r.complementary_peak_max, r.complementary_peak_max > 1.0, "complementary_peak_max");
  CHECK(!(r.load_iae_max || r.load_recovery_time_max_s || spec.search.objective == specloop::Objective::load_iae) ||
            specloop::has_integrator(spec.controller.structure),
        "a load IAE or recovery requirement without integral action");

  CHECK(finite(spec.reference.amplitude) && spec.reference.amplitude != 0.0, "reference.amplitude");

  const auto& s = spec.search;
  CHECK(s.max_evaluations >= 20 && s.max_evaluations <= 100000000, "search.max_evaluations out of range");
  CHECK(finite(s.max_time_s) && s.max_time_s > 0.0 && s.max_time_s <= 86400.0, "search.max_time out of range");
  std::vector<std::string> names;
  for (const auto& info : specloop::structure_parameters(c.structure)) names.emplace_back(info.name);
  // The set-point weight is a search parameter only when searched, only with integral action, and
  // then not also fixed by controller.setpoint_weight; its bound stays within (0, 1].
  if (s.tune_setpoint_weight) {
    CHECK(specloop::has_integrator(c.structure), "search.tune_setpoint_weight on a structure without integral action");
    CHECK(c.setpoint_weight == 1.0, "search.tune_setpoint_weight with controller.setpoint_weight = {}", c.setpoint_weight);
    names.emplace_back(specloop::kSetpointWeightParameter);
    for (const auto& [name, range] : s.bounds)
      if (name == specloop::kSetpointWeightParameter) CHECK(range.second <= 1.0, "search.bounds.setpoint_weight above 1");
  }
  if (spec.rules.simc_tau_c_s) CHECK(finite(*spec.rules.simc_tau_c_s) && *spec.rules.simc_tau_c_s > 0.0, "rules.simc_tau_c not > 0");
  for (const auto& [name, range] : s.bounds) {
    CHECK(std::find(names.begin(), names.end(), name) != names.end(),
          "search.bounds.{} is not a parameter of the structure", name);
    CHECK(finite(range.first) && finite(range.second) && range.first > 0.0 && range.second > range.first,
          "search.bounds.{} = [{}, {}] not 0 < low < high", name, range.first, range.second);
  }

  const auto& d = spec.disturbance;
  CHECK(finite(d.time_s) && d.time_s >= 0.0, "disturbance.time");
  CHECK(finite(d.size), "disturbance.size");
  CHECK(finite(d.noise_rms) && d.noise_rms >= 0.0, "disturbance.noise_rms");
  CHECK(finite(d.noise_period_s) && d.noise_period_s >= 0.0, "disturbance.noise_period");

  for (const auto& axis : spec.sweep_vary) {
    try {
      (void)specloop::parse_sweep_axis(axis);
    } catch (const specloop::SweepError& e) {
      specloop_fuzz::fail(kHarness, fmt::format("accepted [sweep] vary entry does not parse: {}", e.what()));
    }
  }
}

// Plants of hundreds of poles are skipped: the roots come from an O(n³) eigenvalue solve, and
// under ASan with Eigen's assertions a denominator of 434 coefficients took over 40 s (0.8 s in
// the release build), which is not a hang but stalls the fuzzer. A limit on the plant order belongs to
// the load-time ranges (issue 12 §1). Every array of the schema is far shorter than 64 entries.
bool has_long_array(const toml::node& node) {
  if (const auto* table = node.as_table()) {
    for (const auto& [key, value] : *table)
      if (has_long_array(value)) return true;
  } else if (const auto* array = node.as_array()) {
    if (array->size() > 64) return true;
    for (const auto& element : *array)
      if (has_long_array(element)) return true;
  }
  return false;
}

bool has_long_array(std::string_view text) {
  try {
    return has_long_array(toml::parse(text));
  } catch (const toml::parse_error&) {
    return false;  // parse_spec reports it
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  if (has_long_array(text)) return 0;
  try {
    const specloop::Spec spec = specloop::parse_spec(text, kPath);
    check_spec(spec, text);
  } catch (const specloop::SpecError& e) {
    // The documented refusal: the message starts with the file name.
    const std::string_view message = e.what();
    if (message.rfind(kPath + ":", 0) != 0)
      specloop_fuzz::fail(kHarness, fmt::format("SpecError without the file name: {}", message));
  } catch (const std::exception& e) {
    specloop_fuzz::fail_exception(kHarness, e);
  }
  return 0;
}
