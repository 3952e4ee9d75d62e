// The design report's tables (report_parts.hpp): requirements × designs, the second-order
// approximation, the recommended controller's forms and wiring, and the stability margins.
#include <algorithm>
#include <cmath>
#include <fmt/format.h>

#include "output/report_parts.hpp"

namespace specloop::design_report {

using namespace page;

std::string with_unit(double v, const std::string& unit) { return fmt::format("{:.4g}{}", v, unit.empty() ? "" : " " + unit); }

std::string value_attribute(const std::optional<double>& v) {
  return v ? fmt::format("data-value=\"{:.17g}\"", *v) : std::string("data-value=\"none\"");
}

Table requirement_table(const DesignRun& run) {
  Table t{"requirements", {"requirement", "limit"}, {}};
  for (const Design& d : run.designs) t.header.push_back(name_of(d.role));
  const Design* optimized = run.find(DesignRole::optimized);
  if (optimized) t.header.push_back("slack (optimized)");
  for (std::size_t i = 0; i < run.problem.requirements.size(); ++i) {
    const Requirement& r = run.problem.requirements[i];
    // The limit in its shortest round-trip form; a missed value gets the digits to tell it apart.
    const std::string unit = requirement_unit(r, run.problem.spec.units);
    std::vector<Cell> row{{r.key, fmt::format("data-key=\"{}\"", r.key)},
                          {fmt::format("{}{} {}{}", r.magnitude ? "|e| " : "", r.upper ? "≤" : "≥", r.limit,
                                       unit.empty() ? "" : " " + unit),
                           fmt::format("data-value=\"{:.17g}\"", r.limit)}};
    for (const Design& d : run.designs) {
      const RequirementCheck& c = d.checks[i];
      const std::string shown = c.value ? shown_value(c) + (unit.empty() ? "" : " " + unit) : "none";
      row.push_back({fmt::format("{} {}", shown, c.met ? "✓" : "✗"),
                     fmt::format("{} data-design=\"{}\" data-met=\"{}\" class=\"{}\"", value_attribute(c.value), role_name(d.role),
                                 c.met ? "true" : "false", c.met ? "met" : "missed")});
    }
    if (optimized) {  // normalized room: (limit − value)/|limit| for an upper bound, negative when missed
      const RequirementCheck& c = optimized->checks[i];
      row.push_back({c.slack >= 1e3 ? std::string("∞") : fmt::format("{:+.3g} %", 100.0 * c.slack),
                     fmt::format("data-slack=\"{:.17g}\"", c.slack)});
    }
    t.rows.push_back(std::move(row));
  }
  std::vector<Cell> all{{"meets all", ""}, {"", ""}};
  for (const Design& d : run.designs) all.push_back({d.meets_all ? "yes" : "no", d.meets_all ? "class=\"met\"" : "class=\"missed\""});
  if (optimized) all.push_back({"", ""});
  t.rows.push_back(std::move(all));
  // A conditionally stable loop turns unstable when its gain drops: say by how much.
  if (std::any_of(run.designs.begin(), run.designs.end(),
                  [](const Design& d) { return d.margins && d.margins->lower_gain_margin_db; })) {
    std::vector<Cell> lower{{"lower gain margin (dB)", ""}, {"", ""}};
    for (const Design& d : run.designs)
      lower.push_back({!d.margins                        ? "—"
                       : d.margins->lower_gain_margin_db ? fmt::format("{:.3g} (unstable if the gain drops this much)",
                                                                       *d.margins->lower_gain_margin_db)
                                                         : "none",
                       ""});
    t.rows.push_back(std::move(lower));
  }
  std::vector<Cell> confirmed{{"nonlinear loop", ""}, {"", ""}};
  for (const Design& d : run.designs)
    confirmed.push_back({!d.nonlinear ? "—" : d.nonlinear->confirmed ? "confirmed" : "NOT confirmed",
                         !d.nonlinear ? "" : d.nonlinear->confirmed ? "class=\"met\"" : "class=\"missed\""});
  if (optimized) confirmed.push_back({"", ""});
  t.rows.push_back(std::move(confirmed));
  return t;
}

Table approximation_table(const DesignRun& run) {
  Table t{"approximation", {"design", "metric", "second-order prediction", "simulated", "error"}, {}};
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok) continue;
    const std::string name = name_of(d.role);
    if (!d.second_order) {
      t.rows.push_back({{name, ""}, {"—", ""}, {"no complex closed-loop pair: nothing to predict", ""}, {"", ""}, {"", ""}});
      continue;
    }
    const SecondOrderPrediction& p = *d.second_order;
    auto row = [&](const char* metric, double predicted, const std::optional<double>& simulated, const std::string& unit) {
      const std::string error =
          simulated && predicted != 0.0 ? fmt::format("{:+.1f} %", (*simulated - predicted) / std::abs(predicted) * 100.0) : "—";
      t.rows.push_back({{name, ""}, {metric, ""}, {with_unit(predicted, unit), ""},
                        {simulated ? with_unit(*simulated, unit) : "none", ""}, {error, ""}});
    };
    row("overshoot", p.overshoot_pct, d.simulated.overshoot_pct, "%");
    row("peak time", p.peak_time_s, d.simulated.peak_time_s, run.problem.spec.units.time);
    row("settling time", p.settling_time_s, d.simulated.settling_time_s, run.problem.spec.units.time);
  }
  return t;
}

