// The step metrics of one exact step simulation (private to the sim layer; step_metrics.cpp):
// what StepSimulator::simulate hands over once the samples are written, and the measurement.
#pragma once

#include <Eigen/Dense>

#include "sim/step_kernels.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/sim/response.hpp"

namespace specloop::exact_step {

/// The sample times of a two-segment grid: k·h₁ on the fine segment, T₁ + (k − F)·h₂ after it
/// (F = fine intervals); computed from the grid, never stored.
struct SampleTimes {
  int last_fine;  // the last sample of the fine segment
  double step, coarse_step, t_switch;
  SampleTimes(const TimeGrid& grid, int count)
      : last_fine(grid.coarse_intervals > 0 ? grid.fine_intervals : count - 1),
        step(grid.step_s),
        coarse_step(grid.coarse_step_s),
        t_switch(last_fine * grid.step_s) {}
  double operator()(int k) const { return k <= last_fine ? k * step : t_switch + (k - last_fine) * coarse_step; }
};

/// One exact step simulation as the metrics read it.
struct SimulatedStep {
  const StateSpace& loop;  // the closed loop: outputs y (row 0) and u (row 1)
  double amplitude = 0.0;
  double band_fraction = 0.0;
  double y_inf = 0.0;
  const double* y = nullptr;  // `count` samples of y and u; y[count] readable (the scan reads it)
  const double* u = nullptr;  // nullptr when layout.effort_from_y: u_k = layout.effort(y_k)
  KernelLayout layout;
  int count = 0;
  TimeGrid grid;
  SampleTimes time;
  StoredStates states;               // the state at every sample (StoredStates::state)
  const double (*basis)[8] = nullptr;  // modal: x − x∞ = V·w, the stored states being w (else nullptr)
  const Eigen::MatrixXd& outputs;    // [C_y; C_y·A; C_u; C_u·A]: rows 0, 2 on x, the slope rows 1, 3 on the stored states
  const Eigen::VectorXd& out_const;  // their constants: D_y·r, C_y·B·r, D_u·r, C_u·B·r
  double* scratch_a = nullptr;       // two vectors of n entries, overwritten (state_rate)
  double* scratch_b = nullptr;
  ScanBits bits;                     // room for the scan's masks, (count + 63)/64 words each
  double fastest_pole = 0.0;         // the largest |pole| of the loop
};

/// The metrics of the step into `m` (which holds final_value and steady_state_error already):
/// extremes exact where they decide something, crossings and band exits on the cubic Hermite
/// interpolant or the exact series, integrals with the Hermite end corrections (DEVELOPERS.md,
/// "Metrics without per-metric passes" and below). ok, or numerical_failure for a non-finite
/// sample extreme or metric.
StepStatus measure_step(const SimulatedStep& step, StepMetrics& m);

}  // namespace specloop::exact_step
