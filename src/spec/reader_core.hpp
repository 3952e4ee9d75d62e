// The spec reader's shared core (private to the spec layer): one parsed TOML document and its
// path; the document walk with the schema's name checks (unknown keys and sections, did-you-mean);
// typed getters that fail with "file:line:col: key: expected …, got …"; and SpecSources, where
// the reader found what later checks may blame. The sections are read by read_plant.cpp,
// read_loop.cpp, read_requirements.cpp and read_run.cpp; spec.cpp (read_spec) puts them together.
#pragma once

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <toml++/toml.h>

#include <complex>
#include <optional>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "specloop/core/vocabulary.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

namespace reading {

using Position = toml::source_position;

/// toml++ leaves positions zeroed for nodes it created implicitly; this falls back to 1:1.
Position position_of(const toml::source_region& region);
bool comes_before(const Position& a, const Position& b);

/// One key of a table together with its value and where the key was written.
struct Entry {
  std::string_view key;
  const toml::node* value = nullptr;
  Position at{};
};

/// Entries of a table in the order they appear in the file (toml++ iterates in key order).
std::vector<Entry> entries_in_file_order(const toml::table& table);
std::optional<Entry> find_entry(const toml::table& table, std::string_view key);

/// A number read from the spec, with its spelling (for messages) and position.
struct Number {
  double value = 0.0;
  std::string shown;
  Position at{};
};

/// What a node is, for the "got ..." part of a message.
std::string describe(const toml::node& node);
/// `text` in double quotes, cut after 40 characters.
std::string in_quotes(std::string_view text);
/// A range end as the README writes it: "1e-5", "1e5", "1000", "0.5".
std::string limit_text(double v);
/// "section.key".
std::string dotted(std::string_view section, std::string_view key);
/// The keys of table `section` ("plant", "plant.nonlinear", ...) in spec_keys() order.
std::vector<std::string_view> keys_of_section(std::string_view section);

/// Throws the SpecError "path:line:col: key: what".
[[noreturn]] void fail_at(const std::string& path, const Position& at, std::string_view key, std::string_view what);

/// A plant pole or zero and where the file gave it (for messages about it).
struct LocatedRoot {
  std::complex<double> value;
  std::string key;
  Position at{};
};

/// Where the plant's poles, zeros, gain and delay were written (the plant checks blame them).
struct PlantSources {
  std::vector<LocatedRoot> poles, zeros;
  std::pair<std::string, Position> gain{"plant", {1, 1}};
  Position delay{};
};

/// A number as read (Number), or why it is not one, in number_from's words.
struct NumberOrWhyNot {
  std::optional<Number> number;
  std::string expected, got;  // "a number" / "a finite number", and what was given
};

/// An entry of [plant.nonlinear.operating_point] as written. The entries are matched to the state
/// names (and u) by the modelling step, once the names are known to be valid.
struct PointEntry {
  std::string key;
  Position at{};
  NumberOrWhyNot value;
};

/// Where each part of [plant.nonlinear] was written (the modelling step blames them).
struct NonlinearSources {
  Position states_entry{}, derivatives_entry{}, output_entry{};
  std::vector<Position> states, derivatives, parameters;  // per element or parameter
  Position operating_point{};                             // the operating point table's header
  std::vector<PointEntry> point_entries;                  // its entries, in file order
};

/// actuator.min and actuator.max as written, when both were given.
struct ActuatorLimitsShown {
  std::string min, max;
};

/// The lower limit of controller and noise times: at least kMinTimeFraction of the plant's
/// fastest time constant (when the plant has a nonzero pole or zero).
struct TimeRule {
  double fastest_rate = 0.0;  // the largest nonzero plant pole or zero magnitude, rad/s (0: none)
  bool admits(double v) const;
  std::string expected(std::string_view what, std::string_view otherwise) const;
};

/// A time read before the plant's fastest rate was known (a nonlinear plant's is known only from
/// its linearization): the modelling step checks it against TimeRule, as the reader would have.
struct PendingTime {
  std::string key;          // "controller.sample_time"
  Number number;
  std::string what, otherwise;  // TimeRule::expected's arguments
};

}  // namespace reading

