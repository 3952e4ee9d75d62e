// The design report's section over the plant's uncertainty ([uncertainty]): the claim of each
// design with its counts and interval, each requirement's nominal and worst value and the plant
// it occurs on, the named plants' values, the worst plants on the nonlinear loop, the search's
// rounds, and the envelope figure.
#include <algorithm>
#include <fmt/format.h>

#include "output/report_parts.hpp"

namespace specloop::design_report {

using namespace page;

namespace {

std::string value_text(const RequirementCheck& c) { return fmt::format("{} {}", shown_value(c), c.met ? "✓" : "✗"); }

std::string count_text(const YieldCount& y) {
  return y.of == 0 ? std::string("—")
                   : fmt::format("{} of {} ({:.4g} %; 95 % interval {:.4g}–{:.4g} %)", y.met, y.of, y.pct,
                                 y.interval.low_pct, y.interval.high_pct);
}

Table worst_table(const DesignRun& run) {
  const RobustRun& r = *run.robust;
  Table t{"robust-table", {"requirement", "limit"}, {}};
  for (const RobustAssessment& a : r.assessments) t.header.push_back(name_of(a.role) + ": nominal / worst (plant)");
  for (std::size_t q = 0; q < run.problem.requirements.size(); ++q) {
    const Requirement& req = run.problem.requirements[q];
    std::vector<Cell> row{{req.key, ""}, {fmt::format("{} {:.4g} {}", req.upper ? "≤" : "≥", req.limit, req.unit), ""}};
    for (const RobustAssessment& a : r.assessments) {
      const auto w = std::find_if(a.worst.begin(), a.worst.end(),
                                  [&](const WorstCase& c) { return c.check.requirement.key == req.key; });
      const std::string nominal = !a.set.empty() && a.set[0].stable && q < a.set[0].checks.size()
                                      ? value_text(a.set[0].checks[q])
                                      : std::string("unstable");
      row.push_back({fmt::format("{} / {}", nominal, w == a.worst.end() ? std::string("—")
                                                                        : fmt::format("{} ({})", value_text(w->check), w->scenario)),
                     ""});
    }
    t.rows.push_back(std::move(row));
  }
  std::vector<Cell> set{{"plants of the set meeting all", ""}, {"", ""}}, fresh{{"fresh random plants meeting all", ""}, {"", ""}};
  for (const RobustAssessment& a : r.assessments) {
    set.push_back({count_text(a.set_all), ""});
    fresh.push_back({count_text(a.verification), ""});
  }
  t.rows.push_back(std::move(set));
  t.rows.push_back(std::move(fresh));
  return t;
}

Table named_plants_table(const DesignRun& run, const RobustAssessment& a) {
  const RobustRun& r = *run.robust;
  Table t{"robust-plants", {"plant", "kind", "values", "worst of", "nonlinear loop"}, {}};
  std::vector<std::size_t> named{0};
  for (const WorstCase& w : a.worst)
    if (std::find(named.begin(), named.end(), w.scenario) == named.end()) named.push_back(w.scenario);
  if (a.unstable_scenario && std::find(named.begin(), named.end(), *a.unstable_scenario) == named.end())
    named.push_back(*a.unstable_scenario);
  for (const std::size_t i : named) {
    std::vector<std::string> worst_of;
    for (const WorstCase& w : a.worst)
      if (w.scenario == i) worst_of.push_back(w.check.requirement.key);
    const auto c = std::find_if(a.confirmations.begin(), a.confirmations.end(),
                                [&](const WorstConfirmation& x) { return x.scenario == i; });
    std::string nonlinear = "—";
    if (c != a.confirmations.end() && c->design.nonlinear)
      nonlinear = c->design.nonlinear->status != NonlinearStatus::ok ? std::string(status_name(c->design.nonlinear->status))
                  : c->design.nonlinear->meets_all                  ? std::string("meets every requirement")
                                                                    : std::string("misses: ") + tightest_requirement(c->design.nonlinear->checks);
    t.rows.push_back({{fmt::format("{}", i), ""},
                      {std::string(scenario_kind_name(r.scenarios[i].kind)), ""},
                      {scenario_values_text(r.box, r.scenarios[i].values), ""},
                      {worst_of.empty() ? (a.unstable_scenario == i ? std::string("unstable") : std::string("—"))
                                        : fmt::format("{}", fmt::join(worst_of, ", ")),
                       ""},
                      {nonlinear, ""}});
  }
  return t;
}

}  // namespace

Section robust_section(const DesignRun& run, const std::vector<std::pair<std::string, std::string>>& figures) {
  Section s{"robust", "Over the plant's uncertainty", "", ""};
  const RobustRun& r = *run.robust;
  const UncertaintySpec& u = run.problem.spec.uncertainty;
  std::vector<std::string> ranges;
  for (std::size_t k = 0; k < r.box.size(); ++k)
    ranges.push_back(fmt::format("{} in [{:.6g}, {:.6g}] (nominal {:.6g})", r.box.keys[k], r.box.low[k], r.box.high[k],
                                 r.box.nominal[k]));
  std::size_t corners = 0, samples = 0;
  for (const Scenario& sc : r.scenarios) {
    corners += sc.kind == ScenarioKind::corner ? 1 : 0;
    samples += sc.kind == ScenarioKind::sample ? 1 : 0;
  }
  std::string text = fmt::format(
      "Mode {}. The plant varies: {}{}. Scenario set: the nominal plant (0), {} corner(s) of the box and {} seeded "
      "Latin-hypercube plants (seed {}); every design is measured on each on the linear loop with the spec's own limits, "
      "and again on {} fresh random plants drawn after the search (a sample the search never saw).",
      robust_mode_name(u.mode), fmt::join(ranges, "; "),
      u.scale != 1.0 ? fmt::format(" (the written ranges scaled by {:.4g} about the nominal)", u.scale) : std::string(),
      corners, samples, u.seed, r.verification.size());
  std::string claims;
  for (const RobustAssessment& a : r.assessments) claims += fmt::format("{}: {}. ", name_of(a.role), a.claim);
  s.html = paragraph_html(text) + paragraph_html(claims);
  s.markdown = escape_md(text) + "\n\n" + escape_md(claims) + "\n\n";
  const Table t = worst_table(run);
  s.html += html_table(t);
  s.markdown += md_table(t) + "\n";
  if (const Design* best = recommended_design(run))
    if (const RobustAssessment* a = r.find(best->role)) {
      const Table named = named_plants_table(run, *a);
      const std::string lead = fmt::format("The plants named above for the {} design (its worst plants were also run on the "
                                           "nonlinear loop):", name_of(best->role));
      s.html += paragraph_html(lead) + html_table(named);
      s.markdown += escape_md(lead) + "\n\n" + md_table(named) + "\n";
      if (!a->verification_misses.empty()) {
        std::vector<std::string> misses;
        for (const auto& [plant, what] : a->verification_misses)
          misses.push_back(fmt::format("{} ({}: {})", plant, scenario_values_text(r.box, r.verification[plant].values), what));
        const std::string m = fmt::format("Fresh plants that miss (first {}): {}.", misses.size(), fmt::join(misses, "; "));
        s.html += paragraph_html(m);
        s.markdown += escape_md(m) + "\n\n";
      }
    }
  const std::string search = "Search: " + r.search.text + ".";
  s.html += paragraph_html(search);
  s.markdown += escape_md(search) + "\n\n";
  const auto svg = std::find_if(figures.begin(), figures.end(), [](const auto& f) { return f.first == "envelope"; });
  const std::string caption = "The recommended design's step response on every plant of the scenario set (grey), the "
                              "nominal plant and each requirement's worst plant named, with the requirement envelope.";
  s.html += fmt::format("<figure id=\"fig-envelope\">\n{}<figcaption>{} (data: series/envelope.csv, script: "
                        "plots/envelope.gp)</figcaption>\n</figure>\n",
                        svg != figures.end() && !svg->second.empty() ? svg->second + "\n" : std::string(), escape_html(caption));
  s.markdown += svg != figures.end() ? fmt::format("![envelope](plots/envelope.svg)\n\n*{}*\n\n", caption)
                                     : fmt::format("*{}* (script: plots/envelope.gp)\n\n", caption);
  return s;
}

}  // namespace specloop::design_report
