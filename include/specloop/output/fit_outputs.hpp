// What `specloop fit` writes: fit.json, plant.toml, report.html / report.md and CSV series.
#pragma once

#include <nlohmann/json.hpp>

#include <filesystem>
#include <string>

#include "specloop/fit/estimate.hpp"
#include "specloop/fit/test_data.hpp"

namespace specloop {

/// fit.json (README "Fitting a plant from a test"): the data's summary, the criterion, the best
/// kind (or null) and every model tried. Refuses NaN (json_io).
nlohmann::json fit_json(const fit::PreparedData& data, const fit::FitResult& result);

struct FitOutputs {
  std::filesystem::path dir, html;
  bool plant_written = false;   // plant.toml (only when a model is ok)
  bool figures_rendered = false;
  std::string figures_note;
};

/// Writes DIR/fit.json, DIR/plant.toml (when there is a best model), DIR/report.html and
/// DIR/report.md (data against each model's response, the residuals, the parameter tables),
/// DIR/series/*.csv and DIR/plots/*.gp, all through a staging folder: all or nothing.
FitOutputs write_fit_outputs(const fit::PreparedData& data, const fit::FitResult& result, const std::filesystem::path& dir,
                             bool render_figures = true);

}  // namespace specloop
