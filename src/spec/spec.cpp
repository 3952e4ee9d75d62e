// Spec file loading: parses the TOML spec with toml++, checks every section, key, type and
// range against our schema, and reports the first problem as
// "file:line:column: dotted.key: expected ..., got ...". A valid spec is normalized so that
// both plant forms (zeros/poles/gain and numerator/denominator) are filled.
#include "specloop/spec/spec.hpp"
#include "specloop/spec/axes.hpp"

#include "specloop/core/compensator.hpp"
#include "specloop/sim/expression_plant.hpp"
#include "specloop/core/lti.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <toml++/toml.h>

#include <algorithm>
#include <array>
#include <cctype>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <limits>
#include <span>
#include <sstream>
#include <unsupported/Eigen/Polynomials>
#include <utility>

namespace specloop {

// ---------------------------------------------------------------------------------------------
// Schema and helpers
// ---------------------------------------------------------------------------------------------

namespace {

struct SectionSchema {
  std::string_view name;
  std::vector<std::string_view> keys;
};

/// The keys of table `section` ("plant", "plant.nonlinear", ...) in spec_keys() order: the first
/// component after "section." of every dotted key under it (spec_keys is the one list).
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

std::string in_quotes(std::string_view text) {
  constexpr std::size_t kMaxShown = 40;
  if (text.size() > kMaxShown) return fmt::format("\"{}...\"", text.substr(0, kMaxShown));
  return fmt::format("\"{}\"", text);
}

/// Shows a number the way a user would recognise it: integers as integers, floating-point
/// values in shortest round-trip form ("-5", "0.25", "nan", "inf").
std::string shown_number(const toml::node& node) {
  if (const auto* integer = node.as_integer()) return fmt::format("{}", integer->get());
  if (const auto* floating = node.as_floating_point()) return fmt::format("{}", floating->get());
  return "?";
}

/// What a node is, for the "got ..." part of a message.
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

/// toml++ leaves positions zeroed for nodes it created implicitly; fall back to 1:1.
toml::source_position position_of(const toml::source_region& region) {
  if (region.begin.line == 0) return toml::source_position{1, 1};
  return region.begin;
}

bool comes_before(const toml::source_position& a, const toml::source_position& b) {
  return std::pair{a.line, a.column} < std::pair{b.line, b.column};
}

/// One key of a table together with its value and where the key was written.
struct Entry {
  std::string_view key;
  const toml::node* value = nullptr;
  toml::source_position at{};
};

/// Entries of a table in the order they appear in the file (toml++ iterates in key order).
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

/// A number read from the spec, with its spelling (for messages) and position.
struct Number {
  double value = 0.0;
  std::string shown;
  toml::source_position at{};
};

/// A root list entry as written: a real root, or the pair re ± j·im.
struct RootEntry {
  double re = 0.0;
  std::optional<double> im;
  std::string key;                 // "plant.poles[2]", for messages
  toml::source_position at{};      // where it was written
};

/// A plant pole or zero and where the file gave it (for messages about it).
struct LocatedRoot {
  std::complex<double> value;
  std::string key;
  toml::source_position at{};
};

/// A range end as the README writes it: "1e-5", "1e5", "1000", "0.5".
std::string limit_text(double v) {
  const double e = std::log10(std::abs(v));
  if (std::abs(v) >= 1e4 || std::abs(v) < 1e-3) {
    if (e == std::round(e)) return fmt::format("{}1e{}", v < 0 ? "-" : "", static_cast<int>(e));
  }
  return fmt::format("{:g}", v);
}

std::string root_text(std::complex<double> r) {
  if (r.imag() == 0.0) return fmt::format("{:.6g}", r.real());
  return fmt::format("{:.6g} {} j{:.6g}", r.real(), r.imag() > 0.0 ? '+' : '-', std::abs(r.imag()));
}

/// Multiplies two polynomials given with the highest power first.
std::vector<double> multiply(const std::vector<double>& a, const std::vector<double>& b) {
  std::vector<double> product(a.size() + b.size() - 1, 0.0);
  for (std::size_t i = 0; i < a.size(); ++i) {
    for (std::size_t j = 0; j < b.size(); ++j) product[i + j] += a[i] * b[j];
  }
  return product;
}

/// leading · Π(s − r), with each pair expanded to the real quadratic s² − 2re·s + re² + im².
std::vector<double> expand_roots(const std::vector<RootEntry>& roots, double leading) {
  std::vector<double> polynomial{leading};
  for (const auto& root : roots) {
    if (root.im) {
      polynomial =
          multiply(polynomial, {1.0, -2.0 * root.re, root.re * root.re + *root.im * *root.im});
    } else {
      polynomial = multiply(polynomial, {1.0, -root.re});
    }
  }
  return polynomial;
}

std::vector<std::complex<double>> listed_roots(const std::vector<RootEntry>& roots) {
  std::vector<std::complex<double>> listed;
  for (const auto& root : roots) {
    if (root.im) {
      listed.emplace_back(root.re, *root.im);
      listed.emplace_back(root.re, -*root.im);
    } else {
      listed.emplace_back(root.re, 0.0);
    }
  }
  return listed;
}

std::size_t trailing_zero_count(const std::vector<double>& highest_first) {
  const auto nonzero =
      std::find_if(highest_first.rbegin(), highest_first.rend(), [](double c) { return c != 0.0; });
  return static_cast<std::size_t>(std::distance(highest_first.rbegin(), nonzero));
}

/// Roots of a polynomial (highest power first, leading coefficient nonzero). Roots at s = 0
/// (trailing zero coefficients) are returned exactly. Order: real part descending, then
/// |imaginary part| ascending, each conjugate pair as (+im, −im).
std::vector<std::complex<double>> polynomial_roots(const std::vector<double>& highest_first) {
  const std::size_t zero_roots = trailing_zero_count(highest_first);
  std::vector<std::complex<double>> roots(zero_roots, std::complex<double>(0.0, 0.0));
  const std::size_t kept = highest_first.size() - zero_roots;
  if (kept >= 2) {
    Eigen::VectorXd lowest_first(static_cast<Eigen::Index>(kept));
    for (std::size_t i = 0; i < kept; ++i) {
      lowest_first[static_cast<Eigen::Index>(i)] = highest_first[kept - 1 - i];
    }
    Eigen::PolynomialSolver<double, Eigen::Dynamic> solver(lowest_first);
    for (const auto& root : solver.roots()) roots.push_back(root);
  }
  std::sort(roots.begin(), roots.end(),
            [](const std::complex<double>& a, const std::complex<double>& b) {
              if (a.real() != b.real()) return a.real() > b.real();
              if (std::abs(a.imag()) != std::abs(b.imag())) {
                return std::abs(a.imag()) < std::abs(b.imag());
              }
              return a.imag() > b.imag();
            });
  return roots;
}

}  // namespace

namespace {

constexpr double kInf = std::numeric_limits<double>::infinity();

// ---------------------------------------------------------------------------------------------
// The reader: one parsed document and the file path for messages
// ---------------------------------------------------------------------------------------------

class SpecReader {
 public:
  SpecReader(const toml::table& document, std::string path)
      : document_(document), path_(std::move(path)) {}

