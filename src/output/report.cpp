// The design report (report.hpp): data for the figures, CSV series, gnuplot scripts, and the HTML
// and Markdown pages built from one list of sections.
#include "specloop/output/report.hpp"
#include "specloop/sim/sampled_loop.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <fmt/format.h>
#include <fstream>
#include <numbers>
#include <sstream>
#include <stdexcept>
#include <unistd.h>

#include "output/page_kit.hpp"
#include "specloop/output/json_io.hpp"

namespace specloop {

const char* const kSafetyCaution =
    "A simulated design is not a verified machine: validate on the real system with interlocks, and defer to local "
    "codes, applicable functional-safety standards and licensed engineering practice.";

namespace fs = std::filesystem;
using namespace page;

std::string shown_unit(std::string_view unit, const UnitsSpec& units) {
  if (unit == "s") return units.time;
  if (unit == "1/s") return fmt::format("1/{}", units.time);
  if (unit == "rad/s") return fmt::format("rad/{}", units.time);
  if (unit == "controller units") return fmt::format("{} per {}", units.input, units.output);
  return std::string(unit);
}

std::string requirement_unit(const Requirement& r, const UnitsSpec& units) {
  if (r.key == "effort_max") return units.input;
  return shown_unit(r.unit, units);
}

std::string controller_action(const DesignRun& run) { return run.problem.action < 0.0 ? "reverse" : "direct"; }

const Design* recommended_design(const DesignRun& run) {
  for (const char* name : {"optimized", "classical"}) {
    const Design* d = run.find(name);
    if (d && d->status == StepStatus::ok) return d;
  }
  return nullptr;
}

// ---- data ----------------------------------------------------------------------------------------

namespace {

constexpr int kReportNonlinearSamples = 2000;

std::vector<double> subsample(const std::vector<double>& v, std::size_t stride) {
  std::vector<double> out;
  for (std::size_t i = 0; i < v.size(); i += stride) out.push_back(v[i]);
  if (!v.empty() && (v.size() - 1) % stride != 0) out.push_back(v.back());
  return out;
}

// A frequency range that shows every corner and crossover of the loop: two decades beyond.
std::pair<double, double> frequency_range(const TransferFunction& loop, const std::optional<Margins>& m) {
  double lo = std::numeric_limits<double>::infinity(), hi = 0.0;
  auto take = [&](double w) {
    if (w > 0.0 && std::isfinite(w)) {
      lo = std::min(lo, w);
      hi = std::max(hi, w);
    }
  };
  for (const Complex& p : loop.poles()) take(std::abs(p));
  if (!loop.numerator.is_zero())
    for (const Complex& z : loop.zeros()) take(std::abs(z));
  if (m) {
    if (m->gain_crossover_rad_s) take(*m->gain_crossover_rad_s);
    if (m->phase_crossover_rad_s) take(*m->phase_crossover_rad_s);
    if (m->lower_phase_crossover_rad_s) take(*m->lower_phase_crossover_rad_s);
  }
  if (!(hi > 0.0)) return {0.01, 100.0};
  return {lo / 100.0, hi * 100.0};
}

bool all_finite(const std::vector<double>& v) {
  return std::all_of(v.begin(), v.end(), [](double x) { return std::isfinite(x); });
}

// A figure's series never carries a NaN or an infinity: a trace with one is left out whole (the
// figure is drawn without it), a frequency or locus point with one is left out alone.
bool trace_is_finite(const ResponseTrace& t) {
  return !t.time_s.empty() && all_finite(t.time_s) && all_finite(t.output) && all_finite(t.control) &&
         all_finite(t.command);
}

FrequencySeries finite_rows(const FrequencySeries& f) {
  FrequencySeries out;
  for (std::size_t i = 0; i < f.omega_rad_s.size(); ++i)
    if (std::isfinite(f.omega_rad_s[i]) && std::isfinite(f.magnitude_db[i]) && std::isfinite(f.phase_deg[i])) {
      out.omega_rad_s.push_back(f.omega_rad_s[i]);
      out.magnitude_db.push_back(f.magnitude_db[i]);
      out.phase_deg.push_back(f.phase_deg[i]);
    }
  return out;
}

}  // namespace

namespace {

// After a response has settled, the time axis runs a quarter of its settling time further.
constexpr double kRoomAfterSettling = 1.25;

// The step figure's designs: all but the ultimate-gain one (its trace is in the CSV only).
bool plotted(const ResponseTrace& t) { return t.design != "ultimate_gain"; }

}  // namespace

ReportData report_data(const DesignRun& run) {
  const Problem& problem = run.problem;
  const Spec& spec = problem.spec;
  ReportData data;
  // Until when each plotted response must be in view: its reported settling time with room
  // after it, or its whole trace when it does not settle.
  std::vector<std::pair<double, double>> wanted;  // (settled or end, trace end)
  auto want = [&](const std::optional<double>& settled, double end) {
    wanted.emplace_back(settled ? std::max(*settled, std::min(end, kRoomAfterSettling * *settled)) : end, end);
  };
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok) continue;
    StepSimulator sim;
    SampledStepSimulator sampled;
    StepMetrics m;
    StepTrace trace;
    StepStatus status = StepStatus::numerical_failure;
    if (d.sampled) {  // the sampled loop, as the design was measured
      const ControllerSpec& cs = spec.controller;
      const DifferenceEquation eq = controller_difference_equation(d.controller, cs.sample_time_s, cs.setpoint_weight,
                                                                   cs.derivative_on_measurement ? 0.0 : 1.0);
      status = sampled.simulate(problem.plant_realization, eq, spec.reference.amplitude, problem.band_fraction, m, &trace);
    } else {
      status = sim.simulate(close_loop(problem.plant_realization, d.controller.transfer, d.reference_path),
                            spec.reference.amplitude, problem.band_fraction, m, &trace);
    }
    if (status != StepStatus::ok) continue;
    ResponseTrace t{d.name, false, std::move(trace.time_s), std::move(trace.output), std::move(trace.effort), {}};
    if (!trace_is_finite(t)) continue;
    if (plotted(t)) want(d.simulated.settling_time_s, t.time_s.back());
    data.traces.push_back(std::move(t));
  }
  const Design* best = recommended_design(run);
  if (best) {
    const auto linear = std::find_if(data.traces.begin(), data.traces.end(),
                                     [&](const ResponseTrace& t) { return t.design == best->name; });
    NonlinearSetup setup = nonlinear_setup(problem, linear != data.traces.end() ? linear->time_s.back() : 1.0,
                                           kReportNonlinearSamples);
    // The confirmation's (possibly extended) horizon, so the trace shows what the verdict read.
    if (best->nonlinear && best->nonlinear->horizon_s > 0.0) {
      setup.options.horizon_s = best->nonlinear->horizon_s;
      setup.options.output_step_s = setup.options.horizon_s / kReportNonlinearSamples;
    }
    const std::optional<double> reported =
        best->nonlinear && best->nonlinear->status == NonlinearStatus::ok ? best->nonlinear->simulated.settling_time_s : std::nullopt;
    NonlinearResult r;
    try {
      r = simulate_on_nonlinear_loop(problem, best->controller, setup);
    } catch (const std::invalid_argument&) {
      r.status = NonlinearStatus::non_finite;  // the confirmation said why; the figure goes without this trace
    }
    ResponseTrace nonlinear_trace{best->name, true, r.time_s, r.output, r.control, r.command};
    if (r.status == NonlinearStatus::ok && !r.time_s.empty() && trace_is_finite(nonlinear_trace)) {
      data.traces.push_back(std::move(nonlinear_trace));
      want(reported, r.time_s.back());
      if (spec.disturbance.size != 0.0) want(std::nullopt, std::min(r.time_s.back(), 2.0 * spec.disturbance.time_s));
    }
    data.locus_design = best->name;
    data.locus_loop = best->controller.transfer * problem.plant;
    data.locus = trace_root_locus(data.locus_loop, 1e-3, 1e3);
  }
  for (const char* name : {"classical", "optimized"}) {
    const Design* d = run.find(name);
    if (!d || d->status != StepStatus::ok) continue;
    const TransferFunction loop = d->controller.transfer * problem.plant;
    const auto [lo, hi] = frequency_range(loop, d->margins);
    FrequencySeries f = finite_rows(loop_frequency_response(loop, lo, hi, 300));
    if (!f.omega_rad_s.empty()) data.frequency.emplace_back(name, std::move(f));
  }
  double horizon = 0.0;
  for (const auto& [until, end] : wanted) horizon = std::max(horizon, until);
  // The requirement envelope in view too (settling limit, peak-time limit), within the data.
  double data_end = 0.0;
  for (const auto& [until, end] : wanted) data_end = std::max(data_end, end);
  std::optional<double> tp_limit = spec.requirements.peak_time_max_s;
  if (spec.requirements.peak_time_ratio && problem.reference_peak_time_s) {
    const double v = *spec.requirements.peak_time_ratio * *problem.reference_peak_time_s;
    tp_limit = tp_limit ? std::min(*tp_limit, v) : v;
  }
  for (const auto& limit : {spec.requirements.settling_time_max_s, tp_limit})
    if (limit) horizon = std::max(horizon, std::min(data_end, 1.1 * *limit));
  data.peak_time_limit_s = tp_limit;
  data.plot_horizon_s = horizon > 0.0 && std::isfinite(horizon) ? horizon : 1.0;
  return data;
}

