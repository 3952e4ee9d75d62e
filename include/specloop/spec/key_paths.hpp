// Numeric spec keys named by dotted paths ("plant.delay", "plant.poles[1][0]"): the one key
// checker of `sweep --vary` and of [uncertainty], and a spec document whose numbers can be set by
// path (a sweep point's spec, an uncertainty scenario's spec).
#pragma once

#include <cstddef>
#include <memory>
#include <stdexcept>
#include <string>
#include <string_view>

namespace specloop {

struct Spec;

/// A key path that names no number of the document. what() says which step failed, without the
/// file or the caller's prefix ("'plant.x' is not in the spec file", "… expected a numeric spec
/// key (it is an array: …)"); the caller adds both.
class KeyPathError : public std::runtime_error {
 public:
  enum class Kind { syntax, missing, not_indexable, out_of_range, not_numeric };
  KeyPathError(Kind kind, const std::string& what) : std::runtime_error(what), kind_(kind) {}
  Kind kind() const { return kind_; }

 private:
  Kind kind_;
};

/// A parsed spec document (TOML) whose numbers can be read and set by key path. Reading it
/// checks TOML syntax only; the spec's own checks are the reader's (parse_spec of text()).
class SpecDocument {
 public:
  /// Parses `text`; SpecError "path:line:col: invalid TOML: …" on a syntax error.
  SpecDocument(std::string_view text, const std::string& path);
  ~SpecDocument();
  SpecDocument(const SpecDocument& other);
  SpecDocument& operator=(const SpecDocument& other);

  /// The number `key` names (an integer read as a double). KeyPathError when a step of the path
  /// is not in the document, an index is out of range, or the node is not a number.
  double number_at(const std::string& key) const;
  /// Replaces the number `key` names (number_at's errors); an integer stays an integer when the
  /// value is integral.
  void set_number(const std::string& key, double value);
  /// Removes the table key `key` names ("uncertainty", "search.objective_at"); nothing when absent.
  void erase(const std::string& key);
  /// The document re-serialized (sorted keys, no comments) with a final newline.
  std::string text() const;
  /// The spec this document describes: parse_spec(text(), path) without the text round trip
  /// (Spec::source_text stays empty). Throws SpecError as parse_spec does; positions are those of
  /// the document as parsed, not of the numbers set since.
  Spec spec(const std::string& path) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace specloop