std::string controller_lines(const Design& d, const UnitsSpec& units) {
  const Controller& c = d.controller;
  const std::string& t = units.time;
  std::string s;
  const auto& info = structure_parameters(c.structure);
  std::vector<std::string> series;
  const std::vector<double> shown = signed_series(c);
  for (std::size_t i = 0; i < info.size(); ++i)
    series.push_back(info[i].unit.empty() ? fmt::format("{} = {:.5g}", info[i].name, shown[i])
                                          : fmt::format("{} = {:.5g} {}", info[i].name, shown[i], shown_unit(info[i].unit, units)));
  s += fmt::format("series ({}): {}\n", structure_name(c.structure), fmt::join(series, ", "));
  if (c.parallel)
    s += fmt::format("parallel: Kp = {:.5g}, Ki = {:.5g} 1/{}, Kd = {:.5g} {}, Tf = {:.4g} {}\n", c.parallel->kp, c.parallel->ki, t,
                     c.parallel->kd, t, c.parallel->filter_time, t);
  else
    s += "parallel: none (this structure has no PID equivalent)\n";
  if (c.standard)
    s += fmt::format("standard: Kp = {:.5g}, Ti = {}, Td = {:.4g} {}, N = {:.4g}\n", c.standard->kp,
                     c.standard->has_integral ? fmt::format("{:.4g} {}", c.standard->ti, t) : std::string("∞ (no integral)"),
                     c.standard->td, t, c.standard->n);
  else
    s += "standard: none (this structure has no PID equivalent)\n";
  auto poly = [](const Polynomial& p) {
    std::vector<std::string> terms;
    for (double v : p.coefficients) terms.push_back(fmt::format("{:.6g}", v));
    return fmt::format("[{}]", fmt::join(terms, ", "));
  };
  if (c.notch || c.measurement_filter) {
    s += fmt::format("filters: {} (u = N·(C_r·r − C·F·y); the series, parallel and standard forms above are C's, the PID "
                     "part's; C(s) below is C·F·N, the whole controller the measurement sees)\n",
                     filters_text(c, t));
  }
  s += fmt::format("C(s) = {} / {} (coefficients, highest power of s first)\n", poly(c.transfer.numerator), poly(c.transfer.denominator));
  if (d.nonlinear && d.nonlinear->difference_equation) {
    const DifferenceEquation& e = *d.nonlinear->difference_equation;
    auto list = [](const std::vector<double>& v) {
      std::vector<std::string> terms;
      for (double x : v) terms.push_back(fmt::format("{:.8g}", x));
      return fmt::format("[{}]", fmt::join(terms, ", "));
    };
    s += fmt::format("difference equation at Ts = {:.4g} {} (coefficients of z^0, z^-1, ...): U = (R·{} − Y·{}) / {}; {}\n",
                     e.sample_time_s, t, list(e.reference_numerator), list(e.measurement_numerator), list(e.denominator), e.method);
  }
  return s;
}

