// The least-squares fit of one model kind with Ceres Solver (estimate.hpp): the residuals of the
// exact simulated response, central-difference Jacobians, bounds that keep the parameters in
// their domain, the σ²-scaled covariance, the identifiability check and the ranking.
#include "specloop/fit/estimate.hpp"

#include <ceres/ceres.h>
#include <fmt/format.h>
#include <glog/logging.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <numeric>

namespace specloop::fit {

namespace {

// Residuals y_k − ŷ_k(θ) of one kind on the record; the Jacobian by central differences, each
// parameter's step 1e-6·max(|θ_i|, its typical size) (the simulation is exact to rounding, so the
// derivative's error is the O(step²) truncation: ~1e-12 relative).
class ResponseResiduals final : public ceres::CostFunction {
 public:
  // With `offset`, a second parameter block: the output's operating point's correction c (the
  // model's output is y0 + c + response), estimated with the model so that the noise of the
  // leading stretch's mean does not bias the gain.
  ResponseResiduals(const PreparedData& d, ModelShape shape, std::vector<double> typical, bool offset)
      : d_(d), shape_(shape), typical_(std::move(typical)), offset_(offset), sim_(d.record.t, d.du) {
    set_num_residuals(static_cast<int>(d.dy.size()));
    mutable_parameter_block_sizes()->push_back(static_cast<int>(typical_.size()));
    if (offset_) mutable_parameter_block_sizes()->push_back(1);
  }

  bool Evaluate(double const* const* parameters, double* residuals, double** jacobians) const override {
    const std::size_t p = typical_.size(), n = d_.dy.size();
    std::vector<double> theta(parameters[0], parameters[0] + p);
    const double c = offset_ ? parameters[1][0] : 0.0;
    if (!response(theta, work_)) return false;
    for (std::size_t k = 0; k < n; ++k) residuals[k] = weight(k) * (d_.dy[k] - c - work_[k]);
    if (jacobians == nullptr) return true;
    if (offset_ && jacobians[1] != nullptr)
      for (std::size_t k = 0; k < n; ++k) jacobians[1][k] = -weight(k);
    if (jacobians[0] == nullptr) return true;
    for (std::size_t i = 0; i < p; ++i) {
      const double step = 1e-6 * std::max(std::abs(theta[i]), typical_[i]);
      std::vector<double> plus = theta, minus = theta;
      plus[i] += step;
      minus[i] -= step;
      if (!response(plus, up_) || !response(minus, down_)) return false;
      const double width = plus[i] - minus[i];
      for (std::size_t k = 0; k < n; ++k) jacobians[0][k * p + i] = -weight(k) * (up_[k] - down_[k]) / width;
    }
    return true;
  }

  /// Square roots of per-sample weights (IRLS for the Huber loss); empty = all 1.
  void set_weights(std::vector<double> sqrt_weights) { sqrt_w_ = std::move(sqrt_weights); }

  bool response(const std::vector<double>& theta, std::vector<double>& out) const {
    sim_.simulate(realize(shape_, theta), out);
    return std::all_of(out.begin(), out.end(), [](double v) { return std::isfinite(v); });
  }

