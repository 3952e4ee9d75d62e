// The design report (report.hpp): data for the figures, CSV series, gnuplot scripts, and the HTML
// and Markdown pages built from one list of sections.
#include "specloop/report.hpp"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <fmt/format.h>
#include <fstream>
#include <numbers>
#include <sstream>
#include <stdexcept>
#include <unistd.h>

#include "page_kit.hpp"
#include "specloop/json_io.hpp"

namespace specloop {

const char* const kSafetyCaution =
    "A simulated design is not a verified machine: validate on the real system with interlocks, and defer to local "
    "codes, applicable functional-safety standards and licensed engineering practice.";

namespace fs = std::filesystem;
using namespace page;

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
  }
  if (!(hi > 0.0)) return {0.01, 100.0};
  return {lo / 100.0, hi * 100.0};
}

}  // namespace

ReportData report_data(const DesignRun& run) {
  const Problem& problem = run.problem;
  const Spec& spec = problem.spec;
  ReportData data;
  double horizon = 0.0;
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok) continue;
    StepSimulator sim;
    StepMetrics m;
    StepTrace trace;
    if (sim.simulate(close_loop(problem.plant_realization, d.controller.transfer, d.reference_path),
                     spec.reference.amplitude, problem.band_fraction, m, &trace) != StepStatus::ok)
      continue;
    ResponseTrace t{d.name, false, std::move(trace.time_s), std::move(trace.output), std::move(trace.effort), {}};
    // The time axis: until the slowest plotted design has settled, with room after it.
    const double settled = m.settling_time_s ? *m.settling_time_s : t.time_s.back();
    if (d.name != "ultimate_gain") horizon = std::max(horizon, std::min(1.5 * settled, t.time_s.back()));
    data.traces.push_back(std::move(t));
  }
  const Design* best = recommended_design(run);
  if (best) {
    const auto linear = std::find_if(data.traces.begin(), data.traces.end(),
                                     [&](const ResponseTrace& t) { return t.design == best->name; });
    const double linear_horizon = linear != data.traces.end() ? linear->time_s.back() : horizon;
    const NonlinearSetup setup = nonlinear_setup(problem, linear_horizon, kReportNonlinearSamples);
    const NonlinearResult r = simulate_on_nonlinear_loop(problem, best->controller, setup);
    if (r.status == NonlinearStatus::ok) {
      data.traces.push_back({best->name, true, r.time_s, r.output, r.control, r.command});
      if (spec.disturbance.size != 0.0) horizon = std::max(horizon, std::min(r.time_s.back(), 2.0 * spec.disturbance.time_s));
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
    data.frequency.emplace_back(name, loop_frequency_response(loop, lo, hi, 300));
  }
  data.plot_horizon_s = horizon > 0.0 ? horizon : 1.0;
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
  s += fmt::format("  set title {} font ',13'\n", quoted(effort ? "Control effort u(t)" : "Step response y(t)"));
  s += "  set xlabel 'time (s)'\n";
  s += fmt::format("  set ylabel {}\n", quoted(effort ? "u (actuator units)" : "y (output units)"));
  s += fmt::format("  set xrange [0:{}]\n", csv_number(data.plot_horizon_s));
  s += "  unset object; unset arrow; unset label\n";
  std::vector<std::string> plots;
  if (!effort) {
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
      s += fmt::format("  set label {} at {},graph 0.06 right offset -0.5,0 textcolor rgb '#6a1b9a' font ',10'\n",
                       quoted(fmt::format("settling {:.4g} s, ±{:.4g} % band", ts, band * 100.0)), csv_number(ts));
    }
    std::optional<double> tp_limit = req.peak_time_max_s;
    if (req.peak_time_ratio && run.problem.reference_peak_time_s) {
      const double v = *req.peak_time_ratio * *run.problem.reference_peak_time_s;
      tp_limit = tp_limit ? std::min(*tp_limit, v) : v;
    }
    if (tp_limit) {
      s += fmt::format("  set arrow from {},graph 0 to {},graph 1 nohead lc rgb '#ef6c00' dt 4 lw 1.2\n", csv_number(*tp_limit),
                       csv_number(*tp_limit));
      s += fmt::format("  set label {} at {},graph 0.95 left offset 0.5,0 textcolor rgb '#ef6c00' font ',10'\n",
                       quoted(fmt::format("peak-time limit {:.4g} s", *tp_limit)), csv_number(*tp_limit));
    }
  } else {
    const ActuatorSpec& a = spec.actuator;
    if (a.limited) {
      plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 title 'actuator limits'", csv_number(a.max)));
      plots.push_back(fmt::format("{} with lines lc rgb '#c62828' dt 2 lw 1.5 notitle", csv_number(a.min)));
    }
    if (req.effort_max) {
      plots.push_back(fmt::format("{} with lines lc rgb '#6a1b9a' dt 3 lw 1.2 title {}", csv_number(*req.effort_max),
                                  quoted(fmt::format("effort_max {:.4g}", *req.effort_max))));
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
    if (t.design == "ultimate_gain") continue;  // in the CSV; the figure shows the designs compared
    // Draw at most ~700 points per curve (the CSV keeps every row): smooth curves, small SVGs.
    const std::size_t rows = std::min<std::size_t>(t.time_s.size(), 2000);
    plots.push_back(fmt::format("'../series/{}' every {} using 1:{} with lines lc rgb '{}' lw {} {} title {}", trace_file(t),
                                std::max<std::size_t>(1, rows / 700), effort ? 3 : 2, colour_of(t.design, t.nonlinear), t.design == "reference" ? "1.2" : "2",
                                t.nonlinear ? "dt (8,4)" : "", quoted(label_of(t.design, t.nonlinear))));
  }
  s += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  return script_frame(effort ? "effort" : "step", s);
}

