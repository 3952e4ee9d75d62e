// The shared vocabulary: the enums that the spec reader, the numerics, the reports and the sweep
// store all name, each with its one table of spellings (as written in a spec file and in
// result.json), and the did-you-mean matcher used by every "unknown name" message.
#pragma once

#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <vector>

namespace specloop {

/// Compensator structures. Names as written in the spec: p, pi, pd, pid, lead, lag, lead-lag.
enum class Structure { p, pi, pd, pid, lead, lag, lead_lag };

/// Spec spelling of a structure ("lead-lag" for Structure::lead_lag).
std::string_view structure_name(Structure s);
/// Parses a spec spelling; std::nullopt for an unknown name.
std::optional<Structure> parse_structure(std::string_view name);
/// All spellings, in declaration order, for error messages.
const std::vector<std::string>& structure_names();
/// True when the structure contains an integrator (pi, pid).
bool has_integrator(Structure s);

/// Integrator protection while the actuator is saturated (parallel-form controllers only).
enum class AntiWindup {
  none,                     // the integrator integrates the error regardless of saturation
  conditional_integration,  // stop integrating while saturated and the error drives further in;
                            // where neither integrating nor stopping is consistent, u_c slides on
                            // the limit (Filippov: the integrator moves just enough to hold u_c there)
  back_calculation,         // I' = Ki·e + (u_applied − u_c)/Tt
};
/// "none", "conditional-integration", "back-calculation".
std::string_view anti_windup_name(AntiWindup a);
/// Parses a spelling; std::nullopt for an unknown name.
std::optional<AntiWindup> parse_anti_windup(std::string_view name);
/// All spellings, in declaration order, for error messages.
const std::vector<std::string>& anti_windup_names();

/// What a search minimizes among feasible designs.
enum class Objective { itae, iae, ise, effort, settling_time, sensitivity_peak, load_iae };
std::string_view objective_name(Objective o);
std::optional<Objective> parse_objective(std::string_view name);
const std::vector<std::string>& objective_names();

/// Which loop the search ends on (`search.simulate`).
///   automatic: the nonlinear loop when an effect the linear loop leaves out is active for the
///              linear optimum (measured), else the linear loop;
///   linear:    never the nonlinear loop (the verdict is still read on the loop the spec describes);
///   nonlinear: always a final stage on the nonlinear loop.
enum class SimulateMode { automatic, linear, nonlinear };
std::string_view simulate_mode_name(SimulateMode m);  // "auto", "linear", "nonlinear"
std::optional<SimulateMode> parse_simulate_mode(std::string_view name);
const std::vector<std::string>& simulate_mode_names();

/// What a design over the plant's uncertainty ([uncertainty] mode) requires.
///   worst_case: every requirement on every plant of the scenario set;
///   yield:      every requirement on at least yield_min_pct of the set's random plants.
enum class RobustMode { worst_case, yield };
std::string_view robust_mode_name(RobustMode m);  // "worst-case", "yield"
std::optional<RobustMode> parse_robust_mode(std::string_view name);
const std::vector<std::string>& robust_mode_names();

/// Where a robust search reads its objective (`search.objective_at`): on the nominal plant, or
/// its worst value over the scenarios.
enum class ObjectiveAt { nominal, worst };
std::string_view objective_at_name(ObjectiveAt a);  // "nominal", "worst"
std::optional<ObjectiveAt> parse_objective_at(std::string_view name);
const std::vector<std::string>& objective_at_names();

/// The known name closest to `unknown` when it is a likely typo (equal ignoring case, or within
/// edit distance 2 and not a complete rewrite of a short word), for did-you-mean messages.
std::optional<std::string_view> closest_name(std::string_view unknown, std::span<const std::string_view> known);
/// The same over strings; std::nullopt when none is close.
std::optional<std::string> likely_name(std::string_view unknown, const std::vector<std::string>& known);

}  // namespace specloop
