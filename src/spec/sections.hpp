// The spec reader's sections (private to the spec layer), one file each: read_plant.cpp,
// read_loop.cpp (actuator, controller), read_requirements.cpp, read_run.cpp (reference, search,
// disturbance, sweep, units). read_spec (spec.cpp) calls them in this order, which is the order a file's
// problems are reported in. Each throws SpecError on the first problem.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "spec/reader_core.hpp"

namespace specloop::reading {

/// [plant]: exactly one form. zeros/poles/gain and numerator/denominator fill both forms and
/// `sources.plant`; [plant.nonlinear] is read as written (states, expressions, parameters, the
/// operating point's entries) into plant.nonlinear and `sources.nonlinear`, to be modelled by
/// model_nonlinear_plant; plant.delay.
void read_plant(const DocumentReader& reader, PlantSpec& plant, SpecSources& sources);

/// [actuator]. With `absolute_limits` (a nonlinear plant) the limits are absolute actuator values,
/// checked against the operating point's u by the modelling step (their spellings go to
/// `sources`); otherwise they must contain u = 0.
void read_actuator(const DocumentReader& reader, ActuatorSpec& actuator, bool absolute_limits, SpecSources& sources);

/// [controller]. Its times are checked against `times` when the plant's rates are known, else
/// appended to `pending` for the modelling step.
void read_controller(const DocumentReader& reader, ControllerSpec& controller, const std::optional<TimeRule>& times,
                     std::vector<PendingTime>& pending);

/// [requirements], key by key from the requirement catalogue; notes where
/// steady_state_error_max was written in `sources`.
void read_requirements(const DocumentReader& reader, Requirements& requirements, SpecSources& sources);
/// The load requirements (load_iae_max, load_peak_max, load_recovery_time_max) and the load_iae
/// objective where the load response cannot be defined: a sampled controller (not measured), and
/// for the IAE and the recovery time a structure without integral action (the load leaves an
/// offset). Fails naming the first such key.
void check_load_requirements(const DocumentReader& reader, const Spec& spec, const std::string& path);

void read_reference(const DocumentReader& reader, ReferenceSpec& reference);
/// [search]; its bounds must name parameters of the controller's structure or its searched filters.
void read_search(const DocumentReader& reader, SearchSpec& search, const ControllerSpec& controller);
/// [disturbance]; noise_period like the controller's times.
void read_disturbance(const DocumentReader& reader, DisturbanceSpec& disturbance, const std::optional<TimeRule>& times,
                      std::vector<PendingTime>& pending);
/// [sweep] vary: each axis's syntax.
void read_sweep(const DocumentReader& reader, std::vector<std::string>& vary);
/// [uncertainty]: each range's key checked against the document (a numeric plant key, as `sweep
/// --vary` checks it), low < high around the file's value; the drawing and judging keys.
void read_uncertainty(const DocumentReader& reader, UncertaintySpec& uncertainty);
/// [rules]: simc_tau_c, a time > 0.
void read_rules(const DocumentReader& reader, RulesSpec& rules);
/// [units]: each a short label without control characters.
void read_units(const DocumentReader& reader, UnitsSpec& units);

/// Every section of a parsed document, in order (spec.cpp; read_spec without the TOML parse).
SpecAsRead read_document(const toml::table& document, const std::string& path);

/// A time key whose lower limit depends on the plant (controller.tracking_time, controller.sample_time,
/// disturbance.noise_period): checked against `times` when given, else read and left in `pending`.
std::optional<double> read_plant_time(const DocumentReader& reader, const toml::table* table, std::string_view section,
                                      std::string_view key, std::string_view what, std::string_view otherwise,
                                      const std::optional<TimeRule>& times, std::vector<PendingTime>& pending);

}  // namespace specloop::reading
