// Reading [requirements]: every key from the requirement catalogue, with the catalogue's range
// and message. (Whether a zero steady-state error has an integrator to rely on is checked once the
// plant is known: plant_checks.cpp.)
#include "specloop/spec/requirement_catalogue.hpp"
#include "spec/sections.hpp"

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

}  // namespace specloop::reading
