// Reading the loop around the plant: [actuator] (limits and slew rate) and [controller]
// (structure, derivative filter, anti-windup, sampling, set-point weights, the notch and the
// measurement filter).
#include <algorithm>
#include <numbers>

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

/// A number inside a filter's table (controller.notch.frequency …): required, in range; a string
/// there ("search") mixes the two forms.
double filter_number(const DocumentReader& reader, const toml::table& filter, const Entry& at_table, std::string_view key,
                     std::string_view expected, bool (*in_range)(double)) {
  const std::string dotted_key = fmt::format("controller.{}.{}", at_table.key, key);
  const auto entry = find_entry(filter, key);
  if (!entry) reader.fail(at_table.at, dotted_key, fmt::format("missing; expected {}", expected));
  if (entry->value->is_string())
    reader.fail(entry->at, dotted_key,
                fmt::format("\"search\" inside the table mixes the two forms: give controller.{} = \"search\" to search "
                            "the whole filter, or numbers for every entry",
                            at_table.key));
  const Number number = reader.number_from(*entry->value, entry->at, dotted_key);
  reader.require(in_range(number.value), number, dotted_key, expected);
  return number.value;
}

/// The filter keys' two forms: "search", or a table whose keys are `keys`. Returns the table (or
/// nullptr for "search").
const toml::table* filter_form(const DocumentReader& reader, const Entry& entry, std::string_view table_text,
                               const std::vector<std::string_view>& keys) {
  const std::string dotted_key = fmt::format("controller.{}", entry.key);
  if (const auto* text = entry.value->as_string()) {
    if (text->get() != "search")
      reader.fail_expected(entry.at, dotted_key, fmt::format("\"search\" or a table {}", table_text),
                           fmt::format("\"{}\"", text->get()));
    return nullptr;
  }
  const auto* table = entry.value->as_table();
  if (table == nullptr)
    reader.fail_expected(entry.at, dotted_key, fmt::format("\"search\" or a table {}", table_text), describe(*entry.value));
  for (const auto& inner : entries_in_file_order(*table))
    if (std::find(keys.begin(), keys.end(), inner.key) == keys.end()) {
      const auto suggestion = closest_name(inner.key, keys);
      reader.fail(inner.at, fmt::format("{}.{}", dotted_key, inner.key),
                  fmt::format("unknown key{}; valid keys: {}", suggestion ? fmt::format("; did you mean '{}'?", *suggestion) : "",
                              fmt::join(keys, ", ")));
    }
  return table;
}

/// controller.notch and controller.measurement_filter (README "Filters").
void read_filters(const DocumentReader& reader, const toml::table& table, ControllerSpec& controller) {
  if (const auto entry = find_entry(table, "notch")) {
    const auto* notch = filter_form(reader, *entry, "{frequency, depth, width}", {"frequency", "depth", "width"});
    if (notch == nullptr) {
      controller.notch_search = true;
    } else {
      NotchFilter f;
      f.frequency = filter_number(reader, *notch, *entry, "frequency", "a frequency in rad/s > 0",
                                  [](double v) { return v > 0.0; });
      f.depth = filter_number(reader, *notch, *entry, "depth", "a gain at the notch frequency in (0, 1) (0.1: -20 dB)",
                              [](double v) { return v > 0.0 && v < 1.0; });
      f.width = filter_number(reader, *notch, *entry, "width", "a pole damping ζp in (0, 1]",
                              [](double v) { return v > 0.0 && v <= 1.0; });
      if (controller.sample_time_s > 0.0 && !(f.frequency < std::numbers::pi / controller.sample_time_s))
        reader.fail(find_entry(*notch, "frequency")->at, "controller.notch.frequency",
                    fmt::format("{} rad/s is at or above the Nyquist frequency π/sample_time = {:.6g} rad/s of the "
                                "sampled controller; a notch there cannot be discretized",
                                f.frequency, std::numbers::pi / controller.sample_time_s));
      controller.notch = f;
    }
  }
  if (const auto entry = find_entry(table, "measurement_filter")) {
    const auto* filter = filter_form(reader, *entry, "{order, time_constant}", {"order", "time_constant"});
    if (filter == nullptr) {
      controller.measurement_filter_search = true;
    } else {
      MeasurementFilter f;
      const double order =
          filter_number(reader, *filter, *entry, "order", "1 or 2", [](double v) { return v == 1.0 || v == 2.0; });
      f.order = order == 2.0 ? 2 : 1;
      f.time_constant = filter_number(reader, *filter, *entry, "time_constant", "a time constant in s > 0",
                                      [](double v) { return v > 0.0; });
      controller.measurement_filter = f;
    }
  }
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
  read_filters(reader, *table, controller);
}

}  // namespace specloop::reading
