// Reading [requirements]: every key from the requirement catalogue, with the catalogue's range
// and message. (Whether a zero steady-state error has an integrator to rely on is checked once the
// plant is known: plant_checks.cpp.)
#include "specloop/spec/requirement_catalogue.hpp"
#include "spec/sections.hpp"

#include <fmt/format.h>

namespace specloop::reading {

void read_requirements(const DocumentReader& reader, Requirements& requirements, SpecSources& sources) {
  const toml::table* table = reader.section("requirements");
  if (table == nullptr) return;
  for (const RequirementEntry& entry : requirement_catalogue()) {
    const auto value = reader.ranged_number(
        table, "requirements", entry.key, [&](double v) { return entry.range.contains(v); },
        requirement_expected_text(entry));
    if (entry.is_limit()) {
      requirements.*entry.limit = value;
    } else if (value) {
      requirements.*entry.setting = *value;
    }
  }
  if (const auto error = find_entry(*table, "steady_state_error_max")) sources.steady_state_error_at = error->at;
}

void check_load_requirements(const DocumentReader& reader, const Spec& spec, const std::string& path) {
  const toml::table* requirements = reader.section("requirements");
  const toml::table* search = reader.section("search");
  // Where each load requirement (and the load_iae objective) was written, in file order.
  std::vector<std::pair<std::string, Position>> written;
  if (requirements)
    for (const RequirementEntry& entry : requirement_catalogue())
      if (entry.source == RequirementSource::load_response)
        if (const auto at = find_entry(*requirements, entry.key))
          written.emplace_back("requirements." + std::string(entry.key), at->at);
  if (spec.search.objective == Objective::load_iae && search)
    if (const auto at = find_entry(*search, "objective")) written.emplace_back("search.objective", at->at);
  for (const auto& [key, at] : written) {
    const bool settles = key != "requirements.load_peak_max";
    if (settles && !has_integrator(spec.controller.structure))
      fail_at(path, at, key,
              fmt::format("a step load at the plant input leaves an offset d·G(0)/(1 + C(0)·G(0)) in y unless the "
                          "controller integrates, and structure '{}' does not: the load's IAE would grow without "
                          "bound and y would never recover; use structure = \"pi\" or \"pid\" (load_peak_max "
                          "alone is defined for any structure)",
                          structure_name(spec.controller.structure)));
  }
}

}  // namespace specloop::reading
