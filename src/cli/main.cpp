// The specloop command line: subcommands, exit codes (0 ok, 1 requirement not met, 2 bad input),
// and the terminal tables.
#include <CLI/CLI.hpp>
#include <fmt/format.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <csignal>
#include <filesystem>
#include <thread>
#include <fstream>
#include <iostream>

#include "specloop/design/characterize.hpp"
#include "specloop/output/json_io.hpp"
#include "specloop/output/caution.hpp"
#include "specloop/output/report.hpp"
#include "specloop/spec/spec.hpp"
#include "specloop/sweep/sweep.hpp"
#include "specloop/sweep/sweep_report.hpp"
#include "cli/fit_command.hpp"

namespace {

using namespace specloop;

std::string opt_time(const std::optional<double>& t, const std::string& unit) { return t ? fmt::format("{:.4g} {}", *t, unit) : "—"; }

std::string pole_text(Complex p) {
  if (p.imag() == 0.0) return fmt::format("{:.4g}", p.real());
  return fmt::format("{:.4g} {} j{:.4g}", p.real(), p.imag() > 0 ? '+' : '-', std::abs(p.imag()));
}

std::string poles_text(const std::vector<Complex>& poles) {
  std::string out;
  for (const Complex& p : poles) {
    if (p.imag() < 0.0) continue;  // print each pair once, as ±
    if (!out.empty()) out += ", ";
    out += p.imag() == 0.0 ? pole_text(p) : fmt::format("{:.4g} ± j{:.4g}", p.real(), p.imag());
  }
  return out;
}

std::string constant_text(double v) { return std::isinf(v) ? "∞" : fmt::format("{:.4g}", v); }

// The closed-loop modes at the dominant gain with their signed contributions (characterize.hpp).
void print_modes(const DominanceDiagnosis& d) {
  fmt::print("  modes (signed contribution to the step's final value at t = 0; they add up to {:.0f} %):\n",
             d.contribution_sum * 100.0);
  double known = 0.0;
  bool missing = false;
  for (const ModeShare& m : d.modes) {
    const std::string pole = m.pole.imag() == 0.0 ? fmt::format("{:.4g}", m.pole.real())
                                                  : fmt::format("{:.4g} ± j{:.4g}", m.pole.real(), m.pole.imag());
    if (m.contribution) known += *m.contribution;
    else missing = true;
    fmt::print("    {:<22} {:>9}{}\n", pole, m.contribution ? fmt::format("{:+.1f} %", *m.contribution * 100.0) : "—",
               m.pole.imag() != 0.0 && m.share ? fmt::format("   (oscillation amplitude {:.1f} %)", *m.share * 100.0) : "");
  }
  if (missing) fmt::print("    {:<22} {:>9}\n", "repeated poles together", fmt::format("{:+.1f} %", (d.contribution_sum - known) * 100.0));
  if (d.cancellation) fmt::print("  modes cancel: {}\n", *d.cancellation);
}

void print_analysis(const Spec& spec, const Characterization& ch) {
  const double limit = *spec.requirements.overshoot_max_pct;
  const std::string& tu = spec.units.time;
  fmt::print("{}\n", spec.title.empty() ? spec.name : spec.title);
  const double a = ch.action;  // gains are shown as the controller gain on the plant as given
  fmt::print("P-only loop K·G against overshoot ≤ {:.4g} %  →  ζ = {:.4f}{}\n", limit, ch.damping_ratio,
             a < 0.0 ? "  (reverse action: K < 0)" : "");
  fmt::print("P-gain stability: {}\n\n", ch.p_stability.text(a));
  if (ch.crossings.empty()) {
    fmt::print("ζ-line crossings: none. {}\n", ch.dominant_reason);
  } else {
    fmt::print("ζ-line crossings of the root locus\n");
    fmt::print("  {:>3}  {:>12}  {:>22}  {:>7}  {:>9}\n", "#", "gain K", "crossing point", "stable", "σ ratio");
    for (std::size_t i = 0; i < ch.crossings.size(); ++i) {
      const auto& c = ch.crossings[i];
      fmt::print("  {:>3}  {:>12.5g}  {:>22}  {:>7}  {:>9}{}\n", i + 1, a * c.gain,
                 fmt::format("{:.4g} ± j{:.4g}", c.pair_pole.real(), c.pair_pole.imag()), c.stable ? "yes" : "no",
                 std::isinf(c.decay_ratio) ? "—" : fmt::format("{:.2f}", c.decay_ratio),
                 ch.dominant_index && *ch.dominant_index == i ? "  ← dominant" : "");
    }
    fmt::print("  dominant: {}\n", ch.dominant_reason);
  }
  fmt::print("\n");
  if (ch.dominant && ch.second_order) {
    const auto& s = ch.dominant->simulated;
    const auto& p = *ch.second_order;
    fmt::print("At the dominant crossing, K = {:.5g}; closed-loop poles {}\n", a * ch.dominant->gain,
               poles_text(ch.dominant->poles));
    fmt::print("  {:<18} {:>14} {:>14} {:>10}\n", "", "second-order", "simulated", "error");
    fmt::print("  {:<18} {:>12.3f} % {:>12.3f} % {:>9.0f} %\n", "overshoot", p.overshoot_pct, s.overshoot_pct,
               ch.dominance->overshoot_error_pct);
    fmt::print("  {:<18} {:>14} {:>14} {:>10}\n", "peak time", opt_time(p.peak_time_s, tu), opt_time(s.peak_time_s, tu),
               ch.dominance->peak_time_error_pct ? fmt::format("{:.0f} %", *ch.dominance->peak_time_error_pct) : "—");
    fmt::print("  {:<18} {:>14} {:>14} {:>10}\n", "settling time", opt_time(p.settling_time_s, tu), opt_time(s.settling_time_s, tu),
               ch.dominance->settling_time_error_pct ? fmt::format("{:.0f} %", *ch.dominance->settling_time_error_pct) : "—");
    fmt::print("\n");
  }
  fmt::print("  {:<28} {:>14} {:>14}\n", "", "dominant K", "reference K");
  auto cell = [](const std::optional<GainPoint>& g, auto f) { return g ? f(*g) : std::string("—"); };
  const auto& d = ch.dominant;
  const auto& r = ch.reference;
  auto row = [&](const char* name, auto f) { fmt::print("  {:<28} {:>14} {:>14}\n", name, cell(d, f), cell(r, f)); };
  row("gain", [a](const GainPoint& g) { return fmt::format("{:.5g}", a * g.gain); });
  row("overshoot", [](const GainPoint& g) { return fmt::format("{:.3f} %", g.simulated.overshoot_pct); });
  row("peak time", [&](const GainPoint& g) { return opt_time(g.simulated.peak_time_s, tu); });
  row("settling time", [&](const GainPoint& g) { return opt_time(g.simulated.settling_time_s, tu); });
  row("rise time (10–90 %)", [&](const GainPoint& g) { return opt_time(g.simulated.rise_time_s, tu); });
  row("position constant Kp", [](const GainPoint& g) { return constant_text(g.constants.position); });
  row("velocity constant Kv", [](const GainPoint& g) { return constant_text(g.constants.velocity); });
  row("steady-state error", [](const GainPoint& g) { return fmt::format("{:.4g}", g.simulated.steady_state_error); });
  row("peak |u|", [&](const GainPoint& g) { return fmt::format("{:.4g} {}", g.simulated.effort_peak, spec.units.input); });
  row("ITAE", [](const GainPoint& g) { return fmt::format("{:.4g}", g.simulated.itae); });
  if (r) fmt::print("  reference peak time (what peak_time_ratio multiplies): {}\n", opt_time(r->simulated.peak_time_s, tu));
  else fmt::print("  no reference gain: {}\n", ch.reference_note);
  if (r && !ch.reference_note.empty()) fmt::print("  reference: {}\n", ch.reference_note);
  fmt::print("\nDominance: {}\n", ch.dominance ? ch.dominance->verdict : "no dominant crossing to judge");
  if (ch.dominance) {
    for (const auto& reason : ch.dominance->reasons) fmt::print("  - {}\n", reason);
    print_modes(*ch.dominance);
  }
  for (const auto& note : ch.notes) fmt::print("Note: {}\n", note);
}

std::string check_cell(const RequirementCheck& c) {
  if (!c.value) return fmt::format("{:>10} ✗", "—");
  return fmt::format("{:>10} {}", shown_value(c), c.met ? "✓" : "✗");
}

// A check's slack as a signed percentage of the limit ("+1.2 %"; "∞" for unbounded room).
std::string slack_text(const RequirementCheck& c) {
  if (c.slack >= 1e3) return "∞";
  return fmt::format("{:+.3g} %", 100.0 * c.slack);
}

// The designs over [uncertainty]: each requirement's worst value and plant, and each claim.
void print_robust(const DesignRun& run) {
  const RobustRun& r = *run.robust;
  fmt::print("\nOver the plant's uncertainty ({}: {} plants of the scenario set, {} fresh random plants; {}):\n",
             robust_mode_name(run.problem.spec.uncertainty.mode), r.scenarios.size(), r.verification.size(),
             fmt::join(r.box.keys, ", "));
  fmt::print("  {:<24} {:>12}", "worst over the set", "limit");
  for (const RobustAssessment& a : r.assessments) fmt::print(" {:>14}", role_name(a.role));
  fmt::print("\n");
  for (const Requirement& q : run.problem.requirements) {
    fmt::print("  {:<24} {:>12}", q.key, fmt::format("{} {:.4g}", q.upper ? "≤" : "≥", q.limit));
    for (const RobustAssessment& a : r.assessments) {
      const auto w = std::find_if(a.worst.begin(), a.worst.end(), [&](const WorstCase& c) { return c.check.requirement.key == q.key; });
      fmt::print(" {:>14}", w == a.worst.end() ? std::string("—")
                                               : fmt::format("{} {}@{}", shown_value(w->check), w->check.met ? "✓" : "✗", w->scenario));
    }
    fmt::print("\n");
  }
  fmt::print("  {:<37}", "plants meeting all (set / fresh)");
  for (const RobustAssessment& a : r.assessments)
    fmt::print(" {:>14}", a.verification.of > 0 ? fmt::format("{:.3g}/{:.3g} %", a.set_all.pct, a.verification.pct)
                                                : fmt::format("{:.3g} %/—", a.set_all.pct));
  fmt::print("\n  (value ✓/✗ @ scenario index; the scenarios and every plant's checks are in result.json)\n");
}

void print_design(const DesignRun& run, const ReportOutcome& outcome) {
  const Spec& spec = run.problem.spec;
  fmt::print("{}  —  structure {}\n\n", spec.title.empty() ? spec.name : spec.title,
             structure_name(spec.controller.structure));
  // Requirements × designs.
  // The last column: the optimized design's slack (normalized room, % of the limit).
  const Design* optimized = run.find(DesignRole::optimized);
  fmt::print("  {:<24} {:>12}", "requirement", "limit");
  for (const Design& d : run.designs) fmt::print(" {:>14}", role_name(d.role));
  if (optimized) fmt::print(" {:>10}", "slack");
  fmt::print("\n");
  for (std::size_t i = 0; i < run.problem.requirements.size(); ++i) {
    const Requirement& r = run.problem.requirements[i];
    // The limit in its shortest round-trip form, so a value shown beside it compares exactly.
    const std::string unit = requirement_unit(r, spec.units);
    fmt::print("  {:<24} {:>12}", r.key, fmt::format("{}{} {}{}", r.magnitude ? "|e| " : "", r.upper ? "≤" : "≥",
                                                     r.limit, unit.empty() ? "" : " " + unit));
    for (const Design& d : run.designs) fmt::print(" {:>14}", check_cell(d.checks[i]));
    if (optimized) fmt::print(" {:>10}", slack_text(optimized->checks[i]));
    fmt::print("\n");
  }
  fmt::print("  {:<24} {:>12}", "meets all", "");
  for (const Design& d : run.designs) fmt::print(" {:>14}", d.meets_all ? "yes" : "no");
  fmt::print("\n");
  // Margins, for every design (informational unless a margin requirement is set).
  auto margin_row = [&](const std::string& name, auto get) {
    fmt::print("  {:<24} {:>12}", name, "");
    for (const Design& d : run.designs) {
      const std::optional<double> v = d.margins ? get(*d.margins) : std::nullopt;
      fmt::print(" {:>14}", !d.margins ? "—" : v ? fmt::format("{:.3g}", *v) : "∞");
    }
    fmt::print("\n");
  };
  margin_row("gain margin (dB)", [](const Margins& m) { return m.gain_margin_db; });
  if (std::any_of(run.designs.begin(), run.designs.end(),
                  [](const Design& d) { return d.margins && d.margins->lower_gain_margin_db; })) {
    // Conditionally stable loops: unstable if the gain drops by this much.
    fmt::print("  {:<24} {:>12}", "lower gain margin (dB)", "");
    for (const Design& d : run.designs)
      fmt::print(" {:>14}", !d.margins ? "—"
                            : d.margins->lower_gain_margin_db ? fmt::format("{:.3g}", *d.margins->lower_gain_margin_db)
                                                              : "none");
    fmt::print("\n");
  }
  margin_row("phase margin (deg)", [](const Margins& m) { return m.phase_margin_deg; });
  margin_row("sensitivity peak Ms", [](const Margins& m) { return std::optional<double>(m.sensitivity_peak); });
  margin_row(fmt::format("delay margin ({})", spec.units.time), [](const Margins& m) { return m.delay_margin_s; });
  if (run.problem.needs_peaks) {
    margin_row("complementary peak Mt", [](const Margins& m) { return m.complementary_peak; });
    margin_row("noise gain", [](const Margins& m) { return m.noise_gain; });
  }
  if (run.problem.needs_load) {  // a regulator: the load response of every design, linear loop
    auto load_row = [&](const std::string& name, auto get) {
      fmt::print("  {:<24} {:>12}", name, "");
      for (const Design& d : run.designs) {
        const std::optional<double> v = d.status == StepStatus::ok ? get(d.simulated) : std::nullopt;
        fmt::print(" {:>14}", v ? fmt::format("{:.4g}", *v) : "—");
      }
      fmt::print("\n");
    };
    load_row(fmt::format("load IAE ({}·{})", spec.units.output, spec.units.time),
             [](const StepMetrics& m) { return m.load_iae; });
    load_row(fmt::format("load peak ({})", spec.units.output), [](const StepMetrics& m) { return m.load_peak; });
  }
  fmt::print("  {:<24} {:>12}", "nonlinear loop", "");
  for (const Design& d : run.designs)
    fmt::print(" {:>14}", !d.nonlinear ? "—" : d.nonlinear->confirmed ? "confirmed" : "NOT confirmed");
  fmt::print("\n  {:<24} {:>12}", "saturated (% of time)", "");
  for (const Design& d : run.designs)
    fmt::print(" {:>14}", d.nonlinear ? fmt::format("{:.1f}", 100.0 * d.nonlinear->saturated_fraction) : "—");
  fmt::print("\n\n");
  const Design* best = run.find(DesignRole::optimized);
  if (best) {
    const Controller& c = best->controller;
    if (c.action < 0.0) fmt::print("Action: {}\n", action_reason(run.problem.plant));
    fmt::print("Optimized controller ({}, {} action):", structure_name(c.structure), action_name(c.action));
    const auto& info = structure_parameters(c.structure);
    const std::vector<double> shown = signed_series(c);
    for (std::size_t i = 0; i < info.size(); ++i) fmt::print(" {} = {:.5g}", info[i].name, shown[i]);
    if (c.setpoint_weight) fmt::print(" setpoint_weight = {:.4g} (searched)", *c.setpoint_weight);
    fmt::print("\n");
    if (c.parallel)
      fmt::print("  parallel: Kp = {:.5g}, Ki = {:.5g}, Kd = {:.5g}, Tf = {:.4g} {}\n", c.parallel->kp, c.parallel->ki,
                 c.parallel->kd, c.parallel->filter_time, spec.units.time);
    if (c.notch || c.measurement_filter) fmt::print("  filters (in series, u = N·(C_r·r − C·F·y)): {}\n", filters_text(c, spec.units.time));
  }
  const SearchSummary& s = run.search;
  fmt::print("Search: NLopt {} then {}, {} evaluations ({} unstable, {} infeasible{}) in {:.3f} s;\n  {}\n",
             s.global_given, s.local_given, s.evaluations, s.unstable, s.infeasible,
             s.linear_loop == "sampled" ? "; linear stages on the sampled loop" : "", s.wall_time_s, s.stop_reason);
  std::vector<std::string> effects;
  for (const std::string& e : s.active_effects) effects.push_back(effect_description(e));
  fmt::print("  search.simulate = {}; active for the linear optimum: {}; {} evaluations on the nonlinear loop\n  {}\n",
             s.simulate, effects.empty() ? std::string("none") : fmt::format("{}", fmt::join(effects, ", ")),
             s.nonlinear_evaluations, s.nonlinear_stage);
  const char* loop = run.judged_on_nonlinear ? "nonlinear loop (the loop the spec describes)" : "linear loop";
  if (run.robust) print_robust(run);
  if (run.infeasibility && run.infeasibility->binding == "uncertainty") {
    fmt::print("\nNOT MET over the plant's uncertainty: the optimized design meets every requirement on the nominal "
               "plant's {}, but {}.\n", loop, run.infeasibility->nearest_text);
  } else if (run.infeasibility) {
    fmt::print("\nNOT MET: no design meets every requirement on the {}. Binding: {}.\n", loop, run.infeasibility->binding);
    for (const auto& m : run.infeasibility->misses)
      fmt::print("  - {} misses by {} %\n", m.requirement.key,
                 // one decimal, or two significant digits for a miss below 0.1 % (never "0.0 %")
                 m.violation >= 1e-3 ? fmt::format("{:.1f}", m.violation * 100.0)
                                     : fmt::format("{:.2g}", m.violation * 100.0));
    fmt::print("  {}\n", run.infeasibility->nearest_text);
    if (const std::string advice = time_cap_advice(s, run.problem.spec.search.max_time_s); !advice.empty())
      fmt::print("  {}\n", advice);
  } else {
    if (const RobustAssessment* a = run.robust ? run.robust->find(DesignRole::optimized) : nullptr)
      fmt::print("\nMET: the optimized design meets every requirement on the nominal plant's {}; {}.\n", loop, a->claim);
    else
      fmt::print("\nMET: the optimized design meets every requirement on the {}.\n", loop);
  }
  if (best && best->nonlinear) fmt::print("Nonlinear loop: {}\n", best->nonlinear->verdict);
  if (!run.classical.designed)
    fmt::print("Classical design: none — the hand method stops at its {} step: {}\n", run.classical.failed_step,
               run.classical.reason);
  for (const RuleOutcome& rule : run.rules) {
    if (rule.applied())
      fmt::print("Published rule {}: on the model {} ({}){}\n", rule.rule, model_text(*rule.model),
                 rule.model->exact ? "exact" : "Skogestad's half rule",
                 rule.tau_c_s ? fmt::format(", τc = {:.4g} {} ({})", *rule.tau_c_s, spec.units.time, rule.tau_c_source) : "");
    else
      fmt::print("Published rule {}: left out — {}\n", rule.rule, rule.reason);
  }
  for (const std::string& w : run.warnings) fmt::print("Warning: {}\n", w);
  if (best)
    for (const std::string& w : best->warnings) fmt::print("Warning: {}\n", w);
  fmt::print("Report: {} (also {}; data in {})\n", outcome.html.string(), outcome.markdown.string(),
             outcome.result.string());
  if (!outcome.figures_rendered) fmt::print("{}\n", outcome.figures_note);
  fmt::print("Caution: {}\n", kSafetyCaution);
}

// `specloop keys`: the spec-key table (spec_keys, the list the reader checks names against), as
// plain text or as the README's Markdown table.
std::string plain(std::string_view text) {
  std::string out;
  for (char c : text)
    if (c != '`') out += c;
  return out;
}

std::string markdown_cell(std::string_view text) {
  std::string out;
  for (char c : text) {
    if (c == '|') out += '\\';
    out += c;
  }
  return out;
}

// Words of `text` on lines of at most `width` characters, each line indented by `indent`.
std::string wrapped(const std::string& text, std::size_t width, const std::string& indent) {
  std::string out, line;
  std::size_t line_length = 0;  // in code points
  std::size_t start = 0;
  while (start < text.size()) {
    std::size_t end = text.find(' ', start);
    if (end == std::string::npos) end = text.size();
    const std::string word = text.substr(start, end - start);
    std::size_t length = 0;
    for (char c : word) length += (static_cast<unsigned char>(c) & 0xC0u) != 0x80u;
    if (line_length > 0 && line_length + 1 + length > width) {
      out += indent + line + "\n";
      line.clear();
      line_length = 0;
    }
    if (line_length > 0) {
      line += ' ';
      ++line_length;
    }
    line += word;
    line_length += length;
    start = end + 1;
  }
  if (!line.empty()) out += indent + line + "\n";
  return out;
}

int print_keys(const std::string& prefix, bool markdown) {
  std::vector<const SpecKey*> rows;
  for (const SpecKey& k : spec_keys())
    if (prefix.empty() || k.key == prefix || k.key.starts_with(prefix + "."))
      rows.push_back(&k);
  if (rows.empty()) {
    std::vector<std::string> sections;
    for (const SpecKey& k : spec_keys()) {
      const std::string top(k.key.substr(0, k.key.find('.')));
      if (std::find(sections.begin(), sections.end(), top) == sections.end()) sections.push_back(top);
    }
    const auto suggestion = likely_name(prefix, sections);
    std::cerr << fmt::format("specloop keys: no spec key or section '{}'{}; sections: {}\n", prefix,
                             suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "", fmt::join(sections, ", "));
    return 2;
  }
  if (markdown) {
    fmt::print("| key | unit | default | meaning and range |\n| --- | --- | --- | --- |\n");
    for (const SpecKey* k : rows)
      fmt::print("| `{}` | {} | {} | {} |\n", k->key, markdown_cell(k->unit), markdown_cell(k->default_value),
                 markdown_cell(k->meaning));
    return 0;
  }
  fmt::print("Spec file keys (every section but [plant] is optional; a requirement left out is not required):\n\n");
  for (const SpecKey* k : rows) {
    fmt::print("{}\n", k->key);
    fmt::print("    unit: {}   default: {}\n", plain(k->unit), plain(k->default_value));
    fmt::print("{}", wrapped(plain(k->meaning), 92, "    "));
  }
  return 0;
}

std::atomic<bool> g_stop{false};

extern "C" void on_interrupt(int) {
  g_stop.store(true);
  std::signal(SIGINT, SIG_DFL);  // a second Ctrl-C ends the process at once
}

std::string duration_text(double s) {
  if (!std::isfinite(s) || s < 0.0) return "—";
  const long t = std::lround(s);
  if (t >= 3600) return fmt::format("{}h{:02}m", t / 3600, (t % 3600) / 60);
  if (t >= 60) return fmt::format("{}m{:02}s", t / 60, t % 60);
  return fmt::format("{}s", t);
}

int run_sweep_command(const std::string& spec_path, const std::vector<std::string>& vary, const std::string& store,
                      unsigned jobs, const std::string& shard_text, const std::string& point_reports) {
  const SweepSpec spec(spec_path);
  SweepGrid grid;
  for (const auto& v : vary.empty() ? spec.vary_in_file() : vary) grid.axes.push_back(parse_sweep_axis(v));
  SweepOptions options;
  if (!shard_text.empty()) options.shard = parse_shard(shard_text);
  options.store_path = store.empty() ? default_store_path(spec.name(), options.shard) : store;
  check_output_file(options.store_path, "--store");
  if (!point_reports.empty()) check_output_folder(point_reports, "--point-reports");
  options.jobs = jobs;
  options.point_reports = point_reports;
  options.stop = &g_stop;
  const bool terminal = isatty(STDOUT_FILENO) != 0;
  double last_line = -1.0;
  options.progress = [&](std::size_t done, std::size_t total, std::size_t met, double elapsed, std::size_t now) {
    const double rate = elapsed > 0.0 ? static_cast<double>(now) / elapsed : 0.0;
    const double eta = rate > 0.0 ? static_cast<double>(total - done) / rate : -1.0;
    const std::string line = fmt::format("{}/{} points, {} met, {:.2f} points/s, ETA {}", done, total, met, rate,
                                         duration_text(eta));
    if (terminal) {
      const int width = 24;
      const int filled = total ? static_cast<int>(width * done / total) : width;
      fmt::print("\r[{}{}] {}\x1b[K", std::string(static_cast<std::size_t>(filled), '#'),
                 std::string(static_cast<std::size_t>(width - filled), '.'), line);
      std::fflush(stdout);
    } else if (done == total || last_line < 0.0 || elapsed - last_line >= 5.0) {
      fmt::print("sweep: {}\n", line);
      std::fflush(stdout);
      last_line = elapsed;
    }
  };
  options.started = [&](const SweepOutcome& at) {
    fmt::print("sweep: {}: {} point(s) in the grid, {} in shard {}, {} already in {}; {} job(s)\n", spec_path,
               grid.size(), at.total, options.shard.text(), at.done_before, options.store_path, jobs);
    std::fflush(stdout);
  };
  std::signal(SIGINT, on_interrupt);
  const SweepOutcome out = run_sweep(spec, grid, options);
  std::signal(SIGINT, SIG_DFL);
  if (terminal && out.done_now > 0) fmt::print("\n");
  fmt::print("sweep: {} of {} point(s) finished ({} already in the store, {} now, {} failed), {} met; {:.1f} s\n",
             out.done_before + out.done_now, out.total, out.done_before, out.done_now, out.failed, out.met,
             out.wall_time_s);
  if (out.interrupted) {
    fmt::print("sweep: interrupted; run the same command again to continue\n");
    return 130;
  }
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app{"specloop: compensator design against hard step-response requirements"};
  app.require_subcommand(1);
  app.set_version_flag("--version", std::string("specloop ") + SPECLOOP_VERSION);
  std::string spec_path;
  bool as_json = false;
  auto* analyze = app.add_subcommand("analyze", "Characterize the P-only loop against the overshoot requirement");
  analyze->add_option("SPEC", spec_path, "spec file (TOML)")->required();
  analyze->add_flag("--json", as_json, "print one JSON object instead of the tables");
  std::string out_dir;
  auto* design = app.add_subcommand("design", "Design the compensator: classical, baseline and optimized, "
                                              "checked against every requirement");
  design->add_option("SPEC", spec_path, "spec file (TOML)")->required();
  design->add_option("--out", out_dir, "output folder (default results/<spec name>/)");
  std::string plant_file;
  design->add_option("--plant", plant_file, "a file with [plant] (and [uncertainty]) replacing the spec's: `specloop fit`'s plant.toml");
  unsigned design_jobs = std::max(1u, std::thread::hardware_concurrency());
  design->add_option("--jobs", design_jobs, "threads for the plants of [uncertainty] (default: all cores; the result "
                                            "is the same for any number)")
      ->check(CLI::Range(1u, 4096u));
  std::vector<std::string> vary;
  std::string store, shard, point_reports;
  unsigned jobs = std::max(1u, std::thread::hardware_concurrency());
  auto* sweep = app.add_subcommand("sweep", "Design the spec over a grid of values of its numeric keys; results "
                                            "in a resumable SQLite store");
  sweep->add_option("SPEC", spec_path, "spec file (TOML)")->required();
  sweep->add_option("--vary", vary, "KEY=FROM:TO:COUNT, KEY=FROM:TO:COUNTlog or KEY=a,b,c (repeatable; the first "
                                    "varies slowest; replaces the spec's [sweep] vary list)");
  sweep->add_option("--store", store, "SQLite store (default results/<spec name>.sweep.sqlite)");
  sweep->add_option("--jobs", jobs, "points designed at once (default: all cores)")->check(CLI::Range(1u, 4096u));
  sweep->add_option("--shard", shard, "K/N: only the points with index % N == K - 1");
  sweep->add_option("--point-reports", point_reports, "also write each point's full design report into "
                                                      "DIR/point-<index>/ (the points designed in this run)");
  std::string merge_out;
  std::vector<std::string> merge_in;
  auto* merge = app.add_subcommand("merge", "Combine sweep stores of the same spec and grid (shards) into one");
  merge->add_option("OUT", merge_out, "merged store (written whole, then moved into place)")->required();
  merge->add_option("IN", merge_in, "input stores")->required();
  std::string keys_prefix;
  bool keys_markdown = false;
  auto* keys = app.add_subcommand("keys", "Print the spec file's keys: unit, default, meaning and range");
  keys->add_option("KEY", keys_prefix, "only this key or section (e.g. controller, requirements.effort_max)");
  keys->add_flag("--markdown", keys_markdown, "print the table as Markdown (the README's spec-key table)");
  std::string report_store, report_out, map_keys, front_metrics = "peak_time,effort_peak", front_loop = "nonlinear";
  std::vector<std::string> report_at;
  double threshold_pct = 10.0;
  auto* sweep_report = app.add_subcommand("sweep-report", "Maps, Pareto front, approximation errors and gains of a sweep "
                                                          "store, as HTML, Markdown and CSV");
  sweep_report->add_option("STORE", report_store, "sweep store (SQLite)")->required();
  sweep_report->add_option("--out", report_out, "output folder (default: beside the store, <store name>-report)");
  sweep_report->add_option("--map", map_keys, "KEY_X,KEY_Y: the two axes of the maps (default: the first two)");
  sweep_report->add_option("--at", report_at, "KEY=VALUE: where the axes not on the maps are held (repeatable; default: "
                                              "their first value)");
  sweep_report->add_option("--front", front_metrics, "two or three metrics for the Pareto front, comma-separated: "
                                                     "overshoot_pct, peak_time, settling_time, rise_time, effort_peak, iae, "
                                                     "ise, itae (default peak_time,effort_peak)");
  sweep_report->add_option("--front-loop", front_loop, "loop the front's metrics are read on: nonlinear (default) or linear");
  sweep_report->add_option("--threshold", threshold_pct, "relative error of the second-order prediction, %, beyond which "
                                                         "a map cell is outlined (default 10)");
  cli::FitCommand fit_cmd;  // `specloop fit` (cli/fit_command.cpp)
  cli::add_fit_command(app, fit_cmd);
  const std::string keys_hint = "Spec file keys (unit, default, meaning): specloop keys [SECTION], or README.md, "
                                "\"Spec file reference\".";
  for (CLI::App* command : {&app, analyze, design, sweep}) command->footer(keys_hint);

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int code = app.exit(e);
    return code == 0 ? 0 : 2;
  }

