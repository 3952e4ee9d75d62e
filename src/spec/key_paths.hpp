// The key-path walk over a toml++ document (private to the spec layer): key_paths.cpp's
// SpecDocument uses it, and so does the [uncertainty] reader, on the document it reads.
#pragma once

#include <toml++/toml.h>

#include <string>

#include "specloop/spec/key_paths.hpp"

namespace specloop::reading {

/// The node `key` names in `root`; KeyPathError naming the step that failed.
const toml::node& node_at(const toml::table& root, const std::string& key);
/// The same, requiring a number (KeyPathError::Kind::not_numeric with a hint for arrays, tables,
/// strings and booleans).
double number_at(const toml::table& root, const std::string& key);

}  // namespace specloop::reading
