// One design as JSON (design_json.hpp): the pieces — controller, checks, second-order prediction,
// simulated metrics, the nonlinear confirmation — each written once, put together as the store's
// summary and, with the rest, as result.json's design object.
#include "specloop/output/design_json.hpp"

#include "specloop/output/json_io.hpp"

namespace specloop {

using nlohmann::json;

namespace {

json optional_number(const std::optional<double>& v) { return v ? number_json(*v) : json(nullptr); }

json numbers(const std::vector<double>& v) {
  json out = json::array();
  for (double x : v) out.push_back(number_json(x));
  return out;
}

json controller_json(const Design& d) {
  const Controller& c = d.controller;
  json series = json::object();
  const auto& info = structure_parameters(c.structure);
  const std::vector<double> shown = signed_series(c);
  for (std::size_t i = 0; i < info.size(); ++i) series[info[i].name] = number_json(shown[i]);
  json parallel = nullptr, standard = nullptr;
  if (c.parallel)
    parallel = {{"kp", number_json(c.parallel->kp)}, {"ki", number_json(c.parallel->ki)},
                {"kd", number_json(c.parallel->kd)}, {"filter_time", number_json(c.parallel->filter_time)}};
  if (c.standard)
    standard = {{"kp", number_json(c.standard->kp)},
                {"ti", c.standard->has_integral ? number_json(c.standard->ti) : json(nullptr)},
                {"td", c.standard->has_derivative ? number_json(c.standard->td) : json(nullptr)},
                {"n", c.standard->has_derivative ? number_json(c.standard->n) : json(nullptr)}};
  json out = {{"structure", structure_name(c.structure)},
          {"action", action_name(c.action)},
          {"numerator", numbers(c.transfer.numerator.coefficients)},
          {"denominator", numbers(c.transfer.denominator.coefficients)},
          {"derivative_filter", number_json(c.derivative_filter)},
          {"reference_numerator", numbers(d.reference_path.numerator.coefficients)},
          {"reference_denominator", numbers(d.reference_path.denominator.coefficients)},
          {"series", series},
          {"parallel", parallel},
          {"standard", standard}};
  // A searched set-point weight (search.tune_setpoint_weight); otherwise the spec's applies.
  if (c.setpoint_weight) out["setpoint_weight"] = number_json(*c.setpoint_weight);
  // The filters (README "Filters"): numerator/denominator above are then C·F·N's, the series,
  // parallel and standard forms the structure's part alone.
  if (c.notch)
    out["notch"] = {{"frequency", number_json(c.notch->frequency)}, {"depth", number_json(c.notch->depth)},
                    {"width", number_json(c.notch->width)}, {"searched", c.notch_searched}};
  if (c.measurement_filter)
    out["measurement_filter"] = {{"order", c.measurement_filter->order},
                                 {"time_constant", number_json(c.measurement_filter->time_constant)},
                                 {"searched", c.measurement_filter_searched}};
  return out;
}


json second_order_json(const std::optional<SecondOrderPrediction>& p) {
  if (!p) return nullptr;
  return {{"overshoot_pct", number_json(p->overshoot_pct)},
          {"peak_time", number_json(p->peak_time_s)},
          {"settling_time", number_json(p->settling_time_s)},
          {"damping_ratio", number_json(p->damping_ratio)},
          {"natural_frequency", number_json(p->natural_frequency)}};
}

// What the store keeps of the nonlinear confirmation; nonlinear_json adds the rest.
json nonlinear_summary(const NonlinearConfirmation& n) {
  return {{"status", status_name(n.status)},
          {"simulated", n.status == NonlinearStatus::ok ? metrics_json(n.simulated) : json(nullptr)},
          {"checks", checks_json(n.checks)},
          {"meets_all", n.meets_all},
          {"confirmed", n.confirmed}};
}

json difference_equation_json(const std::optional<DifferenceEquation>& de) {
  if (!de) return nullptr;
  return {{"sample_time", number_json(de->sample_time_s)},
          {"reference_numerator", numbers(de->reference_numerator)},
          {"measurement_numerator", numbers(de->measurement_numerator)},
          {"denominator", numbers(de->denominator)},
          {"method", de->method}};
}

json nonlinear_json(const NonlinearConfirmation& n) {
  json out = nonlinear_summary(n);
  out["saturated_fraction"] = number_json(n.saturated_fraction);
  out["rate_limited_fraction"] = number_json(n.rate_limited_fraction);
  out["command_excess_max"] = number_json(n.command_excess_max);
  out["integrator_held_fraction"] = number_json(n.integrator_held_fraction);
  out["active_effects"] = n.active_effects;
  out["horizon"] = number_json(n.horizon_s);
  out["horizon_bound_hit"] = n.horizon_bound_hit;
  out["stepper"] = stepper_name(n.stepper);
  out["noise_period"] = optional_number(n.noise_period_s);
  out["tracking_time"] = optional_number(n.tracking_time_s);
  out["verdict"] = n.verdict;
  out["notes"] = n.notes;
  json attribution = json::array();
  for (const CauseTrial& t : n.attribution)
    attribution.push_back({{"factor", t.factor},
                           {"factors", t.factors},
                           {"removed", t.removed},
                           {"status", status_name(t.status)},
                           {"checks", checks_json(t.checks)},
                           {"restores", t.restores}});
  out["attribution"] = attribution;
  out["difference_equation"] = difference_equation_json(n.difference_equation);
  return out;
}

json margins_json(const std::optional<Margins>& margins) {
  if (!margins) return nullptr;
  const Margins& m = *margins;
  // An absent crossover means an infinite margin.
  json out = {{"gain_margin_db", m.gain_margin_db ? number_json(*m.gain_margin_db) : json("infinite")},
          {"phase_crossover", optional_number(m.phase_crossover_rad_s)},
          {"phase_margin_deg", m.phase_margin_deg ? number_json(*m.phase_margin_deg) : json("infinite")},
          {"gain_crossover", optional_number(m.gain_crossover_rad_s)},
          {"sensitivity_peak", number_json(m.sensitivity_peak)},
          {"sensitivity_peak_frequency", number_json(m.sensitivity_peak_rad_s)},
          {"delay_margin", m.delay_margin_s ? number_json(*m.delay_margin_s) : json("infinite")},
          {"lower_gain_margin_db", optional_number(m.lower_gain_margin_db)},
          {"lower_phase_crossover", optional_number(m.lower_phase_crossover_rad_s)}};
  if (m.complementary_peak) {  // only where a requirement asks for them (add_closed_loop_peaks)
    out["complementary_peak"] = optional_number(m.complementary_peak);
    out["complementary_peak_frequency"] = optional_number(m.complementary_peak_rad_s);
    out["noise_gain"] = optional_number(m.noise_gain);
    out["noise_gain_frequency"] = optional_number(m.noise_gain_rad_s);
  }
  return out;
}

}  // namespace

json checks_json(const std::vector<RequirementCheck>& list) {
  json out = json::array();
  for (const auto& check : list)
    out.push_back({{"requirement", check.requirement.key},
                   {"limit", number_json(check.requirement.limit)},
                   {"bound", check.requirement.upper ? "max" : "min"},
                   {"on_magnitude", check.requirement.magnitude},  // the bound applies to |value|
                   {"unit", check.requirement.unit},
                   {"value", optional_number(check.value)},
                   {"met", check.met},
                   {"violation", number_json(check.violation)},
                   {"slack", number_json(check.slack)}});
  return out;
}

json design_summary(const Design& d) {
  return {{"status", status_name(d.status)},
          {"meets_all", d.meets_all},
          {"controller", controller_json(d)},
          {"checks", checks_json(d.checks)},
          {"second_order", second_order_json(d.second_order)},
          {"simulated", d.status == StepStatus::ok ? metrics_json(d.simulated) : json(nullptr)},
          {"nonlinear", d.nonlinear ? nonlinear_summary(*d.nonlinear) : json(nullptr)}};
}

json design_json(const Design& d) {
  json out = design_summary(d);
  out["closed_loop_poles"] = poles_json(d.closed_loop_poles);
  out["simulated_loop"] = d.sampled ? "sampled" : "continuous";
  out["warnings"] = d.warnings;
  out["notes"] = d.notes;
  out["dominance"] = d.dominance ? dominance_json(*d.dominance) : json(nullptr);
  if (d.nonlinear) out["nonlinear"] = nonlinear_json(*d.nonlinear);
  out["margins"] = margins_json(d.margins);
  return out;
}

}  // namespace specloop
