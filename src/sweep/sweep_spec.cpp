// Point specs (sweep_spec.hpp): the spec document without [sweep] (toml++), key paths walked to
// the node an axis names, and each point's text with the axis values written in.
#include "specloop/sweep/sweep_spec.hpp"

#include <fmt/format.h>

#include <cmath>
#include <cstdint>
#include <optional>
#include <set>
#include <sstream>
#include <toml++/toml.h>

#include "specloop/spec/spec.hpp"

namespace specloop {

namespace {

/// One step of a key path: a table key or an array index.
struct PathStep {
  std::string key;
  std::optional<std::size_t> index;
};

std::vector<PathStep> split_key(const std::string& key) {
  std::vector<PathStep> steps;
  std::size_t i = 0;
  const auto bad = [&]() -> std::vector<PathStep> {
    throw SweepError(fmt::format("--vary key '{}': expected a dotted path such as plant.delay or plant.poles[1][0]", key));
  };
  while (i < key.size()) {
    std::size_t j = i;
    while (j < key.size() && key[j] != '.' && key[j] != '[') ++j;
    if (j == i) return bad();
    steps.push_back({key.substr(i, j - i), std::nullopt});
    while (j < key.size() && key[j] == '[') {
      const auto close = key.find(']', j);
      if (close == std::string::npos || close == j + 1) return bad();
      std::size_t n = 0;
      for (std::size_t p = j + 1; p < close; ++p) {
        if (key[p] < '0' || key[p] > '9') return bad();
        n = n * 10 + static_cast<std::size_t>(key[p] - '0');
      }
      steps.push_back({"", n});
      j = close + 1;
    }
    if (j < key.size()) {
      if (key[j] != '.') return bad();
      ++j;
      if (j == key.size()) return bad();
    }
    i = j;
  }
  if (steps.empty()) return bad();
  return steps;
}

/// The node a key names, or an error saying which step failed.
toml::node* find_node(toml::table& root, const std::string& key, const std::string& spec_path) {
  const auto steps = split_key(key);
  toml::node* node = &root;
  std::string walked;
  for (const auto& step : steps) {
    if (!step.index) {
      auto* table = node->as_table();
      toml::node* next = table ? table->get(step.key) : nullptr;
      walked += (walked.empty() ? "" : ".") + step.key;
      if (next == nullptr)
        throw SweepError(fmt::format("{}: --vary key '{}': '{}' is not in the spec file (only keys written in the "
                                     "file can be varied)", spec_path, key, walked));
      node = next;
    } else {
      auto* array = node->as_array();
      if (array == nullptr)
        throw SweepError(fmt::format("{}: --vary key '{}': '{}' is not an array, so [{}] cannot index it", spec_path,
                                     key, walked, *step.index));
      if (*step.index >= array->size())
        throw SweepError(fmt::format("{}: --vary key '{}': '{}' has {} element(s); index {} is out of range "
                                     "(indices start at 0)", spec_path, key, walked, array->size(), *step.index));
      walked += fmt::format("[{}]", *step.index);
      node = array->get(*step.index);
    }
  }
  return node;
}

/// Replaces a numeric node's value, keeping an integer an integer when the value is integral.
void set_number(toml::table& root, const std::string& key, double value, const std::string& spec_path) {
  const toml::node* old = find_node(root, key, spec_path);  // throws unless every step exists
  const auto steps = split_key(key);
  toml::node* parent = &root;
  for (std::size_t s = 0; s + 1 < steps.size(); ++s) {
    if (!steps[s].index) parent = parent->as_table()->get(steps[s].key);
    else parent = parent->as_array()->get(*steps[s].index);
  }
  const bool keep_integer = old->is_integer() && std::floor(value) == value && std::abs(value) < 9.0e15;
  const auto& last = steps.back();
  if (!last.index) {
    if (keep_integer) parent->as_table()->insert_or_assign(last.key, static_cast<int64_t>(value));
    else parent->as_table()->insert_or_assign(last.key, value);
  } else {
    auto* array = parent->as_array();
    const auto at = array->cbegin() + static_cast<std::ptrdiff_t>(*last.index);
    if (keep_integer) array->replace(at, static_cast<int64_t>(value));
    else array->replace(at, value);
  }
}

std::string serialize(const toml::table& table) {
  std::ostringstream out;
  out << table << "\n";
  return out.str();
}

}  // namespace

struct SweepSpec::Impl {
  toml::table document;  // without [sweep]
};

SweepSpec::SweepSpec(const std::string& path) : impl_(new Impl), path_(path) {
  try {
    const Spec spec = load_spec(path);  // validates the whole file, [sweep] included
    name_ = spec.name;
    vary_in_file_ = spec.sweep_vary;
    impl_->document = toml::parse_file(path);
  } catch (const toml::parse_error& e) {
    delete impl_;
    throw SpecError(fmt::format("{}: invalid TOML: {}", path, e.description()));
  } catch (...) {
    delete impl_;
    throw;
  }
  impl_->document.erase("sweep");
  canonical_ = serialize(impl_->document);
}

SweepSpec::~SweepSpec() { delete impl_; }

void SweepSpec::check_keys(const SweepGrid& grid) const {
  std::set<std::string> seen;
  for (const auto& axis : grid.axes) {
    if (!seen.insert(axis.key).second)
      throw SweepError(fmt::format("--vary key '{}' is given twice; give each key once", axis.key));
    if (axis.key == "sweep" || axis.key.rfind("sweep.", 0) == 0 || axis.key.rfind("sweep[", 0) == 0)
      throw SweepError(fmt::format("--vary key '{}': the [sweep] table itself cannot be varied", axis.key));
    const toml::node* node = find_node(impl_->document, axis.key, path_);
    if (!node->is_number()) {
      std::string hint;
      if (node->is_array()) hint = " (it is an array: index an element, e.g. " + axis.key + "[0]; a complex pole [re, im] is indexed again: [i][0] is its real part, [i][1] its imaginary part)";
      else if (node->is_table()) hint = " (it is a table)";
      else if (node->is_string()) hint = " (it is a string)";
      else if (node->is_boolean()) hint = " (it is a boolean)";
      throw SweepError(fmt::format("{}: --vary key '{}': expected a numeric spec key{}", path_, axis.key, hint));
    }
  }
}

std::string SweepSpec::point_text(const SweepGrid& grid, std::size_t index) const {
  toml::table copy = impl_->document;
  const auto values = grid.point(index);
  for (std::size_t a = 0; a < grid.axes.size(); ++a) set_number(copy, grid.axes[a].key, values[a], path_);
  return serialize(copy);
}

std::string point_values_text(const SweepGrid& grid, std::size_t index) {
  const auto v = grid.point(index);
  std::string text;
  for (std::size_t a = 0; a < v.size(); ++a) text += fmt::format("{}{} = {}", a ? ", " : "", grid.axes[a].key, v[a]);
  return text;
}

}  // namespace specloop
