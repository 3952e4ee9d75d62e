// The sampled controller's difference equation: the PID family's parallel law discretized term by
// term (integral by Tustin, filtered derivative by the backward difference), any other C(s) by the
// Tustin transform of the whole (nonlinear.hpp, "Sampled controller").
#include <cmath>
#include <numbers>
#include <utility>
#include <vector>

#include "sim/discretization.hpp"
#include "sim/nonlinear_run.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop {
namespace {

using nonlinear_loop::fail;
using nonlinear_loop::samples_parallel_law;

// Polynomials in w = z⁻¹, lowest power first.
std::vector<double> poly_mul(const std::vector<double>& a, const std::vector<double>& b) {
  std::vector<double> c(a.size() + b.size() - 1, 0.0);
  for (std::size_t i = 0; i < a.size(); ++i)
    for (std::size_t j = 0; j < b.size(); ++j) c[i + j] += a[i] * b[j];
  return c;
}
std::vector<double> poly_add(std::vector<double> a, const std::vector<double>& b, double scale) {
  if (a.size() < b.size()) a.resize(b.size(), 0.0);
  for (std::size_t i = 0; i < b.size(); ++i) a[i] += scale * b[i];
  return a;
}

// Tustin image of N(s)/D(s) (coefficients highest power first, proper): s = (2/Ts)(1 − w)/(1 + w)
// with w = z⁻¹; both multiplied by (1 + w)^n, n = deg D. Returns {num, den} with den[0] = 1.
std::pair<std::vector<double>, std::vector<double>> tustin_of(const Polynomial& num, const Polynomial& den, double ts,
                                                              double prewarp = 0.0) {
  const int n = den.degree();
  // s = k·(1 − w)/(1 + w): k = 2/Ts, or ω/tan(ω·Ts/2) prewarped at ω (the image's gain and phase at
  // ω are then the continuous ones at ω).
  const double scale = prewarp > 0.0 ? prewarp / std::tan(prewarp * ts / 2.0) : 2.0 / ts;
  auto image = [&](const Polynomial& p) {
    std::vector<double> out(static_cast<std::size_t>(n) + 1, 0.0);
    const int deg = p.degree();
    for (int i = 0; i <= deg; ++i) {  // the s^i term
      const double coef = p.coefficients[static_cast<std::size_t>(deg - i)] * std::pow(scale, i);
      std::vector<double> term{coef};
      for (int k = 0; k < i; ++k) term = poly_mul(term, {1.0, -1.0});
      for (int k = i; k < n; ++k) term = poly_mul(term, {1.0, 1.0});
      out = poly_add(out, term, 1.0);
    }
    return out;
  };
  std::vector<double> nz = image(num), dz = image(den);
  const double d0 = dz[0];
  if (!(std::abs(d0) > 0.0) || !std::isfinite(d0)) fail("controller: the Tustin image has a zero leading denominator coefficient");
  for (double& v : nz) v /= d0;
  for (double& v : dz) v /= d0;
  return {nz, dz};
}

}  // namespace

namespace nonlinear_loop {

bool samples_parallel_law(const Controller& controller) {
  const Structure st = controller.structure;
  return controller.parallel && st != Structure::lead && st != Structure::lag && st != Structure::lead_lag &&
         !controller.notch && !controller.measurement_filter;
}

bool samples_filtered_parallel_law(const Controller& controller) {
  return (controller.notch || controller.measurement_filter) && samples_parallel_law(without_filters(controller));
}

DiscreteSection measurement_filter_section(const MeasurementFilter& f, double ts) {
  std::vector<double> fd;
  measurement_filter_polynomials(f, fd);
  auto [num, den] = tustin_of(Polynomial({1.0}), Polynomial(fd), ts);
  return {num, den};
}

DiscreteSection notch_section(const NotchFilter& f, double ts) {
  if (!(f.frequency * ts < std::numbers::pi)) fail("notch frequency at or above the Nyquist frequency π/sample_time");
  double n3[3], d3[3];
  notch_polynomials(f, n3, d3);
  auto [num, den] = tustin_of(Polynomial({n3[0], n3[1], n3[2]}), Polynomial({d3[0], d3[1], d3[2]}), ts, f.frequency);
  return {num, den};
}

}  // namespace nonlinear_loop