/// Where the reader found what the modelling step's checks may blame (SpecAsRead::sources).
struct SpecSources {
  std::string path;                              // as given to read_spec: every message names it
  reading::PlantSources plant;                   // a linear plant's roots and gain; the delay (either form)
  reading::NonlinearSources nonlinear;           // [plant.nonlinear]'s parts
  std::optional<reading::ActuatorLimitsShown> actuator_limits;  // a nonlinear plant's, to check u0 against
  std::vector<reading::PendingTime> pending_times;  // times to check once the plant is modelled
  std::optional<reading::Position> steady_state_error_at;  // where requirements.steady_state_error_max was given
};

namespace reading {

/// One parsed document and the path for messages: the typed getters every section reader uses.
class DocumentReader {
 public:
  DocumentReader(const toml::table& document, std::string path) : document_(document), path_(std::move(path)) {}

  const toml::table& document() const { return document_; }
  const std::string& path() const { return path_; }
  /// The top-level table `name`, or nullptr when the file has none.
  const toml::table* section(std::string_view name) const { return document_[name].as_table(); }
  /// Where a section's header is (for keys that are missing from it).
  static Position header_of(const toml::table& table) { return position_of(table.source()); }

  [[noreturn]] void fail(const Position& at, std::string_view key, std::string_view what) const {
    fail_at(path_, at, key, what);
  }
  [[noreturn]] void fail_expected(const Position& at, std::string_view key, std::string_view expected,
                                  std::string_view got) const {
    fail(at, key, fmt::format("expected {}, got {}", expected, got));
  }
  void require(bool satisfied, const Number& number, std::string_view key, std::string_view expected) const {
    if (!satisfied) fail_expected(number.at, key, expected, number.shown);
  }

  /// The first pass: a non-empty document, every top-level name and every section key listed in
  /// spec_keys() (else "unknown key" with a did-you-mean or the valid names), sections not empty.
  void check_names_and_shapes() const;
  /// Every key of `table` (the section `section_name`) is one of `keys`.
  void check_keys(const toml::table& table, std::string_view section_name,
                  const std::vector<std::string_view>& keys) const;

  /// A finite number (integer or floating point) from `node`; booleans are not numbers.
  Number number_from(const toml::node& node, const Position& at, std::string_view key) const;
  /// The same without failing: the number, or what number_from's message would say.
  static NumberOrWhyNot try_number(const toml::node& node, const Position& at);
  std::optional<Number> optional_number(const toml::table* table, std::string_view section_name,
                                        std::string_view key) const;

  /// Reads an optional number and checks it against a range; `expected` names the range.
  template <typename InRange>
  std::optional<double> ranged_number(const toml::table* table, std::string_view section_name, std::string_view key,
                                      InRange in_range, std::string_view expected) const {
    const auto number = optional_number(table, section_name, key);
    if (!number) return std::nullopt;
    require(in_range(number->value), *number, dotted(section_name, key), expected);
    return number->value;
  }

  /// A string naming one of `names`, parsed by `parse` (which returns a std::optional); an
  /// unknown name is an error listing the valid ones, with a did-you-mean when one is close.
  template <typename Parse>
  auto read_choice(const toml::table& table, std::string_view section_name, std::string_view key,
                   std::string_view what, const std::vector<std::string>& names, Parse parse) const
      -> decltype(parse(std::string_view{})) {
    const auto entry = find_entry(table, key);
    if (!entry) return std::nullopt;
    const std::string dotted_key = dotted(section_name, key);
    const std::string valid = fmt::format("{}", fmt::join(names, ", "));
    const auto* text = entry->value->as_string();
    if (text == nullptr) fail_expected(entry->at, dotted_key, fmt::format("one of {}", valid), describe(*entry->value));
    auto value = parse(text->get());
    if (!value) fail_unknown_choice(*entry, dotted_key, what, names, text->get());
    return value;
  }

  /// A non-empty array of strings, with each element's position.
  std::vector<std::pair<std::string, Position>> string_list(const Entry& entry, const std::string& key,
                                                            std::string_view what) const;

 private:
  [[noreturn]] void fail_unknown_choice(const Entry& entry, const std::string& key, std::string_view what,
                                        const std::vector<std::string>& names, std::string_view given) const;

  const toml::table& document_;
  std::string path_;
};

}  // namespace reading
}  // namespace specloop
