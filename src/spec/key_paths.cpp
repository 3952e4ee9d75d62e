// Dotted key paths over a spec document (key_paths.hpp): the path syntax, the walk that says
// which step failed, and setting a number in place.
#include "specloop/spec/key_paths.hpp"

#include <fmt/format.h>

#include <cmath>
#include <cstdint>
#include <optional>
#include <sstream>
#include <vector>

#include "specloop/spec/spec.hpp"
#include "spec/key_paths.hpp"
#include "spec/reader_core.hpp"
#include "spec/sections.hpp"

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
    throw KeyPathError(KeyPathError::Kind::syntax,
                       "expected a dotted path such as plant.delay or plant.poles[1][0]");
  };
  while (i < key.size()) {
    std::size_t j = i;
    while (j < key.size() && key[j] != '.' && key[j] != '[') ++j;
    if (j == i) return bad();
    steps.push_back({key.substr(i, j - i), std::nullopt});
    while (j < key.size() && key[j] == '[') {
      const auto close = key.find(']', j);
      if (close == std::string::npos || close == j + 1 || close - j > 10) return bad();
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

/// The node's parent (table or array) and the last step; every step checked.
template <typename Node>
Node* walk(Node* root, const std::vector<PathStep>& steps, std::size_t count) {
  Node* node = root;
  std::string walked;
  for (std::size_t s = 0; s < count; ++s) {
    const PathStep& step = steps[s];
    if (!step.index) {
      auto* table = node->as_table();
      Node* next = table ? table->get(step.key) : nullptr;
      walked += (walked.empty() ? "" : ".") + step.key;
      if (next == nullptr)
        throw KeyPathError(KeyPathError::Kind::missing, fmt::format("'{}' is not in the spec file", walked));
      node = next;
    } else {
      auto* array = node->as_array();
      if (array == nullptr)
        throw KeyPathError(KeyPathError::Kind::not_indexable,
                           fmt::format("'{}' is not an array, so [{}] cannot index it", walked, *step.index));
      if (*step.index >= array->size())
        throw KeyPathError(KeyPathError::Kind::out_of_range,
                           fmt::format("'{}' has {} element(s); index {} is out of range (indices start at 0)", walked,
                                       array->size(), *step.index));
      walked += fmt::format("[{}]", *step.index);
      node = array->get(*step.index);
    }
  }
  return node;
}

std::string serialize(const toml::table& table) {
  std::ostringstream out;
  out << table << "\n";
  return out.str();
}

}  // namespace

namespace reading {

const toml::node& node_at(const toml::table& root, const std::string& key) {
  const auto steps = split_key(key);
  return *walk<const toml::node>(&root, steps, steps.size());
}

double number_at(const toml::table& root, const std::string& key) {
  const toml::node& node = node_at(root, key);
  if (const auto* integer = node.as_integer()) return static_cast<double>(integer->get());
  if (const auto* floating = node.as_floating_point()) return floating->get();
  std::string hint;
  if (node.is_array())
    hint = " (it is an array: index an element, e.g. " + key +
           "[0]; a complex pole [re, im] is indexed again: [i][0] is its real part, [i][1] its imaginary part)";
  else if (node.is_table()) hint = " (it is a table)";
  else if (node.is_string()) hint = " (it is a string)";
  else if (node.is_boolean()) hint = " (it is a boolean)";
  throw KeyPathError(KeyPathError::Kind::not_numeric, "expected a numeric spec key" + hint);
}

}  // namespace reading

struct SpecDocument::Impl {
  toml::table document;
};

SpecDocument::SpecDocument(std::string_view text, const std::string& path) : impl_(std::make_unique<Impl>()) {
  try {
    impl_->document = toml::parse(text, std::string_view(path));
  } catch (const toml::parse_error& error) {
    const auto at = reading::position_of(error.source());
    throw SpecError(fmt::format("{}:{}:{}: invalid TOML: {}", path, at.line, at.column, error.description()));
  }
}

SpecDocument::~SpecDocument() = default;
SpecDocument::SpecDocument(const SpecDocument& other) : impl_(std::make_unique<Impl>(*other.impl_)) {}
SpecDocument& SpecDocument::operator=(const SpecDocument& other) {
  if (this != &other) impl_ = std::make_unique<Impl>(*other.impl_);
  return *this;
}

double SpecDocument::number_at(const std::string& key) const { return reading::number_at(impl_->document, key); }

void SpecDocument::set_number(const std::string& key, double value) {
  const toml::node& old = reading::node_at(impl_->document, key);
  (void)number_at(key);  // throws unless it is a number
  const auto steps = split_key(key);
  toml::node* parent = walk<toml::node>(&impl_->document, steps, steps.size() - 1);
  const bool keep_integer = old.is_integer() && std::floor(value) == value && std::abs(value) < 9.0e15;
  const PathStep& last = steps.back();
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

void SpecDocument::erase(const std::string& key) {
  const auto steps = split_key(key);
  if (steps.back().index) throw KeyPathError(KeyPathError::Kind::syntax, "only a table key can be erased");
  try {
    toml::node* parent = walk<toml::node>(&impl_->document, steps, steps.size() - 1);
    if (auto* table = parent->as_table()) table->erase(steps.back().key);
  } catch (const KeyPathError&) {
    // a parent that is not there: nothing to erase
  }
}

std::string SpecDocument::text() const { return serialize(impl_->document); }

Spec SpecDocument::spec(const std::string& path) const { return model_spec(reading::read_document(impl_->document, path)); }

}  // namespace specloop