DifferenceEquation controller_difference_equation(const Controller& controller, double ts, double setpoint_weight,
                                                  double derivative_weight) {
  if (!(std::isfinite(ts) && ts > 0.0)) fail("sample_time_s: expected a finite number > 0");
  if (controller.notch || controller.measurement_filter) {
    // u = N·(C_r·r − C·F·y): the structure's two paths (Tustin of its C_r and C over one
    // denominator), the filter by Tustin, the notch by Tustin prewarped at its frequency.
    const Controller bare = without_filters(controller);
    const TransferFunction cr = reference_path(bare, setpoint_weight, derivative_weight);
    auto [rn, rd] = tustin_of(cr.numerator, cr.denominator, ts);
    auto [mn, md] = tustin_of(bare.transfer.numerator, bare.transfer.denominator, ts);
    (void)rd;  // cr shares C's denominator: the same image
    DifferenceEquation eq;
    eq.sample_time_s = ts;
    eq.reference_numerator = rn;
    eq.measurement_numerator = mn;
    eq.denominator = md;
    eq.method = "C_r(s) and C(s) by Tustin (bilinear) over one denominator";
    if (controller.measurement_filter) {
      const auto [fzn, fzd] = nonlinear_loop::measurement_filter_section(*controller.measurement_filter, ts);
      eq.measurement_numerator = poly_mul(eq.measurement_numerator, fzn);
      eq.reference_numerator = poly_mul(eq.reference_numerator, fzd);
      eq.denominator = poly_mul(eq.denominator, fzd);
      eq.method += "; measurement filter F(s) by Tustin";
    }
    if (controller.notch) {
      const auto [nzn, nzd] = nonlinear_loop::notch_section(*controller.notch, ts);
      eq.measurement_numerator = poly_mul(eq.measurement_numerator, nzn);
      eq.reference_numerator = poly_mul(eq.reference_numerator, nzn);
      eq.denominator = poly_mul(eq.denominator, nzd);
      eq.method += "; notch N(s) by Tustin prewarped at its frequency ωn";
    }
    return eq;
  }
  DifferenceEquation eq;
  eq.sample_time_s = ts;
  if (samples_parallel_law(controller)) {
    const ParallelGains& g = *controller.parallel;
    const double a_d = g.kd != 0.0 ? g.filter_time / (g.filter_time + ts) : 0.0;
    const std::vector<double> den_i = g.ki != 0.0 ? std::vector<double>{1.0, -1.0} : std::vector<double>{1.0};
    const std::vector<double> den_d = g.kd != 0.0 ? std::vector<double>{1.0, -a_d} : std::vector<double>{1.0};
    const std::vector<double> den = poly_mul(den_i, den_d);
    auto numerator = [&](double pw, double dw) {
      std::vector<double> n = poly_add({}, den, g.kp * pw);
      if (g.ki != 0.0) n = poly_add(n, poly_mul({1.0, 1.0}, den_d), g.ki * ts / 2.0);
      if (g.kd != 0.0) n = poly_add(n, poly_mul({1.0, -1.0}, den_i), g.kd / (g.filter_time + ts) * dw);
      return n;
    };
    eq.reference_numerator = numerator(setpoint_weight, derivative_weight);
    eq.measurement_numerator = numerator(1.0, 1.0);
    eq.denominator = den;
    eq.method = "proportional: direct; integral: Tustin (bilinear); derivative: backward difference on the filtered term Kd*s/(Tf*s + 1)";
  } else {
    const TransferFunction& tf = controller.transfer;
    if (!tf.is_proper()) fail("controller: C(s) must be proper for a sampled controller");
    auto [nz, dz] = tustin_of(tf.numerator, tf.denominator, ts);
    eq.reference_numerator = nz;
    eq.measurement_numerator = nz;
    eq.denominator = dz;
    eq.method = "Tustin (bilinear) transform of C(s), acting on e = r - y";
  }
  return eq;
}

}  // namespace specloop
