// Shared by the test-only probes: reading one JSON object from stdin and mapping failures to
// exit codes (2 malformed input, 3 internal error).
#pragma once

#include <iostream>
#include <iterator>
#include <nlohmann/json.hpp>
#include <stdexcept>
#include <string>

namespace probe {

/// Malformed input: the message names the field.
struct InputError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

/// All of stdin as JSON (read into a string first: parsing straight from the stream can hang).
inline nlohmann::json read_stdin_json() {
  const std::string text((std::istreambuf_iterator<char>(std::cin)), std::istreambuf_iterator<char>());
  try {
    return nlohmann::json::parse(text);
  } catch (const nlohmann::json::parse_error& e) {
    throw InputError(std::string("stdin is not valid JSON: ") + e.what());
  }
}

/// Runs `body` and turns its exceptions into the probes' exit codes, messages prefixed by `name`.
template <typename Body>
int run_main(const char* name, Body body) {
  try {
    return body();
  } catch (const InputError& e) {
    std::cerr << name << ": " << e.what() << "\n";
    return 2;
  } catch (const nlohmann::json::exception& e) {
    std::cerr << name << ": malformed input: " << e.what() << "\n";
    return 2;
  } catch (const std::invalid_argument& e) {
    std::cerr << name << ": malformed input: " << e.what() << "\n";
    return 2;
  } catch (const std::exception& e) {
    std::cerr << name << ": internal error: " << e.what() << "\n";
    return 3;
  }
}

}  // namespace probe
