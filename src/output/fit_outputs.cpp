// `specloop fit`'s outputs (fit_outputs.hpp): fit.json, plant.toml, the report pages, CSV series
// and gnuplot scripts, written through one staging folder.
#include "specloop/output/fit_outputs.hpp"

#include <fmt/format.h>

#include "output/page_kit.hpp"
#include "specloop/fit/plant_form.hpp"
#include "specloop/output/json_io.hpp"

namespace specloop {

namespace fs = std::filesystem;
using namespace specloop::fit;

namespace {

nlohmann::json matrix_json(const Eigen::MatrixXd& m) {
  nlohmann::json rows = nlohmann::json::array();
  for (Eigen::Index i = 0; i < m.rows(); ++i) {
    nlohmann::json row = nlohmann::json::array();
    for (Eigen::Index j = 0; j < m.cols(); ++j) row.push_back(number_json(m(i, j)));
    rows.push_back(row);
  }
  return rows;
}

nlohmann::json model_json(const ModelFit& f) {
  nlohmann::json j;
  j["kind"] = std::string(kind_name(f.shape.kind));
  if (f.shape.kind == ModelKind::poles_zeros) {
    j["poles"] = f.shape.poles;
    j["zeros"] = f.shape.zeros;
  }
  j["status"] = std::string(status_name(f.status));
  j["message"] = f.message.empty() ? nlohmann::json(nullptr) : nlohmann::json(f.message);
  j["output_operating_point"] = {{"value", number_json(f.output_operating_point)},
                                 {"std_error", f.offset_estimated && f.have_covariance ? number_json(f.output_operating_point_std_error)
                                                                                       : nlohmann::json(nullptr)},
                                 {"estimated", f.offset_estimated}};
  j["parameter_names"] = f.names;
  nlohmann::json params = nlohmann::json::object(), start = nlohmann::json::object();
  for (std::size_t i = 0; i < f.names.size(); ++i) {
    nlohmann::json p;
    p["value"] = number_json(f.values[i]);
    if (f.have_covariance) {
      p["std_error"] = number_json(f.std_errors[i]);
      p["low"] = number_json(f.values[i] - 2.0 * f.std_errors[i]);
      p["high"] = number_json(f.values[i] + 2.0 * f.std_errors[i]);
    } else {
      p["std_error"] = p["low"] = p["high"] = nullptr;
    }
    params[f.names[i]] = p;
    start[f.names[i]] = number_json(f.start[i]);
  }
  j["parameters"] = params;
  j["covariance"] = f.have_covariance ? matrix_json(f.covariance) : nlohmann::json(nullptr);
  j["correlation"] = f.have_covariance ? matrix_json(f.correlation) : nlohmann::json(nullptr);
  j["start"] = start;
  j["start_method"] = f.start_method;
  j["residual_rms"] = number_json(f.residual_rms);
  j["residual_variance"] = number_json(f.sigma2);
  j["fit_pct"] = number_json(f.fit_pct);
  j["aic"] = number_json(f.aic);
  j["bic"] = number_json(f.bic);
  j["iterations"] = f.iterations;
  j["termination"] = f.termination;
  j["rank"] = f.rank ? nlohmann::json(*f.rank) : nlohmann::json(nullptr);
  j["seconds"] = number_json(f.seconds);
  return j;
}

std::string model_label(const ModelFit& f) {
  if (f.shape.kind == ModelKind::poles_zeros) return fmt::format("poles-zeros ({} poles, {} zeros)", f.shape.poles, f.shape.zeros);
  return std::string(kind_name(f.shape.kind));
}

std::string series_file(const ModelFit& f, std::size_t index) {
  return fmt::format("model-{}-{}.csv", index + 1, kind_name(f.shape.kind));
}

const char* colour(std::size_t i) {
  static const char* const palette[] = {"#1565c0", "#2e7d32", "#ef6c00", "#6a1b9a", "#00838f", "#ad1457", "#5d4037"};
  return palette[i % 7];
}

std::string figure(const PreparedData& d, const FitResult& r, bool residuals) {
  const std::size_t every = std::max<std::size_t>(1, d.record.t.size() / 700);
  std::string s = fmt::format("  set xlabel {}\n  set ylabel {}\n", page::quoted("time (" + d.record.time_column + ")"),
                              page::quoted(residuals ? "measured − model" : d.record.output_column));
  std::vector<std::string> plots;
  if (!residuals)
    plots.push_back(fmt::format("'../series/data.csv' every {} using 1:3 with points pt 7 ps 0.3 lc rgb '#888888' title "
                                "'measured'", every));
  for (std::size_t i = 0; i < r.models.size(); ++i) {
    const ModelFit& f = r.models[i];
    if (f.response.empty()) continue;
    plots.push_back(fmt::format("'../series/{}' every {} using 1:{} with lines lc rgb '{}' lw {} title {}", series_file(f, i),
                                every, residuals ? 3 : 2, colour(i), r.best == i ? "2.2" : "1.2", page::quoted(model_label(f))));
  }
  s += page::plot_command(plots, "no model response to show");
  return page::script_frame(residuals ? "residuals" : "fit", s);
}

std::string cell(double v) { return fmt::format("{:.6g}", v); }
page::Cell C(std::string text) { return page::Cell{std::move(text), ""}; }

page::Section summary_section(const PreparedData& d, const FitResult& r) {
  page::Table t{"models", {"model", "status", "rank", "fit %", "residual RMS", criterion_name(r.criterion) == "aic" ? "AIC" : "BIC",
                           "iterations", "start", "message"}, {}};
  for (const ModelFit& f : r.models)
    t.rows.push_back({C(model_label(f)), C(std::string(status_name(f.status))), C(f.rank ? std::to_string(*f.rank) : "—"),
                      C(fmt::format("{:.2f}", f.fit_pct)), C(cell(f.residual_rms)),
                      C(cell(r.criterion == Criterion::aic ? f.aic : f.bic)), C(std::to_string(f.iterations)), C(f.start_method),
                      C(f.message.empty() ? "—" : f.message)});
  const std::string intro = fmt::format(
      "{} samples of {} (time '{}', input '{}', output '{}'), median step {:.6g}; operating point u0 = {:.6g}, y0 = {:.6g} ({}); "
      "excitation: {}. Each model is simulated on the recorded input (zero-order hold between samples, the delay exact) and "
      "fitted by least squares{}; ranked by {} among the fits with status ok.",
      d.record.t.size(), d.record.file, d.record.time_column, d.record.input_column, d.record.output_column, d.median_dt, d.u0,
      d.y0, d.steady_samples > 0 ? fmt::format("leading steady stretch of {} samples", d.steady_samples) : "given",
      excitation_name(d.excitation),
      r.robust ? fmt::format(" with the Huber loss (scale {:.4g})", r.robust_scale) : "",
      r.criterion == Criterion::aic ? "AIC" : "BIC");
  return {"models", "Models tried", page::paragraph_html(intro) + page::html_table(t), intro + "\n\n" + page::md_table(t)};
}

page::Section parameters_section(const FitResult& r) {
  std::string html, md;
  for (const ModelFit& f : r.models) {
    page::Table t{fmt::format("parameters-{}", kind_name(f.shape.kind)), {"parameter", "value", "σ", "low (−2σ)", "high (+2σ)", "start"}, {}};
    for (std::size_t i = 0; i < f.names.size(); ++i) {
      const bool c = f.have_covariance;
      t.rows.push_back({C(f.names[i]), C(cell(f.values[i])), C(c ? cell(f.std_errors[i]) : "—"),
                        C(c ? cell(f.values[i] - 2 * f.std_errors[i]) : "—"), C(c ? cell(f.values[i] + 2 * f.std_errors[i]) : "—"),
                        C(cell(f.start[i]))});
    }
    html += fmt::format("<h3>{}</h3>\n", page::escape_html(model_label(f))) + page::html_table(t);
    md += fmt::format("### {}\n\n", model_label(f)) + page::md_table(t) + "\n";
  }
  return {"parameters", "Parameters with their ±2σ intervals", html, md};
}

page::Section figure_section(const std::string& id, const std::string& heading, const page::RenderedFigures& figs,
                             const std::string& caption) {
  for (const auto& [name, svg] : figs.svgs)
    if (name == id)
      return {id, heading, fmt::format("<figure>{}<figcaption>{}</figcaption></figure>\n", svg, page::escape_html(caption)),
              fmt::format("![{}](plots/{}.png)\n\n{}\n", heading, id, caption)};
  const std::string note = figs.note.empty() ? "figure not drawn" : figs.note;
  return {id, heading, page::paragraph_html(note), note + "\n"};
}

}  // namespace

nlohmann::json fit_json(const PreparedData& d, const FitResult& r) {
  nlohmann::json data;
  data["file"] = d.record.file;
  data["samples"] = d.record.t.size();
  data["time_column"] = d.record.time_column;
  data["input_column"] = d.record.input_column;
  data["output_column"] = d.record.output_column;
  data["u0"] = number_json(d.u0);
  data["y0"] = number_json(d.y0);
  data["operating_point"] = (d.u0_given && d.y0_given) ? std::string("given")
                                                       : fmt::format("leading steady stretch of {} samples{}", d.steady_samples,
                                                                     d.u0_given || d.y0_given ? " (one value given)" : "");
  data["excitation"] = std::string(excitation_name(d.excitation));
  data["input_changes"] = d.input_changes;
  data["sample_time_median"] = number_json(d.median_dt);
  data["noise_sigma"] = number_json(d.noise_sigma);
  nlohmann::json j;
  j["data"] = data;
  j["criterion"] = std::string(criterion_name(r.criterion));
  j["robust"] = r.robust ? nlohmann::json{{"loss", "huber"}, {"scale", number_json(r.robust_scale)}} : nlohmann::json(nullptr);
  j["best"] = r.best ? nlohmann::json(std::string(kind_name(r.models[*r.best].shape.kind))) : nlohmann::json(nullptr);
  j["models"] = nlohmann::json::array();
  for (const ModelFit& f : r.models) j["models"].push_back(model_json(f));
  return j;
}

FitOutputs write_fit_outputs(const PreparedData& d, const FitResult& r, const fs::path& dir, bool render_figures) {
  FitOutputs out;
  out.dir = dir;
  out.html = dir / "report.html";
  const nlohmann::json json = fit_json(d, r);
  std::string plant_text;
  if (r.best) {
    const ModelFit& best = r.models[*r.best];
    plant_text = plant_toml(plant_form(best), best, d.record.file);
  }
  std::vector<std::string> entries{"series", "plots", "fit.json", "report.md", "report.html"};
  if (!plant_text.empty()) entries.push_back("plant.toml");
  page::write_staged(dir, entries, [&](const fs::path& staging) {
    page::write_text(staging / "fit.json", json.dump(2) + "\n");
    if (!plant_text.empty()) page::write_text(staging / "plant.toml", plant_text);
    fs::create_directories(staging / "series");
    page::write_csv(staging / "series" / "data.csv", {"time", "input", "output"}, {&d.record.t, &d.record.u, &d.record.y});
    for (std::size_t i = 0; i < r.models.size(); ++i) {
      const ModelFit& f = r.models[i];
      if (f.response.empty()) continue;
      std::vector<double> residual(f.response.size());
      for (std::size_t k = 0; k < residual.size(); ++k) residual[k] = d.record.y[k] - f.response[k];
      page::write_csv(staging / "series" / series_file(f, i), {"time", "model_output", "residual"}, {&d.record.t, &f.response, &residual});
    }
    const page::RenderedFigures figs =
        page::write_and_render(staging / "plots", {{"fit", figure(d, r, false)}, {"residuals", figure(d, r, true)}}, render_figures);
    out.figures_rendered = figs.rendered;
    out.figures_note = figs.note;
    std::vector<page::Section> sections{summary_section(d, r),
                                        figure_section("fit", "Measured output and the models' responses", figs,
                                                       "The recorded output (grey points) and each model's response to the recorded input."),
                                        figure_section("residuals", "Residuals", figs, "Measured output minus each model's response."),
                                        parameters_section(r)};
    const std::string verdict =
        r.best ? fmt::format("Best model by {}: {} (fit {:.2f} %); plant.toml holds it with its ±2σ uncertainty.",
                             r.criterion == Criterion::aic ? "AIC" : "BIC", model_label(r.models[*r.best]), r.models[*r.best].fit_pct)
               : std::string("No model fitted these data with identifiable parameters: no plant.toml written.");
    page::write_pages(staging, fmt::format("Plant fit of {}", fs::path(d.record.file).filename().string()), "specloop fit report",
                      verdict, r.best.has_value(), sections, fmt::format("specloop {}", SPECLOOP_VERSION));
  });
  out.plant_written = !plant_text.empty();
  return out;
}

}  // namespace specloop
