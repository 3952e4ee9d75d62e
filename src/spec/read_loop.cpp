// Reading the loop around the plant: [actuator] (limits and slew rate) and [controller]
// (structure, derivative filter, anti-windup, sampling, set-point weights).
#include "spec/sections.hpp"

namespace specloop::reading {

void read_actuator(const DocumentReader& reader, ActuatorSpec& actuator, bool absolute_limits, SpecSources& sources) {
  const toml::table* table = reader.section("actuator");
  if (table == nullptr) return;
  actuator.rate_max = reader.ranged_number(table, "actuator", "rate_max", [](double v) { return v > 0.0; },
                                           "a rate in actuator units per second > 0");
  const auto min = reader.optional_number(table, "actuator", "min");
  const auto max = reader.optional_number(table, "actuator", "max");
  if (!min && !max) return;
  if (min && !max) reader.fail(DocumentReader::header_of(*table), "actuator.max", "missing; give both min and max, or neither");
  if (max && !min) reader.fail(DocumentReader::header_of(*table), "actuator.min", "missing; give both min and max, or neither");
  reader.require(max->value > min->value, *max, "actuator.max",
                 fmt::format("a number greater than actuator.min ({})", min->shown));
  if (absolute_limits) {
    // The loop starts at rest at the operating point, u = u0: checked once u0 is matched.
    sources.actuator_limits = ActuatorLimitsShown{min->shown, max->shown};
  } else {
    // The loop starts at rest with u = 0, so the range must contain it.
    reader.require(min->value <= 0.0, *min, "actuator.min", "a limit <= 0 (the loop starts at rest with u = 0)");
    reader.require(max->value >= 0.0, *max, "actuator.max", "a limit >= 0 (the loop starts at rest with u = 0)");
  }
  actuator.min = min->value;
  actuator.max = max->value;
  actuator.limited = true;
}

std::optional<double> read_plant_time(const DocumentReader& reader, const toml::table* table, std::string_view section,
                                      std::string_view key, std::string_view what, std::string_view otherwise,
                                      const std::optional<TimeRule>& times, std::vector<PendingTime>& pending) {
  if (times)
    return reader.ranged_number(table, section, key, [&](double v) { return times->admits(v); },
                                times->expected(what, otherwise));
  const auto number = reader.optional_number(table, section, key);
  if (!number) return std::nullopt;
  pending.push_back({dotted(section, key), *number, std::string(what), std::string(otherwise)});
  return number->value;
}

namespace {

/// Set-point weights act on the parallel form; lag and lead-lag have none.
void check_weights_fit_structure(const DocumentReader& reader, const toml::table& table,
                                 const ControllerSpec& controller) {
  const bool weighted = controller.setpoint_weight != 1.0 || controller.derivative_on_measurement;
  if (!weighted || (controller.structure != Structure::lag && controller.structure != Structure::lead_lag)) return;
  const auto entry = find_entry(table, controller.setpoint_weight != 1.0 ? "setpoint_weight" : "derivative_on");
  reader.fail(entry->at, fmt::format("controller.{}", entry->key),
              fmt::format("set-point weighting needs a parallel (PID-type) form; structure '{}' has none",
                          structure_name(controller.structure)));
}

}  // namespace

void read_controller(const DocumentReader& reader, ControllerSpec& controller, const std::optional<TimeRule>& times,
                     std::vector<PendingTime>& pending) {
  const toml::table* table = reader.section("controller");
  if (table == nullptr) return;
  if (const auto structure =
          reader.read_choice(*table, "controller", "structure", "structure", structure_names(), parse_structure))
    controller.structure = *structure;
  if (const auto filter = reader.ranged_number(
          table, "controller", "derivative_filter", [](double v) { return v > 0.0 && v <= kMaxDerivativeFilter; },
          fmt::format("a number in (0, {}] (common practice is 2 to 20; beyond that the filter pole is a mode "
                      "the numerics cannot keep apart from the plant's)", limit_text(kMaxDerivativeFilter)))) {
    controller.derivative_filter = *filter;
  }
  if (const auto scheme =
          reader.read_choice(*table, "controller", "anti_windup", "scheme", anti_windup_names(), parse_anti_windup))
    controller.anti_windup = *scheme;
  controller.tracking_time_s =
      read_plant_time(reader, table, "controller", "tracking_time", "a time in s", "", times, pending);
  if (const auto ts = read_plant_time(reader, table, "controller", "sample_time", "a sample period in s",
                                      " (a controller that fast is continuous: leave sample_time out)", times, pending))
    controller.sample_time_s = *ts;
  if (const auto b = reader.ranged_number(table, "controller", "setpoint_weight",
                                          [](double v) { return v >= 0.0 && v <= 1.0; }, "a weight in [0, 1]"))
    controller.setpoint_weight = *b;
  static const std::vector<std::string> kDerivativeOn{"error", "measurement"};
  if (const auto on = reader.read_choice(*table, "controller", "derivative_on", "place", kDerivativeOn,
                                         [](std::string_view v) -> std::optional<bool> {
                                           if (v == "error") return false;
                                           if (v == "measurement") return true;
                                           return std::nullopt;
                                         }))
    controller.derivative_on_measurement = *on;
  check_weights_fit_structure(reader, *table, controller);
}

}  // namespace specloop::reading
