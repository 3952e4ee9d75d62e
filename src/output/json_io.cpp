// JSON output of the characterization.
#include "specloop/output/json_io.hpp"
#include "specloop/output/robust_json.hpp"
#include "specloop/output/caution.hpp"
#include "specloop/output/design_json.hpp"
#include "specloop/spec/requirement_catalogue.hpp"

#include <algorithm>
#include <cmath>
#include <stdexcept>

namespace specloop {

using nlohmann::json;

json number_json(double v) {
  if (std::isnan(v)) throw std::logic_error("a NaN reached the JSON writer; the computation upstream must report a status instead");
  if (std::isinf(v)) return v > 0 ? "infinite" : "-infinite";
  return v;
}

json complex_json(Complex z) { return json::array({number_json(z.real()), number_json(z.imag())}); }

json poles_json(const std::vector<Complex>& poles) {
  json out = json::array();
  for (const Complex& p : poles) out.push_back(complex_json(p));
  return out;
}

namespace {
json optional_json(const std::optional<double>& v) { return v ? number_json(*v) : json(nullptr); }

// Gains are shown as the controller gain on the plant as given: action × the magnitude.
json gain_point_json(const GainPoint& p, double action) {
  return {{"gain", number_json(action * p.gain)},
          {"poles", poles_json(p.poles)},
          {"simulated", metrics_json(p.simulated)},
          {"error_constants",
           {{"position", number_json(p.constants.position)},
            {"velocity", number_json(p.constants.velocity)},
            {"acceleration", number_json(p.constants.acceleration)}}}};
}
}  // namespace

json stable_gain_set_json(const StableGainSet& set, double action) {
  json ranges = json::array();
  // Signed gains, in increasing order: for reverse action the range (low, high) of magnitudes is
  // (−high, −low), and the list runs from −∞ up to 0.
  std::vector<StableGainSet::Range> in_order = set.ranges;
  if (action < 0.0) std::reverse(in_order.begin(), in_order.end());
  for (const StableGainSet::Range& r : in_order) {
    const double a = r.low == 0.0 ? 0.0 : action * r.low, b = action * r.high;
    ranges.push_back({{"low", number_json(std::min(a, b))},
                      {"high", number_json(std::max(a, b))},
                      {"state", r.state == StableGainSet::State::stable     ? "stable"
                                : r.state == StableGainSet::State::undamped ? "undamped"
                                                                            : "unstable"}});
  }
  return {{"text", set.text(action)}, {"ranges", ranges}};
}

json metrics_json(const StepMetrics& m) {
  json out = {{"final_value", number_json(m.final_value)},
          {"overshoot_pct", number_json(m.overshoot_pct)},
          {"peak_time", optional_json(m.peak_time_s)},
          {"undershoot_pct", number_json(m.undershoot_pct)},
          {"settling_time", optional_json(m.settling_time_s)},
          {"rise_time", optional_json(m.rise_time_s)},
          {"band_entry_time", optional_json(m.band_entry_time_s)},
          {"post_peak_dip_pct", number_json(m.post_peak_dip_pct)},
          {"steady_state_error", number_json(m.steady_state_error)},
          {"effort_peak", number_json(m.effort_peak)},
          {"iae", number_json(m.iae)},
          {"ise", number_json(m.ise)},
          {"itae", number_json(m.itae)}};
  if (m.command_peak) out["command_peak"] = number_json(*m.command_peak);  // the nonlinear loop's
  if (m.load_peak) {  // only where the spec asks for the load response (README, "Regulators")
    out["load_peak"] = number_json(*m.load_peak);
    out["load_iae"] = optional_json(m.load_iae);
    out["load_recovery_time"] = optional_json(m.load_recovery_time_s);
  }
  return out;
}

json units_json(const UnitsSpec& u) { return {{"output", u.output}, {"input", u.input}, {"time", u.time}}; }

json dominance_json(const DominanceDiagnosis& d) {
  json modes = json::array();
  for (const auto& m : d.modes)
    modes.push_back({{"pole", complex_json(m.pole)}, {"share", optional_json(m.share)},
                     {"contribution", optional_json(m.contribution)}});
  return {{"verdict", d.verdict},
          {"holds", d.holds},
          {"reasons", d.reasons},
          {"modes", modes},
          {"contribution_sum", number_json(d.contribution_sum)},
          {"cancellation", d.cancellation ? json(*d.cancellation) : json(nullptr)},
          {"overshoot_error_pct", number_json(d.overshoot_error_pct)},
          {"peak_time_error_pct", optional_json(d.peak_time_error_pct)},
          {"settling_time_error_pct", optional_json(d.settling_time_error_pct)}};
}

json characterization_json(const Spec& spec, const Characterization& ch) {
  json out;
  out["spec"] = spec.path;
  out["title"] = spec.title;
  out["overshoot_max_pct"] = number_json(*spec.requirements.overshoot_max_pct);
  out["damping_ratio"] = number_json(ch.damping_ratio);
  out["settling_band_pct"] = number_json(ch.band_fraction * 100.0);
  json crossings = json::array();
  for (const auto& c : ch.crossings)
    crossings.push_back({{"gain", number_json(ch.action * c.gain)},
                         {"pair", complex_json(c.pair_pole)},
                         {"poles", poles_json(c.poles)},
                         {"stable", c.stable},
                         {"decay_ratio", number_json(c.decay_ratio)}});
  out["crossings"] = crossings;
  if (ch.dominant && ch.second_order) {
    json d = gain_point_json(*ch.dominant, ch.action);
    d["index"] = *ch.dominant_index;
    d["pair"] = complex_json(ch.crossings[*ch.dominant_index].pair_pole);
    d["why"] = ch.dominant_reason;
    d["second_order"] = {{"overshoot_pct", number_json(ch.second_order->overshoot_pct)},
                         {"peak_time", number_json(ch.second_order->peak_time_s)},
                         {"settling_time", number_json(ch.second_order->settling_time_s)},
                         {"damping_ratio", number_json(ch.second_order->damping_ratio)},
                         {"natural_frequency", number_json(ch.second_order->natural_frequency)}};
    out["dominant"] = d;
  } else {
    out["dominant"] = nullptr;
    out["dominant_note"] = ch.dominant_reason;
  }
  if (ch.reference) {
    out["reference"] = gain_point_json(*ch.reference, ch.action);
    if (!ch.reference_note.empty()) out["reference_note"] = ch.reference_note;  // e.g. a jump or a non-monotonic overshoot
  } else {
    out["reference"] = nullptr;
    out["reference_note"] = ch.reference_note;
  }
  if (ch.dominance) {
    out["dominance"] = dominance_json(*ch.dominance);
  } else {
    out["dominance"] = {{"verdict", "no dominant crossing: nothing to compare"}, {"holds", false},
                        {"reasons", json::array({ch.dominant_reason})}};
  }
  out["notes"] = ch.notes;
  out["linearization"] = linearization_json(spec);
  out["units"] = units_json(spec.units);
  out["action"] = action_name(ch.action);
  out["p_stability"] = stable_gain_set_json(ch.p_stability, ch.action);
  return out;
}

}  // namespace specloop