// How the recommended controller is wired: where the derivative acts, the set-point weight, the
// action, the sample time. One row per field (data-field) for both pages.
Table controller_box(const DesignRun& run, const Design& d) {
  const ControllerSpec& cs = run.problem.spec.controller;
  const Controller& c = d.controller;
  const bool pid_type = c.parallel.has_value();
  const bool has_derivative = pid_type && c.parallel->kd != 0.0;
  Table t{"controller-box", {"", "recommended controller"}, {}};
  auto row = [&](const char* field, const std::string& label, const std::string& value, const std::string& data_value) {
    t.rows.push_back({{label, fmt::format("data-field=\"{}\"", field)},
                      {value, fmt::format("data-field=\"{}\" data-value=\"{}\"", field, escape_html(data_value))}});
  };
  row("design", "design", fmt::format("{} ({})", role_name(d.role), structure_name(c.structure)), name_of(d.role));
  if (!pid_type)
    row("derivative_on", "derivative acts on", "— (this structure acts on the error as its transfer function)", "none");
  else if (!has_derivative)
    row("derivative_on", "derivative acts on", "— (no derivative term)", "none");
  else
    row("derivative_on", "derivative acts on",
        cs.derivative_on_measurement ? "the measurement (c = 0: no derivative kick on a set-point step)" : "the error (c = 1)",
        cs.derivative_on_measurement ? "measurement" : "error");
  if (pid_type) {
    const double b = setpoint_weight_of(cs, c);
    row("setpoint_weight", "set-point weight",
        fmt::format("b = {:.4g} (the proportional term acts on b·r − y{})", b,
                    c.setpoint_weight ? "; searched with the feedback gains" : ""),
        fmt::format("{:.17g}", b));
  }
  else
    row("setpoint_weight", "set-point weight", "— (this structure acts on the error r − y)", "none");
  const std::string action = controller_action(run);
  row("action", "action",
      action == "direct" ? "direct (u rises while y is below r; every gain is positive)"
                         : "reverse (u falls while y is below r; every gain is negative, as the plant's sign requires: its "
                           "lowest-order numerator coefficient over its leading denominator coefficient is negative)",
      action);
  if (cs.sample_time_s > 0.0)
    row("sample_time", "sample time",
        fmt::format("{:.4g} {} (digital controller; difference equation above)", cs.sample_time_s, run.problem.spec.units.time),
        fmt::format("{:.17g}", cs.sample_time_s));
  else
    row("sample_time", "sample time", "continuous (no sampling)", "continuous");
  return t;
}

// The classical and optimized loops' stability margins, in words and numbers, under the frequency figure.
Table margin_table(const DesignRun& run, const ReportData& data) {
  const std::string w_unit = fmt::format("rad/{}", run.problem.spec.units.time);
  Table t{"margins",
          {"design", "gain margin", "at ω (phase crossover)", "lower gain margin", "at ω", "phase margin",
           "at ω (gain crossover)", "delay margin", "sensitivity peak Ms"},
          {}};
  for (const auto& [role, series] : data.traces.frequency) {
    const Design* d = run.find(role);
    const std::string name = name_of(role);
    if (!d || !d->margins) continue;
    const Margins& m = *d->margins;
    auto cell = [&, &design = name](const char* field, const std::optional<double>& v, const std::string& text) {
      return Cell{text, fmt::format("data-design=\"{}\" data-field=\"{}\" {}", design, field, value_attribute(v))};
    };
    auto or_none = [&](const std::optional<double>& v, const char* format_unit, const char* none) {
      return v ? fmt::format("{:.3g}{}{}", *v, std::string_view(format_unit) == "°" ? "" : " ", format_unit) : std::string(none);
    };
    t.rows.push_back({{name, fmt::format("data-design=\"{}\"", name)},
                      cell("gain_margin_db", m.gain_margin_db, or_none(m.gain_margin_db, "dB", "∞ (no gain destabilizes)")),
                      cell("phase_crossover", m.phase_crossover_rad_s, or_none(m.phase_crossover_rad_s, w_unit.c_str(), "—")),
                      cell("lower_gain_margin_db", m.lower_gain_margin_db,
                           or_none(m.lower_gain_margin_db, "dB", "none (stable at any lower gain)")),
                      cell("lower_phase_crossover", m.lower_phase_crossover_rad_s,
                           or_none(m.lower_phase_crossover_rad_s, w_unit.c_str(), "—")),
                      cell("phase_margin_deg", m.phase_margin_deg, or_none(m.phase_margin_deg, "°", "∞ (no gain crossover)")),
                      cell("gain_crossover", m.gain_crossover_rad_s, or_none(m.gain_crossover_rad_s, w_unit.c_str(), "—")),
                      cell("delay_margin", m.delay_margin_s, or_none(m.delay_margin_s, run.problem.spec.units.time.c_str(), "∞")),
                      cell("sensitivity_peak", m.sensitivity_peak, fmt::format("{:.3g}", m.sensitivity_peak))});
  }
  return t;
}


}  // namespace specloop::design_report
