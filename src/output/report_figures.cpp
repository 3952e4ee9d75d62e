// The design report's figures as gnuplot scripts (report_parts.hpp): the step response and the
// control effort with the requirement envelope, the s-plane with the root locus, and the loop
// frequency response with the margins.
#include <algorithm>
#include <cmath>
#include <fmt/format.h>

#include "output/report_parts.hpp"

namespace specloop::design_report {

using namespace page;

bool plotted(const ResponseTrace& t) { return t.design != DesignRole::ultimate_gain; }

bool on_splane(DesignRole role) {
  return role != DesignRole::ultimate_gain && role != DesignRole::simc && role != DesignRole::amigo;
}

std::string trace_file(const ResponseTrace& t) {
  return fmt::format("step_{}{}.csv", role_name(t.design), t.nonlinear ? "_nonlinear" : "");
}

// A stable look of our own: muted colours per design, thin grid, sans-serif.
const char* colour_of(DesignRole design, bool nonlinear) {
  if (nonlinear) return "#2e7d32";
  switch (design) {
    case DesignRole::reference: return "#8c8c8c";
    case DesignRole::classical: return "#c26a1b";
    case DesignRole::ultimate_gain: return "#7b5ea7";
    case DesignRole::simc: return "#00897b";
    case DesignRole::amigo: return "#b8860b";
    case DesignRole::optimized: break;
  }
  return "#1f5f99";
}

namespace {

// A trace's legend entry.
std::string label_of(DesignRole design, bool nonlinear) {
  std::string name = design == DesignRole::ultimate_gain ? "ultimate gain (ZN)" : name_of(design);
  return nonlinear ? name + " (nonlinear loop)" : name + (design == DesignRole::reference ? " (P only)" : "");
}

}  // namespace

std::string step_script(const DesignRun& run, const ReportData& data, bool effort) {
  const Spec& spec = run.problem.spec;
  const Requirements& req = spec.requirements;
  const double r = spec.reference.amplitude, band = run.problem.band_fraction;
  std::string s;
  const UnitsSpec& units = spec.units;
  s += fmt::format("  set title {} font ',13'\n", quoted(effort ? "Control effort u(t)" : "Step response y(t)"));
  s += fmt::format("  set xlabel {}\n", quoted(fmt::format("time ({})", units.time)));
  s += fmt::format("  set ylabel {}\n", quoted(effort ? fmt::format("u ({})", units.input) : fmt::format("y ({})", units.output)));
  s += fmt::format("  set xrange [0:{}]\n", csv_number(data.plot_horizon_s));
  // The legend right of the plot area, never over a curve.
  s += "  set key outside right top vertical Left reverse box opaque font ',10' samplen 2\n";
  s += "  unset object; unset arrow; unset label\n";
  std::vector<std::string> plots;
  if (!effort) {
    // A limit's label beside its vertical line, where a step response leaves room: low in the plot
    // (high for a negative step) at `height` of it, right of the line, or left of it in the last
    // third of the axis; the two labels at different heights never meet.
    auto limit_label = [&](const std::string& text, double at, double height, const char* colour) {
      const bool right_of_line = at < 0.65 * data.plot_horizon_s;
      s += fmt::format("  set label {} at {},graph {} {} offset {},0 textcolor rgb '{}' font ',10'\n", quoted(text), csv_number(at),
                       r > 0.0 ? height : 1.0 - height, right_of_line ? "left" : "right", right_of_line ? "0.5" : "-0.5", colour);
    };
    // The requirement envelope: overshoot ceiling, settling band from settling_time_max, peak-time limit.
    if (req.overshoot_max_pct) {
      const double ceiling = r * (1.0 + *req.overshoot_max_pct / 100.0);
      plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 title {}", csv_number(ceiling),
                                  quoted(fmt::format("overshoot limit {:.4g} %", *req.overshoot_max_pct))));
    }
    if (req.settling_time_max_s) {
      const double ts = *req.settling_time_max_s;
      for (double edge : {r * (1.0 + band), r * (1.0 - band)})
        s += fmt::format("  set arrow from {},{} to graph 1,first {} nohead lc rgb '#6a1b9a' dt 3 lw 1.2\n", csv_number(ts),
                         csv_number(edge), csv_number(edge));
      s += fmt::format("  set arrow from {},graph 0 to {},graph 1 nohead lc rgb '#6a1b9a' dt 3 lw 1\n", csv_number(ts), csv_number(ts));
      limit_label(fmt::format("settling {:.4g} {}, ±{:.4g} % band", ts, units.time, band * 100.0), ts, 0.05, "#6a1b9a");
    }
    const std::optional<double>& tp_limit = data.peak_time_limit_s;
    if (tp_limit) {
      s += fmt::format("  set arrow from {},graph 0 to {},graph 1 nohead lc rgb '#ef6c00' dt 4 lw 1.2\n", csv_number(*tp_limit),
                       csv_number(*tp_limit));
      limit_label(fmt::format("peak-time limit {:.4g} {}", *tp_limit, units.time), *tp_limit, 0.12, "#ef6c00");
    }
  } else {
    const ActuatorSpec& a = spec.actuator;
    if (a.limited) {
      plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 title 'actuator limits'", csv_number(a.max)));
      plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 notitle", csv_number(a.min)));
    }
    if (req.effort_max) {
      plots.push_back(fmt::format("{} with lines lc rgb '#6a1b9a' dt 3 lw 1.2 title {}", csv_number(*req.effort_max),
                                  quoted(fmt::format("effort_max {:.4g} {}", *req.effort_max, units.input))));
      plots.push_back(fmt::format("{} with lines lc rgb '#6a1b9a' dt 3 lw 1.2 notitle", csv_number(-*req.effort_max)));
    }
    // Time with the command beyond a limit, shaded (from the nonlinear trace's command column).
    for (const ResponseTrace& t : data.traces.responses)
      if (t.nonlinear && a.limited &&
          std::any_of(t.command.begin(), t.command.end(), [&](double u) { return u > a.max || u < a.min; }))
        plots.insert(plots.begin(), {
                     fmt::format("'../series/{}' using 1:(($4 > {} || $4 < {}) ? {} : NaN) with impulses lc rgb '#f3d3d3' lw 2 "
                                 "title 'command beyond a limit'",
                                 trace_file(t), csv_number(a.max), csv_number(a.min), csv_number(a.max)),
                     fmt::format("'../series/{}' using 1:(($4 > {} || $4 < {}) ? {} : NaN) with impulses lc rgb '#f3d3d3' lw 2 "
                                 "notitle",
                                 trace_file(t), csv_number(a.max), csv_number(a.min), csv_number(a.min))});
  }
  for (const ResponseTrace& t : data.traces.responses) {
    if (!plotted(t)) continue;  // in the CSV; the figure shows the designs compared
    // Draw at most ~700 points per curve (the CSV keeps every row): smooth curves, small SVGs.
    const std::size_t rows = std::min<std::size_t>(t.time_s.size(), 2000);
    plots.push_back(fmt::format("'../series/{}' every {} using 1:{} with lines lc rgb '{}' lw {} {} title {}", trace_file(t),
                                std::max<std::size_t>(1, rows / 700), effort ? 3 : 2, colour_of(t.design, t.nonlinear), t.design == DesignRole::reference ? "1.2" : "2",
                                t.nonlinear ? "dt (8,4)" : "", quoted(label_of(t.design, t.nonlinear))));
  }
  s += plot_command(plots, "no stable design to show");
  return script_frame(effort ? "effort" : "step", s);
}