std::string splane_script(const DesignRun& run, const ReportData& data, double zeta, double extent_re, double extent_im) {
  std::string s;
  s += fmt::format("  set title {} font ',13'\n",
                   quoted(fmt::format("s-plane: root locus of the {} loop as its gain varies", data.locus_design)));
  s += "  set xlabel 'real (1/s)'\n  set ylabel 'imaginary (rad/s)'\n";
  s += fmt::format("  set xrange [{}:{}]\n  set yrange [{}:{}]\n", csv_number(-extent_re), csv_number(0.25 * extent_re),
                   csv_number(-extent_im), csv_number(extent_im));
  s += "  set size ratio -1\n  set key bottom left box opaque font ',9'\n";
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
  for (const Design& d : run.designs) {
    if (d.status != StepStatus::ok || d.name == "ultimate_gain") continue;
    plots.push_back(fmt::format("'../series/splane_points.csv' using ((strcol(1) eq 'closed_loop_pole' && strcol(2) eq '{}') ? $3 : "
                                "NaN):4 with points pt 7 ps 1.0 lc rgb '{}' title {}",
                                d.name, colour_of(d.name, false), quoted(d.name + " closed-loop poles")));
  }
  plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'dominant_pair') ? $3 : NaN):4 with points pt 4 ps 2.4 lw 2 "
                  "lc rgb '#1f5f99' title 'dominant pair (recommended design)'");
  plots.push_back("'../series/splane_points.csv' using ((strcol(1) eq 'breaks_approximation') ? $3 : NaN):4 with points pt 3 ps "
                  "2.2 lw 2 lc rgb '#c62828' title 'modes that break the approximation'");
  s += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  return script_frame("splane", s);
}