namespace specloop {

namespace {
json optional_number(const std::optional<double>& v) { return v ? number_json(*v) : json(nullptr); }
json numbers(const std::vector<double>& v) {
  json out = json::array();
  for (double x : v) out.push_back(number_json(x));
  return out;
}
}  // namespace

json linearization_json(const Spec& spec) {
  if (!spec.plant.nonlinear) return nullptr;
  const NonlinearPlantSpec& nl = *spec.plant.nonlinear;
  json states = json::object();
  for (std::size_t i = 0; i < nl.states.size(); ++i) states[nl.states[i]] = number_json(nl.equilibrium[i]);
  json a = json::array();
  for (const auto& row : nl.a) a.push_back(numbers(row));
  return {{"operating_point", {{"states", states}, {"u", number_json(nl.input)}, {"y", number_json(nl.output_value)}}},
          {"state_order", nl.states},
          {"jacobians", {{"A", a}, {"B", numbers(nl.b)}, {"C", numbers(nl.c)}, {"D", number_json(nl.d)}}},
          {"newton_iterations", nl.newton_iterations},
          {"equilibrium_residual", number_json(nl.residual)},
          {"note", "the design used this linearization of [plant.nonlinear] at the operating point (Jacobians by "
                   "central differences); every design was confirmed on the nonlinear model in deviation variables: "
                   "r, y and u are measured from the operating point, actuator limits are absolute"}};
}

json spec_json(const Spec& spec) {
  json plant = {{"zeros", poles_json(spec.plant.zeros)},
                {"poles", poles_json(spec.plant.poles)},
                {"gain", number_json(spec.plant.gain)},
                {"numerator", numbers(spec.plant.numerator)},
                {"denominator", numbers(spec.plant.denominator)},
                {"delay", number_json(spec.plant.delay_s)},
                {"given_as", spec.plant.nonlinear ? "nonlinear"
                                                  : spec.plant.given_as_zeros_poles ? "zeros_poles" : "numerator_denominator"}};
  if (spec.plant.nonlinear) {
    const NonlinearPlantSpec& nl = *spec.plant.nonlinear;
    json parameters = json::object();
    for (const auto& [name, value] : nl.parameters) parameters[name] = number_json(value);
    json guess = json::object();
    for (std::size_t i = 0; i < nl.states.size(); ++i) guess[nl.states[i]] = number_json(nl.state_guess[i]);
    guess["u"] = number_json(nl.input);
    plant["nonlinear"] = {{"states", nl.states},
                          {"derivatives", nl.derivatives},
                          {"output", nl.output},
                          {"parameters", parameters},
                          {"operating_point", guess}};
  }
  json actuator = spec.actuator.limited
                      ? json{{"min", number_json(spec.actuator.min)}, {"max", number_json(spec.actuator.max)}}
                      : json{{"min", nullptr}, {"max", nullptr}};
  actuator["rate_max"] = optional_number(spec.actuator.rate_max);
  const ControllerSpec& c = spec.controller;
  // Every key that changes a number is written, so that result.json rebuilds the loop alone;
  // null stands for "none" (rate_max, sample_time: continuous) or for the documented default rule
  // (tracking_time, noise_period: the value used is in each design's "nonlinear" block).
  json controller = {{"structure", structure_name(c.structure)},
                           {"derivative_filter", number_json(c.derivative_filter)},
                           {"setpoint_weight", number_json(c.setpoint_weight)},
                           {"derivative_on", c.derivative_on_measurement ? "measurement" : "error"},
                           {"sample_time", c.sample_time_s > 0.0 ? number_json(c.sample_time_s) : json(nullptr)},
                           {"anti_windup", anti_windup_name(c.anti_windup)},
                           {"tracking_time", optional_number(c.tracking_time_s)}};
  // The filters (README "Filters"), only when given: "search", or their values.
  if (c.notch_search) controller["notch"] = "search";
  else if (c.notch)
    controller["notch"] = {{"frequency", number_json(c.notch->frequency)}, {"depth", number_json(c.notch->depth)},
                           {"width", number_json(c.notch->width)}};
  if (c.measurement_filter_search) controller["measurement_filter"] = "search";
  else if (c.measurement_filter)
    controller["measurement_filter"] = {{"order", c.measurement_filter->order},
                                        {"time_constant", number_json(c.measurement_filter->time_constant)}};
  const DisturbanceSpec& dist = spec.disturbance;
  const json disturbance = {{"time", number_json(dist.time_s)},
                            {"size", number_json(dist.size)},
                            {"noise_rms", number_json(dist.noise_rms)},
                            {"noise_period", dist.noise_period_s > 0.0 ? number_json(dist.noise_period_s) : json(nullptr)},
                            {"seed", dist.noise_seed}};
  const Requirements& r = spec.requirements;
  json requirements = json::object();
  for (const RequirementEntry& entry : requirement_catalogue())
    requirements[std::string(entry.key)] =
        entry.is_limit() ? optional_number(r.*(entry.limit)) : number_json(r.*(entry.setting));
  json bounds = json::object();
  for (const auto& [name, range] : spec.search.bounds) bounds[name] = {range.first, range.second};
  json uncertainty = nullptr;
  if (const UncertaintySpec& u = spec.uncertainty; u.active()) {
    json ranges = json::array();
    for (const UncertainRange& range : u.ranges)
      ranges.push_back({{"key", range.key},
                        {"low", number_json(range.low)},
                        {"high", number_json(range.high)},
                        {"nominal", number_json(range.nominal)},
                        {"scaled_low", number_json(u.low_of(range))},
                        {"scaled_high", number_json(u.high_of(range))}});
    uncertainty = {{"ranges", ranges},
                   {"samples", u.samples},
                   {"seed", u.seed},
                   {"mode", robust_mode_name(u.mode)},
                   {"yield_min_pct", u.mode == RobustMode::yield ? number_json(u.yield_min_pct) : json(nullptr)},
                   {"verify_samples", u.verify_samples},
                   {"scale", number_json(u.scale)},
                   {"max_corners", u.max_corners}};
  }
  return {{"path", spec.path},
          {"name", spec.name},
          {"title", spec.title},
          {"plant", plant},
          {"actuator", actuator},
          {"controller", controller},
          {"requirements", requirements},
          {"reference", {{"amplitude", number_json(spec.reference.amplitude)}}},
          {"disturbance", disturbance},
          {"search",
           {{"objective", objective_name(spec.search.objective)},
            {"seed", spec.search.seed},
            {"max_evaluations", spec.search.max_evaluations},
            {"max_time", number_json(spec.search.max_time_s)},
            {"simulate", simulate_mode_name(spec.search.simulate)},
            {"margin_pct", number_json(spec.search.margin_pct)},
            {"objective_at", objective_at_name(spec.search.objective_at)},
            {"tune_setpoint_weight", spec.search.tune_setpoint_weight},
            {"bounds", bounds}}},
          {"sweep", {{"vary", spec.sweep_vary}}},
          {"uncertainty", uncertainty},
          {"rules", {{"simc_tau_c", optional_number(spec.rules.simc_tau_c_s)}}},
          {"units", units_json(spec.units)}};
}

json rule_json(const RuleOutcome& r) {
  json model = nullptr;
  if (r.model) {
    const ReducedModel& m = *r.model;
    model = {{"order", m.order},
             {"integrating", m.integrating},
             {"gain", number_json(m.gain)},
             {"lag", m.integrating ? json(nullptr) : number_json(m.lag_s)},
             {"second_lag", m.order == 2 ? number_json(m.second_lag_s) : json(nullptr)},
             {"delay", number_json(m.delay_s)},
             {"exact", m.exact},
             {"text", model_text(m)},
             {"derivation", m.steps}};
  }
  return {{"applied", r.applied()},
          {"reason", r.applied() ? json(nullptr) : json(r.reason)},
          {"model", model},
          {"tau_c", optional_number(r.tau_c_s)},
          {"tau_c_source", r.tau_c_s ? json(r.tau_c_source) : json(nullptr)},
          {"settings", r.formula.empty() ? json(nullptr) : json(r.formula)}};
}

json search_json(const SearchSummary& s) {
  return {{"algorithms_given", {{"global", s.global_given}, {"local", s.local_given}}},
          {"algorithms_used", {{"global", s.global_algorithm}, {"local", s.local_algorithm}}},
          {"evaluations", s.evaluations},
          {"global_evaluations", s.global_evaluations},
          {"local_evaluations", s.local_evaluations},
          {"nonlinear_evaluations", s.nonlinear_evaluations},
          {"nonlinear_stage", s.nonlinear_stage},
          {"simulate", s.simulate},
          {"linear_loop", s.linear_loop},
          {"active_effects", s.active_effects},
          {"unstable_candidates", s.unstable},
          {"infeasible_candidates", s.infeasible},
          {"wall_time_s", number_json(s.wall_time_s)},
          {"evaluations_per_s", number_json(s.wall_time_s > 0 ? s.evaluations / s.wall_time_s : 0.0)},
          {"feasible", s.feasible},
          {"best_objective", number_json(s.best_objective)},
          {"best_violation", number_json(s.best_violation)},
          {"stop_reason", s.stop_reason},
          {"time_capped", s.time_capped}};
}

json result_json(const DesignRun& run) {
  json designs = json::object();
  for (const Design& d : run.designs) {
    json& entry = designs[std::string(role_name(d.role))] = design_json(d);
    if (run.robust)
      if (const RobustAssessment* a = run.robust->find(d.role)) entry["robust"] = robust_assessment_json(*run.robust, *a);
  }
  json out = {{"schema", "specloop-result-1"},
              {"version", SPECLOOP_VERSION},
              {"spec", spec_json(run.problem.spec)},
              // The plant as specified (a delayed plant without its Padé approximant, which
              // belongs to linear_model): G(s)·e^(−s·delay) rebuilds it.
              {"plant",
               {{"numerator", numbers(run.problem.spec.plant.numerator)},
                {"denominator", numbers(run.problem.spec.plant.denominator)},
                {"delay", number_json(run.problem.spec.plant.delay_s)}}},
              {"linear_model",
               {{"numerator", numbers(run.problem.plant.numerator.coefficients)},
                {"denominator", numbers(run.problem.plant.denominator.coefficients)},
                {"delay_approximant_order", run.problem.spec.plant.delay_s > 0.0 ? json(kDelayApproximantOrder) : json(nullptr)}}},
              {"reference_peak_time", optional_number(run.problem.reference_peak_time_s)},
              {"action", {{"name", action_name(run.problem.action)}, {"sign", number_json(run.problem.action)},
                          {"reason", action_reason(run.problem.plant)}}},
              {"designs", designs},
              {"search", search_json(run.search)},
              {"met", run.met},
              {"judged_on", run.judged_on_nonlinear ? "nonlinear" : "linear"},
              {"units", units_json(run.problem.spec.units)},
              {"met_on_linear", run.met_on_linear},
              {"safety", kSafetyCaution}};
  out["linear_model"]["linearization"] = linearization_json(run.problem.spec);
  out["robust"] = robust_run_json(run);
  if (run.target)
    out["target_pole"] = {{"pole", complex_json(run.target->pole)}, {"derivation", run.target->derivation}};
  out["classical_outcome"] = {{"designed", run.classical.designed},
                              {"failed_step", run.classical.designed ? json(nullptr) : json(run.classical.failed_step)},
                              {"reason", run.classical.designed ? json(nullptr) : json(run.classical.reason)},
                              {"notes", run.classical.notes}};
  out["objective"] = {{"name", objective_name(run.problem.spec.search.objective)},
                      {"tracking_window", number_json(run.problem.tracking_window_s)},
                      {"search_margin_pct", number_json(run.problem.search_margin * 100.0)}};
  out["warnings"] = run.warnings;
  out["rules"] = json::object();
  for (const RuleOutcome& r : run.rules) out["rules"][r.rule] = rule_json(r);
  if (run.ultimate)
    out["ultimate"] = {{"gain", number_json(run.problem.action * run.ultimate->gain)}, {"period", number_json(run.ultimate->period_s)},
                       {"frequency", number_json(run.ultimate->frequency_rad_s)}};
  if (run.infeasibility) {
    json misses = json::array();
    for (const auto& c : run.infeasibility->misses)
      misses.push_back({{"requirement", c.requirement.key}, {"limit", number_json(c.requirement.limit)},
                        {"value", optional_number(c.value)}, {"violation", number_json(c.violation)}});
    out["infeasibility"] = {{"binding", run.infeasibility->binding},
                            {"misses", misses},
                            {"nearest_value", optional_number(run.infeasibility->nearest_value)},
                            {"nearest", run.infeasibility->nearest_text}};
  }
  return out;
}

}  // namespace specloop
