// The fitted model as a spec plant with its uncertainty (plant_form.hpp).
#include "specloop/fit/plant_form.hpp"

#include <fmt/format.h>

#include <cmath>
#include <functional>

namespace specloop::fit {

namespace {

// The spec's plant as a function of the parameters: gain, delay, and one value per numeric key.
struct KeyFunction {
  std::string key;
  std::function<double(const std::vector<double>&)> value;
  enum class Sign { any, positive, negative, nonnegative, keep } sign = Sign::any;
};

std::vector<KeyFunction> key_functions(const ModelShape& shape, const std::vector<double>& theta) {
  using S = KeyFunction::Sign;
  std::vector<KeyFunction> f;
  switch (shape.kind) {
    case ModelKind::first_order_delay:
      f.push_back({"plant.gain", [](const auto& p) { return p[0] / p[1]; }, S::keep});
      f.push_back({"plant.poles[0]", [](const auto& p) { return -1.0 / p[1]; }, S::negative});
      break;
    case ModelKind::second_order_delay:
      f.push_back({"plant.gain", [](const auto& p) { return p[0] / (p[1] * p[2]); }, S::keep});
      f.push_back({"plant.poles[0]", [](const auto& p) { return -1.0 / p[1]; }, S::negative});
      f.push_back({"plant.poles[1]", [](const auto& p) { return -1.0 / p[2]; }, S::negative});
      break;
    case ModelKind::underdamped_delay:
      f.push_back({"plant.gain", [](const auto& p) { return p[0] * p[1] * p[1]; }, S::keep});
      if (theta[2] < 1.0) {
        f.push_back({"plant.poles[0][0]", [](const auto& p) { return -p[2] * p[1]; }, S::negative});
        f.push_back({"plant.poles[0][1]", [](const auto& p) { return p[1] * std::sqrt(std::max(0.0, 1.0 - p[2] * p[2])); }, S::positive});
      } else {
        f.push_back({"plant.poles[0]", [](const auto& p) { return -p[1] * (p[2] - std::sqrt(std::max(0.0, p[2] * p[2] - 1.0))); }, S::negative});
        f.push_back({"plant.poles[1]", [](const auto& p) { return -p[1] * (p[2] + std::sqrt(std::max(0.0, p[2] * p[2] - 1.0))); }, S::negative});
      }
      break;
    case ModelKind::integrator_delay:
      f.push_back({"plant.gain", [](const auto& p) { return p[0] / p[1]; }, S::keep});
      f.push_back({"plant.poles[0]", [](const auto&) { return 0.0; }, S::any});
      f.push_back({"plant.poles[1]", [](const auto& p) { return -1.0 / p[1]; }, S::negative});
      break;
    case ModelKind::poles_zeros: {
      const int n = shape.poles, m = shape.zeros;
      f.push_back({"plant.gain", [n, m](const auto& p) {
                     double g = p[0];
                     for (int i = 0; i < n; ++i) g *= p[static_cast<std::size_t>(1 + i)];
                     for (int j = 0; j < m; ++j) g /= p[static_cast<std::size_t>(1 + n + j)];
                     return g;
                   }, S::keep});
      for (int i = 0; i < n; ++i)
        f.push_back({fmt::format("plant.poles[{}]", i), [i](const auto& p) { return -p[static_cast<std::size_t>(1 + i)]; }, S::negative});
      for (int j = 0; j < m; ++j)
        f.push_back({fmt::format("plant.zeros[{}]", j), [n, j](const auto& p) { return -p[static_cast<std::size_t>(1 + n + j)]; },
                     S::negative});
      break;
    }
  }
  f.push_back({"plant.delay", [](const auto& p) { return p.back(); }, S::nonnegative});
  return f;
}

// σ of g(θ) by the delta method: ∇g·Σ·∇g, ∇g by central differences.
double delta_sigma(const KeyFunction& g, const std::vector<double>& theta, const Eigen::MatrixXd& cov) {
  const std::size_t p = theta.size();
  Eigen::VectorXd grad(static_cast<Eigen::Index>(p));
  for (std::size_t i = 0; i < p; ++i) {
    const double h = 1e-6 * std::max(std::abs(theta[i]), 1e-12);
    auto plus = theta, minus = theta;
    plus[i] += h;
    minus[i] -= h;
    grad(static_cast<Eigen::Index>(i)) = (g.value(plus) - g.value(minus)) / (plus[i] - minus[i]);
  }
  return std::sqrt(std::max(0.0, grad.dot(cov * grad)));
}

std::string number(double v) { return fmt::format("{:.12g}", v); }

std::string root_text(const SpecRoot& r) { return r.pair ? fmt::format("[{}, {}]", number(r.re), number(r.im)) : number(r.re); }

}  // namespace

PlantForm plant_form(const ModelFit& fit) {
  PlantForm form;
  const auto& p = fit.values;
  const auto fns = key_functions(fit.shape, p);
  for (const KeyFunction& g : fns) {
    const double v = g.value(p);
    if (g.key == "plant.gain") form.gain = v;
    else if (g.key == "plant.delay") form.delay = v;
    else if (g.key.starts_with("plant.poles[")) {
      if (g.key.ends_with("][0]")) form.poles.push_back({v, 0.0, true});
      else if (g.key.ends_with("][1]")) form.poles.back().im = v;
      else form.poles.push_back({v, 0.0, false});
    } else if (g.key.starts_with("plant.zeros[")) {
      form.zeros.push_back({v, 0.0, false});
    }
    if (!fit.have_covariance) continue;
    const double s = delta_sigma(g, p, fit.covariance);
    if (!(s > 0.0) || !std::isfinite(s)) continue;
    KeyRange r{g.key, v, v - 2.0 * s, v + 2.0 * s, ""};
    using S = KeyFunction::Sign;
    const auto clip_low = [&](double at, const char* why) {
      if (r.low < at) {
        r.note = fmt::format("low end {:.6g} clipped to {:.6g}: {}", r.low, at, why);
        r.low = at;
      }
    };
    const auto clip_high = [&](double at, const char* why) {
      if (r.high > at) {
        r.note = fmt::format("high end {:.6g} clipped to {:.6g}: {}", r.high, at, why);
        r.high = at;
      }
    };
    if (g.sign == S::nonnegative) clip_low(0.0, "a delay is ≥ 0");
    else if (g.sign == S::positive) clip_low(1e-3 * v, "an imaginary part stays > 0");
    else if (g.sign == S::negative) clip_high(1e-3 * v, "the pole stays stable as fitted");
    else if (g.sign == S::keep) {
      if (v > 0) clip_low(1e-3 * v, "a gain's range may not contain 0");
      else clip_high(1e-3 * v, "a gain's range may not contain 0");
    }
    if (r.high > r.low) form.ranges.push_back(r);
  }
  // The spec takes a delay of 0 or ≥ about 5.1e-5 (README, plant.delay): a smaller fitted delay is 0.
  if (form.delay < kMinSpecDelay) {
    form.delay = 0.0;
    for (auto it = form.ranges.begin(); it != form.ranges.end(); ++it)
      if (it->key == "plant.delay") {
        it->nominal = 0.0;
        it->low = 0.0;
        if (it->high < kMinSpecDelay) form.ranges.erase(it);
        break;
      }
  }
  return form;
}

std::string plant_toml(const PlantForm& form, const ModelFit& fit, const std::string& source) {
  std::string s = fmt::format(
      "# Plant fitted by `specloop fit` from {} — model {} (fit {:.2f} %, residual RMS {:.6g}).\n"
      "# Use it with: specloop design SPEC --plant THIS_FILE (its [plant] and [uncertainty] replace the spec's).\n"
      "# Times are in the recorded test's time unit; the spec's must be the same. The [uncertainty] ranges\n"
      "# are the fit's ±2σ intervals (σ from the residual variance) mapped to the spec's keys.\n",
      source, kind_name(fit.shape.kind), fit.fit_pct, fit.residual_rms);
  for (std::size_t i = 0; i < fit.names.size(); ++i)
    s += fmt::format("#   {} = {:.8g}{}\n", fit.names[i], fit.values[i],
                     fit.have_covariance ? fmt::format(" ± {:.4g} (1σ)", fit.std_errors[i]) : "");
  s += "\n[plant]\n";
  if (!form.zeros.empty()) {
    std::string z;
    for (const auto& r : form.zeros) z += (z.empty() ? "" : ", ") + root_text(r);
    s += fmt::format("zeros = [{}]\n", z);
  }
  std::string poles;
  for (const auto& r : form.poles) poles += (poles.empty() ? "" : ", ") + root_text(r);
  s += fmt::format("poles = [{}]\ngain = {}\ndelay = {}\n", poles, number(form.gain), number(form.delay));
  if (!form.ranges.empty()) {
    s += "\n[uncertainty]\n";
    for (const KeyRange& r : form.ranges)
      s += fmt::format("\"{}\" = [{}, {}]{}\n", r.key, number(r.low), number(r.high), r.note.empty() ? "" : "  # " + r.note);
  }
  return s;
}

}  // namespace specloop::fit