std::string frequency_script(const DesignRun& run, const ReportData& data) {
  std::string s;
  s += "  set multiplot layout 2,1 title 'Loop frequency response L(jω) = C(jω)·G(jω)' font ',13'\n";
  s += "  set logscale x\n  set format x '10^{%L}'\n  set xlabel 'ω (rad/s)'\n";
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
      if (panel == 0 && m.phase_crossover_rad_s && m.gain_margin_db) {
        const double w = *m.phase_crossover_rad_s;
        s += fmt::format("  set arrow from {},{} to {},0 lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(-*m.gain_margin_db), csv_number(w), colour_of(name, false));
        s += fmt::format("  set label {} at {},{} left offset 0.6,0 font ',9' textcolor rgb '{}'\n",
                         quoted(fmt::format("GM {:.3g} dB at {:.3g} rad/s", *m.gain_margin_db, w)), csv_number(w),
                         csv_number(-*m.gain_margin_db / 2.0), colour_of(name, false));
      }
      if (panel == 1 && m.gain_crossover_rad_s && m.phase_margin_deg) {
        const double w = *m.gain_crossover_rad_s;
        s += fmt::format("  set arrow from {},-180 to {},{} lc rgb '{}' lw 1.5 heads size screen 0.008,90\n", csv_number(w),
                         csv_number(w), csv_number(-180.0 + *m.phase_margin_deg), colour_of(name, false));
        s += fmt::format("  set label {} at {},{} left offset 0.6,0 font ',9' textcolor rgb '{}'\n",
                         quoted(fmt::format("PM {:.3g}° at {:.3g} rad/s", *m.phase_margin_deg, w)), csv_number(w),
                         csv_number(-180.0 + *m.phase_margin_deg / 2.0), colour_of(name, false));
      }
    }
    s += fmt::format("  plot {}\n", fmt::join(plots, ", \\\n       "));
  }
  s += "  unset multiplot\n  unset logscale x\n  set format x '% h'\n";
  return script_frame("frequency", s);
}

// Writes the CSV series; returns the s-plane view (half-extents along re and im).
std::pair<double, double> write_series(const DesignRun& run, const ReportData& data, const fs::path& dir) {
  fs::create_directories(dir);
  for (const ResponseTrace& t : data.traces) {
    // Keep reports small: at most ~2000 rows per trace (every sample of the usual grids).
    const std::size_t stride = std::max<std::size_t>(1, t.time_s.size() / 2000);
    const auto time = subsample(t.time_s, stride), y = subsample(t.output, stride), u = subsample(t.control, stride);
    if (t.nonlinear) {
      const auto uc = subsample(t.command, stride);
      write_csv(dir / trace_file(t), {"time_s", "output", "control_applied", "control_command"}, {&time, &y, &u, &uc});
    } else {
      write_csv(dir / trace_file(t), {"time_s", "output", "control"}, {&time, &y, &u});
    }
  }
  {
    std::vector<double> gain, branch, re, im;
    for (std::size_t b = 0; !data.locus.poles.empty() && b < data.locus.poles.front().size(); ++b)
      for (std::size_t i = 0; i < data.locus.gains.size(); ++i) {
        gain.push_back(data.locus.gains[i]);
        branch.push_back(static_cast<double>(b));
        re.push_back(data.locus.poles[i][b].real());
        im.push_back(data.locus.poles[i][b].imag());
      }
    write_csv(dir / "locus.csv", {"gain_multiplier", "branch", "real_per_s", "imag_rad_per_s"}, {&gain, &branch, &re, &im});
  }
  // Marked points of the s-plane, and the view that holds them.
  double extent_re = 0.0, extent_im = 0.0;
  std::string points = "kind,design,real_per_s,imag_rad_per_s\n";
  auto point = [&](const std::string& kind, const std::string& design, Complex z) {
    points += fmt::format("{},{},{},{}\n", kind, design, csv_number(z.real()), csv_number(z.imag()));
    extent_re = std::max(extent_re, std::abs(z.real()));
    extent_im = std::max(extent_im, std::abs(z.imag()));
  };
  if (!data.locus.poles.empty()) {
    for (const Complex& p : data.locus_loop.poles()) point("open_loop_pole", data.locus_design, p);
    if (!data.locus_loop.numerator.is_zero())
      for (const Complex& z : data.locus_loop.zeros()) point("open_loop_zero", data.locus_design, z);
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
  extent_re = std::max(extent_re * 1.3, 1e-6);
  extent_im = std::max(extent_im * 1.3, 0.6 * extent_re);
  return {extent_re, extent_im};
}

std::string value_attribute(const std::optional<double>& v) {
  return v ? fmt::format("data-value=\"{:.17g}\"", *v) : std::string("data-value=\"none\"");
}

Table requirement_table(const DesignRun& run) {
  Table t{"requirements", {"requirement", "limit"}, {}};
  for (const Design& d : run.designs) t.header.push_back(d.name);
  for (std::size_t i = 0; i < run.problem.requirements.size(); ++i) {
    const Requirement& r = run.problem.requirements[i];
    std::vector<Cell> row{{r.key, fmt::format("data-key=\"{}\"", r.key)},
                          {fmt::format("{} {}", r.upper ? "≤" : "≥", with_unit(r.limit, r.unit)),
                           fmt::format("data-value=\"{:.17g}\"", r.limit)}};
    for (const Design& d : run.designs) {
      const RequirementCheck& c = d.checks[i];
      const std::string shown = c.value ? with_unit(*c.value, r.unit) : "none";
      row.push_back({fmt::format("{} {}", shown, c.met ? "✓" : "✗"),
                     fmt::format("{} data-design=\"{}\" data-met=\"{}\" class=\"{}\"", value_attribute(c.value), d.name,
                                 c.met ? "true" : "false", c.met ? "met" : "missed")});
    }
    t.rows.push_back(std::move(row));
  }
  std::vector<Cell> all{{"meets all", ""}, {"", ""}};
  for (const Design& d : run.designs) all.push_back({d.meets_all ? "yes" : "no", d.meets_all ? "class=\"met\"" : "class=\"missed\""});
  t.rows.push_back(std::move(all));
  std::vector<Cell> confirmed{{"nonlinear loop", ""}, {"", ""}};
  for (const Design& d : run.designs)
    confirmed.push_back({!d.nonlinear ? "—" : d.nonlinear->confirmed ? "confirmed" : "NOT confirmed",
                         !d.nonlinear ? "" : d.nonlinear->confirmed ? "class=\"met\"" : "class=\"missed\""});
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
    row("peak time", p.peak_time_s, d.simulated.peak_time_s, "s");
    row("settling time", p.settling_time_s, d.simulated.settling_time_s, "s");
  }
  return t;
}

