// `specloop fit TEST.csv`: the plant model from a recorded test (fit_command.hpp).
#include "cli/fit_command.hpp"

#include <fmt/format.h>

#include <filesystem>
#include <iostream>

#include "specloop/core/vocabulary.hpp"
#include "specloop/fit/estimate.hpp"
#include "specloop/output/fit_outputs.hpp"
#include "specloop/output/output_folder.hpp"

namespace specloop::cli {

using namespace specloop::fit;

void add_fit_command(CLI::App& app, FitCommand& cmd) {
  CLI::App* f = app.add_subcommand("fit", "Fit plant models to a recorded test (CSV: time, input, output) and write the "
                                          "best one as a spec plant with its uncertainty");
  cmd.app = f;
  f->add_option("CSV", cmd.csv, "recorded test: a header row, then time, input as applied, output as measured")->required();
  f->add_option("--time", cmd.time, "time column's name (default: the first column)");
  f->add_option("--input", cmd.input, "input column's name (default: the second column)");
  f->add_option("--output", cmd.output, "output column's name (default: the third column)");
  f->add_option("--model", cmd.models, "model kind, repeatable: first-order-delay, second-order-delay, underdamped-delay, "
                                       "integrator-delay, poles-zeros (default: all five, poles-zeros with 2 poles and 1 zero)");
  f->add_option("--poles", cmd.poles, "poles-zeros: number of poles, 1 to 4 (default 2)")->check(CLI::Range(1, kMaxPoles));
  f->add_option("--zeros", cmd.zeros, "poles-zeros: number of zeros, 0 to poles − 1 (default 0; 1 in the default set)")
      ->check(CLI::Range(0, kMaxPoles - 1));
  f->add_option("--u0", cmd.u0, "the input's operating point (default: from the leading steady stretch)");
  f->add_option("--y0", cmd.y0, "the output's operating point (default: from the leading steady stretch)");
  f->add_flag("--robust", cmd.robust, "Huber loss (scale 1.345 × the noise σ estimated from the output) instead of squares");
  f->add_option("--criterion", cmd.criterion, "ranking: aic (default) or bic");
  f->add_option("--out", cmd.out, "output folder (default results/<csv name>-fit/)");
}

namespace {

std::vector<ModelShape> shapes_of(const FitCommand& cmd) {
  if (cmd.zeros >= cmd.poles)
    throw FitDataError(fmt::format("--zeros {}: a poles-zeros model needs fewer zeros than poles (--poles {})", cmd.zeros, cmd.poles));
  std::vector<ModelShape> shapes;
  if (cmd.models.empty()) {
    for (ModelKind k : {ModelKind::first_order_delay, ModelKind::second_order_delay, ModelKind::underdamped_delay,
                        ModelKind::integrator_delay})
      shapes.push_back({k, 0, 0});
    const bool counts_given = cmd.app->count("--poles") > 0 || cmd.app->count("--zeros") > 0;
    shapes.push_back({ModelKind::poles_zeros, cmd.poles, counts_given ? cmd.zeros : std::min(1, cmd.poles - 1)});
    return shapes;
  }
  for (const std::string& name : cmd.models) {
    const auto kind = parse_kind(name);
    if (!kind) {
      const auto guess = likely_name(name, kind_names());
      std::string known;
      for (const auto& k : kind_names()) known += (known.empty() ? "" : ", ") + k;
      throw FitDataError(fmt::format("--model {}: unknown model kind{}; known: {}", name,
                                     guess ? fmt::format(" (did you mean '{}'?)", *guess) : "", known));
    }
    shapes.push_back({*kind, *kind == ModelKind::poles_zeros ? cmd.poles : 0, *kind == ModelKind::poles_zeros ? cmd.zeros : 0});
  }
  return shapes;
}

}  // namespace

int run_fit_command(const FitCommand& cmd) {
  namespace fs = std::filesystem;
  try {
    FitOptions options;
    if (cmd.criterion == "aic") options.criterion = Criterion::aic;
    else if (cmd.criterion == "bic") options.criterion = Criterion::bic;
    else throw FitDataError(fmt::format("--criterion {}: expected aic or bic", cmd.criterion));
    options.robust = cmd.robust;
    const std::vector<ModelShape> shapes = shapes_of(cmd);
    const fs::path dir = cmd.out.empty() ? fs::path("results") / (fs::path(cmd.csv).stem().string() + "-fit") : fs::path(cmd.out);
    check_output_folder(dir, "--out");
    const PreparedData data = prepare_test_data(read_test_csv(cmd.csv, {cmd.time, cmd.input, cmd.output}), cmd.u0, cmd.y0);
    const FitResult result = fit_models(data, shapes, options);
    const FitOutputs written = write_fit_outputs(data, result, dir);

    fmt::print("{}: {} samples, {} excitation, operating point u0 = {:.6g}, y0 = {:.6g}\n", data.record.file,
               data.record.t.size(), excitation_name(data.excitation), data.u0, data.y0);
    fmt::print("  {:<4} {:<34} {:<17} {:>8} {:>12} {:>12}  parameters (±2σ)\n", "rank", "model", "status", "fit %",
               "residual RMS", criterion_name(options.criterion) == "aic" ? "AIC" : "BIC");
    for (const ModelFit& f : result.models) {
      std::string params;
      for (std::size_t i = 0; i < f.names.size(); ++i)
        params += fmt::format("{}{} = {:.5g}{}", i ? ", " : "", f.names[i], f.values[i],
                              f.have_covariance ? fmt::format(" ± {:.2g}", 2.0 * f.std_errors[i]) : "");
      const std::string label = f.shape.kind == ModelKind::poles_zeros
                                    ? fmt::format("poles-zeros ({}p, {}z)", f.shape.poles, f.shape.zeros)
                                    : std::string(kind_name(f.shape.kind));
      fmt::print("  {:<4} {:<34} {:<17} {:>8.2f} {:>12.5g} {:>12.6g}  {}\n", f.rank ? std::to_string(*f.rank) : "—", label,
                 status_name(f.status), f.fit_pct, f.residual_rms, options.criterion == Criterion::aic ? f.aic : f.bic, params);
      if (!f.message.empty()) fmt::print("       {}\n", f.message);
    }
    if (!written.figures_rendered && !written.figures_note.empty()) fmt::print("fit: {}\n", written.figures_note);
    if (!result.best) {
      fmt::print("\nNo model fitted with identifiable parameters: no plant.toml. Report: {}\n", written.html.string());
      return 1;
    }
    fmt::print("\nBest: {} — {} (use: specloop design SPEC --plant {})\nReport: {}\n", kind_name(result.models[*result.best].shape.kind),
               (dir / "plant.toml").string(), (dir / "plant.toml").string(), written.html.string());
    return 0;
  } catch (const FitDataError& e) {
    std::cerr << e.what() << "\n";
    return 2;
  }
}

}  // namespace specloop::cli
