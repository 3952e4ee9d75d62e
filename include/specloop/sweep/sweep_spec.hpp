// Point specs: a spec file prepared for sweeping — the canonical text that identifies it and the
// spec text of each grid point (the document with each axis key set to the point's value).
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "specloop/spec/axes.hpp"

namespace specloop {

/// A spec file prepared for sweeping: the document re-serialized without its [sweep] table (the
/// canonical text that identifies the spec), and the point texts.
class SweepSpec {
 public:
  /// Reads the file (SpecError/SweepError on problems). Does not validate the axes' keys yet.
  explicit SweepSpec(const std::string& path);
  ~SweepSpec();
  SweepSpec(const SweepSpec&) = delete;
  SweepSpec& operator=(const SweepSpec&) = delete;

  const std::string& path() const { return path_; }
  const std::string& name() const { return name_; }
  const std::string& canonical_text() const { return canonical_; }
  /// The axes written in the spec's [sweep] vary list (empty when there is none).
  const std::vector<std::string>& vary_in_file() const { return vary_in_file_; }
  /// Checks that every axis key names a number present in the document (not in [sweep]).
  void check_keys(const SweepGrid& grid) const;
  /// The spec text of one point: the canonical document with each axis key set to its value.
  std::string point_text(const SweepGrid& grid, std::size_t index) const;

 private:
  struct Impl;
  Impl* impl_;
  std::string path_, name_, canonical_;
  std::vector<std::string> vary_in_file_;
};

/// "key = value, key = value" of one grid point (how messages and reports name a point).
std::string point_values_text(const SweepGrid& grid, std::size_t index);

}  // namespace specloop