std::string splane_script(const DesignRun& run, const ReportData& data, double zeta, const SplaneView& view) {
  const UnitsSpec& units = run.problem.spec.units;
  std::string s;
  s += fmt::format("  set title {} font ',13'\n",
                   quoted(!data.traces.locus.design
                              ? std::string("s-plane: the plant's poles and zeros (no stable design to vary)")
                              : fmt::format("s-plane: root locus of the {} loop as its gain varies", role_name(*data.traces.locus.design))));
  s += fmt::format("  set xlabel {}\n  set ylabel {}\n", quoted(fmt::format("real (1/{})", units.time)),
                   quoted(fmt::format("imaginary (rad/{})", units.time)));
  s += fmt::format("  set xrange [{}:{}]\n  set yrange [{}:{}]\n", csv_number(-view.left), csv_number(view.right),
                   csv_number(-view.im), csv_number(view.im));
  // The legend right of the plot area (the square view leaves room there), never over a curve.
  s += "  set size ratio -1\n  set key outside right top vertical Left reverse box opaque font ',9' samplen 2\n";
  s += "  set arrow from graph 0,first 0 to graph 1,first 0 nohead lc rgb '#999999'\n";
  s += "  set arrow from first 0,graph 0 to first 0,graph 1 nohead lc rgb '#999999'\n";
  std::vector<std::string> plots;
  const std::size_t branches = data.traces.locus.locus.poles.empty() ? 0 : data.traces.locus.locus.poles.front().size();
  plots.push_back(fmt::format("for [b=0:{}] '../series/locus.csv' using ((column(2) == b) ? $3 : NaN):4 with lines lc rgb "
                              "'#1f5f99' lw 1.3 title (b == 0 ? 'root locus (gain × 0.001 … 1000)' : '')",
                              branches == 0 ? 0 : branches - 1));
  if (zeta > 0.0) {
    plots.push_back(fmt::format("'../series/splane_points.csv' using ((strcol(1) eq 'damping_line_upper') ? $3 : NaN):4 with lines "
                                "lc rgb '#c62828' dt 2 lw 1.3 title {}",
                                quoted(fmt::format("ζ = {:.3f} line (overshoot limit)", zeta))));
    plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'damping_line_lower') ? $3 : NaN):4 with lines "
                    "lc rgb '#c62828' dt 2 lw 1.3 notitle");
  }
  plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'open_loop_pole') ? $3 : NaN):4 with points pt 2 ps 1.6 "
                  "lw 2 lc rgb '#222222' title 'open-loop poles'");
  plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'open_loop_zero') ? $3 : NaN):4 with points pt 6 ps 1.6 "
                  "lw 2 lc rgb '#222222' title 'open-loop zeros'");
  if (run.problem.spec.plant.delay_s > 0.0) {
    // The delay's Padé approximant is part of the loop the locus is drawn for, not of the plant.
    plots.push_back(fmt::format("'../series/splane_points.csv' using ((strcol(1) eq 'delay_approximant_pole') ? $3 : NaN):4 with "
                                "points pt 2 ps 1.4 lw 1.5 lc rgb '#9e9e9e' title {}",
                                quoted(fmt::format("Padé poles (order-{} stand-in for the delay)", kDelayApproximantOrder))));
    plots.push_back(fmt::format("'../series/splane_points.csv' using ((strcol(1) eq 'delay_approximant_zero') ? $3 : NaN):4 with "
                                "points pt 6 ps 1.4 lw 1.5 lc rgb '#9e9e9e' title {}",
                                quoted(fmt::format("Padé zeros (order-{} stand-in for the delay)", kDelayApproximantOrder))));
  }
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok || !on_splane(d.role)) continue;
    plots.push_back(fmt::format("'../series/splane_points.csv' using ((strcol(1) eq 'closed_loop_pole' && strcol(2) eq '{}') ? $3 : "
                                "NaN):4 with points pt 7 ps 1.0 lc rgb '{}' title {}",
                                role_name(d.role), colour_of(d.role, false), quoted(name_of(d.role) + " closed-loop poles")));
  }
  // The dominant pair: a large open diamond around the recommended design's pole dots.
  plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'dominant_pair') ? $3 : NaN):4 with points pt 12 ps 2.8 lw 2 "
                  "lc rgb '#1f5f99' title 'dominant pair (recommended design)'");
  plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'breaks_approximation') ? $3 : NaN):4 with points pt 3 ps "
                  "2.2 lw 2 lc rgb '#c62828' title 'modes that break the approximation'");
  s += plot_command(plots, "nothing to show");
  return script_frame("splane", s);
}

