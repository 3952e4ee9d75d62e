// Reading [plant]: which form the file uses (zeros/poles/gain, numerator/denominator or
// [plant.nonlinear]); the two linear forms, each filling both; the nonlinear form as written (the
// modelling step, plant_model.cpp, compiles its expressions, matches the operating point to its
// states and finds the equilibrium); the delay.
#include "spec/plant_checks.hpp"
#include "spec/sections.hpp"

#include <algorithm>
#include <initializer_list>

namespace specloop::reading {

namespace {

/// A root list entry as written: a real root, or the pair re ± j·im.
struct RootEntry {
  double re = 0.0;
  std::optional<double> im;
  std::string key;    // "plant.poles[2]", for messages
  Position at{};      // where it was written
};

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
      polynomial = multiply(polynomial, {1.0, -2.0 * root.re, root.re * root.re + *root.im * *root.im});
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

/// A list of real roots and [re, im] pairs (im > 0).
std::vector<RootEntry> root_list(const DocumentReader& reader, const Entry& entry) {
  const std::string key = dotted("plant", entry.key);
  const auto* list = entry.value->as_array();
  if (list == nullptr) {
    reader.fail_expected(entry.at, key, "an array of numbers and [re, im] pairs", describe(*entry.value));
  }
  std::vector<RootEntry> roots;
  for (std::size_t i = 0; i < list->size(); ++i) {
    const toml::node& element = *list->get(i);
    const std::string element_key = fmt::format("{}[{}]", key, i);
    const auto at = position_of(element.source());
    if (const auto* pair = element.as_array()) {
      if (pair->size() != 2) {
        reader.fail_expected(at, element_key, "a pair [re, im] of exactly 2 numbers", describe(element));
      }
      const Number re = reader.number_from(*pair->get(0), position_of(pair->get(0)->source()), element_key + "[0]");
      const Number im = reader.number_from(*pair->get(1), position_of(pair->get(1)->source()), element_key + "[1]");
      if (!(im.value > 0.0)) {
        reader.fail_expected(at, element_key, "a pair [re, im] with im > 0 (it stands for re ± j·im)",
                             fmt::format("[{}, {}]", re.shown, im.shown));
      }
      roots.push_back({re.value, im.value, element_key, at});
    } else if (element.is_number()) {
      roots.push_back({reader.number_from(element, at, element_key).value, std::nullopt, element_key, at});
    } else {
      reader.fail_expected(at, element_key, "a number or a pair [re, im]", describe(element));
    }
  }
  return roots;
}

/// A non-empty coefficient list, highest power of s first.
std::vector<double> coefficient_list(const DocumentReader& reader, const Entry& entry) {
  const std::string key = dotted("plant", entry.key);
  const auto* list = entry.value->as_array();
  if (list == nullptr || list->empty()) {
    reader.fail_expected(entry.at, key, "a non-empty array of coefficients, highest power of s first",
                         describe(*entry.value));
  }
  std::vector<double> coefficients;
  for (std::size_t i = 0; i < list->size(); ++i) {
    const toml::node& element = *list->get(i);
    coefficients.push_back(
        reader.number_from(element, position_of(element.source()), fmt::format("{}[{}]", key, i)).value);
  }
  return coefficients;
}

void read_root_form(const DocumentReader& reader, PlantSpec& plant, PlantSources& where,
                    const std::optional<Entry>& zeros, const Entry& poles, const std::optional<Entry>& gain) {
  const std::vector<RootEntry> zero_entries = zeros ? root_list(reader, *zeros) : std::vector<RootEntry>{};
  const std::vector<RootEntry> pole_entries = root_list(reader, poles);
  if (pole_entries.empty()) reader.fail_expected(poles.at, "plant.poles", "at least one pole", "an empty array");
  plant.given_as_zeros_poles = true;
  plant.zeros = listed_roots(zero_entries);
  plant.poles = listed_roots(pole_entries);
  if (plant.zeros.size() > plant.poles.size()) {
    reader.fail(zeros->at, "plant.zeros",
                fmt::format("improper plant: numerator degree {} ({} zeros) exceeds denominator "
                            "degree {} ({} poles); a plant needs more poles than zeros",
                            plant.zeros.size(), plant.zeros.size(), plant.poles.size(), plant.poles.size()));
  }
  if (plant.zeros.size() == plant.poles.size())
    reader.fail(zeros->at, "plant.zeros", "as many zeros as poles: " + biproper_refusal());
  for (const auto* entries : {&zero_entries, &pole_entries}) {
    auto& located = entries == &zero_entries ? where.zeros : where.poles;
    for (const RootEntry& root : *entries) {
      located.push_back({{root.re, root.im.value_or(0.0)}, root.key, root.at});
      if (root.im) located.push_back({{root.re, -*root.im}, root.key, root.at});
    }
  }
  where.gain = {"plant.gain", gain ? gain->at : poles.at};
  if (gain) {
    const Number k = reader.number_from(*gain->value, gain->at, "plant.gain");
    reader.require(k.value != 0.0, k, "plant.gain", "a nonzero number");
    plant.gain = k.value;
  }
  plant.numerator = expand_roots(zero_entries, plant.gain);
  plant.denominator = expand_roots(pole_entries, 1.0);
}

void read_coefficient_form(const DocumentReader& reader, PlantSpec& plant, PlantSources& where,
                           const Entry& numerator, const Entry& denominator) {
  const std::vector<double> num = coefficient_list(reader, numerator);
  const std::vector<double> den = coefficient_list(reader, denominator);
  if (std::all_of(num.begin(), num.end(), [](double c) { return c == 0.0; })) {
    reader.fail(numerator.at, "plant.numerator", "all coefficients are zero; the plant output would always be zero");
  }
  if (num.front() == 0.0) {
    reader.fail(numerator.at, "plant.numerator", "leading coefficient must be nonzero; remove the leading zeros");
  }
  if (den.front() == 0.0) {
    reader.fail(denominator.at, "plant.denominator", "leading coefficient must be nonzero; remove the leading zeros");
  }
  if (num.size() > den.size()) {
    reader.fail(numerator.at, "plant.numerator",
                fmt::format("improper plant: numerator degree {} exceeds denominator degree {}", num.size() - 1,
                            den.size() - 1));
  }
  if (num.size() == den.size())
    reader.fail(numerator.at, "plant.numerator",
                fmt::format("numerator degree {0} equals denominator degree {0}: {1}", num.size() - 1,
                            biproper_refusal()));
  plant.given_as_zeros_poles = false;
  plant.numerator = num;
  plant.denominator = den;
  plant.zeros = polynomial_roots(num);
  plant.poles = polynomial_roots(den);
  plant.gain = num.front() / den.front();
  for (const auto& z : plant.zeros) where.zeros.push_back({z, "plant.numerator", numerator.at});
  for (const auto& p : plant.poles) where.poles.push_back({p, "plant.denominator", denominator.at});
  where.gain = {"plant.numerator", numerator.at};
}

// --- [plant.nonlinear], as written --------------------------------------------------------------

/// The parameters table: name = finite number, in file order.
void read_parameters(const DocumentReader& reader, const toml::table& table, NonlinearPlantSpec& nl,
                     NonlinearSources& where) {
  const auto parameters = find_entry(table, "parameters");
  if (!parameters) return;
  const auto* list = parameters->value->as_table();
  if (list == nullptr)
    reader.fail_expected(parameters->at, "plant.nonlinear.parameters", "a table of name = number",
                         describe(*parameters->value));
  for (const auto& p : entries_in_file_order(*list)) {
    const Number value = reader.number_from(*p.value, p.at, fmt::format("plant.nonlinear.parameters.{}", p.key));
    nl.parameters.emplace_back(std::string(p.key), value.value);
    where.parameters.push_back(p.at);
  }
}

/// The operating point's entries as written: matched to the states and u by the modelling step
/// (plant_model.cpp), after the expressions' names are checked.
void read_operating_point(const DocumentReader& reader, const Entry& point_entry, NonlinearSources& where) {
  const auto* point = point_entry.value->as_table();
  if (point == nullptr)
    reader.fail_expected(point_entry.at, "plant.nonlinear.operating_point", "a table of u and one guess per state",
                         describe(*point_entry.value));
  where.operating_point = position_of(point->source());
  for (const auto& p : entries_in_file_order(*point))
    where.point_entries.push_back({std::string(p.key), p.at, DocumentReader::try_number(*p.value, p.at)});
}

void read_nonlinear_form(const DocumentReader& reader, PlantSpec& plant, NonlinearSources& where,
                                   const Entry& entry) {
  constexpr std::string_view kSection = "plant.nonlinear";
  const auto* table = entry.value->as_table();
  if (table == nullptr)
    reader.fail_expected(entry.at, kSection, "a table (a [plant.nonlinear] section)", describe(*entry.value));
  static const std::vector<std::string_view> kKeys = keys_of_section(kSection);
  reader.check_keys(*table, kSection, kKeys);
  const auto header = DocumentReader::header_of(*table);
  const auto required = [&](std::string_view key, std::string_view what) {
    const auto found = find_entry(*table, key);
    if (!found) reader.fail(header, dotted(kSection, key), fmt::format("missing; {}", what));
    return *found;
  };
  const Entry states_entry = required("states", "the state names, e.g. states = [\"level\"]");
  const Entry derivatives_entry = required(
      "derivatives",
      "one expression per state for its time derivative, e.g. derivatives = [\"(q_in - k*sqrt(level))/area\"]");
  const Entry output_entry = required("output", "the measured output as an expression of the states, e.g. output = \"level\"");
  const Entry point_entry = required("operating_point", "a [plant.nonlinear.operating_point] table with u and a guess per state");

  NonlinearPlantSpec nl;
  where.states_entry = states_entry.at;
  where.derivatives_entry = derivatives_entry.at;
  where.output_entry = output_entry.at;
  for (const auto& [name, at] : reader.string_list(states_entry, "plant.nonlinear.states", "state names")) {
    nl.states.push_back(name);
    where.states.push_back(at);
  }
  for (const auto& [text, at] : reader.string_list(derivatives_entry, "plant.nonlinear.derivatives", "expressions")) {
    nl.derivatives.push_back(text);
    where.derivatives.push_back(at);
  }
  const auto* output_text = output_entry.value->as_string();
  if (output_text == nullptr)
    reader.fail_expected(output_entry.at, "plant.nonlinear.output", "a string (an expression of the states)",
                         describe(*output_entry.value));
  nl.output = std::string(output_text->get());
  read_parameters(reader, *table, nl, where);
  read_operating_point(reader, point_entry, where);
  plant.given_as_zeros_poles = false;
  plant.nonlinear = std::move(nl);
}

// --- which form ---------------------------------------------------------------------------------

/// The plant's keys, found.
struct PlantEntries {
  std::optional<Entry> zeros, poles, gain, numerator, denominator, nonlinear;
  std::optional<Entry> root_form, coefficient_form;  // the first key of each linear form present
};

/// The forms exclude each other; blame whichever key of the second form comes later.
PlantEntries plant_entries(const DocumentReader& reader, const toml::table& table) {
  PlantEntries e;
  e.zeros = find_entry(table, "zeros");
  e.poles = find_entry(table, "poles");
  e.gain = find_entry(table, "gain");
  e.numerator = find_entry(table, "numerator");
  e.denominator = find_entry(table, "denominator");
  e.nonlinear = find_entry(table, "nonlinear");
  if (e.nonlinear && e.nonlinear->value->is_table()) e.nonlinear->at = position_of(e.nonlinear->value->source());
  const auto first_present = [](std::initializer_list<const std::optional<Entry>*> entries) {
    std::optional<Entry> first;
    for (const auto* entry : entries) {
      if (*entry && (!first || comes_before((*entry)->at, first->at))) first = **entry;
    }
    return first;
  };
  e.root_form = first_present({&e.zeros, &e.poles, &e.gain});
  e.coefficient_form = first_present({&e.numerator, &e.denominator});
  if (e.root_form && e.coefficient_form) {
    const bool root_form_first = comes_before(e.root_form->at, e.coefficient_form->at);
    const Entry& offender = root_form_first ? *e.coefficient_form : *e.root_form;
    const Entry& earlier = root_form_first ? *e.root_form : *e.coefficient_form;
    reader.fail(offender.at, dotted("plant", offender.key),
                fmt::format("cannot be combined with plant.{}; give either zeros/poles/gain or "
                            "numerator/denominator, not both",
                            earlier.key));
  }
  if (e.nonlinear && (e.root_form || e.coefficient_form)) {
    const Entry& linear = e.root_form ? *e.root_form : *e.coefficient_form;
    const bool nonlinear_first = comes_before(e.nonlinear->at, linear.at);
    const Entry& offender = nonlinear_first ? linear : *e.nonlinear;
    const Entry& earlier = nonlinear_first ? *e.nonlinear : linear;
    reader.fail(offender.at, dotted("plant", offender.key),
                fmt::format("cannot be combined with plant.{}; give exactly one plant form: zeros/poles/gain, "
                            "numerator/denominator, or [plant.nonlinear]",
                            earlier.key));
  }
  return e;
}

}  // namespace

void read_plant(const DocumentReader& reader, PlantSpec& plant, SpecSources& sources) {
  const toml::table* table = reader.section("plant");
  if (table == nullptr) {
    reader.fail({1, 1}, "plant",
                "missing section; a spec needs [plant] with poles (and optional zeros, gain) "
                "or with numerator and denominator");
  }
  const auto header = DocumentReader::header_of(*table);
  const PlantEntries e = plant_entries(reader, *table);
  if (e.nonlinear) {
    read_nonlinear_form(reader, plant, sources.nonlinear, *e.nonlinear);
  } else if (e.coefficient_form) {
    if (!e.denominator) reader.fail(header, "plant.denominator", "missing (required with plant.numerator)");
    if (!e.numerator) reader.fail(header, "plant.numerator", "missing (required with plant.denominator)");
    read_coefficient_form(reader, plant, sources.plant, *e.numerator, *e.denominator);
  } else {
    if (!e.poles) {
      if (e.root_form) {
        reader.fail(header, "plant.poles", fmt::format("missing (required with plant.{})", e.root_form->key));
      }
      reader.fail(header, "plant.poles",
                  "missing; give poles (with optional zeros and gain), numerator and denominator, or a "
                  "[plant.nonlinear] section");
    }
    read_root_form(reader, plant, sources.plant, e.zeros, *e.poles, e.gain);
  }

  if (const auto delay = reader.ranged_number(
          table, "plant", "delay", [](double v) { return v >= 0.0; }, "a number >= 0")) {
    plant.delay_s = *delay;
    sources.plant.delay = find_entry(*table, "delay")->at;
  }
}

}  // namespace specloop::reading