  Spec read() {
    if (document_.empty())
      throw SpecError(fmt::format("{}:1:1: the file is empty (no keys: only blank lines or comments); a spec needs at "
                                  "least a [plant] section, e.g. [plant] with poles = [-1.0, -4.0]",
                                  path_));
    check_names_and_shapes();
    Spec spec;
    spec.path = path_;
    spec.name = std::filesystem::path(path_).stem().string();
    if (const auto title = find_entry(document_, kTitleKey)) {
      spec.title = std::string(title->value->as_string()->get());
    }
    read_plant(spec.plant);
    read_actuator(spec.actuator, spec.plant);
    read_controller(spec.controller);
    read_requirements(spec.requirements);
    read_reference(spec.reference);
    read_search(spec.search, spec.controller.structure);
    read_disturbance(spec.disturbance);
    read_sweep(spec.sweep_vary);
    read_units(spec.units);
    check_consistency(spec);
    return spec;
  }

 private:
  [[noreturn]] void fail(const toml::source_position& at, std::string_view key,
                         std::string_view what) const {
    throw SpecError(fmt::format("{}:{}:{}: {}: {}", path_, at.line, at.column, key, what));
  }

  [[noreturn]] void fail_expected(const toml::source_position& at, std::string_view key,
                                  std::string_view expected, std::string_view got) const {
    fail(at, key, fmt::format("expected {}, got {}", expected, got));
  }

  static std::string dotted(std::string_view section, std::string_view key) {
    return fmt::format("{}.{}", section, key);
  }

  const toml::table* section(std::string_view name) const { return document_[name].as_table(); }

  /// Where a section's header is (for keys that are missing from it).
  static toml::source_position header_of(const toml::table& table) {
    return position_of(table.source());
  }

  // --- pass 1: names, section shapes, empty sections --------------------------------------

  void check_names_and_shapes() const {
    std::vector<std::string_view> top_level_names{kTitleKey};
    for (const auto& schema : section_schemas()) top_level_names.push_back(schema.name);

    for (const auto& entry : entries_in_file_order(document_)) {
      if (entry.key == kTitleKey) {
        if (!entry.value->is_string()) {
          fail_expected(entry.at, entry.key, "a string", describe(*entry.value));
        }
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
        fail(at, entry.key,
             fmt::format("{}; valid top-level names: {}", kind, fmt::join(top_level_names, ", ")));
      }
      const auto* table = entry.value->as_table();
      if (table == nullptr) {
        fail_expected(entry.at, entry.key, fmt::format("a table (a [{}] section)", entry.key),
                      describe(*entry.value));
      }
      if (table->empty()) fail(header_of(*table), entry.key, "empty section");
      for (const auto& key_entry : entries_in_file_order(*table)) {
        if (std::find(schema->keys.begin(), schema->keys.end(), key_entry.key) !=
            schema->keys.end()) {
          continue;
        }
        const std::string key = dotted(entry.key, key_entry.key);
        if (const auto suggestion = closest_name(key_entry.key, schema->keys)) {
          fail(key_entry.at, key, fmt::format("unknown key; did you mean '{}'?", *suggestion));
        }
        fail(key_entry.at, key,
             fmt::format("unknown key; valid keys in [{}]: {}", entry.key,
                         fmt::join(schema->keys, ", ")));
      }
    }
  }

  // --- numbers -----------------------------------------------------------------------------

  /// A finite number (integer or floating point) from `node`; booleans are not numbers.
  Number number_from(const toml::node& node, const toml::source_position& at,
                     std::string_view key) const {
    Number number;
    number.at = at;
    if (const auto* integer = node.as_integer()) {
      number.value = static_cast<double>(integer->get());
    } else if (const auto* floating = node.as_floating_point()) {
      number.value = floating->get();
    } else {
      fail_expected(at, key, "a number", describe(node));
    }
    number.shown = shown_number(node);
    if (!std::isfinite(number.value)) fail_expected(at, key, "a finite number", number.shown);
    return number;
  }

  std::optional<Number> optional_number(const toml::table* table, std::string_view section_name,
                                        std::string_view key) const {
    if (table == nullptr) return std::nullopt;
    const auto entry = find_entry(*table, key);
    if (!entry) return std::nullopt;
    return number_from(*entry->value, entry->at, dotted(section_name, key));
  }

  void require(bool satisfied, const Number& number, std::string_view key,
               std::string_view expected) const {
    if (!satisfied) fail_expected(number.at, key, expected, number.shown);
  }

  /// Reads an optional number and checks it against a range; `expected` names the range.
  template <typename InRange>
  std::optional<double> ranged_number(const toml::table* table, std::string_view section_name,
                                      std::string_view key, InRange in_range,
                                      std::string_view expected) const {
    const auto number = optional_number(table, section_name, key);
    if (!number) return std::nullopt;
    require(in_range(number->value), *number, dotted(section_name, key), expected);
    return number->value;
  }

  // --- [plant] -----------------------------------------------------------------------------

  /// A list of real roots and [re, im] pairs (im > 0).
  std::vector<RootEntry> root_list(const Entry& entry) const {
    const std::string key = dotted("plant", entry.key);
    const auto* list = entry.value->as_array();
    if (list == nullptr) {
      fail_expected(entry.at, key, "an array of numbers and [re, im] pairs",
                    describe(*entry.value));
    }
    std::vector<RootEntry> roots;
    for (std::size_t i = 0; i < list->size(); ++i) {
      const toml::node& element = *list->get(i);
      const std::string element_key = fmt::format("{}[{}]", key, i);
      const auto at = position_of(element.source());
      if (const auto* pair = element.as_array()) {
        if (pair->size() != 2) {
          fail_expected(at, element_key, "a pair [re, im] of exactly 2 numbers", describe(element));
        }
        const Number re =
            number_from(*pair->get(0), position_of(pair->get(0)->source()), element_key + "[0]");
        const Number im =
            number_from(*pair->get(1), position_of(pair->get(1)->source()), element_key + "[1]");
        if (!(im.value > 0.0)) {
          fail_expected(at, element_key, "a pair [re, im] with im > 0 (it stands for re ± j·im)",
                        fmt::format("[{}, {}]", re.shown, im.shown));
        }
        roots.push_back({re.value, im.value, element_key, at});
      } else if (element.is_number()) {
        roots.push_back({number_from(element, at, element_key).value, std::nullopt, element_key, at});
      } else {
        fail_expected(at, element_key, "a number or a pair [re, im]", describe(element));
      }
    }
    return roots;
  }

  /// A non-empty coefficient list, highest power of s first.
  std::vector<double> coefficient_list(const Entry& entry) const {
    const std::string key = dotted("plant", entry.key);
    const auto* list = entry.value->as_array();
    if (list == nullptr || list->empty()) {
      fail_expected(entry.at, key, "a non-empty array of coefficients, highest power of s first",
                    describe(*entry.value));
    }
    std::vector<double> coefficients;
    for (std::size_t i = 0; i < list->size(); ++i) {
      const toml::node& element = *list->get(i);
      coefficients.push_back(
          number_from(element, position_of(element.source()), fmt::format("{}[{}]", key, i)).value);
    }
    return coefficients;
  }

