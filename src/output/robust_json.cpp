// result.json's robust blocks (robust_json.hpp).
#include "specloop/output/robust_json.hpp"

#include "specloop/output/json_io.hpp"

namespace specloop {

using nlohmann::json;

namespace {

json values_json(const UncertaintyBox& box, const std::vector<double>& values) {
  json out = json::object();
  for (std::size_t k = 0; k < box.size() && k < values.size(); ++k) out[box.keys[k]] = number_json(values[k]);
  return out;
}

json count_json(const YieldCount& y) {
  return {{"met", y.met},
          {"of", y.of},
          {"pct", number_json(y.pct)},
          {"low_pct", number_json(y.interval.low_pct)},
          {"high_pct", number_json(y.interval.high_pct)}};
}

}  // namespace

json robust_assessment_json(const RobustRun& robust, const RobustAssessment& a) {
  json scenarios = json::array();
  for (std::size_t i = 0; i < a.set.size(); ++i)
    scenarios.push_back({{"index", i},
                         {"kind", scenario_kind_name(robust.scenarios[i].kind)},
                         {"values", values_json(robust.box, robust.scenarios[i].values)},
                         {"stable", a.set[i].stable},
                         {"meets_all", a.set[i].meets_all},
                         {"checks", checks_json(a.set[i].checks)}});
  json worst = json::object();
  for (const WorstCase& w : a.worst)
    worst[w.check.requirement.key] = {{"value", w.check.value ? number_json(*w.check.value) : json(nullptr)},
                                      {"limit", number_json(w.check.requirement.limit)},
                                      {"met", w.check.met},
                                      {"slack", number_json(w.check.slack)},
                                      {"scenario", w.scenario}};
  json verify = count_json(a.verification);
  json plants = json::array(), meets = json::array(), misses = json::array();
  if (a.verification.of > 0)
    for (const Scenario& s : robust.verification) {
      json row = json::array();
      for (double v : s.values) row.push_back(number_json(v));
      plants.push_back(row);
    }
  verify["plants"] = plants;
  verify["meets_all"] = a.verification_meets;
  for (const auto& [plant, what] : a.verification_misses) misses.push_back({{"plant", plant}, {"what", what}});
  verify["misses"] = misses;
  json confirmations = json::array();
  for (const WorstConfirmation& c : a.confirmations) {
    const auto& nl = c.design.nonlinear;
    confirmations.push_back(
        {{"scenario", c.scenario},
         {"requirements", c.requirements},
         {"nonlinear", nl ? json{{"status", status_name(nl->status)}, {"meets_all", nl->meets_all},
                                 {"checks", checks_json(nl->checks)}}
                          : json(nullptr)}});
  }
  return {{"mode", robust_mode_name(robust.scenarios.front().problem.spec.uncertainty.mode)},
          {"holds", a.holds},
          {"claim", a.claim},
          {"scenarios", scenarios},
          {"worst", worst},
          {"unstable_scenario", a.unstable_scenario ? json(*a.unstable_scenario) : json(nullptr)},
          {"weakest_scenario", a.weakest_scenario},
          {"set", count_json(a.set_all)},
          {"yield", count_json(a.set_samples)},
          {"verify", verify},
          {"confirmations", confirmations}};
}

json robust_summary_json(const RobustRun& robust, const RobustAssessment& a) {
  json out = robust_assessment_json(robust, a);
  out.erase("scenarios");
  out["verify"].erase("plants");
  out["verify"].erase("meets_all");
  return out;
}

json robust_run_json(const DesignRun& run) {
  if (!run.robust) return nullptr;
  const RobustRun& r = *run.robust;
  const UncertaintySpec& u = run.problem.spec.uncertainty;
  json low = json::array(), high = json::array(), nominal = json::array();
  for (std::size_t k = 0; k < r.box.size(); ++k) {
    low.push_back(number_json(r.box.low[k]));
    high.push_back(number_json(r.box.high[k]));
    nominal.push_back(number_json(r.box.nominal[k]));
  }
  return {{"mode", robust_mode_name(u.mode)},
          {"keys", r.box.keys},
          {"box", {{"low", low}, {"high", high}, {"nominal", nominal}}},
          {"scenario_count", r.scenarios.size()},
          {"verification", {{"count", r.verification.size()}, {"seed", u.seed}, {"draw", r.verification_draw}}},
          {"search",
           {{"rounds", r.search.rounds},
            {"active", r.search.active},
            {"scenario_evaluations", r.search.scenario_evaluations},
            {"corners_found", r.search.corners_found},
            {"refuting_plants_added", r.refuting_added},
            {"converged", r.search.converged},
            {"text", r.search.text}}}};
}

}  // namespace specloop
