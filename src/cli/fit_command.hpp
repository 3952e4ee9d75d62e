// `specloop fit`: the subcommand's options and its run (kept out of main.cpp).
#pragma once

#include <CLI/CLI.hpp>

#include <optional>
#include <string>
#include <vector>

namespace specloop::cli {

struct FitCommand {
  std::string csv, time, input, output, out, criterion = "aic";
  std::vector<std::string> models;
  int poles = 2, zeros = 0;
  bool poles_given = false;
  std::optional<double> u0, y0;
  bool robust = false;
  CLI::App* app = nullptr;
};

/// Adds the subcommand and binds its options to `cmd`.
void add_fit_command(CLI::App& app, FitCommand& cmd);
/// Runs it: 0 a model was fitted (plant.toml written), 1 none was (fit.json and the report say
/// why), 2 bad data or options (FitDataError, OutputError). Prints a summary table.
int run_fit_command(const FitCommand& cmd);

}  // namespace specloop::cli