  void read_plant(PlantSpec& plant) const {
    const toml::table* table = section("plant");
    if (table == nullptr) {
      fail({1, 1}, "plant",
           "missing section; a spec needs [plant] with poles (and optional zeros, gain) "
           "or with numerator and denominator");
    }
    const auto header = header_of(*table);
    const auto zeros = find_entry(*table, "zeros");
    const auto poles = find_entry(*table, "poles");
    const auto gain = find_entry(*table, "gain");
    const auto numerator = find_entry(*table, "numerator");
    const auto denominator = find_entry(*table, "denominator");
    auto nonlinear = find_entry(*table, "nonlinear");
    if (nonlinear && nonlinear->value->is_table()) nonlinear->at = position_of(nonlinear->value->source());

    // The two forms exclude each other; blame whichever key of the second form comes later.
    const auto first_present = [](std::initializer_list<const std::optional<Entry>*> entries) {
      std::optional<Entry> first;
      for (const auto* entry : entries) {
        if (*entry && (!first || comes_before((*entry)->at, first->at))) first = **entry;
      }
      return first;
    };
    const auto root_form = first_present({&zeros, &poles, &gain});
    const auto coefficient_form = first_present({&numerator, &denominator});
    if (root_form && coefficient_form) {
      const bool root_form_first = comes_before(root_form->at, coefficient_form->at);
      const Entry& offender = root_form_first ? *coefficient_form : *root_form;
      const Entry& earlier = root_form_first ? *root_form : *coefficient_form;
      fail(offender.at, dotted("plant", offender.key),
           fmt::format("cannot be combined with plant.{}; give either zeros/poles/gain or "
                       "numerator/denominator, not both",
                       earlier.key));
    }
    if (nonlinear && (root_form || coefficient_form)) {
      const Entry& linear = root_form ? *root_form : *coefficient_form;
      const bool nonlinear_first = comes_before(nonlinear->at, linear.at);
      const Entry& offender = nonlinear_first ? linear : *nonlinear;
      const Entry& earlier = nonlinear_first ? *nonlinear : linear;
      fail(offender.at, dotted("plant", offender.key),
           fmt::format("cannot be combined with plant.{}; give exactly one plant form: zeros/poles/gain, "
                       "numerator/denominator, or [plant.nonlinear]",
                       earlier.key));
    }

    if (nonlinear) {
      read_nonlinear_form(plant, *nonlinear);
    } else if (coefficient_form) {
      if (!denominator) {
        fail(header, "plant.denominator", "missing (required with plant.numerator)");
      }
      if (!numerator) {
        fail(header, "plant.numerator", "missing (required with plant.denominator)");
      }
      read_coefficient_form(plant, *numerator, *denominator);
    } else {
      if (!poles) {
        if (root_form) {
          fail(header, "plant.poles",
               fmt::format("missing (required with plant.{})", root_form->key));
        }
        fail(header, "plant.poles",
             "missing; give poles (with optional zeros and gain), numerator and denominator, or a "
             "[plant.nonlinear] section");
      }
      read_root_form(plant, zeros, *poles, gain);
    }

    if (const auto delay = ranged_number(
            table, "plant", "delay", [](double v) { return v >= 0.0; }, "a number >= 0")) {
      plant.delay_s = *delay;
      delay_at_ = find_entry(*table, "delay")->at;
    }
    check_plant_numerics(plant);
  }

  /// A plant pole in the closed right half plane (Re p ≥ 0, the imaginary axis included) that a
  /// zero cancels is a mode the output never shows and no controller can act on; a plant outside
  /// the ranges below is one the numerics cannot honour. Both are refused here (README, "Spec
  /// file reference"); a cancelled stable pair is only noted by `analyze`.
  void check_plant_numerics(const PlantSpec& plant) const {
    for (const LocatedRoot& p : poles_where_) {
      if (p.value.real() < -kCancellationTolerance * std::abs(p.value)) continue;
      for (const LocatedRoot& z : zeros_where_) {
        if (std::abs(p.value - z.value) > kCancellationTolerance * std::max(std::abs(p.value), std::abs(z.value))) continue;
        const bool on_axis = p.value.real() <= kCancellationTolerance * std::abs(p.value);
        if (plant.nonlinear)
          fail(z.at, z.key,
               fmt::format("the linearization at this operating point has a mode at {} {} that u cannot move or the "
                           "output cannot see (its pole is cancelled by a zero in G(s)): {}, and no controller can "
                           "reach it; expected every state that does not decay on its own to be driven by u and seen "
                           "in the output",
                           root_text(p.value), on_axis ? "on the imaginary axis" : "in the right half plane",
                           on_axis ? "it never decays" : "it grows unseen"));
        fail(z.at, z.key,
             fmt::format("zero {} cancels the pole {} ({}) {}: the plant has a hidden mode that the output never shows "
                         "and that no controller can reach, so the loop can never be internally stable{}; expected no "
                         "zero within a relative {} of a pole with Re ≥ 0. If that mode truly does not exist, remove "
                         "both the pole and the zero",
                         root_text(z.value), root_text(p.value), p.key,
                         on_axis ? "on the imaginary axis" : "in the right half plane",
                         on_axis ? " (the mode never decays: an integrator holds any offset, an undamped pair rings "
                                   "forever)"
                                 : " (the mode grows without bound)",
                         limit_text(kCancellationTolerance)));
      }
    }
    // Every nonzero pole and zero magnitude within [kMinRate, kMaxRate], at most kMaxSpread
    // apart; the delay's approximant (every linear computation uses it) counts as plant poles.
    std::vector<LocatedRoot> roots = poles_where_;
    roots.insert(roots.end(), zeros_where_.begin(), zeros_where_.end());
    if (plant.delay_s > 0.0)
      for (const Complex& p : delay_approximant(plant.delay_s, kDelayApproximantOrder).poles())
        roots.push_back({p, "plant.delay", delay_at_});
    const LocatedRoot* slowest = nullptr;
    const LocatedRoot* fastest = nullptr;
    double log_sum = 0.0;
    int counted = 0;
    // The approximant's pole magnitudes for a 1 s delay scale as 1/delay.
    double unit_delay_fastest = 0.0, unit_delay_slowest = kInf;
    for (const Complex& p : delay_approximant(1.0, kDelayApproximantOrder).poles()) {
      unit_delay_fastest = std::max(unit_delay_fastest, std::abs(p));
      unit_delay_slowest = std::min(unit_delay_slowest, std::abs(p));
    }
    for (const LocatedRoot& r : roots) {
      const double m = std::abs(r.value);
      if (m == 0.0) continue;
      if (!(m >= kMinRate && m <= kMaxRate)) {
        if (r.key == "plant.delay")
          fail(r.at, r.key,
               fmt::format("{:g} s puts the poles of its order-{} Padé approximant (which every linear computation uses) "
                           "at {:.3g} rad/s; expected every pole and zero magnitude within [{}, {}] rad/s, i.e. a "
                           "delay between about {:.2g} s and {:.2g} s{}",
                           plant.delay_s, kDelayApproximantOrder, m, limit_text(kMinRate), limit_text(kMaxRate), unit_delay_fastest / kMaxRate,
                           unit_delay_slowest / kMinRate, m > kMaxRate ? " (a delay this short is negligible: leave it out)" : ""));
        fail(r.at, r.key,
             fmt::format("{} {} has magnitude {:.3g} rad/s; expected every nonzero pole and zero magnitude within "
                         "[{}, {}] rad/s (time constants from 10 µs to about 28 h), where the step simulation and "
                         "the search keep their accuracy; for a plant this {} express time in {} throughout the spec",
                         r.key.find("zero") != std::string::npos || r.key == "plant.numerator" ? "zero" : "pole",
                         root_text(r.value), m, limit_text(kMinRate), limit_text(kMaxRate), m > kMaxRate ? "fast" : "slow",
                         m > kMaxRate ? "milliseconds or microseconds" : "minutes or hours"));
      }
      if (r.key != "plant.delay") fastest_rate_ = std::max(fastest_rate_, m);
      if (!slowest || m < std::abs(slowest->value)) slowest = &r;
      if (!fastest || m > std::abs(fastest->value)) fastest = &r;
      if (r.key != "plant.delay") {
        log_sum += std::log(m);
        ++counted;
      }
    }
    if (slowest && std::abs(fastest->value) > kMaxSpread * std::abs(slowest->value)) {
      const LocatedRoot& blamed = fastest->key == "plant.delay" || slowest->key != "plant.delay" ? *fastest : *slowest;
      fail(blamed.at, blamed.key,
           fmt::format("the plant's pole and zero magnitudes span a factor {:.3g}, from {:.3g} rad/s ({}) to {:.3g} "
                       "rad/s ({}){}; expected at most {} between the fastest and the slowest: a mode that much "
                       "faster than the slowest acts as a plain gain at the loop's speed, so leave it out of the model",
                       std::abs(fastest->value) / std::abs(slowest->value), std::abs(slowest->value), slowest->key,
                       std::abs(fastest->value), fastest->key,
                       fastest->key == "plant.delay" || slowest->key == "plant.delay"
                           ? " (the delay counts through its Padé approximant's poles)"
                           : "",
                       limit_text(kMaxSpread)));
    }
    // The gain scale: |G| at the geometric mean of the pole and zero magnitudes. The controller's
    // gains come out near its inverse.
    const double w = counted > 0 ? std::exp(log_sum / counted) : 1.0;
    const TransferFunction g(Polynomial(plant.numerator), Polynomial(plant.denominator));
    const double magnitude = std::abs(g(Complex(0.0, w)));
    if (!(magnitude >= kMinGainScale && magnitude <= kMaxGainScale))
      fail(gain_where_.second, gain_where_.first,
           fmt::format("the plant's gain |G(jω)| at ω = {:.4g} rad/s (the geometric mean of its pole and zero magnitudes) "
                       "is {:.3g}; expected within [{}, {}]: the controller's gains come out near its inverse, and "
                       "beyond this range the step simulation and the search lose accuracy; express the input or the "
                       "output in other units (e.g. % of span, kV instead of V)",
                       w, magnitude, limit_text(kMinGainScale), limit_text(kMaxGainScale)));
  }

