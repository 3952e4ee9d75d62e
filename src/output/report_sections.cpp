// The design report's page sections (report_parts.hpp), in order: the recommended controller,
// warnings, requirements × designs, figures, the second-order approximation, the nonlinear
// confirmation, the search, the spec as read, safety; and the verdict line above them.
#include <algorithm>
#include <filesystem>
#include <fmt/format.h>

#include "output/report_parts.hpp"
#include "specloop/output/caution.hpp"
#include "specloop/output/json_io.hpp"

namespace specloop::design_report {

using namespace page;

namespace {

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

}  // namespace

std::string verdict_line(const DesignRun& run) {
  const Design* best = recommended_design(run);
  std::string line;
  const char* loop = run.judged_on_nonlinear ? "nonlinear loop (the loop the spec describes)" : "linear loop";
  if (run.infeasibility) {
    line = fmt::format("NOT MET: no design meets every requirement on the {}; binding: {}.", loop, run.infeasibility->binding);
    if (run.judged_on_nonlinear && run.met_on_linear) line += " (The linear loop alone passes: a linear-only pass.)";
    if (const std::string advice = time_cap_advice(run.search, run.problem.spec.search.max_time_s); !advice.empty())
      line += " " + advice;
  } else {
    line = fmt::format("MET: the optimized design meets every requirement on the {}.", loop);
  }
  if (best && best->nonlinear)
    line += best->nonlinear->confirmed ? " Confirmed on the nonlinear loop." : " NOT confirmed on the nonlinear loop.";
  return line;
}

namespace {

// The recommended controller: its forms, its wiring and its warnings.
Section controller_section(const DesignRun& run) {
  const Spec& spec = run.problem.spec;
  const Design* best = recommended_design(run);
  Section s{"controller", "Recommended controller", "", ""};
  if (best) {
    const std::string lines = controller_lines(*best, spec.units);
    const Table box = controller_box(run, *best);
    s.html = paragraph_html(fmt::format("The {} design.", role_name(best->role))) + "<pre>" + escape_html(lines) + "</pre>\n" + html_table(box);
    s.markdown = fmt::format("The {} design.\n\n```\n{}```\n\n{}", role_name(best->role), lines, md_table(box));
    for (const std::string& w : best->warnings) {
      s.html += paragraph_html("Warning: " + w);
      s.markdown += "\nWarning: " + escape_md(w) + "\n";
    }
  } else {
    s.html = paragraph_html("No design to recommend: neither the optimized nor the classical loop is stable.");
    s.markdown = "No design to recommend: neither the optimized nor the classical loop is stable.\n";
  }
  return s;
}

// Warnings about the result, before anything else is read (when there are any).
Section warnings_section(const DesignRun& run) {
  Section s{"warnings", "Warnings", "", ""};
  for (const std::string& w : run.warnings) {
    s.html += paragraph_html("Warning: " + w);
    s.markdown += "**Warning:** " + escape_md(w) + "\n\n";
  }
  return s;
}

// Requirements × designs, and what the values are read on.
Section requirement_section(const DesignRun& run) {
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
  return s;
}

// The published rules beside the optimum: each rule's model, how it was obtained, and its settings
// or the reason it was left out.
Section rules_section(const DesignRun& run) {
  Section s{"rules", "Published tuning rules", "", ""};
  const std::string note =
      "SIMC (Skogestad 2003) and AMIGO (Åström & Hägglund 2004 for PI, 2006 for PID) on a low-order model of the plant "
      "with delay, obtained by Skogestad's half rule; their designs are the columns simc and amigo above, measured and "
      "confirmed like every design (the spec's derivative filter, set-point weight and derivative placement apply). "
      "Times in " + run.problem.spec.units.time + ".";
  Table t{"rules", {"rule", "model", "how it was obtained", "settings"}, {}};
  for (const RuleOutcome& r : run.rules) {
    std::string how = "—";
    if (r.model) how = fmt::format("{}", fmt::join(r.model->steps, "; "));
    std::string settings = r.applied() ? r.formula : "left out: " + r.reason;
    if (r.applied() && r.tau_c_s) settings = fmt::format("τc = {:.4g} ({}); {}", *r.tau_c_s, r.tau_c_source, settings);
    t.rows.push_back({{r.rule, fmt::format("data-rule=\"{}\" data-applied=\"{}\"", r.rule, r.applied() ? "true" : "false")},
                      {r.model ? model_text(*r.model) : "—", ""},
                      {how, ""},
                      {settings, r.applied() ? "" : "class=\"missed\""}});
  }
  s.html = paragraph_html(note) + html_table(t);
  s.markdown = escape_md(note) + "\n\n" + md_table(t);
  return s;
}

// The figures with their captions (inline SVG when rendered), the margin table under the frequency one.
Section figures_section(const DesignRun& run, const ReportData& data, const ReportOutcome& outcome,
                        const std::vector<std::pair<std::string, std::string>>& figures) {
  Section s{"figures", "Figures", "", ""};
  static const std::vector<std::pair<std::string, std::string>> captions{
      {"step", "Step response: reference (P only), classical, published-rule (simc, amigo) and optimized designs on the "
               "linear loop, and the recommended "
               "design on the nonlinear loop, with the requirement envelope."},
      {"effort", "Control effort u(t) for the same designs, with the actuator limits, effort_max, and the time the command "
                 "spends beyond a limit shaded."},
      {"splane", "s-plane: open-loop poles and zeros of the recommended loop, its root locus as the gain varies, the ζ-line "
                 "of the overshoot limit, each design's closed-loop poles, the dominant pair and the modes that break the "
                 "second-order approximation."},
      {"frequency", "Loop frequency response of the classical and optimized designs. Each bar spans a margin at its "
                    "crossover: in the magnitude panel from the magnitude at the phase crossover up to 0 dB (the gain "
                    "margin), in the phase panel from −180° up to the phase at the gain crossover (the phase margin); "
                    "their values are in the table below."},
      {"load", "Load response: each design's output after a step load at the plant input on the linear loop, with "
               "load_peak_max and the recovery band (settling_band_pct of |reference.amplitude|) from "
               "load_recovery_time_max."}};
  if (!outcome.figures_rendered) {
    s.html += paragraph_html(outcome.figures_note);
    s.markdown += outcome.figures_note + "\n\n";
  }
  for (const auto& [id, caption] : captions) {
    if (id == "load" && !run.problem.needs_load) continue;  // regulator specs only
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
  return s;
}

// The second-order approximation against the simulated response, and each design's modes.
Section approximation_section(const DesignRun& run) {
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
    s.html += fmt::format("<p><b>{}</b>: {}</p>\n<ul>\n", escape_html(name_of(d.role)), escape_html(d.dominance->verdict));
    s.markdown += fmt::format("**{}**: {}\n\n", role_name(d.role), escape_md(d.dominance->verdict));
    for (const std::string& r : d.dominance->reasons) {
      s.html += "<li>" + escape_html(r) + "</li>\n";
      s.markdown += "- " + escape_md(r) + "\n";
    }
    for (const std::string& line : mode_sentences(*d.dominance)) {
      s.html += fmt::format("<li class=\"modes\" data-design=\"{}\">{}</li>\n", role_name(d.role), escape_html(line));
      s.markdown += "- " + escape_md(line) + "\n";
    }
    s.html += "</ul>\n";
    s.markdown += "\n";
  }
  return s;
}

// Every design's verdict on the nonlinear loop.
Section confirmation_section(const DesignRun& run) {
  Section s{"confirmation", "Confirmation on the nonlinear loop", "", ""};
  for (const Design& d : run.designs) {
    if (!d.nonlinear) continue;
    const std::string text = fmt::format("{}: {}", role_name(d.role), d.nonlinear->verdict);
    s.html += paragraph_html(text);
    s.markdown += escape_md(text) + "\n\n";
  }
  return s;
}

// What the search did, and why no design met every requirement when none did.
Section search_section(const DesignRun& run) {
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
  return s;
}

// The spec as read: its text (or the normalized spec when there is no file to show).
Section spec_section(const Spec& spec) {
  std::string text;
  if (!spec.source_text.empty()) text = spec.source_text;
  else if (spec.path != "<string>" && fs::exists(spec.path)) text = read_text(spec.path);
  else text = spec_json(spec).dump(2);
  const std::string intro = fmt::format("From {} (every default filled in, as normalized, is in result.json under \"spec\").", spec.path);
  return Section{"spec", "The spec as read", paragraph_html(intro) + "<pre>" + escape_html(text) + "</pre>\n",
                 escape_md(intro) + "\n\n```toml\n" + text + (text.ends_with('\n') ? "" : "\n") + "```\n"};
}

}  // namespace

std::vector<Section> sections(const DesignRun& run, const ReportData& data, const ReportOutcome& outcome,
                              const std::vector<std::pair<std::string, std::string>>& figures) {
  std::vector<Section> out;
  out.push_back(controller_section(run));
  if (!run.warnings.empty()) out.push_back(warnings_section(run));
  out.push_back(requirement_section(run));
  if (!run.rules.empty()) out.push_back(rules_section(run));
  if (run.robust) out.push_back(robust_section(run, figures));
  out.push_back(figures_section(run, data, outcome, figures));
  out.push_back(approximation_section(run));
  out.push_back(confirmation_section(run));
  out.push_back(search_section(run));
  out.push_back(spec_section(run.problem.spec));
  out.push_back(Section{"safety", "Safety", paragraph_html(kSafetyCaution), std::string(kSafetyCaution) + "\n"});
  return out;
}
}  // namespace specloop::design_report