 private:
  const PreparedData& d_;
  ModelShape shape_;
  double weight(std::size_t k) const { return sqrt_w_.empty() ? 1.0 : sqrt_w_[k]; }
  std::vector<double> typical_;
  std::vector<double> sqrt_w_;
  bool offset_ = false;
  mutable ResponseSimulator sim_;
  mutable std::vector<double> work_, up_, down_;
};

// Lower (and upper) bounds per parameter: time constants and rates positive, ζ in [1e-3, 20],
// the delay in [0, 0.9·duration]; the gain free.
void set_bounds(ceres::Problem& problem, double* block, const ModelShape& shape, const std::vector<std::string>& names,
                double h, double duration) {
  for (std::size_t i = 0; i < names.size(); ++i) {
    const std::string& name = names[i];
    const int at = static_cast<int>(i);
    if (name == "k") continue;
    if (name == "L") {
      problem.SetParameterLowerBound(block, at, 0.0);
      problem.SetParameterUpperBound(block, at, 0.9 * duration);
    } else if (name == "zeta") {
      problem.SetParameterLowerBound(block, at, 1e-3);
      problem.SetParameterUpperBound(block, at, 20.0);
    } else if (name[0] == 'T') {
      problem.SetParameterLowerBound(block, at, 1e-3 * h);
      problem.SetParameterUpperBound(block, at, 1e3 * duration);
    } else {  // wn, p_i, z_i: rates
      problem.SetParameterLowerBound(block, at, 1e-3 / duration);
      problem.SetParameterUpperBound(block, at, 1e3 / h);
    }
  }
  (void)shape;
}

double sum_squares(const std::vector<double>& v) {
  return std::accumulate(v.begin(), v.end(), 0.0, [](double a, double b) { return a + b * b; });
}

// Levenberg–Marquardt (Ceres's default trust region) on a dense QR, tolerances tight enough for
// a noise-free record to give its parameters back to 1e-6.
ceres::Solver::Options solver_options() {
  ceres::Solver::Options so;
  so.linear_solver_type = ceres::DENSE_QR;
  so.max_num_iterations = 200;
  so.function_tolerance = 1e-14;
  so.gradient_tolerance = 1e-14;
  so.parameter_tolerance = 1e-12;
  so.logging_type = ceres::SILENT;
  so.num_threads = 1;
  return so;
}

// An ok fit's parameters whose ±2σ interval is wider than the value itself (4σ > |value|) but clear
// of zero: named in the message as poorly determined (the delay too), or "".
std::string poorly_determined(const std::vector<std::string>& names, const std::vector<double>& values,
                              const std::vector<double>& std_errors) {
  std::string wide;
  for (std::size_t i = 0; i < names.size(); ++i)
    if (4.0 * std_errors[i] > std::abs(values[i]))
      wide += fmt::format("{}{} = {:.4g} ± {:.4g}", wide.empty() ? "" : ", ", names[i], values[i], 2.0 * std_errors[i]);
  return wide.empty() ? "" : "poorly determined by these data (a ±2σ interval wider than the value itself): " + wide;
}

// The σ²-scaled covariance at the estimate (ceres::Covariance, DENSE_SVD; a rank-deficient
// Jacobian is refused, not pseudo-inverted), the correlations, and the identifiability verdict:
// status ok, or not_identifiable (rank deficiency, or unidentified_parameter).
void covariance_and_identifiability(ceres::Problem& problem, std::vector<double>& theta, double& c, bool offset,
                                    ModelFit& fit) {
  const std::size_t p = theta.size();
  ceres::Covariance::Options co;
  co.algorithm_type = ceres::DENSE_SVD;
  co.num_threads = 1;
  ceres::Covariance covariance(co);
  std::vector<std::pair<const double*, const double*>> blocks{{theta.data(), theta.data()}};
  if (offset) blocks.emplace_back(&c, &c);
  if (!covariance.Compute(blocks, &problem)) {
    fit.status = FitStatus::not_identifiable;
    fit.message = "the Jacobian at the estimate is rank deficient: these data cannot tell the parameters apart";
  } else {
    Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> cov(p, p);
    covariance.GetCovarianceBlock(theta.data(), theta.data(), cov.data());
    fit.covariance = cov * fit.sigma2;
    if (offset) {
      double cc = 0.0;
      covariance.GetCovarianceBlock(&c, &c, &cc);
      fit.output_operating_point_std_error = std::sqrt(std::max(0.0, cc * fit.sigma2));
    }
    fit.have_covariance = true;
    fit.std_errors.resize(p);
    fit.correlation = Eigen::MatrixXd::Identity(static_cast<Eigen::Index>(p), static_cast<Eigen::Index>(p));
    for (std::size_t i = 0; i < p; ++i) fit.std_errors[i] = std::sqrt(std::max(0.0, fit.covariance(i, i)));
    for (std::size_t i = 0; i < p; ++i)
      for (std::size_t j = 0; j < p; ++j)
        if (i != j && fit.std_errors[i] > 0 && fit.std_errors[j] > 0)
          fit.correlation(i, j) = fit.covariance(i, j) / (fit.std_errors[i] * fit.std_errors[j]);
    fit.status = FitStatus::ok;
    if (auto why = unidentified_parameter(fit.names, theta, fit.std_errors)) {
      fit.status = FitStatus::not_identifiable;
      fit.message = std::move(*why);
    } else {
      fit.message = poorly_determined(fit.names, theta, fit.std_errors);
    }
  }
}

// Solves from the start and each alternative for at most 20 iterations and leaves the parameters
// at the lowest final cost (unchanged when no solve was usable).
template <class Solve>
void best_of_starts(const StartValues& sv, std::vector<double>& theta, double& c, double duration,
                    const ceres::Solver::Summary& summary, const Solve& solve) {
  const std::size_t last = theta.size() - 1;
  std::vector<double> best_theta;
  double best_c = 0.0, best_cost = INFINITY;
  std::vector<std::vector<double>> starts{sv.values};
  starts.insert(starts.end(), sv.alternatives.begin(), sv.alternatives.end());
  for (const auto& start : starts) {
    theta = start;
    theta[last] = std::clamp(theta[last], 0.0, 0.9 * duration);
    c = 0.0;
    solve(20);
    if (summary.IsSolutionUsable() && summary.final_cost < best_cost) {
      best_cost = summary.final_cost;
      best_theta = theta;
      best_c = c;
    }
  }
  if (!best_theta.empty()) {
    theta = best_theta;
    c = best_c;
  }
}

// The delay's neighbouring minima: on a sampled record the sum of squares has a local minimum
// about every sample interval of L (the delayed switching instants cross the samples), and a
// solve can stop in the one beside the best. Re-solves from L ± h and L ± 2h (h the median step;
// 20 iterations each), keeps the lowest cost and solves on from it.
template <class Solve>
void polish_delay(std::vector<double>& theta, double& c, double h, double duration, const ceres::Solver::Summary& summary,
                  const Solve& solve) {
  if (!summary.IsSolutionUsable()) return;
  const std::size_t at = theta.size() - 1;
  const std::vector<double> found = theta;
  const double found_c = c;
  std::vector<double> best = found;
  double best_c = found_c, best_cost = summary.final_cost;
  for (double shift : {-2.0 * h, -h, h, 2.0 * h}) {
    theta = found;
    c = found_c;
    theta[at] = std::clamp(found[at] + shift, 0.0, 0.9 * duration);
    if (theta[at] == found[at]) continue;
    solve(20);
    if (summary.IsSolutionUsable() && summary.final_cost < best_cost * (1.0 - 1e-12)) {
      best_cost = summary.final_cost;
      best = theta;
      best_c = c;
    }
  }
  theta = best;
  c = best_c;
  solve(0);
}

}  // namespace

std::optional<std::string> unidentified_parameter(const std::vector<std::string>& names, const std::vector<double>& values,
                                                  const std::vector<double>& std_errors) {
  for (std::size_t i = 0; i < names.size(); ++i) {
    if (names[i] == "L") continue;
    const double half = 2.0 * std_errors[i];
    if (!(half < std::abs(values[i])))
      return fmt::format("{} = {:.4g} ± {:.4g} (2σ): its interval [{:.4g}, {:.4g}] reaches zero, so these data cannot tell "
                         "whether it is there at all; not identifiable from these data (a model with fewer parameters, a "
                         "longer test or less noise)", names[i], values[i], half, values[i] - half, values[i] + half);
  }
  return std::nullopt;
}

std::string_view criterion_name(Criterion c) { return c == Criterion::aic ? "aic" : "bic"; }

std::string_view status_name(FitStatus s) {
  switch (s) {
    case FitStatus::ok: return "ok";
    case FitStatus::not_converged: return "not_converged";
    case FitStatus::not_identifiable: return "not_identifiable";
  }
  return "?";
}

ModelFit fit_model(const PreparedData& d, const ModelShape& shape, const FitOptions& options) {
  // Ceres logs a rank-deficient covariance as an error on stderr; the fit reports it as a status.
  static const bool quiet = [] {
    FLAGS_minloglevel = google::GLOG_FATAL;
    return true;
  }();
  (void)quiet;
  const auto started = std::chrono::steady_clock::now();
  ModelFit fit;
  fit.shape = shape;
  fit.names = parameter_names(shape);
  const StartValues sv = start_values(d, shape);
  fit.start = sv.values;
  fit.start_method = sv.method;
  const std::size_t p = fit.names.size(), n = d.dy.size();
  const double h = d.median_dt, duration = d.record.t.back() - d.record.t.front();

  std::vector<double> typical(p);
  for (std::size_t i = 0; i < p; ++i) typical[i] = fit.names[i] == "L" ? h : std::max(std::abs(sv.values[i]), 1e-12);
  std::vector<double> theta = sv.values;
  // Keep the start inside the bounds.
  theta[p - 1] = std::clamp(theta[p - 1], 0.0, 0.9 * duration);

  ceres::Problem::Options problem_options;
  problem_options.cost_function_ownership = ceres::TAKE_OWNERSHIP;
  ceres::Problem problem(problem_options);
  const bool offset = !d.y0_given;
  double c = 0.0;
  auto* cost = new ResponseResiduals(d, shape, typical, offset);
  if (offset) problem.AddResidualBlock(cost, nullptr, theta.data(), &c);
  else problem.AddResidualBlock(cost, nullptr, theta.data());
  set_bounds(problem, theta.data(), shape, fit.names, h, duration);

  ceres::Solver::Options so = solver_options();
  const int default_iterations = so.max_num_iterations;
  ceres::Solver::Summary summary;
  int iterations = 0;
  // Solves from the current parameters, at most `max_iterations` (0: the default) iterations.
  const auto solve = [&](int max_iterations = 0) {
    so.max_num_iterations = max_iterations > 0 ? max_iterations : default_iterations;
    ceres::Solve(so, &problem, &summary);
    iterations += static_cast<int>(summary.iterations.size()) - 1;
  };
  // Alternative starts (poles-zeros): each solved for at most 20 iterations, the lowest final
  // cost kept and solved on to convergence below.
  if (!sv.alternatives.empty()) best_of_starts(sv, theta, c, duration, summary, solve);
  solve();
  polish_delay(theta, c, h, duration, summary, solve);
  // The Huber loss by iteratively reweighted least squares: weight min(1, δ/|r_k|) per sample
  // (Ceres's loss functions act on a whole residual block, here all samples at once).
  const double delta = 1.345 * d.noise_sigma;
  const bool robust = options.robust && delta > 0.0;
  if (robust) {
    std::vector<double> dev0, w(n, 1.0);
    for (int round = 0; round < 30; ++round) {
      if (!cost->response(theta, dev0)) break;
      double change = 0.0;
      for (std::size_t k = 0; k < n; ++k) {
        const double r = std::abs(d.dy[k] - c - dev0[k]);
        const double next = r <= delta ? 1.0 : std::sqrt(delta / r);
        change = std::max(change, std::abs(next - w[k]));
        w[k] = next;
      }
      if (change < 1e-6 && round > 0) break;
      cost->set_weights(w);
      solve();
    }
  }
  fit.iterations = iterations;
  fit.termination = summary.message;

  // second-order-delay: T1 ≥ T2 (the model is symmetric in them).
  if (shape.kind == ModelKind::second_order_delay && theta[2] > theta[1]) std::swap(theta[1], theta[2]);
  // poles-zeros: poles and zeros each in ascending rate (the model is symmetric in their order).
  if (shape.kind == ModelKind::poles_zeros) {
    const auto np = static_cast<std::ptrdiff_t>(shape.poles), nz = static_cast<std::ptrdiff_t>(shape.zeros);
    std::sort(theta.begin() + 1, theta.begin() + 1 + np);
    std::sort(theta.begin() + 1 + np, theta.begin() + 1 + np + nz);
  }
  fit.values = theta;

  std::vector<double> dev;
  const bool finite = cost->response(theta, dev);
  fit.response.resize(n);
  std::vector<double> residual(n);
  for (std::size_t k = 0; k < n; ++k) {
    fit.response[k] = d.y0 + c + dev[k];
    residual[k] = d.dy[k] - c - dev[k];
  }
  fit.output_operating_point = d.y0 + c;
  fit.offset_estimated = offset;
  const std::size_t q = p + (offset ? 1 : 0);  // parameters estimated
  fit.ssr = sum_squares(residual);
  const double mean_y = std::accumulate(d.record.y.begin(), d.record.y.end(), 0.0) / double(n);
  double sst = 0.0;
  for (double y : d.record.y) sst += (y - mean_y) * (y - mean_y);
  fit.residual_rms = std::sqrt(fit.ssr / double(n));
  fit.fit_pct = 100.0 * (1.0 - std::sqrt(fit.ssr) / std::sqrt(sst));
  fit.sigma2 = fit.ssr / double(n - q);
  if (robust) {
    // Under the Huber loss the outliers the loss discounts would inflate SSR/(N − p): the scale
    // is the residuals' MAD instead, 1.4826·median|r − median r| (σ under Gaussian noise; common
    // practice), and the covariance is Ceres's on the robustified Jacobian.
    std::vector<double> a = residual;
    const auto mid = a.begin() + static_cast<std::ptrdiff_t>(n / 2);
    std::nth_element(a.begin(), mid, a.end());
    const double med = *mid;
    for (double& v : a) v = std::abs(v - med);
    std::nth_element(a.begin(), mid, a.end());
    fit.sigma2 = std::pow(1.4826 * *mid, 2) * double(n) / double(n - q);
  }
  // ln(SSR/N) with SSR/N floored at (1e-15·max|y|)², so that a noise-free fit stays finite.
  double ymax = 0.0;
  for (double y : d.record.y) ymax = std::max(ymax, std::abs(y));
  const double mse = std::max(fit.ssr / double(n), std::pow(1e-15 * std::max(ymax, 1e-300), 2));
  fit.aic = double(n) * std::log(mse) + 2.0 * double(q);
  fit.bic = double(n) * std::log(mse) + double(q) * std::log(double(n));

  if (!finite || !summary.IsSolutionUsable() || summary.termination_type != ceres::CONVERGENCE) {
    fit.status = FitStatus::not_converged;
    fit.message = !finite ? "the model's response is not finite at the last estimate"
                          : fmt::format("the solver stopped without converging after {} iteration(s): {}", fit.iterations,
                                        summary.message);
  } else {
    covariance_and_identifiability(problem, theta, c, offset, fit);
  }
  // underdamped-delay at ζ ≥ 1 is the two-lag model: say so beside an ok fit (the ranking ties them).
  if (shape.kind == ModelKind::underdamped_delay && fit.status == FitStatus::ok && theta[2] >= 1.0) {
    const double root = std::sqrt(theta[2] * theta[2] - 1.0);
    fit.message = fmt::format("zeta = {:.4g} ≥ 1: no oscillation — the response of second-order-delay with T1 = {:.6g}, "
                              "T2 = {:.6g}{}", theta[2], 1.0 / (theta[1] * (theta[2] - root)),
                              1.0 / (theta[1] * (theta[2] + root)), fit.message.empty() ? "" : "; " + fit.message);
  }
  fit.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  return fit;
}

FitResult fit_models(const PreparedData& d, const std::vector<ModelShape>& shapes, const FitOptions& options) {
  FitResult r;
  r.criterion = options.criterion;
  r.robust = options.robust;
  r.robust_scale = options.robust ? 1.345 * d.noise_sigma : 0.0;
  for (const ModelShape& s : shapes) r.models.push_back(fit_model(d, s, options));
  std::vector<std::size_t> order;
  for (std::size_t i = 0; i < r.models.size(); ++i)
    if (r.models[i].status == FitStatus::ok) order.push_back(i);
  const auto score = [&](std::size_t i) { return options.criterion == Criterion::aic ? r.models[i].aic : r.models[i].bic; };
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return score(a) < score(b); });
  // Two fits whose criteria agree to rounding (1e-9 relative + 1e-6) are the same response — an
  // underdamped-delay at ζ ≥ 1 and second-order-delay — and keep the order they were asked in
  // (the default set lists the simpler kinds first), not rounding's.
  const auto tied = [&](std::size_t a, std::size_t b) {
    return std::abs(score(a) - score(b)) <= 1e-9 * std::max(std::abs(score(a)), std::abs(score(b))) + 1e-6;
  };
  for (std::size_t k = 1; k < order.size(); ++k)
    for (std::size_t j = k; j > 0 && order[j] < order[j - 1] && tied(order[j], order[j - 1]); --j) std::swap(order[j], order[j - 1]);
  for (std::size_t k = 0; k < order.size(); ++k) r.models[order[k]].rank = static_cast<int>(k + 1);
  if (!order.empty()) r.best = order.front();
  return r;
}

}  // namespace specloop::fit