  void read_root_form(PlantSpec& plant, const std::optional<Entry>& zeros, const Entry& poles,
                      const std::optional<Entry>& gain) const {
    const std::vector<RootEntry> zero_entries =
        zeros ? root_list(*zeros) : std::vector<RootEntry>{};
    const std::vector<RootEntry> pole_entries = root_list(poles);
    if (pole_entries.empty()) {
      fail_expected(poles.at, "plant.poles", "at least one pole", "an empty array");
    }
    plant.given_as_zeros_poles = true;
    plant.zeros = listed_roots(zero_entries);
    plant.poles = listed_roots(pole_entries);
    if (plant.zeros.size() > plant.poles.size()) {
      fail(zeros->at, "plant.zeros",
           fmt::format("improper plant: numerator degree {} ({} zeros) exceeds denominator "
                       "degree {} ({} poles); a plant needs more poles than zeros",
                       plant.zeros.size(), plant.zeros.size(), plant.poles.size(),
                       plant.poles.size()));
    }
    if (plant.zeros.size() == plant.poles.size())
      fail(zeros->at, "plant.zeros", "as many zeros as poles: " + biproper_refusal());
    for (const auto* entries : {&zero_entries, &pole_entries}) {
      auto& located = entries == &zero_entries ? zeros_where_ : poles_where_;
      for (const RootEntry& root : *entries) {
        located.push_back({{root.re, root.im.value_or(0.0)}, root.key, root.at});
        if (root.im) located.push_back({{root.re, -*root.im}, root.key, root.at});
      }
    }
    gain_where_ = {"plant.gain", gain ? gain->at : poles.at};
    if (gain) {
      const Number k = number_from(*gain->value, gain->at, "plant.gain");
      require(k.value != 0.0, k, "plant.gain", "a nonzero number");
      plant.gain = k.value;
    }
    plant.numerator = expand_roots(zero_entries, plant.gain);
    plant.denominator = expand_roots(pole_entries, 1.0);
  }

  void read_coefficient_form(PlantSpec& plant, const Entry& numerator,
                             const Entry& denominator) const {
    const std::vector<double> num = coefficient_list(numerator);
    const std::vector<double> den = coefficient_list(denominator);
    if (std::all_of(num.begin(), num.end(), [](double c) { return c == 0.0; })) {
      fail(numerator.at, "plant.numerator",
           "all coefficients are zero; the plant output would always be zero");
    }
    if (num.front() == 0.0) {
      fail(numerator.at, "plant.numerator",
           "leading coefficient must be nonzero; remove the leading zeros");
    }
    if (den.front() == 0.0) {
      fail(denominator.at, "plant.denominator",
           "leading coefficient must be nonzero; remove the leading zeros");
    }
    if (num.size() > den.size()) {
      fail(numerator.at, "plant.numerator",
           fmt::format("improper plant: numerator degree {} exceeds denominator degree {}",
                       num.size() - 1, den.size() - 1));
    }
    if (num.size() == den.size())
      fail(numerator.at, "plant.numerator",
           fmt::format("numerator degree {0} equals denominator degree {0}: {1}", num.size() - 1, biproper_refusal()));
    plant.given_as_zeros_poles = false;
    plant.numerator = num;
    plant.denominator = den;
    plant.zeros = polynomial_roots(num);
    plant.poles = polynomial_roots(den);
    plant.gain = num.front() / den.front();
    for (const auto& z : plant.zeros) zeros_where_.push_back({z, "plant.numerator", numerator.at});
    for (const auto& p : plant.poles) poles_where_.push_back({p, "plant.denominator", denominator.at});
    gain_where_ = {"plant.numerator", numerator.at};
  }

