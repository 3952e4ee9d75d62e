// The step response of a loop whose controller is sampled: the continuous plant, driven through
// a zero-order hold by the controller's difference equation at period Ts — exactly, the output
// measured between the samples too. This is the linear loop a spec with `controller.sample_time`
// describes (no saturation); the search and the designs' linear measurements use it instead of
// the continuous loop.
#pragma once

#include <string>
#include <vector>

#include "specloop/core/lti.hpp"
#include "specloop/sim/nonlinear.hpp"
#include "specloop/sim/response.hpp"

namespace specloop {

/// Exact simulation of the sampled loop r → difference equation → hold → plant → y (unity
/// negative feedback, the controller reading y at t = k·Ts, the loop at rest before t = 0 and
/// r[k] = amplitude for k ≥ 0).
///
/// Method. With the plant (A, B, C, D = 0) and the controller's difference equation (reference
/// and measurement numerators, denominator; `controller_difference_equation`) in transposed
/// direct form, the loop at the samples is the discrete system z[k+1] = M·z[k] + N·r, z = [x; s];
/// Φ = e^{A·Ts} and Γ come from one matrix exponential (the same routine as StepSimulator's,
/// through `zero_order_hold`). Its eigenvalues decide stability (all |λ| < 1) and the horizon
/// (the slowest mode decayed to 1e-4, as for the continuous loop); y∞ = the discrete loop's DC
/// gain times r, exact. Between samples the plant is stepped with Φ_h, Γ_h of a sub-step
/// h = Ts/M (M sub-steps per period while the loop's fast modes are alive, M chosen so that
/// h·|p| ≤ 1 for the plant's poles and the first segment has about 2000 samples); after them one
/// sample every q periods (q ≥ 1, about 2000 more samples; every period is still stepped). The
/// metrics are those of StepMetrics on the continuous output y(t): peaks, band exits and level
/// crossings are located on the cubic Hermite interpolant of the exact values and slopes
/// y′ = C·(A·x + B·u) at each interval's ends (the slope's left limit at a sample, where u
/// jumps), integrals by three-point Gauss–Legendre on it, split where e changes sign; the peak
/// effort is max |u[k]| over every period (u is piecewise constant).
class SampledStepSimulator {
 public:
  /// Simulates the step. `plant` must be single-input single-output and strictly proper.
  /// Returns unstable when a discrete closed-loop pole has |λ| >= 1 − 1e-12; zero_final_value
  /// when y∞ = 0; numerical_failure for a non-finite number or a horizon beyond kMaxPeriods
  /// periods (then `failure()` says which). `trace` receives the recorded samples.
  StepStatus simulate(const StateSpace& plant, const DifferenceEquation& controller, double amplitude,
                      double band_fraction, StepMetrics& metrics, StepTrace* trace = nullptr);

  /// The load response of the same loop: a step of `load` added to the plant's input at t = 0,
  /// the set point held at 0 (the controller's reference path unused), exactly as simulate does
  /// the step, run until the slowest mode has decayed to 1e-9. `metrics` is filled the way the
  /// continuous load loop (load_loop_into with this offset) fills it: effort_peak = max |y| on the
  /// interpolant, iae (and ise, itae) of |y − y∞|, settling_time_s = the last time
  /// |y − y∞| > band·|y∞ + offset| (empty if at the horizon), final_value = y∞. `offset` > 0 (the
  /// regulator's band scale: load_band). `trace` receives t, y and the plant's input u + load.
  StepStatus simulate_load(const StateSpace& plant, const DifferenceEquation& controller, double load, double offset,
                           double band, StepMetrics& metrics, StepTrace* trace = nullptr);

  /// The discrete closed-loop poles (z-plane) of the last call.
  const std::vector<Complex>& poles() const { return poles_; }
  /// How far outside the unit circle the outermost pole lies (0 when stable): the search's
  /// measure of instability.
  double instability() const;
  /// Horizon of the last successful call, s.
  double horizon_s() const { return horizon_; }
  /// The first segment of the last call's grid: its sample step and extent, s.
  double fine_step_s() const { return fine_step_; }
  double fine_until_s() const { return fine_until_; }
  /// Why the last call returned numerical_failure ("" otherwise).
  const std::string& failure() const { return failure_; }

  /// Controller periods per horizon, at most.
  static constexpr long kMaxPeriods = 1'000'000'000;

 private:
  std::vector<Complex> poles_;
  double horizon_ = 0.0, fine_step_ = 0.0, fine_until_ = 0.0;
  std::string failure_;
  StepStatus failed(const std::string& why) {  // numerical_failure, saying why
    failure_ = why;
    return StepStatus::numerical_failure;
  }
  // Workspace, reused between calls.
  std::vector<double> t_, y_, u_, slope_right_, slope_left_, shifted_;
};

/// Φ = e^{A·h} and Γ = ∫₀ʰ e^{A·τ} dτ·B, exactly (one exponential of the augmented matrix).
void zero_order_hold(const Eigen::MatrixXd& a, const Eigen::VectorXd& b, double h, Eigen::MatrixXd& phi,
                     Eigen::VectorXd& gamma);

}  // namespace specloop
