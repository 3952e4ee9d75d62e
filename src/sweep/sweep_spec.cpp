// Point specs (sweep_spec.hpp): the spec document without [sweep] (SpecDocument, key_paths.hpp),
// each axis key checked there, and each point's text with the axis values written in.
#include "specloop/sweep/sweep_spec.hpp"

#include <fmt/format.h>

#include <set>

#include "specloop/spec/key_paths.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

namespace {

/// The sweep's words for a key path that names no number.
[[noreturn]] void fail_key(const std::string& spec_path, const std::string& key, const KeyPathError& e) {
  if (e.kind() == KeyPathError::Kind::syntax) throw SweepError(fmt::format("--vary key '{}': {}", key, e.what()));
  throw SweepError(fmt::format("{}: --vary key '{}': {}{}", spec_path, key, e.what(),
                               e.kind() == KeyPathError::Kind::missing
                                   ? " (only keys written in the file can be varied)"
                                   : ""));
}

}  // namespace

struct SweepSpec::Impl {
  explicit Impl(const SpecDocument& d) : document(d) {}
  SpecDocument document;  // without [sweep]
};

SweepSpec::SweepSpec(const std::string& path) : impl_(nullptr), path_(path) {
  const Spec spec = load_spec(path);  // validates the whole file, [sweep] included
  name_ = spec.name;
  vary_in_file_ = spec.sweep_vary;
  impl_ = new Impl(SpecDocument(spec.source_text, path));
  impl_->document.erase("sweep");
  canonical_ = impl_->document.text();
}

SweepSpec::~SweepSpec() { delete impl_; }

void SweepSpec::check_keys(const SweepGrid& grid) const {
  std::set<std::string> seen;
  for (const auto& axis : grid.axes) {
    if (!seen.insert(axis.key).second)
      throw SweepError(fmt::format("--vary key '{}' is given twice; give each key once", axis.key));
    if (axis.key == "sweep" || axis.key.rfind("sweep.", 0) == 0 || axis.key.rfind("sweep[", 0) == 0)
      throw SweepError(fmt::format("--vary key '{}': the [sweep] table itself cannot be varied", axis.key));
    try {
      (void)impl_->document.number_at(axis.key);
    } catch (const KeyPathError& e) {
      fail_key(path_, axis.key, e);
    }
  }
}

std::string SweepSpec::point_text(const SweepGrid& grid, std::size_t index) const {
  SpecDocument copy = impl_->document;
  const auto values = grid.point(index);
  for (std::size_t a = 0; a < grid.axes.size(); ++a) {
    try {
      copy.set_number(grid.axes[a].key, values[a]);
    } catch (const KeyPathError& e) {
      fail_key(path_, grid.axes[a].key, e);
    }
  }
  return copy.text();
}

std::string point_values_text(const SweepGrid& grid, std::size_t index) {
  const auto v = grid.point(index);
  std::string text;
  for (std::size_t a = 0; a < v.size(); ++a) text += fmt::format("{}{} = {}", a ? ", " : "", grid.axes[a].key, v[a]);
  return text;
}

}  // namespace specloop