  // --- [plant.nonlinear] -------------------------------------------------------------------

  /// A non-empty array of strings, with each element's position.
  std::vector<std::pair<std::string, toml::source_position>> string_list(const Entry& entry, const std::string& key,
                                                                         std::string_view what) const {
    const auto* list = entry.value->as_array();
    if (list == nullptr || list->empty())
      fail_expected(entry.at, key, fmt::format("a non-empty array of {}", what), describe(*entry.value));
    std::vector<std::pair<std::string, toml::source_position>> out;
    for (std::size_t i = 0; i < list->size(); ++i) {
      const toml::node& element = *list->get(i);
      const auto at = position_of(element.source());
      const auto* text = element.as_string();
      if (text == nullptr) fail_expected(at, fmt::format("{}[{}]", key, i), fmt::format("a string ({})", what), describe(element));
      out.emplace_back(std::string(text->get()), at);
    }
    return out;
  }

  void read_nonlinear_form(PlantSpec& plant, const Entry& entry) const {
    constexpr std::string_view kSection = "plant.nonlinear";
    const auto* table = entry.value->as_table();
    if (table == nullptr)
      fail_expected(entry.at, kSection, "a table (a [plant.nonlinear] section)", describe(*entry.value));
    static const std::vector<std::string_view> kKeys = keys_of_section(kSection);
    for (const auto& key_entry : entries_in_file_order(*table)) {
      if (std::find(kKeys.begin(), kKeys.end(), key_entry.key) != kKeys.end()) continue;
      const std::string key = dotted(kSection, key_entry.key);
      if (const auto suggestion = closest_name(key_entry.key, kKeys))
        fail(key_entry.at, key, fmt::format("unknown key; did you mean '{}'?", *suggestion));
      fail(key_entry.at, key, fmt::format("unknown key; valid keys in [plant.nonlinear]: {}", fmt::join(kKeys, ", ")));
    }
    const auto header = header_of(*table);
    const auto required = [&](std::string_view key, std::string_view what) {
      const auto found = find_entry(*table, key);
      if (!found) fail(header, dotted(kSection, key), fmt::format("missing; {}", what));
      return *found;
    };
    const Entry states_entry = required("states", "the state names, e.g. states = [\"level\"]");
    const Entry derivatives_entry =
        required("derivatives", "one expression per state for its time derivative, e.g. derivatives = [\"(q_in - k*sqrt(level))/area\"]");
    const Entry output_entry = required("output", "the measured output as an expression of the states, e.g. output = \"level\"");
    const Entry point_entry = required("operating_point", "a [plant.nonlinear.operating_point] table with u and a guess per state");

    ExpressionDefinition definition;
    const auto states = string_list(states_entry, "plant.nonlinear.states", "state names");
    const auto derivatives = string_list(derivatives_entry, "plant.nonlinear.derivatives", "expressions");
    for (const auto& [name, at] : states) definition.states.push_back(name);
    for (const auto& [text, at] : derivatives) definition.derivatives.push_back(text);
    const auto* output_text = output_entry.value->as_string();
    if (output_text == nullptr)
      fail_expected(output_entry.at, "plant.nonlinear.output", "a string (an expression of the states)",
                    describe(*output_entry.value));
    definition.output = std::string(output_text->get());
    std::vector<toml::source_position> parameter_at;
    if (const auto parameters = find_entry(*table, "parameters")) {
      const auto* list = parameters->value->as_table();
      if (list == nullptr)
        fail_expected(parameters->at, "plant.nonlinear.parameters", "a table of name = number",
                      describe(*parameters->value));
      for (const auto& p : entries_in_file_order(*list)) {
        const Number value = number_from(*p.value, p.at, fmt::format("plant.nonlinear.parameters.{}", p.key));
        definition.parameters.emplace_back(std::string(p.key), value.value);
        parameter_at.push_back(p.at);
      }
    }

    // Where an ExpressionError points: the element, key or parameter it names.
    const auto fail_expression = [&](const ExpressionError& e) {
      using Part = ExpressionError::Part;
      std::string key;
      toml::source_position at;
      switch (e.part) {
        case Part::state:
          key = fmt::format("plant.nonlinear.states[{}]", e.index);
          at = e.index < states.size() ? states[e.index].second : states_entry.at;
          break;
        case Part::parameter:
          key = fmt::format("plant.nonlinear.parameters.{}", definition.parameters[e.index].first);
          at = parameter_at[e.index];
          break;
        case Part::derivative:
          if (e.index < derivatives.size()) {
            key = fmt::format("plant.nonlinear.derivatives[{}]", e.index);
            at = derivatives[e.index].second;
          } else {
            key = "plant.nonlinear.derivatives";
            at = derivatives_entry.at;
          }
          break;
        case Part::output:
          key = "plant.nonlinear.output";
          at = output_entry.at;
          break;
      }
      std::string message = e.what();
      if (e.position >= 0 && message.find("position") == std::string::npos && message.find("character") == std::string::npos)
        message += fmt::format(" (at character {} of the expression)", e.position + 1);
      fail(at, key, message);
    };

    std::shared_ptr<ExpressionPlant> model;
    try {
      model = std::make_shared<ExpressionPlant>(definition);
    } catch (const ExpressionError& e) {
      fail_expression(e);
    }

    // The operating point: u and a guess for every state.
    const auto* point = point_entry.value->as_table();
    if (point == nullptr)
      fail_expected(point_entry.at, "plant.nonlinear.operating_point", "a table of u and one guess per state",
                    describe(*point_entry.value));
    const auto point_header = position_of(point->source());
    std::vector<std::string> point_names = definition.states;
    point_names.emplace_back("u");
    for (const auto& p : entries_in_file_order(*point)) {
      if (std::find(point_names.begin(), point_names.end(), p.key) != point_names.end()) continue;
      const auto suggestion = likely_name(p.key, point_names);
      fail(p.at, fmt::format("plant.nonlinear.operating_point.{}", p.key),
           fmt::format("not a state or u{}; expected u and a guess for each state: {}",
                       suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "",
                       fmt::join(point_names, ", ")));
    }
    NonlinearPlantSpec nl;
    for (const auto& name : point_names) {
      const auto found = find_entry(*point, name);
      if (!found)
        fail(point_header, fmt::format("plant.nonlinear.operating_point.{}", name),
             name == "u" ? std::string("missing; the actuator value held at the operating point (absolute units)")
                         : fmt::format("missing; a guess for state '{}' (the equilibrium is searched from it)", name));
      const Number value = number_from(*found->value, found->at, fmt::format("plant.nonlinear.operating_point.{}", name));
      if (name == "u") {
        nl.input = value.value;
        operating_input_at_ = found->at;
        operating_input_shown_ = value.shown;
      } else {
        nl.state_guess.push_back(value.value);
      }
    }

    Equilibrium equilibrium;
    Linearization linearization;
    try {
      equilibrium = model->find_equilibrium(nl.state_guess, nl.input);
      linearization = model->jacobians_at(equilibrium.states, nl.input);
    } catch (const ExpressionError& e) {
      fail_expression(e);
    } catch (const std::runtime_error& e) {
      fail(point_header, "plant.nonlinear.operating_point", e.what());
    }
    const StateSpace& lin = linearization.model;
    if (lin.B.cwiseAbs().maxCoeff() == 0.0)
      fail(derivatives_entry.at, "plant.nonlinear.derivatives",
           fmt::format("no derivative changes with u at the operating point (∂f/∂u = 0 there): the input cannot "
                       "move the plant, so no loop can control it at this point"));
    if (lin.C.cwiseAbs().maxCoeff() == 0.0)
      fail(output_entry.at, "plant.nonlinear.output",
           "does not change with any state at the operating point (∂h/∂x = 0 there): the loop would see nothing");
    const TransferFunction g = transfer_function_of(lin);
    if (g.numerator.is_zero())
      fail(point_header, "plant.nonlinear.operating_point",
           "the linearization's transfer function is zero: u does not reach the output at this operating point "
           "(the states u moves are not those the output sees)");
    for (double v : g.numerator.coefficients)
      if (!std::isfinite(v)) fail(point_header, "plant.nonlinear.operating_point", "the linearization is not finite");

    nl.states = definition.states;
    nl.derivatives = definition.derivatives;
    nl.output = definition.output;
    nl.parameters = definition.parameters;
    nl.equilibrium = equilibrium.states;
    nl.output_value = equilibrium.output;
    nl.newton_iterations = equilibrium.iterations;
    nl.residual = equilibrium.residual;
    for (Eigen::Index i = 0; i < lin.A.rows(); ++i) {
      nl.a.emplace_back();
      for (Eigen::Index j = 0; j < lin.A.cols(); ++j) nl.a.back().push_back(lin.A(i, j));
      nl.b.push_back(lin.B(i));
      nl.c.push_back(lin.C(0, i));
    }
    nl.d = lin.D(0);
    model->set_operating_point(equilibrium.states, nl.input);
    nl.model = model;

    plant.given_as_zeros_poles = false;
    plant.numerator = g.numerator.coefficients;
    plant.denominator = g.denominator.coefficients;
    plant.zeros = polynomial_roots(plant.numerator);
    plant.poles = polynomial_roots(plant.denominator);
    plant.gain = plant.numerator.front() / plant.denominator.front();
    plant.nonlinear = std::move(nl);
    for (const auto& z : plant.zeros) zeros_where_.push_back({z, "plant.nonlinear.operating_point", point_header});
    for (const auto& p : plant.poles) poles_where_.push_back({p, "plant.nonlinear.operating_point", point_header});
    gain_where_ = {"plant.nonlinear.operating_point", point_header};
  }

