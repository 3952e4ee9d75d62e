// Spec file loading: the entry points of spec.hpp. read_spec parses the TOML with toml++ and
// reads the sections in order (sections.hpp: each checks its keys, types and ranges and reports
// the first problem as "file:line:column: dotted.key: expected ..., got ..."); model_spec
// (plant_model.cpp) models a nonlinear plant; parse_spec and load_spec do both.
#include "specloop/spec/spec.hpp"

#include "spec/plant_checks.hpp"
#include "spec/sections.hpp"

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

namespace specloop {

namespace reading {

/// The sections in order. A linear plant is checked completely here; for a nonlinear one the
/// checks that need its linearization wait in `sources` for model_spec.
SpecAsRead read_document(const toml::table& document, const std::string& path) {
  const reading::DocumentReader reader(document, path);
  reader.check_names_and_shapes();
  SpecAsRead read{Spec{}, nullptr};
  Spec& spec = read.spec;
  auto sources = std::make_shared<SpecSources>();
  sources->path = path;
  spec.path = path;
  spec.name = std::filesystem::path(path).stem().string();
  if (const auto title = reading::find_entry(document, "title")) spec.title = std::string(title->value->as_string()->get());
  reading::read_plant(reader, spec.plant, *sources);
  std::optional<reading::TimeRule> times;
  if (!spec.plant.nonlinear) times = reading::check_plant_numerics(path, spec.plant, sources->plant);
  reading::read_actuator(reader, spec.actuator, spec.plant.nonlinear.has_value(), *sources);
  reading::read_controller(reader, spec.controller, times, sources->pending_times);
  reading::read_requirements(reader, spec.requirements, *sources);
  reading::read_reference(reader, spec.reference);
  reading::read_search(reader, spec.search, spec.controller);
  reading::read_disturbance(reader, spec.disturbance, times, sources->pending_times);
  reading::read_sweep(reader, spec.sweep_vary);
  reading::read_units(reader, spec.units);
  reading::read_rules(reader, spec.rules);
  reading::read_uncertainty(reader, spec.uncertainty);
  if (spec.search.objective_at != ObjectiveAt::nominal && !spec.uncertainty.active())
    reading::fail_at(path, reading::find_entry(*reader.section("search"), "objective_at")->at, "search.objective_at",
                     "\"worst\" reads the objective over the plants of [uncertainty], and the file has none");
  if (spec.search.tune_setpoint_weight) {
    const auto at = reading::find_entry(*reader.section("search"), "tune_setpoint_weight")->at;
    const Structure s = spec.controller.structure;
    if (s != Structure::pi && s != Structure::pid)
      reading::fail_at(path, at, "search.tune_setpoint_weight",
                       fmt::format("a set-point weight needs integral action to keep the final value on the set point "
                                   "(PI or PID); structure '{}' has none",
                                   structure_name(s)));
    const toml::table* controller = reader.section("controller");
    if (controller != nullptr && reading::find_entry(*controller, "setpoint_weight"))
      reading::fail_at(path, at, "search.tune_setpoint_weight",
                       "controller.setpoint_weight fixes b, and tune_setpoint_weight searches it: give one of them");
  }
  if (spec.controller.notch_search &&
      std::none_of(spec.search.bounds.begin(), spec.search.bounds.end(),
                   [](const auto& b) { return b.first == kNotchFrequencyParameter; })) {
    // The searched notch's default frequency range comes from the plant's lightly damped poles.
    const auto at = reading::find_entry(*reader.section("controller"), "notch")->at;
    if (spec.plant.nonlinear)
      reading::fail_at(path, at, "controller.notch",
                       "\"search\" on an expression plant needs search.bounds.notch_frequency = [low, high] (its poles "
                       "are known only from its linearization)");
    if (!notch_frequency_range(spec.plant.poles, spec.controller.sample_time_s))
      reading::fail_at(path, at, "controller.notch",
                       fmt::format("\"search\" places the notch near the plant's lightly damped poles (a complex pair "
                                   "with damping below {}), and this plant has none{}; give "
                                   "search.bounds.notch_frequency = [low, high] or leave the notch out",
                                   kLightDamping,
                                   spec.controller.sample_time_s > 0.0 ? " below the sampled controller's Nyquist frequency" : ""));
  }
  if (times) reading::check_zero_error_integrator(path, spec, *sources);
  reading::check_load_requirements(reader, spec, path);
  read.sources = std::move(sources);
  return read;
}

}  // namespace reading

SpecAsRead read_spec(std::string_view text, const std::string& path) {
  toml::table document;
  try {
    document = toml::parse(text, std::string_view(path));
  } catch (const toml::parse_error& error) {
    const auto at = reading::position_of(error.source());
    throw SpecError(fmt::format("{}:{}:{}: invalid TOML: {}", path, at.line, at.column, error.description()));
  }
  SpecAsRead read = reading::read_document(document, path);
  read.spec.source_text = std::string(text);
  return read;
}

Spec parse_spec(std::string_view text, const std::string& path) { return model_spec(read_spec(text, path)); }

Spec load_spec(const std::string& path) {
  std::error_code status_error;
  if (std::filesystem::is_directory(path, status_error)) {
    throw SpecError(fmt::format("{}: cannot read file: {}", path, std::strerror(EISDIR)));
  }
  errno = 0;
  std::ifstream file(path, std::ios::binary);
  if (!file) {
    const int reason = errno;
    throw SpecError(fmt::format("{}: cannot read file: {}", path, reason != 0 ? std::strerror(reason) : "open failed"));
  }
  std::ostringstream contents;
  contents << file.rdbuf();
  if (file.bad()) {
    throw SpecError(fmt::format("{}: cannot read file: read error", path));
  }
  return parse_spec(contents.str(), path);
}

}  // namespace specloop
