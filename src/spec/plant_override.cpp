// `specloop design SPEC --plant FILE`: the spec with FILE's [plant] and [uncertainty] in place of
// its own (spec.hpp, load_spec_with_plant). The two documents are merged as TOML tables — FILE's
// nodes moved in keep their source positions — read by the same section readers as any spec, and
// a message about a node of FILE names FILE and its line.
#include <fmt/format.h>

#include <cstdlib>
#include <fstream>
#include <sstream>

#include "spec/reader_core.hpp"
#include "spec/sections.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

namespace {

std::string read_text_file(const std::string& path) {
  std::ifstream file(path, std::ios::binary);
  if (!file) throw SpecError(fmt::format("{}: cannot read file", path));
  std::ostringstream contents;
  contents << file.rdbuf();
  return contents.str();
}

toml::table parse_document(const std::string& text, const std::string& path) {
  try {
    return toml::parse(text, std::string_view(path));
  } catch (const toml::parse_error& error) {
    const auto at = reading::position_of(error.source());
    throw SpecError(fmt::format("{}:{}:{}: invalid TOML: {}", path, at.line, at.column, error.description()));
  }
}

// A message "SPEC:line:col: key: …" about a node that came from FILE, rewritten to name FILE: the
// node at the key (when the key is a path toml++ finds) decides by its source; otherwise a key in
// [plant], or an [uncertainty] range on a plant key, is FILE's.
std::string attributed(const std::string& message, const std::string& spec_path, const std::string& plant_path,
                       const toml::table& merged) {
  const std::string prefix = spec_path + ":";
  if (!message.starts_with(prefix)) return message;
  std::size_t at = prefix.size();
  char* end = nullptr;
  const long line = std::strtol(message.c_str() + at, &end, 10);
  if (end == message.c_str() + at || *end != ':') return message;
  at = static_cast<std::size_t>(end - message.c_str()) + 1;
  const std::size_t col_end = message.find(": ", at);
  if (col_end == std::string::npos) return message;
  const std::size_t key_end = message.find(": ", col_end + 2);
  const std::string key = key_end == std::string::npos ? "" : message.substr(col_end + 2, key_end - col_end - 2);
  bool from_plant_file = false;
  const toml::node_view<const toml::node> node = merged.at_path(key);
  if (node && node.node()->source().path) {
    from_plant_file = *node.node()->source().path == plant_path && node.node()->source().begin.line == line;
  } else {
    from_plant_file = key.starts_with("plant") || (key.starts_with("uncertainty") && key.find("plant.") != std::string::npos);
  }
  if (!from_plant_file) return message;
  return plant_path + ":" + message.substr(prefix.size());
}

}  // namespace

Spec load_spec_with_plant(const std::string& spec_path, const std::string& plant_path) {
  const std::string spec_text = read_text_file(spec_path);
  const std::string plant_text = read_text_file(plant_path);
  toml::table spec_doc = parse_document(spec_text, spec_path);
  toml::table plant_doc = parse_document(plant_text, plant_path);

  // FILE holds [plant] and, optionally, [uncertainty]; nothing else.
  for (const auto& [name, node] : plant_doc) {
    if (name.str() == "plant" || name.str() == "uncertainty") {
      if (!node.is_table()) {
        const auto p = reading::position_of(node.source());
        throw SpecError(fmt::format("{}:{}:{}: {}: expected a section ([{}]), got a value", plant_path, p.line, p.column,
                                    name.str(), name.str()));
      }
      continue;
    }
    const auto p = reading::position_of(node.source());
    throw SpecError(fmt::format("{}:{}:{}: {}: a --plant file holds only [plant] and [uncertainty] (as `specloop fit` "
                                "writes plant.toml); this belongs in the spec", plant_path, p.line, p.column, name.str()));
  }
  toml::table* plant = plant_doc["plant"].as_table();
  if (plant == nullptr) throw SpecError(fmt::format("{}: no [plant] section", plant_path));

  // [uncertainty]: FILE's ranges replace the spec's; the spec's settings (samples, seed, mode, …)
  // stay unless FILE sets them. Without [uncertainty] in FILE the spec's ranges, which were about
  // its own plant, go with it.
  toml::table* spec_uncertainty = spec_doc["uncertainty"].as_table();
  if (toml::table* file_uncertainty = plant_doc["uncertainty"].as_table()) {
    if (spec_uncertainty != nullptr)
      for (auto&& [name, node] : *spec_uncertainty)
        if (!name.str().starts_with("plant.") && !file_uncertainty->contains(name.str()))
          file_uncertainty->insert(name.str(), std::move(node));
    spec_doc.insert_or_assign("uncertainty", std::move(*file_uncertainty));
  } else {
    spec_doc.erase("uncertainty");
  }
  spec_doc.insert_or_assign("plant", std::move(*plant));

  try {
    SpecAsRead read = reading::read_document(spec_doc, spec_path);
    // What the report shows as the spec read and what robust design's scenarios re-parse.
    std::ostringstream merged;
    merged << "# " << spec_path << " with [plant] and [uncertainty] from " << plant_path << " (specloop design --plant)\n"
           << toml::toml_formatter(spec_doc) << "\n";
    read.spec.source_text = merged.str();
    return model_spec(std::move(read));
  } catch (const SpecError& e) {
    throw SpecError(attributed(e.what(), spec_path, plant_path, spec_doc));
  }
}

}  // namespace specloop