  // --- other sections ----------------------------------------------------------------------

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
    if (!value) {
      std::vector<std::string_view> views(names.begin(), names.end());
      const auto suggestion = closest_name(text->get(), views);
      fail(entry->at, dotted_key,
           fmt::format("unknown {} {}{}; valid {}s: {}", what, in_quotes(text->get()),
                       suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "", what, valid));
    }
    return value;
  }

  void read_actuator(ActuatorSpec& actuator, const PlantSpec& plant) const {
    const toml::table* table = section("actuator");
    if (table == nullptr) return;
    actuator.rate_max = ranged_number(table, "actuator", "rate_max", [](double v) { return v > 0.0; },
                                      "a rate in actuator units per second > 0");
    const auto min = optional_number(table, "actuator", "min");
    const auto max = optional_number(table, "actuator", "max");
    if (!min && !max) return;
    if (min && !max)
      fail(header_of(*table), "actuator.max", "missing; give both min and max, or neither");
    if (max && !min)
      fail(header_of(*table), "actuator.min", "missing; give both min and max, or neither");
    require(max->value > min->value, *max, "actuator.max",
            fmt::format("a number greater than actuator.min ({})", min->shown));
    if (plant.nonlinear) {
      // Absolute actuator values; the loop starts at rest at the operating point, u = u0.
      const double u0 = plant.nonlinear->input;
      if (!(u0 >= min->value && u0 <= max->value))
        fail(operating_input_at_, "plant.nonlinear.operating_point.u",
             fmt::format("{} lies outside the actuator limits [{}, {}]; for a nonlinear plant actuator.min and "
                         "actuator.max are absolute actuator values and the loop starts at rest at the operating "
                         "point, so u must lie within them",
                         operating_input_shown_, min->shown, max->shown));
    } else {
      // The loop starts at rest with u = 0, so the range must contain it.
      require(min->value <= 0.0, *min, "actuator.min", "a limit <= 0 (the loop starts at rest with u = 0)");
      require(max->value >= 0.0, *max, "actuator.max", "a limit >= 0 (the loop starts at rest with u = 0)");
    }
    actuator.min = min->value;
    actuator.max = max->value;
    actuator.limited = true;
  }

  void read_controller(ControllerSpec& controller) const {
    const toml::table* table = section("controller");
    if (table == nullptr) return;
    if (const auto structure = read_choice(*table, "controller", "structure", "structure", structure_names(),
                                           parse_structure))
      controller.structure = *structure;
    if (const auto filter = ranged_number(
            table, "controller", "derivative_filter", [](double v) { return v > 0.0 && v <= kMaxDerivativeFilter; },
            fmt::format("a number in (0, {}] (common practice is 2 to 20; beyond that the filter pole is a mode "
                        "the numerics cannot keep apart from the plant's)", limit_text(kMaxDerivativeFilter)))) {
      controller.derivative_filter = *filter;
    }
    if (const auto scheme = read_choice(*table, "controller", "anti_windup", "scheme", anti_windup_names(),
                                        parse_anti_windup))
      controller.anti_windup = *scheme;
    controller.tracking_time_s = ranged_number(table, "controller", "tracking_time", [&](double v) { return time_in_range(v); },
                                               time_expected("a time in s", ""));
    if (const auto ts = ranged_number(table, "controller", "sample_time", [&](double v) { return time_in_range(v); },
                                      time_expected("a sample period in s", " (a controller that fast is continuous: leave "
                                                                            "sample_time out)")))
      controller.sample_time_s = *ts;
    if (const auto b = ranged_number(table, "controller", "setpoint_weight", [](double v) { return v >= 0.0 && v <= 1.0; },
                                     "a weight in [0, 1]"))
      controller.setpoint_weight = *b;
    static const std::vector<std::string> kDerivativeOn{"error", "measurement"};
    if (const auto on = read_choice(*table, "controller", "derivative_on", "place", kDerivativeOn,
                                    [](std::string_view v) -> std::optional<bool> {
                                      if (v == "error") return false;
                                      if (v == "measurement") return true;
                                      return std::nullopt;
                                    }))
      controller.derivative_on_measurement = *on;
    // Weights act on the parallel form; lag and lead-lag have none.
    const bool weighted = controller.setpoint_weight != 1.0 || controller.derivative_on_measurement;
    if (weighted && (controller.structure == Structure::lag || controller.structure == Structure::lead_lag)) {
      const auto entry = find_entry(*table, controller.setpoint_weight != 1.0 ? "setpoint_weight" : "derivative_on");
      fail(entry->at, fmt::format("controller.{}", entry->key),
           fmt::format("set-point weighting needs a parallel (PID-type) form; structure '{}' has none",
                       structure_name(controller.structure)));
    }
  }