// ---- files ---------------------------------------------------------------------------------------

namespace {

std::string trace_file(const ResponseTrace& t) { return fmt::format("step_{}{}.csv", t.design, t.nonlinear ? "_nonlinear" : ""); }

std::string with_unit(double v, const std::string& unit) { return fmt::format("{:.4g}{}", v, unit.empty() ? "" : " " + unit); }

// A stable look of our own: muted colours per design, thin grid, sans-serif.
const char* colour_of(const std::string& design, bool nonlinear) {
  if (nonlinear) return "#2e7d32";
  if (design == "reference") return "#8c8c8c";
  if (design == "classical") return "#c26a1b";
  if (design == "ultimate_gain") return "#7b5ea7";
  return "#1f5f99";
}

std::string label_of(const std::string& design, bool nonlinear) {
  std::string name = design == "ultimate_gain" ? "ultimate gain (ZN)" : design;
  return nonlinear ? name + " (nonlinear loop)" : name + (design == "reference" ? " (P only)" : "");
}

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
    for (const ResponseTrace& t : data.traces)
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
  for (const ResponseTrace& t : data.traces) {
    if (!plotted(t)) continue;  // in the CSV; the figure shows the designs compared
    // Draw at most ~700 points per curve (the CSV keeps every row): smooth curves, small SVGs.
    const std::size_t rows = std::min<std::size_t>(t.time_s.size(), 2000);
    plots.push_back(fmt::format("'../series/{}' every {} using 1:{} with lines lc rgb '{}' lw {} {} title {}", trace_file(t),
                                std::max<std::size_t>(1, rows / 700), effort ? 3 : 2, colour_of(t.design, t.nonlinear), t.design == "reference" ? "1.2" : "2",
                                t.nonlinear ? "dt (8,4)" : "", quoted(label_of(t.design, t.nonlinear))));
  }
  s += plot_command(plots, "no stable design to show");
  return script_frame(effort ? "effort" : "step", s);
}