  try {
    if (*analyze) {
      const Spec spec = load_spec(spec_path);
      const Characterization ch = characterize(spec);
      if (as_json) std::cout << characterization_json(spec, ch).dump(2) << "\n";
      else print_analysis(spec, ch);
      return 0;
    }
    if (*design) {
      const Spec spec = plant_file.empty() ? load_spec(spec_path) : load_spec_with_plant(spec_path, plant_file);
      const std::filesystem::path dir = out_dir.empty() ? std::filesystem::path("results") / spec.name : std::filesystem::path(out_dir);
      check_output_folder(dir, "--out");  // before the work, not after it
      const DesignRun run = run_design(spec, design_jobs);
      const ReportOutcome outcome = write_design_outputs(run, dir);
      print_design(run, outcome);
      return run.met ? 0 : 1;
    }
    if (*fit_cmd.app) return cli::run_fit_command(fit_cmd);
    if (*keys) return print_keys(keys_prefix, keys_markdown);
    if (*sweep) return run_sweep_command(spec_path, vary, store, jobs, shard, point_reports);
    if (*sweep_report) {
      const SweepStoreContents contents = read_sweep_store(report_store);
      SweepReportOptions options;
      const auto split = [](const std::string& text) {
        std::vector<std::string> parts;
        std::size_t start = 0;
        while (start <= text.size()) {
          const auto comma = text.find(',', start);
          const std::string part = text.substr(start, comma == std::string::npos ? std::string::npos : comma - start);
          if (!part.empty()) parts.push_back(part);
          if (comma == std::string::npos) break;
          start = comma + 1;
        }
        return parts;
      };
      options.map_keys = split(map_keys);
      options.at = report_at;
      options.front_metrics = split(front_metrics);
      options.front_loop = front_loop;
      options.approximation_threshold_pct = threshold_pct;
      const std::filesystem::path dir = report_out.empty() ? default_sweep_report_dir(report_store) : std::filesystem::path(report_out);
      check_output_folder(dir, "--out");
      const SweepReportOutcome outcome = write_sweep_report(contents, dir, options);
      fmt::print("sweep-report: {} of {} point(s) finished, {} met, {} on the Pareto front\n", outcome.finished,
                 contents.points.size(), outcome.met, outcome.front_size);
      if (!outcome.figures_rendered) fmt::print("sweep-report: {}\n", outcome.figures_note);
      fmt::print("sweep-report: {}\n", outcome.html.string());
      return 0;
    }
    if (*merge) {
      check_output_file(merge_out, "OUT");
      const std::size_t n = merge_stores(merge_out, merge_in);
      fmt::print("merge: {} finished point(s) from {} store(s) in {}\n", n, merge_in.size(), merge_out);
      return 0;
    }
  } catch (const SweepError& e) {
    std::cerr << e.what() << "\n";
    return 2;
  } catch (const OutputError& e) {
    std::cerr << e.what() << "\n";
    return 2;
  } catch (const SpecError& e) {
    std::cerr << e.what() << "\n";
    return 2;
  } catch (const std::exception& e) {
    std::cerr << "specloop: internal error: " << e.what() << "\n";
    return 3;
  } catch (...) {
    // A library's own exception type (muparser's was one) must not end the run in std::terminate.
    std::cerr << "specloop: internal error: an exception of a type not derived from std::exception\n";
    return 3;
  }
  return 0;
}
