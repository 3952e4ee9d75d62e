// Fitting model kinds to a prepared test by nonlinear least squares (Ceres Solver): starting
// values, the fit, standard errors and correlations, the information criteria and the ranking.
#pragma once

#include <Eigen/Dense>

#include <optional>
#include <string>
#include <vector>

#include "specloop/fit/model.hpp"
#include "specloop/fit/test_data.hpp"

namespace specloop::fit {

enum class Criterion { aic, bic };
std::string_view criterion_name(Criterion c);  // "aic", "bic"

enum class FitStatus { ok, not_converged, not_identifiable };
std::string_view status_name(FitStatus s);  // "ok", "not_converged", "not_identifiable"

struct FitOptions {
  bool robust = false;  // Huber loss, scale 1.345·σ̂ (PreparedData::noise_sigma), by IRLS
  Criterion criterion = Criterion::aic;
};

/// A first-order-plus-delay guess k/(T s + 1)·e^(−L s).
struct FirstOrderGuess {
  double k = 0.0, T = 0.0, L = 0.0;
};

/// The two-point method of Smith (1972): t1, t2 where the step response reaches 28.3 % and
/// 63.2 % of its change; T = 1.5·(t2 − t1), L = t2 − T (times from the step). Single steps only
/// (std::nullopt otherwise, or when the response never reaches the levels).
std::optional<FirstOrderGuess> smith_two_point(const PreparedData& d);
/// The two-point method of Sundaresan and Krishnaswamy (1977): t1, t2 at 35.3 % and 85.3 %;
/// T = 0.67·(t2 − t1), L = 1.3·t1 − 0.29·t2. Single steps only.
std::optional<FirstOrderGuess> sundaresan_krishnaswamy(const PreparedData& d);
/// First-order ARX y_k = a·y_{k−1} + b·u_{k−1−d} by linear least squares on the deviations, the
/// whole sample delay d searched; converted: k = b/(1 − a), T = −h/ln a, L = d·h (h the median step).
/// With `integrating`, fitted to the output's first differences (the integrator's rate).
FirstOrderGuess arx_first_order(const PreparedData& d, bool integrating);

/// The start on any input: the ARX fit and a grid of T (24 values, log-spaced from the sample
/// step to the duration) × L (25 values, 0 … 0.4·duration), each simulated exactly with k and the
/// output offset by linear least squares; the candidate with the smallest sum of squares.
FirstOrderGuess least_squares_first_order(const PreparedData& d, bool integrating);

struct StartValues {
  std::vector<double> values;
  std::string method;  // "smith-two-point", "sundaresan-krishnaswamy", "least-squares"
  std::vector<std::vector<double>> alternatives;  // further starts, each solved 20 iterations (the lowest cost solved on)
};
/// Starting values for a kind (see estimate.cpp for each kind's conversion).
StartValues start_values(const PreparedData& d, const ModelShape& shape);

struct ModelFit {
  ModelShape shape;
  FitStatus status = FitStatus::not_converged;
  std::string message;  // why, when status is not ok; beside an ok fit a note (poorly determined parameters, ζ ≥ 1)
  std::vector<std::string> names;
  std::vector<double> values, start, std_errors;
  std::string start_method;
  bool have_covariance = false;
  Eigen::MatrixXd covariance, correlation;  // σ²-scaled, in `names` order
  double ssr = 0.0, sigma2 = 0.0, residual_rms = 0.0, fit_pct = 0.0, aic = 0.0, bic = 0.0;
  int iterations = 0;
  std::string termination;
  std::optional<int> rank;  // 1 = best by the criterion, among the ok fits
  double seconds = 0.0;
  std::vector<double> response;  // the model's output at the samples, absolute (y0 + c + deviation)
  // The output's operating point: y0 + c with c estimated with the model (when y0 was not given;
  // it then counts as a parameter in σ², AIC and BIC), and its standard error.
  double output_operating_point = 0.0, output_operating_point_std_error = 0.0;
  bool offset_estimated = false;
};

struct FitResult {
  Criterion criterion = Criterion::aic;
  bool robust = false;
  double robust_scale = 0.0;  // the Huber scale used (output units), when robust
  std::vector<ModelFit> models;
  std::optional<std::size_t> best;  // index into models
};

/// The identifiability rule on a fit with a covariance: the first parameter whose ±2σ interval
/// reaches zero or past it (2σ ≥ |value|: the data cannot tell whether that gain, lag, rate or
/// damping is there at all, and the interval could not become a plant range) — the message
/// naming it — or nothing. The delay L is exempt: L = 0 is a plant too, and its range is clipped
/// at 0 (plant_form).
std::optional<std::string> unidentified_parameter(const std::vector<std::string>& names, const std::vector<double>& values,
                                                  const std::vector<double>& std_errors);

/// Fits one kind. Never throws for a fit that fails: the status and message say so.
ModelFit fit_model(const PreparedData& d, const ModelShape& shape, const FitOptions& options);
/// Fits each kind, ranks the ok ones by the criterion (lower is better).
FitResult fit_models(const PreparedData& d, const std::vector<ModelShape>& shapes, const FitOptions& options);

}  // namespace specloop::fit