std::string controller_lines(const Design& d) {
  const Controller& c = d.controller;
  std::string s;
  const auto& info = structure_parameters(c.structure);
  std::vector<std::string> series;
  for (std::size_t i = 0; i < info.size(); ++i)
    series.push_back(fmt::format("{} = {:.5g}{}", info[i].name, c.series[i], info[i].unit.empty() ? "" : " " + info[i].unit));
  s += fmt::format("series ({}): {}\n", structure_name(c.structure), fmt::join(series, ", "));
  if (c.parallel)
    s += fmt::format("parallel: Kp = {:.5g}, Ki = {:.5g} 1/s, Kd = {:.5g} s, Tf = {:.4g} s\n", c.parallel->kp, c.parallel->ki,
                     c.parallel->kd, c.parallel->filter_time);
  else
    s += "parallel: none (this structure has no PID equivalent)\n";
  if (c.standard)
    s += fmt::format("standard: Kp = {:.5g}, Ti = {}, Td = {:.4g} s, N = {:.4g}\n", c.standard->kp,
                     c.standard->has_integral ? fmt::format("{:.4g} s", c.standard->ti) : std::string("∞ (no integral)"),
                     c.standard->td, c.standard->n);
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
    s += fmt::format("difference equation at Ts = {:.4g} s (coefficients of z^0, z^-1, ...): U = (R·{} − Y·{}) / {}; {}\n",
                     e.sample_time_s, list(e.reference_numerator), list(e.measurement_numerator), list(e.denominator), e.method);
  }
  return s;
}

std::string verdict_line(const DesignRun& run) {
  const Design* best = recommended_design(run);
  std::string line;
  if (run.infeasibility) {
    line = fmt::format("NOT MET: no design meets every requirement on the {} loop; binding: {}.",
                       run.judged_on_nonlinear ? "nonlinear" : "linear", run.infeasibility->binding);
  } else {
    line = fmt::format("MET: the optimized design meets every requirement on the {} loop.",
                       run.judged_on_nonlinear ? "nonlinear" : "linear");
  }
  if (best && best->nonlinear)
    line += best->nonlinear->confirmed ? " Confirmed on the nonlinear loop." : " NOT confirmed on the nonlinear loop.";
  return line;
}