  void read_requirements(Requirements& requirements) const {
    const toml::table* table = section("requirements");
    if (table == nullptr) return;
    constexpr std::string_view kSection = "requirements";
    const auto positive = [](double v) { return v > 0.0; };
    requirements.overshoot_max_pct = ranged_number(
        table, kSection, "overshoot_max_pct", [](double v) { return v > 0.0 && v < 100.0; },
        "a number in (0, 100)");
    requirements.peak_time_ratio = ranged_number(
        table, kSection, "peak_time_ratio", [](double v) { return v > 0.0 && v <= 10.0; },
        "a number in (0, 10]");
    requirements.settling_time_max_s =
        ranged_number(table, kSection, "settling_time_max", positive, "a time in s > 0");
    requirements.peak_time_max_s =
        ranged_number(table, kSection, "peak_time_max", positive, "a time in s > 0");
    requirements.rise_time_max_s =
        ranged_number(table, kSection, "rise_time_max", positive, "a time in s > 0");
    if (const auto band = ranged_number(
            table, kSection, "settling_band_pct", [](double v) { return v > 0.0 && v < 50.0; },
            "a number in (0, 50)")) {
      requirements.settling_band_pct = *band;
    }
    requirements.steady_state_error_max = ranged_number(
        table, kSection, "steady_state_error_max", [](double v) { return v >= 0.0; },
        "a number >= 0");
    requirements.effort_max =
        ranged_number(table, kSection, "effort_max", positive, "a number > 0");
    requirements.undershoot_max_pct = ranged_number(
        table, kSection, "undershoot_max_pct", [](double v) { return v >= 0.0 && v < 100.0; },
        "a number in [0, 100)");
    requirements.phase_margin_min_deg = ranged_number(
        table, kSection, "phase_margin_min_deg", [](double v) { return v > 0.0 && v < 90.0; },
        "an angle in degrees in (0, 90)");
    requirements.gain_margin_min_db = ranged_number(
        table, kSection, "gain_margin_min_db", [](double v) { return v > 0.0 && v < 60.0; },
        "a number of dB in (0, 60)");
    requirements.sensitivity_peak_max = ranged_number(
        table, kSection, "sensitivity_peak_max", [](double v) { return v > 1.0; },
        "a number > 1 (|S| is at least 1 somewhere for any loop of relative degree >= 1)");
  }

  void read_disturbance(DisturbanceSpec& disturbance) const {
    const toml::table* table = section("disturbance");
    if (table == nullptr) return;
    if (const auto time = ranged_number(table, "disturbance", "time", [](double v) { return v >= 0.0; },
                                        "a time in s >= 0"))
      disturbance.time_s = *time;
    if (const auto size = optional_number(table, "disturbance", "size")) disturbance.size = size->value;
    if (const auto rms = ranged_number(table, "disturbance", "noise_rms", [](double v) { return v >= 0.0; },
                                       "a standard deviation in output units >= 0"))
      disturbance.noise_rms = *rms;
    if (const auto period = ranged_number(table, "disturbance", "noise_period", [&](double v) { return time_in_range(v); },
                                          time_expected("a time in s", "")))
      disturbance.noise_period_s = *period;
    if (const auto seed = ranged_number(
            table, "disturbance", "seed",
            [](double v) { return v >= 0.0 && v <= 9007199254740992.0 && v == std::floor(v); },
            "a whole number in [0, 2^53]"))
      disturbance.noise_seed = static_cast<std::uint64_t>(*seed);
  }

  void read_search(SearchSpec& search, Structure structure) const {
    const toml::table* table = section("search");
    if (table == nullptr) return;
    constexpr std::string_view kSection = "search";
    if (const auto objective = read_choice(*table, "search", "objective", "objective", objective_names(),
                                           parse_objective))
      search.objective = *objective;
    if (const auto mode = read_choice(*table, "search", "simulate", "mode", simulate_mode_names(),
                                      parse_simulate_mode))
      search.simulate = *mode;
    const auto whole = [](double v) { return v == std::floor(v); };
    if (const auto seed = ranged_number(
            table, kSection, "seed", [&](double v) { return v >= 0.0 && v <= 4294967295.0 && whole(v); },
            "a whole number in [0, 4294967295]"))
      search.seed = static_cast<unsigned>(*seed);
    if (const auto budget = ranged_number(
            table, kSection, "max_evaluations", [&](double v) { return v >= 20.0 && v <= 1e8 && whole(v); },
            "a whole number in [20, 100000000]"))
      search.max_evaluations = static_cast<int>(*budget);
    if (const auto cap = ranged_number(
            table, kSection, "max_time", [](double v) { return v > 0.0 && v <= 86400.0; },
            "a time in s in (0, 86400]"))
      search.max_time_s = *cap;
    if (const auto margin = ranged_number(
            table, kSection, "margin_pct", [](double v) { return v >= 0.0 && v < 50.0; }, "a percentage in [0, 50)"))
      search.margin_pct = *margin;
    const auto entry = find_entry(*table, "bounds");
    if (!entry) return;
    const auto* bounds = entry->value->as_table();
    if (bounds == nullptr)
      fail_expected(entry->at, "search.bounds", "a table of parameter = [low, high]", describe(*entry->value));
    std::vector<std::string_view> names;
    for (const auto& info : structure_parameters(structure)) names.emplace_back(info.name);
    for (const auto& bound : entries_in_file_order(*bounds)) {
      const std::string key = fmt::format("search.bounds.{}", bound.key);
      if (std::find(names.begin(), names.end(), bound.key) == names.end()) {
        const auto suggestion = closest_name(bound.key, names);
        fail(bound.at, key,
             fmt::format("structure '{}' has no parameter '{}'{}; its parameters: {}", structure_name(structure),
                         bound.key, suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "",
                         fmt::join(names, ", ")));
      }
      const auto* pair = bound.value->as_array();
      if (pair == nullptr || pair->size() != 2)
        fail_expected(bound.at, key, "[low, high], two numbers", describe(*bound.value));
      const Number lo = number_from(*pair->get(0), bound.at, key);
      const Number hi = number_from(*pair->get(1), bound.at, key);
      require(lo.value > 0.0, lo, key, "a low bound > 0 (parameters are searched on a log scale)");
      require(hi.value > lo.value, hi, key, fmt::format("a high bound above the low bound ({})", lo.shown));
      search.bounds.emplace_back(std::string(bound.key), std::make_pair(lo.value, hi.value));
    }
  }

  void read_reference(ReferenceSpec& reference) const {
    if (const auto amplitude = ranged_number(
            section("reference"), "reference", "amplitude",
            [](double v) { return std::abs(v) >= kMinAmplitude && std::abs(v) <= kMaxAmplitude; },
            fmt::format("a nonzero number of magnitude in [{}, {}] (express the output in other units otherwise)",
                        limit_text(kMinAmplitude), limit_text(kMaxAmplitude)))) {
      reference.amplitude = *amplitude;
    }
  }

