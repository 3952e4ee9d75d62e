// The spec reader's core (reader_core.hpp): positions, the document walk and its name checks
// against spec_keys(), the typed getters and the texts of messages.
#include "spec/reader_core.hpp"

#include <algorithm>
#include <cmath>

namespace specloop::reading {

namespace {

struct SectionSchema {
  std::string_view name;
  std::vector<std::string_view> keys;
};

/// The top-level sections with their keys, derived from spec_keys() (first-appearance order).
const std::vector<SectionSchema>& section_schemas() {
  static const std::vector<SectionSchema> schemas = [] {
    std::vector<SectionSchema> out;
    for (const SpecKey& row : spec_keys()) {
      const std::string_view key = row.key;
      const auto dot = key.find('.');
      if (dot == std::string_view::npos) continue;  // a top-level key (title)
      const std::string_view section = key.substr(0, dot);
      if (std::none_of(out.begin(), out.end(), [&](const SectionSchema& s) { return s.name == section; }))
        out.push_back({section, keys_of_section(section)});
    }
    return out;
  }();
  return schemas;
}

constexpr std::string_view kTitleKey = "title";

/// Shows a number the way a user would recognise it: integers as integers, floating-point
/// values in shortest round-trip form ("-5", "0.25", "nan", "inf").
std::string shown_number(const toml::node& node) {
  if (const auto* integer = node.as_integer()) return fmt::format("{}", integer->get());
  if (const auto* floating = node.as_floating_point()) return fmt::format("{}", floating->get());
  return "?";
}

}  // namespace

// ---------------------------------------------------------------------------------------------
// Positions, entries, texts
// ---------------------------------------------------------------------------------------------

Position position_of(const toml::source_region& region) {
  if (region.begin.line == 0) return Position{1, 1};
  return region.begin;
}

bool comes_before(const Position& a, const Position& b) {
  return std::pair{a.line, a.column} < std::pair{b.line, b.column};
}

std::vector<Entry> entries_in_file_order(const toml::table& table) {
  std::vector<Entry> entries;
  for (const auto& [key, value] : table) {
    entries.push_back({key.str(), &value, position_of(key.source())});
  }
  std::stable_sort(entries.begin(), entries.end(),
                   [](const Entry& a, const Entry& b) { return comes_before(a.at, b.at); });
  return entries;
}

std::optional<Entry> find_entry(const toml::table& table, std::string_view key) {
  const auto found = table.find(key);
  if (found == table.end()) return std::nullopt;
  return Entry{found->first.str(), &found->second, position_of(found->first.source())};
}

std::string in_quotes(std::string_view text) {
  constexpr std::size_t kMaxShown = 40;
  if (text.size() > kMaxShown) return fmt::format("\"{}...\"", text.substr(0, kMaxShown));
  return fmt::format("\"{}\"", text);
}

std::string describe(const toml::node& node) {
  switch (node.type()) {
    case toml::node_type::integer:
    case toml::node_type::floating_point:
      return shown_number(node);
    case toml::node_type::string:
      return "a string (" + in_quotes(node.as_string()->get()) + ")";
    case toml::node_type::boolean:
      return fmt::format("a boolean ({})", node.as_boolean()->get());
    case toml::node_type::array: {
      const std::size_t count = node.as_array()->size();
      if (count == 0) return "an empty array";
      return fmt::format("an array of {} element{}", count, count == 1 ? "" : "s");
    }
    case toml::node_type::table:
      return "a table";
    case toml::node_type::date:
      return "a date";
    case toml::node_type::time:
      return "a time";
    case toml::node_type::date_time:
      return "a date-time";
    case toml::node_type::none:
      break;
  }
  return "nothing";
}

std::string limit_text(double v) {
  const double e = std::log10(std::abs(v));
  if (std::abs(v) >= 1e4 || std::abs(v) < 1e-3) {
    if (e == std::round(e)) return fmt::format("{}1e{}", v < 0 ? "-" : "", static_cast<int>(e));
  }
  return fmt::format("{:g}", v);
}

std::string dotted(std::string_view section, std::string_view key) { return fmt::format("{}.{}", section, key); }

std::vector<std::string_view> keys_of_section(std::string_view section) {
  std::vector<std::string_view> keys;
  for (const SpecKey& row : spec_keys()) {
    const std::string_view key = row.key;
    if (key.size() <= section.size() + 1 || !key.starts_with(section) || key[section.size()] != '.') continue;
    std::string_view rest = key.substr(section.size() + 1);
    rest = rest.substr(0, rest.find('.'));
    if (std::find(keys.begin(), keys.end(), rest) == keys.end()) keys.push_back(rest);
  }
  return keys;
}

void fail_at(const std::string& path, const Position& at, std::string_view key, std::string_view what) {
  throw SpecError(fmt::format("{}:{}:{}: {}: {}", path, at.line, at.column, key, what));
}

bool TimeRule::admits(double v) const { return v > 0.0 && v * fastest_rate >= kMinTimeFraction; }

std::string TimeRule::expected(std::string_view what, std::string_view otherwise) const {
  if (fastest_rate == 0.0) return fmt::format("{} > 0", what);
  return fmt::format("{} >= {:.3g} ({} of the plant's fastest time constant, 1/{:.4g} rad/s){}", what,
                     kMinTimeFraction / fastest_rate, limit_text(kMinTimeFraction), fastest_rate, otherwise);
}

// ---------------------------------------------------------------------------------------------
// The document walk
// ---------------------------------------------------------------------------------------------

void DocumentReader::check_names_and_shapes() const {
  if (document_.empty())
    throw SpecError(fmt::format("{}:1:1: the file is empty (no keys: only blank lines or comments); a spec needs at "
                                "least a [plant] section, e.g. [plant] with poles = [-1.0, -4.0]",
                                path_));
  std::vector<std::string_view> top_level_names{kTitleKey};
  for (const auto& schema : section_schemas()) top_level_names.push_back(schema.name);

  for (const auto& entry : entries_in_file_order(document_)) {
    if (entry.key == kTitleKey) {
      if (!entry.value->is_string()) fail_expected(entry.at, entry.key, "a string", describe(*entry.value));
      continue;
    }
    const auto schema = std::find_if(section_schemas().begin(), section_schemas().end(),
                                     [&](const SectionSchema& s) { return s.name == entry.key; });
    if (schema == section_schemas().end()) {
      const bool is_section = entry.value->is_table();
      const auto at = is_section ? position_of(entry.value->source()) : entry.at;
      const std::string_view kind = is_section ? "unknown section" : "unknown key";
      if (const auto suggestion = closest_name(entry.key, top_level_names)) {
        fail(at, entry.key, fmt::format("{}; did you mean '{}'?", kind, *suggestion));
      }
      fail(at, entry.key, fmt::format("{}; valid top-level names: {}", kind, fmt::join(top_level_names, ", ")));
    }
    const auto* table = entry.value->as_table();
    if (table == nullptr) {
      fail_expected(entry.at, entry.key, fmt::format("a table (a [{}] section)", entry.key), describe(*entry.value));
    }
    if (table->empty()) fail(header_of(*table), entry.key, "empty section");
    check_keys(*table, entry.key, schema->keys);
  }
}

void DocumentReader::check_keys(const toml::table& table, std::string_view section_name,
                                const std::vector<std::string_view>& keys) const {
  // A section with free plant keys ([uncertainty]) leaves those to its reader: "plant.gain" (one
  // quoted key) or plant.gain (a dotted key, a [plant] table inside the section).
  const bool plant_keys_free = std::find(keys.begin(), keys.end(), "<plant key>") != keys.end();
  for (const auto& key_entry : entries_in_file_order(table)) {
    if (std::find(keys.begin(), keys.end(), key_entry.key) != keys.end()) continue;
    if (plant_keys_free && (key_entry.key == "plant" || key_entry.key.starts_with("plant."))) continue;
    const std::string key = dotted(section_name, key_entry.key);
    if (plant_keys_free && (key_entry.value->is_table() || key_entry.key.find('.') != std::string_view::npos))
      fail(key_entry.at, key, "only numeric plant keys can be given a range here (\"plant.gain\", \"plant.poles[0]\", …)");
    if (const auto suggestion = closest_name(key_entry.key, keys))
      fail(key_entry.at, key, fmt::format("unknown key; did you mean '{}'?", *suggestion));
    fail(key_entry.at, key, fmt::format("unknown key; valid keys in [{}]: {}", section_name, fmt::join(keys, ", ")));
  }
}

// ---------------------------------------------------------------------------------------------
// Typed getters
// ---------------------------------------------------------------------------------------------

NumberOrWhyNot DocumentReader::try_number(const toml::node& node, const Position& at) {
  NumberOrWhyNot out;
  Number number;
  number.at = at;
  if (const auto* integer = node.as_integer()) {
    number.value = static_cast<double>(integer->get());
  } else if (const auto* floating = node.as_floating_point()) {
    number.value = floating->get();
  } else {
    out.expected = "a number";
    out.got = describe(node);
    return out;
  }
  number.shown = shown_number(node);
  if (!std::isfinite(number.value)) {
    out.expected = "a finite number";
    out.got = number.shown;
    return out;
  }
  out.number = std::move(number);
  return out;
}

Number DocumentReader::number_from(const toml::node& node, const Position& at, std::string_view key) const {
  NumberOrWhyNot read = try_number(node, at);
  if (!read.number) fail_expected(at, key, read.expected, read.got);
  return std::move(*read.number);
}

std::optional<Number> DocumentReader::optional_number(const toml::table* table, std::string_view section_name,
                                                      std::string_view key) const {
  if (table == nullptr) return std::nullopt;
  const auto entry = find_entry(*table, key);
  if (!entry) return std::nullopt;
  return number_from(*entry->value, entry->at, dotted(section_name, key));
}

std::vector<std::pair<std::string, Position>> DocumentReader::string_list(const Entry& entry, const std::string& key,
                                                                          std::string_view what) const {
  const auto* list = entry.value->as_array();
  if (list == nullptr || list->empty())
    fail_expected(entry.at, key, fmt::format("a non-empty array of {}", what), describe(*entry.value));
  std::vector<std::pair<std::string, Position>> out;
  for (std::size_t i = 0; i < list->size(); ++i) {
    const toml::node& element = *list->get(i);
    const auto at = position_of(element.source());
    const auto* text = element.as_string();
    if (text == nullptr)
      fail_expected(at, fmt::format("{}[{}]", key, i), fmt::format("a string ({})", what), describe(element));
    out.emplace_back(std::string(text->get()), at);
  }
  return out;
}

void DocumentReader::fail_unknown_choice(const Entry& entry, const std::string& key, std::string_view what,
                                         const std::vector<std::string>& names, std::string_view given) const {
  std::vector<std::string_view> views(names.begin(), names.end());
  const auto suggestion = closest_name(given, views);
  fail(entry.at, key,
       fmt::format("unknown {} {}{}; valid {}s: {}", what, in_quotes(given),
                   suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "", what,
                   fmt::join(names, ", ")));
}

}  // namespace specloop::reading
