// Output locations: the error for one that cannot be written, and the checks made before any work
// (the writes themselves go through a staging folder, page_kit.hpp).
#pragma once

#include <filesystem>
#include <stdexcept>
#include <string_view>

namespace specloop {

/// An output location that cannot be written (a file where a folder is needed, a folder that
/// cannot be created, no permission): bad input, exit 2. The message names the option and path.
class OutputError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// Checks before any work that `dir` can become an output folder written through a staging
/// folder beside it: `dir` is a folder or does not exist, and the nearest existing folder on its
/// path is a writable folder. Throws OutputError ("--out results/x: exists and is a file, not a
/// folder"). `option` names the command-line option ("--out").
void check_output_folder(const std::filesystem::path& dir, std::string_view option);
/// The same for an output file (a sweep store, a merge's OUT): not a folder, and its folder can
/// be created and written.
void check_output_file(const std::filesystem::path& file, std::string_view option);

}  // namespace specloop