std::string frequency_script(const DesignRun& run, const ReportData& data) {
  const std::string time = run.problem.spec.units.time;
  std::string s;
  if (data.traces.frequency.empty()) {
    // Neither loop is stable (or has a finite response): an empty frame that says so.
    s += "  set title 'Loop frequency response L(jω) = C(jω)·G(jω)' font ',13'\n";
    s += "  set xrange [0:1]\n  set yrange [0:1]\n  unset xtics\n  unset ytics\n";
    s += plot_command({}, "no stable classical or optimized loop to show");
    return script_frame("frequency", s);
  }
  s += "  set multiplot layout 2,1 title 'Loop frequency response L(jω) = C(jω)·G(jω)' font ',13'\n";
  s += fmt::format("  set logscale x\n  set format x '10^{{%L}}'\n  set xlabel {}\n", quoted(fmt::format("ω (rad/{})", time)));
  // Both panels carry a legend of the same width right of the plot, so their ω axes line up and
  // no legend covers a curve. The margins' values are in the table under the figure: two designs'
  // labels at nearby crossovers would print over each other.
  s += "  set key outside right top vertical Left reverse box opaque font ',9' samplen 2 width 2\n";
  for (int panel = 0; panel < 2; ++panel) {
    s += "  unset arrow; unset label\n";
    s += panel == 0 ? "  set ylabel 'magnitude (dB)'\n" : "  set ylabel 'phase (deg)'\n";
    std::vector<std::string> plots;
    plots.push_back(panel == 0 ? "0 with lines lc rgb '#999999' dt 2 notitle" : "-180 with lines lc rgb '#999999' dt 2 notitle");
    for (const auto& [role, series] : data.traces.frequency) {
      const Design* d = run.find(role);
      plots.push_back(fmt::format("'../series/frequency_{}.csv' using 1:{} with lines lc rgb '{}' lw 2 title {}", role_name(role),
                                  panel == 0 ? 2 : 3, colour_of(role, false), quoted(name_of(role))));
      if (!d || !d->margins) continue;
      const Margins& m = *d->margins;
      // Gain margins: a bar from |L| to 0 dB at the phase crossover where a pole would cross the
      // axis (below 0 dB: the upper margin; above: the lower one). A crossing at s = 0 or through
      // infinity has no place on the log axis and is in the table only.
      auto on_axis = [](const std::optional<double>& w) { return w && *w > 0.0 && std::isfinite(*w); };
      if (panel == 0 && on_axis(m.phase_crossover_rad_s) && m.gain_margin_db) {
        const double w = *m.phase_crossover_rad_s;
        s += fmt::format("  set arrow from {},{} to {},0 lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(-*m.gain_margin_db), csv_number(w), colour_of(role, false));
      }
      if (panel == 0 && on_axis(m.lower_phase_crossover_rad_s) && m.lower_gain_margin_db) {
        const double w = *m.lower_phase_crossover_rad_s;
        s += fmt::format("  set arrow from {},{} to {},0 lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(-*m.lower_gain_margin_db), csv_number(w), colour_of(role, false));
      }
      if (panel == 1 && m.gain_crossover_rad_s && m.phase_margin_deg) {
        const double w = *m.gain_crossover_rad_s;
        s += fmt::format("  set arrow from {},-180 to {},{} lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(w), csv_number(-180.0 + *m.phase_margin_deg), colour_of(role, false));
      }
    }
    plots.push_back(fmt::format("NaN with lines lc rgb '#555555' lw 1.5 title {}",
                                quoted(panel == 0 ? "bars: gain margins at the phase crossovers" : "bars: phase margin at the gain crossover")));
    s += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  }
  s += "  unset multiplot\n  unset logscale x\n  set format x '% h'\n";
  return script_frame("frequency", s);
}


std::string envelope_script(const DesignRun& run, const ReportData& data) {
  const Spec& spec = run.problem.spec;
  const Requirements& req = spec.requirements;
  const UnitsSpec& units = spec.units;
  const double r = spec.reference.amplitude, band = run.problem.band_fraction;
  const Design* best = recommended_design(run);
  const RobustAssessment* a = best && run.robust ? run.robust->find(best->role) : nullptr;
  double horizon = 0.0;
  for (const auto& [index, t] : data.traces.scenarios) horizon = std::max(horizon, t.time_s.back());
  horizon = std::min(horizon, 2.0 * data.plot_horizon_s);
  std::string s;
  s += fmt::format("  set title {} font ',13'\n", quoted(fmt::format("Step response on every plant of the scenario set ({})",
                                                                     best ? name_of(best->role) : std::string("none"))));
  s += fmt::format("  set xlabel {}\n", quoted(fmt::format("time ({})", units.time)));
  s += fmt::format("  set ylabel {}\n", quoted(fmt::format("y ({})", units.output)));
  s += fmt::format("  set xrange [0:{}]\n", csv_number(horizon > 0.0 ? horizon : 1.0));
  s += "  set key outside right top vertical Left reverse box opaque font ',10' samplen 2\n";
  s += "  unset object; unset arrow; unset label\n";
  std::vector<std::string> plots;
  if (req.overshoot_max_pct)
    plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 title {}", csv_number(r * (1.0 + *req.overshoot_max_pct / 100.0)),
                                quoted(fmt::format("overshoot limit {:.4g} %", *req.overshoot_max_pct))));
  if (req.settling_time_max_s) {
    const double ts = *req.settling_time_max_s;
    for (double edge : {r * (1.0 + band), r * (1.0 - band)})
      s += fmt::format("  set arrow from {},{} to graph 1,first {} nohead lc rgb '#6a1b9a' dt 3 lw 1.2\n", csv_number(ts),
                       csv_number(edge), csv_number(edge));
    s += fmt::format("  set arrow from {},graph 0 to {},graph 1 nohead lc rgb '#6a1b9a' dt 3 lw 1\n", csv_number(ts), csv_number(ts));
  }
  if (data.peak_time_limit_s)
    s += fmt::format("  set arrow from {},graph 0 to {},graph 1 nohead lc rgb '#ef6c00' dt 4 lw 1.2\n",
                     csv_number(*data.peak_time_limit_s), csv_number(*data.peak_time_limit_s));
  if (!data.traces.scenarios.empty()) {
    plots.push_back(fmt::format("'../series/envelope.csv' skip 1 using 2:3 with lines lc rgb '#b0b7c3' lw 0.8 title {}",
                                quoted(fmt::format("{} plants", data.traces.scenarios.size()))));
    // The nominal plant, then each requirement's worst plant, named.
    std::vector<std::pair<std::size_t, std::string>> named{{0, "nominal plant"}};
    if (a)
      for (const WorstCase& w : a->worst) {
        auto it = std::find_if(named.begin(), named.end(), [&](const auto& n) { return n.first == w.scenario; });
        const std::string what = fmt::format("worst {}", w.check.requirement.key);
        if (it == named.end()) named.emplace_back(w.scenario, fmt::format("plant {}: {}", w.scenario, what));
        else it->second += ", " + what;
      }
    static const char* colours[] = {"#1f5f99", "#c62828", "#ef6c00", "#6a1b9a", "#2e7d32", "#8d6e63", "#00838f"};
    for (std::size_t j = 0; j < named.size(); ++j)
      plots.push_back(fmt::format("'../series/envelope.csv' skip 1 using 2:($1 == {} ? $3 : NaN) with lines lc rgb '{}' lw {} title {}",
                                  named[j].first, colours[j % 7], j == 0 ? "2" : "1.6", page::quoted(named[j].second)));
  }
  s += plot_command(plots, "no stable design to show");
  return script_frame("envelope", s);
}

}  // namespace specloop::design_report