  void read_sweep(std::vector<std::string>& vary) const {
    const toml::table* table = section("sweep");
    if (table == nullptr) return;
    const auto entry = find_entry(*table, "vary");
    if (!entry) return;
    const auto* list = entry->value->as_array();
    if (list == nullptr || list->empty())
      fail_expected(entry->at, "sweep.vary", "a non-empty array of strings such as \"plant.delay=0:0.2:5\"",
                    describe(*entry->value));
    for (std::size_t i = 0; i < list->size(); ++i) {
      const auto* text = list->get(i)->as_string();
      const std::string key = fmt::format("sweep.vary[{}]", i);
      if (text == nullptr)
        fail_expected(position_of(list->get(i)->source()), key, "a string \"KEY=FROM:TO:COUNT\", \"KEY=FROM:TO:COUNTlog\" or \"KEY=a,b,c\"",
                      describe(*list->get(i)));
      try {
        (void)parse_sweep_axis(text->get());
      } catch (const SweepError& error) {
        std::string why = error.what();
        if (why.rfind("--vary ", 0) == 0) why = why.substr(7);
        fail(position_of(list->get(i)->source()), key, why);
      }
      vary.push_back(text->get());
    }
  }

  /// [units]: each a label of 1 to kMaxUnitLength characters (code points), no control characters
  /// (labels go into gnuplot scripts, the pages and terminal tables).
  void read_units(UnitsSpec& units) const {
    const toml::table* table = section("units");
    if (table == nullptr) return;
    constexpr std::size_t kMaxUnitLength = 24;
    const std::string expected =
        fmt::format("a unit name such as \"m/s\": a non-empty string of at most {} characters without control characters",
                    kMaxUnitLength);
    for (auto [name, target] : {std::pair<std::string_view, std::string*>{"output", &units.output},
                                {"input", &units.input},
                                {"time", &units.time}}) {
      const auto entry = find_entry(*table, name);
      if (!entry) continue;
      const std::string key = dotted("units", name);
      const auto* text = entry->value->as_string();
      if (text == nullptr) fail_expected(entry->at, key, expected, describe(*entry->value));
      const std::string_view value = text->get();
      std::size_t code_points = 0;
      bool control = false, blank = true;
      for (const char c : value) {
        const auto byte = static_cast<unsigned char>(c);
        if ((byte & 0xC0u) != 0x80u) ++code_points;
        if (byte < 0x20u || byte == 0x7Fu) control = true;
        if (byte != ' ') blank = false;
      }
      if (blank || control || code_points > kMaxUnitLength)
        fail_expected(entry->at, key, expected,
                      blank ? std::string("an empty name")
                            : control ? std::string("a name with a control character")
                                      : fmt::format("{} ({} characters)", in_quotes(value), code_points));
      *target = std::string(value);
    }
  }

  // --- cross-section checks ----------------------------------------------------------------

  void check_consistency(const Spec& spec) const {
    const auto& required_error = spec.requirements.steady_state_error_max;
    if (!required_error || *required_error != 0.0) return;
    // Net poles at s = 0: a zero at s = 0 cancels one of them.
    const auto plant_integrators = static_cast<long>(trailing_zero_count(spec.plant.denominator)) -
                                   static_cast<long>(trailing_zero_count(spec.plant.numerator));
    if (plant_integrators > 0 || has_integrator(spec.controller.structure)) return;
    const auto entry = find_entry(*section("requirements"), "steady_state_error_max");
    fail(
        entry->at, "requirements.steady_state_error_max",
        fmt::format(
            "zero steady-state error to a step needs an integrator in the loop, but the "
            "plant has no (uncancelled) pole at s = 0 and structure '{}' has none; use structure = "
            "\"pi\" or \"pid\", or allow a small nonzero error",
            structure_name(spec.controller.structure)));
  }

  /// A controller or noise time: positive and at least kMinTimeFraction of the plant's fastest
  /// time constant (when the plant has a nonzero pole or zero).
  bool time_in_range(double v) const { return v > 0.0 && v * fastest_rate_ >= kMinTimeFraction; }
  std::string time_expected(std::string_view what, std::string_view otherwise) const {
    if (fastest_rate_ == 0.0) return fmt::format("{} > 0", what);
    return fmt::format("{} >= {:.3g} ({} of the plant's fastest time constant, 1/{:.4g} rad/s){}", what,
                       kMinTimeFraction / fastest_rate_, limit_text(kMinTimeFraction), fastest_rate_, otherwise);
  }

  /// See check_plant_numerics; the returned text follows "as many zeros as poles: " and the like.
  static std::string biproper_refusal() {
    return "a biproper plant, whose output follows the input instantly (a direct feedthrough), is not supported; "
           "expected fewer zeros than poles (degree(numerator) < degree(denominator)): with a feedthrough the "
           "controller's proportional and derivative action close an algebraic loop with the plant through the "
           "actuator's saturation, which the nonlinear confirmation does not solve. Every path from actuator to sensor "
           "has some lag: add it as a pole (e.g. the sensor's filter)";
  }

  const toml::table& document_;
  std::string path_;
  // Where the plant's poles, zeros, gain and delay were written (filled by read_plant).
  mutable std::vector<LocatedRoot> poles_where_, zeros_where_;
  mutable std::pair<std::string, toml::source_position> gain_where_{"plant", {1, 1}};
  mutable toml::source_position delay_at_{};
  mutable double fastest_rate_ = 0.0;  // the largest nonzero plant pole or zero magnitude, rad/s (0: none)
  mutable toml::source_position operating_input_at_{};  // where plant.nonlinear.operating_point.u was written
  mutable std::string operating_input_shown_;
};

}  // namespace

// ---------------------------------------------------------------------------------------------
// Entry points
// ---------------------------------------------------------------------------------------------

Spec parse_spec(std::string_view text, const std::string& path) {
  toml::table document;
  try {
    document = toml::parse(text, std::string_view(path));
  } catch (const toml::parse_error& error) {
    const auto at = position_of(error.source());
    throw SpecError(
        fmt::format("{}:{}:{}: invalid TOML: {}", path, at.line, at.column, error.description()));
  }
  Spec spec = SpecReader(document, path).read();
  spec.source_text = std::string(text);
  return spec;
}

Spec load_spec(const std::string& path) {
  std::error_code status_error;
  if (std::filesystem::is_directory(path, status_error)) {
    throw SpecError(fmt::format("{}: cannot read file: {}", path, std::strerror(EISDIR)));
  }
  errno = 0;
  std::ifstream file(path, std::ios::binary);
  if (!file) {
    const int reason = errno;
    throw SpecError(fmt::format("{}: cannot read file: {}", path,
                                reason != 0 ? std::strerror(reason) : "open failed"));
  }
  std::ostringstream contents;
  contents << file.rdbuf();
  if (file.bad()) {
    throw SpecError(fmt::format("{}: cannot read file: read error", path));
  }
  return parse_spec(contents.str(), path);
}

}  // namespace specloop