// The s-plane view: real axis from −left to right (a quarter of left, or beyond the rightmost marked
// point), imaginary axis ±im.
struct SplaneView {
  double left = 1.0, right = 0.25, im = 0.6;
};

std::string splane_script(const DesignRun& run, const ReportData& data, double zeta, const SplaneView& view) {
  const UnitsSpec& units = run.problem.spec.units;
  std::string s;
  s += fmt::format("  set title {} font ',13'\n",
                   quoted(data.locus_design.empty()
                              ? std::string("s-plane: the plant's poles and zeros (no stable design to vary)")
                              : fmt::format("s-plane: root locus of the {} loop as its gain varies", data.locus_design)));
  s += fmt::format("  set xlabel {}\n  set ylabel {}\n", quoted(fmt::format("real (1/{})", units.time)),
                   quoted(fmt::format("imaginary (rad/{})", units.time)));
  s += fmt::format("  set xrange [{}:{}]\n  set yrange [{}:{}]\n", csv_number(-view.left), csv_number(view.right),
                   csv_number(-view.im), csv_number(view.im));
  // The legend right of the plot area (the square view leaves room there), never over a curve.
  s += "  set size ratio -1\n  set key outside right top vertical Left reverse box opaque font ',9' samplen 2\n";
  s += "  set arrow from graph 0,first 0 to graph 1,first 0 nohead lc rgb '#999999'\n";
  s += "  set arrow from first 0,graph 0 to first 0,graph 1 nohead lc rgb '#999999'\n";
  std::vector<std::string> plots;
  const std::size_t branches = data.locus.poles.empty() ? 0 : data.locus.poles.front().size();
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
    if (d.status != StepStatus::ok || d.name == "ultimate_gain") continue;
    plots.push_back(fmt::format("'../series/splane_points.csv' using ((strcol(1) eq 'closed_loop_pole' && strcol(2) eq '{}') ? $3 : "
                                "NaN):4 with points pt 7 ps 1.0 lc rgb '{}' title {}",
                                d.name, colour_of(d.name, false), quoted(d.name + " closed-loop poles")));
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
  if (data.frequency.empty()) {
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
    for (const auto& [name, series] : data.frequency) {
      const Design* d = run.find(name);
      plots.push_back(fmt::format("'../series/frequency_{}.csv' using 1:{} with lines lc rgb '{}' lw 2 title {}", name,
                                  panel == 0 ? 2 : 3, colour_of(name, false), quoted(name)));
      if (!d || !d->margins) continue;
      const Margins& m = *d->margins;
      // Gain margins: a bar from |L| to 0 dB at the phase crossover where a pole would cross the
      // axis (below 0 dB: the upper margin; above: the lower one). A crossing at s = 0 or through
      // infinity has no place on the log axis and is in the table only.
      auto on_axis = [](const std::optional<double>& w) { return w && *w > 0.0 && std::isfinite(*w); };
      if (panel == 0 && on_axis(m.phase_crossover_rad_s) && m.gain_margin_db) {
        const double w = *m.phase_crossover_rad_s;
        s += fmt::format("  set arrow from {},{} to {},0 lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(-*m.gain_margin_db), csv_number(w), colour_of(name, false));
      }
      if (panel == 0 && on_axis(m.lower_phase_crossover_rad_s) && m.lower_gain_margin_db) {
        const double w = *m.lower_phase_crossover_rad_s;
        s += fmt::format("  set arrow from {},{} to {},0 lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(-*m.lower_gain_margin_db), csv_number(w), colour_of(name, false));
      }
      if (panel == 1 && m.gain_crossover_rad_s && m.phase_margin_deg) {
        const double w = *m.gain_crossover_rad_s;
        s += fmt::format("  set arrow from {},-180 to {},{} lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(w), csv_number(-180.0 + *m.phase_margin_deg), colour_of(name, false));
      }
    }
    plots.push_back(fmt::format("NaN with lines lc rgb '#555555' lw 1.5 title {}",
                                quoted(panel == 0 ? "bars: gain margins at the phase crossovers" : "bars: phase margin at the gain crossover")));
    s += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  }
  s += "  unset multiplot\n  unset logscale x\n  set format x '% h'\n";
  return script_frame("frequency", s);
}

// Writes the CSV series; returns the s-plane view that holds every marked point.
SplaneView write_series(const DesignRun& run, const ReportData& data, const fs::path& dir) {
  fs::create_directories(dir);
  for (const ResponseTrace& t : data.traces) {
    // A plotted trace ends where the figure's time axis does (the axis covers its settling).
    std::size_t rows = t.time_s.size();
    if (plotted(t))
      rows = static_cast<std::size_t>(std::upper_bound(t.time_s.begin(), t.time_s.end(), data.plot_horizon_s) - t.time_s.begin());
    auto first = [&](const std::vector<double>& v) { return std::vector<double>(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(std::min(rows, v.size()))); };
    // Keep reports small: at most ~2000 rows per trace (every sample of the usual grids).
    const std::size_t stride = std::max<std::size_t>(1, rows / 2000);
    const auto time = subsample(first(t.time_s), stride), y = subsample(first(t.output), stride),
               u = subsample(first(t.control), stride);
    if (t.nonlinear) {
      const auto uc = subsample(first(t.command), stride);
      write_csv(dir / trace_file(t), {"time_s", "output", "control_applied", "control_command"}, {&time, &y, &u, &uc});
    } else {
      write_csv(dir / trace_file(t), {"time_s", "output", "control"}, {&time, &y, &u});
    }
  }
  {
    std::vector<double> gain, branch, re, im;
    for (std::size_t b = 0; !data.locus.poles.empty() && b < data.locus.poles.front().size(); ++b)
      for (std::size_t i = 0; i < data.locus.gains.size(); ++i) {
        const Complex p = data.locus.poles[i][b];
        if (!std::isfinite(data.locus.gains[i]) || !std::isfinite(p.real()) || !std::isfinite(p.imag())) continue;
        gain.push_back(data.locus.gains[i]);
        branch.push_back(static_cast<double>(b));
        re.push_back(data.locus.poles[i][b].real());
        im.push_back(data.locus.poles[i][b].imag());
      }
    write_csv(dir / "locus.csv", {"gain_multiplier", "branch", "real_per_s", "imag_rad_per_s"}, {&gain, &branch, &re, &im});
  }
  // Marked points of the s-plane, and the view that holds them.
  double extent_re = 0.0, extent_im = 0.0, rightmost = 0.0;
  std::string points = "kind,design,real_per_s,imag_rad_per_s\n";
  auto point = [&](const std::string& kind, const std::string& design, Complex z) {
    if (!std::isfinite(z.real()) || !std::isfinite(z.imag())) return;  // drawn without it
    points += fmt::format("{},{},{},{}\n", kind, design, csv_number(z.real()), csv_number(z.imag()));
    extent_re = std::max(extent_re, std::abs(z.real()));
    extent_im = std::max(extent_im, std::abs(z.imag()));
    rightmost = std::max(rightmost, z.real());
  };
  if (!data.locus.poles.empty()) {
    // The delay's Padé approximant brings poles and zeros of its own into the loop: marked apart.
    const double delay = run.problem.spec.plant.delay_s;
    const TransferFunction pade = delay_approximant(delay, kDelayApproximantOrder);
    const std::vector<Complex> pade_poles = delay > 0.0 ? pade.poles() : std::vector<Complex>{};
    const std::vector<Complex> pade_zeros = delay > 0.0 ? pade.zeros() : std::vector<Complex>{};
    auto from_pade = [](Complex z, const std::vector<Complex>& list) {
      return std::any_of(list.begin(), list.end(), [&](Complex q) { return std::abs(z - q) <= 1e-4 * std::max(1.0, std::abs(q)); });
    };
    for (const Complex& p : data.locus_loop.poles())
      point(from_pade(p, pade_poles) ? "delay_approximant_pole" : "open_loop_pole", data.locus_design, p);
    if (!data.locus_loop.numerator.is_zero())
      for (const Complex& z : data.locus_loop.zeros())
        point(from_pade(z, pade_zeros) ? "delay_approximant_zero" : "open_loop_zero", data.locus_design, z);
  } else {
    // No stable design, so no locus: the plant's own poles and zeros at least.
    for (const Complex& p : run.problem.plant.poles()) point("open_loop_pole", "plant", p);
    if (!run.problem.plant.numerator.is_zero())
      for (const Complex& z : run.problem.plant.zeros()) point("open_loop_zero", "plant", z);
  }
  for (const Design& d : run.designs)
    if (d.status == StepStatus::ok && d.name != "ultimate_gain")
      for (const Complex& p : d.closed_loop_poles) point("closed_loop_pole", d.name, p);
  if (const Design* best = recommended_design(run)) {
    if (best->second_order) {
      const double wn = best->second_order->natural_frequency, z = best->second_order->damping_ratio;
      const Complex pair(-z * wn, wn * std::sqrt(std::max(0.0, 1.0 - z * z)));
      point("dominant_pair", best->name, pair);
      point("dominant_pair", best->name, std::conj(pair));
    }
    if (best->dominance) {
      for (const Complex& p : best->dominance->slow_poles) {
        point("breaks_approximation", best->name, p);
        if (p.imag() != 0.0) point("breaks_approximation", best->name, std::conj(p));
      }
      for (const Complex& z : best->dominance->near_zeros) {
        point("breaks_approximation", best->name, z);
        if (z.imag() != 0.0) point("breaks_approximation", best->name, std::conj(z));
      }
    }
  }
  // The ζ-line of the overshoot limit, far enough to cross the whole view (not part of the view).
  if (const double zeta = run.characterization.damping_ratio; zeta > 0.0 && zeta < 1.0) {
    const double far = 6.0 * std::max(extent_re, extent_im) + 1.0;
    for (const char* kind : {"damping_line_upper", "damping_line_lower"}) {
      const double sign = std::string_view(kind).ends_with("upper") ? 1.0 : -1.0;
      points += fmt::format("{0},,0,0\n{0},,{1},{2}\n", kind, csv_number(-far * zeta), csv_number(sign * far * std::sqrt(1.0 - zeta * zeta)));
    }
  }
  write_text(dir / "splane_points.csv", points);
  for (const auto& [name, f] : data.frequency)
    write_csv(dir / fmt::format("frequency_{}.csv", name), {"omega_rad_per_s", "magnitude_db", "phase_deg"},
              {&f.omega_rad_s, &f.magnitude_db, &f.phase_deg});
  SplaneView view;
  view.left = extent_re > 0.0 ? std::max(extent_re * 1.3, 1e-6) : 1.0;  // every point at the origin: a unit view
  view.right = std::max(0.25 * view.left, 1.3 * rightmost);  // right-half-plane zeros (a delay's Padé zeros) in view
  view.im = std::max(extent_im * 1.3, 0.6 * view.left);
  return view;
}

std::string value_attribute(const std::optional<double>& v) {
  return v ? fmt::format("data-value=\"{:.17g}\"", *v) : std::string("data-value=\"none\"");
}

Table requirement_table(const DesignRun& run) {
  Table t{"requirements", {"requirement", "limit"}, {}};
  for (const Design& d : run.designs) t.header.push_back(d.name);
  const Design* optimized = run.find("optimized");
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
                     fmt::format("{} data-design=\"{}\" data-met=\"{}\" class=\"{}\"", value_attribute(c.value), d.name,
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
    if (!d.second_order) {
      t.rows.push_back({{d.name, ""}, {"—", ""}, {"no complex closed-loop pair: nothing to predict", ""}, {"", ""}, {"", ""}});
      continue;
    }
    const SecondOrderPrediction& p = *d.second_order;
    auto row = [&](const char* metric, double predicted, const std::optional<double>& simulated, const std::string& unit) {
      const std::string error =
          simulated && predicted != 0.0 ? fmt::format("{:+.1f} %", (*simulated - predicted) / std::abs(predicted) * 100.0) : "—";
      t.rows.push_back({{d.name, ""}, {metric, ""}, {with_unit(predicted, unit), ""},
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
  row("design", "design", fmt::format("{} ({})", d.name, structure_name(c.structure)), d.name);
  if (!pid_type)
    row("derivative_on", "derivative acts on", "— (this structure acts on the error as its transfer function)", "none");
  else if (!has_derivative)
    row("derivative_on", "derivative acts on", "— (no derivative term)", "none");
  else
    row("derivative_on", "derivative acts on",
        cs.derivative_on_measurement ? "the measurement (c = 0: no derivative kick on a set-point step)" : "the error (c = 1)",
        cs.derivative_on_measurement ? "measurement" : "error");
  if (pid_type)
    row("setpoint_weight", "set-point weight", fmt::format("b = {:.4g} (the proportional term acts on b·r − y)", cs.setpoint_weight),
        fmt::format("{:.17g}", cs.setpoint_weight));
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
  for (const auto& [name, series] : data.frequency) {
    const Design* d = run.find(name);
    if (!d || !d->margins) continue;
    const Margins& m = *d->margins;
    // `name` in an init-capture: clang before 16 cannot capture a structured binding (C++20 P1091).
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

// The closed-loop modes' signed contributions, in one sentence, and the cancellation note.
std::vector<std::string> mode_sentences(const DominanceDiagnosis& dom) {
  std::vector<std::string> parts;
  double known = 0.0;
  bool missing = false;
  for (const ModeShare& m : dom.modes) {
    if (m.contribution) known += *m.contribution;
    else missing = true;
    parts.push_back(fmt::format("{:.4g}{}: {}{}", m.pole.real(),
                                m.pole.imag() > 0.0 ? fmt::format(" ± {:.4g}j", m.pole.imag()) : std::string(),
                                m.contribution ? fmt::format("{:+.1f} %", *m.contribution * 100.0) : std::string("—"),
                                m.pole.imag() > 0.0 && m.share ? fmt::format(" (oscillation amplitude {:.1f} %)", *m.share * 100.0)
                                                               : std::string()));
  }
  if (missing) parts.push_back(fmt::format("repeated poles together: {:+.1f} %", (dom.contribution_sum - known) * 100.0));
  std::vector<std::string> out;
  out.push_back(fmt::format("Closed-loop modes, signed contribution to the final value: {} (sum {:.0f} %).", fmt::join(parts, "; "),
                            dom.contribution_sum * 100.0));
  if (dom.cancellation) out.push_back(fmt::format("Modes cancel: {}.", *dom.cancellation));
  return out;
}

std::string verdict_line(const DesignRun& run) {
  const Design* best = recommended_design(run);
  std::string line;
  const char* loop = run.judged_on_nonlinear ? "nonlinear loop (the loop the spec describes)" : "linear loop";
  if (run.infeasibility) {
    line = fmt::format("NOT MET: no design meets every requirement on the {}; binding: {}.", loop, run.infeasibility->binding);
    if (run.judged_on_nonlinear && run.met_on_linear) line += " (The linear loop alone passes: a linear-only pass.)";
  } else {
    line = fmt::format("MET: the optimized design meets every requirement on the {}.", loop);
  }
  if (best && best->nonlinear)
    line += best->nonlinear->confirmed ? " Confirmed on the nonlinear loop." : " NOT confirmed on the nonlinear loop.";
  return line;
}

std::vector<Section> sections(const DesignRun& run, const ReportData& data, const ReportOutcome& outcome,
                              const std::vector<std::pair<std::string, std::string>>& figures /* id → svg (may be empty) */) {
  std::vector<Section> out;
  const Spec& spec = run.problem.spec;
  const Design* best = recommended_design(run);

  {  // Recommended controller.
    Section s{"controller", "Recommended controller", "", ""};
    if (best) {
      const std::string lines = controller_lines(*best, spec.units);
      const Table box = controller_box(run, *best);
      s.html = paragraph_html(fmt::format("The {} design.", best->name)) + "<pre>" + escape_html(lines) + "</pre>\n" + html_table(box);
      s.markdown = fmt::format("The {} design.\n\n```\n{}```\n\n{}", best->name, lines, md_table(box));
      for (const std::string& w : best->warnings) {
        s.html += paragraph_html("Warning: " + w);
        s.markdown += "\nWarning: " + escape_md(w) + "\n";
      }
    } else {
      s.html = paragraph_html("No design to recommend: neither the optimized nor the classical loop is stable.");
      s.markdown = "No design to recommend: neither the optimized nor the classical loop is stable.\n";
    }
    out.push_back(std::move(s));
  }
  if (!run.warnings.empty()) {  // Warnings about the result, before anything else is read.
    Section s{"warnings", "Warnings", "", ""};
    for (const std::string& w : run.warnings) {
      s.html += paragraph_html("Warning: " + w);
      s.markdown += "**Warning:** " + escape_md(w) + "\n\n";
    }
    out.push_back(std::move(s));
  }
  {  // Requirement table.
    const Table t = requirement_table(run);
    Section s{"requirement-table", "Requirements × designs", "", ""};
    const std::string note = fmt::format(
        "Values on the linear loop{} (✓ met, ✗ missed); the last row is the confirmation on the nonlinear loop. Slack: the "
        "optimized design's room on each requirement as a fraction of its limit (negative when missed); the search kept "
        "{:.3g} % (search.margin_pct) on every limit and narrowed the settling band by as much.",
        run.problem.sampled ? fmt::format(" — the sampled one, the controller at Ts = {:.4g} s", run.problem.spec.controller.sample_time_s)
                            : std::string(),
        run.problem.search_margin * 100.0);
    s.html = paragraph_html(note) + html_table(t);
    s.markdown = note + "\n\n" + md_table(t);
    out.push_back(std::move(s));
  }
  {  // Figures.
    Section s{"figures", "Figures", "", ""};
    static const std::vector<std::pair<std::string, std::string>> captions{
        {"step", "Step response: reference (P only), classical and optimized designs on the linear loop, and the recommended "
                 "design on the nonlinear loop, with the requirement envelope."},
        {"effort", "Control effort u(t) for the same designs, with the actuator limits, effort_max, and the time the command "
                   "spends beyond a limit shaded."},
        {"splane", "s-plane: open-loop poles and zeros of the recommended loop, its root locus as the gain varies, the ζ-line "
                   "of the overshoot limit, each design's closed-loop poles, the dominant pair and the modes that break the "
                   "second-order approximation."},
        {"frequency", "Loop frequency response of the classical and optimized designs. Each bar spans a margin at its "
                      "crossover: in the magnitude panel from the magnitude at the phase crossover up to 0 dB (the gain "
                      "margin), in the phase panel from −180° up to the phase at the gain crossover (the phase margin); "
                      "their values are in the table below."}};
    if (!outcome.figures_rendered) {
      s.html += paragraph_html(outcome.figures_note);
      s.markdown += outcome.figures_note + "\n\n";
    }
    for (const auto& [id, caption] : captions) {
      const auto svg = std::find_if(figures.begin(), figures.end(), [&id = id](const auto& f) { return f.first == id; });
      s.html += fmt::format("<figure id=\"fig-{}\">\n{}<figcaption>{}</figcaption>\n</figure>\n", id,
                            svg != figures.end() && !svg->second.empty() ? svg->second + "\n" : std::string(),
                            escape_html(caption) + fmt::format(" (data: series/, script: plots/{}.gp)", id));
      s.markdown += outcome.figures_rendered ? fmt::format("![{}](plots/{}.svg)\n\n*{}*\n\n", id, id, caption)
                                             : fmt::format("*{}* (script: plots/{}.gp)\n\n", caption, id);
      if (id == "frequency") {
        const Table margins = margin_table(run, data);
        s.html += html_table(margins);
        s.markdown += md_table(margins) + "\n";
      }
    }
    out.push_back(std::move(s));
  }
  {  // The approximation.
    const Table t = approximation_table(run);
    Section s{"approximation", "The second-order approximation against the simulated response", "", ""};
    std::string words;
    const Characterization& ch = run.characterization;
    if (!ch.dominant) {
      words += fmt::format("The uncompensated loop has no usable crossing of the ζ = {:.3f} line: {}. ", ch.damping_ratio,
                           ch.dominant_reason);
    }
    if (!run.classical.designed)
      words += fmt::format("No classical design: the hand method stops at its {} step: {}. ", run.classical.failed_step,
                           run.classical.reason);
    s.html = words.empty() ? "" : paragraph_html(words);
    s.markdown = words.empty() ? "" : words + "\n\n";
    s.html += html_table(t);
    s.markdown += md_table(t) + "\n";
    const std::string modes_defined =
        "A closed-loop mode's signed contribution is its term of y(t) − y∞ at t = 0, negated and divided by y∞: the part "
        "of the final value still to come from that mode (positive: its term starts below y∞ and decays away). The "
        "contributions add up to 100 % of the final value; a pair's term oscillates, so its amplitude is given too.";
    s.html += paragraph_html(modes_defined);
    s.markdown += modes_defined + "\n\n";
    for (const Design& d : run.designs) {
      if (!d.dominance) continue;
      s.html += fmt::format("<p><b>{}</b>: {}</p>\n<ul>\n", escape_html(d.name), escape_html(d.dominance->verdict));
      s.markdown += fmt::format("**{}**: {}\n\n", d.name, escape_md(d.dominance->verdict));
      for (const std::string& r : d.dominance->reasons) {
        s.html += "<li>" + escape_html(r) + "</li>\n";
        s.markdown += "- " + escape_md(r) + "\n";
      }
      for (const std::string& line : mode_sentences(*d.dominance)) {
        s.html += fmt::format("<li class=\"modes\" data-design=\"{}\">{}</li>\n", d.name, escape_html(line));
        s.markdown += "- " + escape_md(line) + "\n";
      }
      s.html += "</ul>\n";
      s.markdown += "\n";
    }
    out.push_back(std::move(s));
  }
  {  // Nonlinear confirmation.
    Section s{"confirmation", "Confirmation on the nonlinear loop", "", ""};
    for (const Design& d : run.designs) {
      if (!d.nonlinear) continue;
      const std::string text = fmt::format("{}: {}", d.name, d.nonlinear->verdict);
      s.html += paragraph_html(text);
      s.markdown += escape_md(text) + "\n\n";
    }
    out.push_back(std::move(s));
  }
  {  // Search.
    const SearchSummary& q = run.search;
    std::vector<std::string> effects;
    for (const std::string& e : q.active_effects) effects.push_back(effect_description(e));
    const std::string text = fmt::format(
        "NLopt {} then {}: {} evaluations ({} global, {} local{}), {} unstable and {} infeasible candidates, {:.3f} s; {}. "
        "Linear stages on the {} loop. search.simulate = {}; active for the linear optimum: {}; {}",
        q.global_given, q.local_given, q.evaluations, q.global_evaluations, q.local_evaluations,
        q.nonlinear_evaluations ? fmt::format(", {} on the nonlinear loop", q.nonlinear_evaluations) : std::string(), q.unstable,
        q.infeasible, q.wall_time_s, q.stop_reason, q.linear_loop, q.simulate,
        effects.empty() ? std::string("none") : fmt::format("{}", fmt::join(effects, ", ")), q.nonlinear_stage);
    Section s{"search", "Search", paragraph_html(text), escape_md(text) + "\n"};
    if (run.infeasibility) {
      const std::string more = run.infeasibility->nearest_text;
      s.html += paragraph_html(more);
      s.markdown += "\n" + escape_md(more) + "\n";
    }
    out.push_back(std::move(s));
  }
  {  // The spec as read.
    std::string text;
    if (!spec.source_text.empty()) text = spec.source_text;
    else if (spec.path != "<string>" && fs::exists(spec.path)) text = read_text(spec.path);
    else text = spec_json(spec).dump(2);
    const std::string intro = fmt::format("From {} (every default filled in, as normalized, is in result.json under \"spec\").", spec.path);
    Section s{"spec", "The spec as read", paragraph_html(intro) + "<pre>" + escape_html(text) + "</pre>\n",
              escape_md(intro) + "\n\n```toml\n" + text + (text.ends_with('\n') ? "" : "\n") + "```\n"};
    out.push_back(std::move(s));
  }
  {
    Section s{"safety", "Safety", paragraph_html(kSafetyCaution), std::string(kSafetyCaution) + "\n"};
    out.push_back(std::move(s));
  }
  return out;
}

}  // namespace

ReportOutcome write_design_outputs(const DesignRun& run, const fs::path& dir, const ReportOptions& options) {
  const ReportData data = report_data(run);
  ReportOutcome outcome;
  write_staged(dir, {"series", "plots", "report.md", "report.html", "result.json"}, [&](const fs::path& staging) {
    write_text(staging / "result.json", result_json(run).dump(2) + "\n");
    const SplaneView view = write_series(run, data, staging / "series");
    const double zeta = run.characterization.damping_ratio;
    const RenderedFigures figures = write_and_render(staging / "plots",
                                                     {{"step", step_script(run, data, false)},
                                                      {"effort", step_script(run, data, true)},
                                                      {"splane", splane_script(run, data, zeta, view)},
                                                      {"frequency", frequency_script(run, data)}},
                                                     options.render_figures);
    outcome.figures_note = figures.note;
    outcome.figures_rendered = figures.rendered;
    const Spec& spec = run.problem.spec;
    const bool good = run.met && recommended_design(run) && recommended_design(run)->nonlinear &&
                      recommended_design(run)->nonlinear->confirmed;
    write_pages(staging, spec.title.empty() ? spec.name : spec.title, "specloop report", verdict_line(run), good,
                sections(run, data, outcome, figures.svgs), fmt::format("specloop {} — spec {}", SPECLOOP_VERSION, spec.path));
  });
  const fs::path target = dir.empty() ? fs::path(".") : dir;
  outcome.result = target / "result.json";
  outcome.html = target / "report.html";
  outcome.markdown = target / "report.md";
  return outcome;
}

}  // namespace specloop