std::vector<Section> sections(const DesignRun& run, const ReportOutcome& outcome,
                              const std::vector<std::pair<std::string, std::string>>& figures /* id → svg (may be empty) */) {
  std::vector<Section> out;
  const Spec& spec = run.problem.spec;
  const Design* best = recommended_design(run);

  {  // Recommended controller.
    Section s{"controller", "Recommended controller", "", ""};
    if (best) {
      const std::string lines = controller_lines(*best);
      s.html = paragraph_html(fmt::format("The {} design.", best->name)) + "<pre>" + escape_html(lines) + "</pre>\n";
      s.markdown = fmt::format("The {} design.\n\n```\n{}```\n", best->name, lines);
    } else {
      s.html = paragraph_html("No design to recommend: neither the optimized nor the classical loop is stable.");
      s.markdown = "No design to recommend: neither the optimized nor the classical loop is stable.\n";
    }
    out.push_back(std::move(s));
  }
  {  // Requirement table.
    const Table t = requirement_table(run);
    Section s{"requirement-table", "Requirements × designs", "", ""};
    const std::string note = "Values on the linear loop (✓ met, ✗ missed); the last row is the confirmation on the nonlinear loop.";
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
        {"frequency", "Loop frequency response of the classical and optimized designs with their gain and phase margins at the "
                      "crossover frequencies."}};
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
    if (!run.find("classical")) words += "No classical design: the hand method has no target pole to design for. ";
    s.html = words.empty() ? "" : paragraph_html(words);
    s.markdown = words.empty() ? "" : words + "\n\n";
    s.html += html_table(t);
    s.markdown += md_table(t) + "\n";
    for (const Design& d : run.designs) {
      if (!d.dominance) continue;
      s.html += fmt::format("<p><b>{}</b>: {}</p>\n<ul>\n", escape_html(d.name), escape_html(d.dominance->verdict));
      s.markdown += fmt::format("**{}**: {}\n\n", d.name, escape_md(d.dominance->verdict));
      for (const std::string& r : d.dominance->reasons) {
        s.html += "<li>" + escape_html(r) + "</li>\n";
        s.markdown += "- " + escape_md(r) + "\n";
      }
      std::vector<std::string> shares;
      for (const ModeShare& m : d.dominance->modes)
        if (m.pole.imag() >= 0.0)
          shares.push_back(fmt::format("{:.4g}{}: {}", m.pole.real(),
                                       m.pole.imag() > 0.0 ? fmt::format(" ± {:.4g}j", m.pole.imag()) : std::string(),
                                       m.share ? fmt::format("{:.1f} %", *m.share * 100.0) : std::string("repeated")));
      const std::string share_text = fmt::format("Share of the step response per closed-loop mode: {}.", fmt::join(shares, "; "));
      s.html += "<li>" + escape_html(share_text) + "</li>\n</ul>\n";
      s.markdown += "- " + escape_md(share_text) + "\n\n";
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
    const std::string text = fmt::format(
        "NLopt {} then {}: {} evaluations ({} global, {} local{}), {} unstable and {} infeasible candidates, {:.3f} s; {}",
        q.global_given, q.local_given, q.evaluations, q.global_evaluations, q.local_evaluations,
        q.nonlinear_evaluations ? fmt::format(", {} on the nonlinear loop", q.nonlinear_evaluations) : std::string(), q.unstable,
        q.infeasible, q.wall_time_s, q.stop_reason);
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
    const auto [extent_re, extent_im] = write_series(run, data, staging / "series");
    const double zeta = run.characterization.damping_ratio;
    const RenderedFigures figures = write_and_render(staging / "plots",
                                                     {{"step", step_script(run, data, false)},
                                                      {"effort", step_script(run, data, true)},
                                                      {"splane", splane_script(run, data, zeta, extent_re, extent_im)},
                                                      {"frequency", frequency_script(run, data)}},
                                                     options.render_figures);
    outcome.figures_note = figures.note;
    outcome.figures_rendered = figures.rendered;
    const Spec& spec = run.problem.spec;
    const bool good = run.met && recommended_design(run) && recommended_design(run)->nonlinear &&
                      recommended_design(run)->nonlinear->confirmed;
    write_pages(staging, spec.title.empty() ? spec.name : spec.title, "specloop report", verdict_line(run), good,
                sections(run, outcome, figures.svgs), fmt::format("specloop {} — spec {}", SPECLOOP_VERSION, spec.path));
  });
  const fs::path target = dir.empty() ? fs::path(".") : dir;
  outcome.result = target / "result.json";
  outcome.html = target / "report.html";
  outcome.markdown = target / "report.md";
  return outcome;
}

}  // namespace specloop
