// The shared vocabulary's spelling tables (one per enum) and the did-you-mean matcher.
#include "specloop/core/vocabulary.hpp"

#include <algorithm>
#include <cctype>
#include <stdexcept>
#include <utility>

namespace specloop {

namespace {

// One table per enum; its length follows from its entries (a new value is one line).
template <typename E>
using Spelling = std::pair<E, std::string_view>;

constexpr Spelling<Structure> kStructures[] = {
    {Structure::p, "p"},
    {Structure::pi, "pi"},
    {Structure::pd, "pd"},
    {Structure::pid, "pid"},
    {Structure::lead, "lead"},
    {Structure::lag, "lag"},
    {Structure::lead_lag, "lead-lag"},
};

constexpr Spelling<AntiWindup> kAntiWindups[] = {
    {AntiWindup::none, "none"},
    {AntiWindup::conditional_integration, "conditional-integration"},
    {AntiWindup::back_calculation, "back-calculation"},
};

constexpr Spelling<Objective> kObjectives[] = {
    {Objective::itae, "itae"},
    {Objective::iae, "iae"},
    {Objective::ise, "ise"},
    {Objective::effort, "effort"},
    {Objective::settling_time, "settling_time"},
    {Objective::sensitivity_peak, "sensitivity_peak"},
    {Objective::load_iae, "load_iae"},
};

constexpr Spelling<SimulateMode> kSimulateModes[] = {
    {SimulateMode::automatic, "auto"},
    {SimulateMode::linear, "linear"},
    {SimulateMode::nonlinear, "nonlinear"},
};

constexpr Spelling<RobustMode> kRobustModes[] = {
    {RobustMode::worst_case, "worst-case"},
    {RobustMode::yield, "yield"},
};

constexpr Spelling<ObjectiveAt> kObjectiveAts[] = {
    {ObjectiveAt::nominal, "nominal"},
    {ObjectiveAt::worst, "worst"},
};

template <typename E, std::size_t N>
std::string_view name_in(const Spelling<E> (&table)[N], E value, const char* what) {
  for (const auto& [v, spelling] : table)
    if (v == value) return spelling;
  throw std::invalid_argument(std::string(what) + ": not a listed value");
}

template <typename E, std::size_t N>
std::optional<E> parse_in(const Spelling<E> (&table)[N], std::string_view name) {
  for (const auto& [v, spelling] : table)
    if (spelling == name) return v;
  return std::nullopt;
}

template <typename E, std::size_t N>
std::vector<std::string> names_in(const Spelling<E> (&table)[N]) {
  std::vector<std::string> all;
  for (const auto& entry : table) all.emplace_back(entry.second);
  return all;
}

std::string lowercase(std::string_view text) {
  std::string lower(text);
  std::transform(lower.begin(), lower.end(), lower.begin(),
                 [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  return lower;
}

/// Levenshtein distance (insertions, deletions, substitutions), two-row dynamic programming.
std::size_t edit_distance(std::string_view a, std::string_view b) {
  std::vector<std::size_t> previous(b.size() + 1);
  std::vector<std::size_t> current(b.size() + 1);
  for (std::size_t j = 0; j <= b.size(); ++j) previous[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    current[0] = i;
    for (std::size_t j = 1; j <= b.size(); ++j) {
      const std::size_t substitution = previous[j - 1] + (a[i - 1] == b[j - 1] ? 0 : 1);
      current[j] = std::min({previous[j] + 1, current[j - 1] + 1, substitution});
    }
    std::swap(previous, current);
  }
  return previous[b.size()];
}

}  // namespace

std::string_view structure_name(Structure s) { return name_in(kStructures, s, "structure_name"); }
std::optional<Structure> parse_structure(std::string_view name) { return parse_in(kStructures, name); }
const std::vector<std::string>& structure_names() {
  static const std::vector<std::string> names = names_in(kStructures);
  return names;
}
bool has_integrator(Structure s) { return s == Structure::pi || s == Structure::pid; }

std::string_view anti_windup_name(AntiWindup a) { return name_in(kAntiWindups, a, "anti_windup_name"); }
std::optional<AntiWindup> parse_anti_windup(std::string_view name) { return parse_in(kAntiWindups, name); }
const std::vector<std::string>& anti_windup_names() {
  static const std::vector<std::string> names = names_in(kAntiWindups);
  return names;
}

std::string_view objective_name(Objective o) { return name_in(kObjectives, o, "objective_name"); }
std::optional<Objective> parse_objective(std::string_view name) { return parse_in(kObjectives, name); }
const std::vector<std::string>& objective_names() {
  static const std::vector<std::string> names = names_in(kObjectives);
  return names;
}

std::string_view simulate_mode_name(SimulateMode m) { return name_in(kSimulateModes, m, "simulate_mode_name"); }
std::optional<SimulateMode> parse_simulate_mode(std::string_view name) { return parse_in(kSimulateModes, name); }
const std::vector<std::string>& simulate_mode_names() {
  static const std::vector<std::string> names = names_in(kSimulateModes);
  return names;
}

std::string_view robust_mode_name(RobustMode m) { return name_in(kRobustModes, m, "robust_mode_name"); }
std::optional<RobustMode> parse_robust_mode(std::string_view name) { return parse_in(kRobustModes, name); }
const std::vector<std::string>& robust_mode_names() {
  static const std::vector<std::string> names = names_in(kRobustModes);
  return names;
}

std::string_view objective_at_name(ObjectiveAt a) { return name_in(kObjectiveAts, a, "objective_at_name"); }
std::optional<ObjectiveAt> parse_objective_at(std::string_view name) { return parse_in(kObjectiveAts, name); }
const std::vector<std::string>& objective_at_names() {
  static const std::vector<std::string> names = names_in(kObjectiveAts);
  return names;
}

std::optional<std::string_view> closest_name(std::string_view unknown, std::span<const std::string_view> known) {
  const std::string unknown_lower = lowercase(unknown);
  std::optional<std::string_view> best;
  std::size_t best_distance = 0;
  for (const auto& candidate : known) {
    const std::size_t distance = edit_distance(unknown_lower, lowercase(candidate));
    if (!best || distance < best_distance) {
      best = candidate;
      best_distance = distance;
    }
  }
  if (best && best_distance <= 2 && best_distance < unknown.size()) return best;
  return std::nullopt;
}

std::optional<std::string> likely_name(std::string_view unknown, const std::vector<std::string>& known) {
  const std::vector<std::string_view> views(known.begin(), known.end());
  if (const auto best = closest_name(unknown, views)) return std::string(*best);
  return std::nullopt;
}

}  // namespace specloop
