// Exact step simulation of a stable linear loop by zero-order-hold discretization, and the
// step-response metrics (definitions in README.md, "Metric definitions").
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <cstdint>
#include <new>
#include <optional>
#include <string_view>
#include <vector>

#include "specloop/core/lti.hpp"

namespace specloop {

/// Two humps of the step response whose heights differ by less than this fraction of |y∞| (0.01
/// percentage points of overshoot) are one peak for the peak time, which reads the later of them
/// (README, "Metric definitions"): an optimum that parks two humps at equal height must not move
/// its peak time by the distance between them under a 1e-6 change of the plant, which moves the
/// heights by about 1e-6 of |y∞| (times the loop's sensitivity), and 1e-4 leaves two orders of
/// magnitude for that; it is far below anything a plot shows as a different peak.
inline constexpr double kPeakTieFraction = 1e-4;

/// Step-response metrics. Times in s; output and effort in the loop's own units.
struct StepMetrics {
  double final_value = 0.0;              // y∞ from the closed loop's DC gain
  double overshoot_pct = 0.0;            // (y_max − y∞)/|y∞|·100, 0 when y never exceeds y∞
  std::optional<double> peak_time_s;     // time of the LATEST local maximum of y within
                                         // kPeakTieFraction·|y∞| of y_max (README, "Metric
                                         // definitions"); empty when there is no overshoot
  std::optional<double> next_peak_time_s;  // the highest local maximum after peak_time_s (above
  double next_peak_gap_pct = 0.0;          // y∞) and how far below y_max it is, in % of |y∞|:
                                           // what the search's margin reads (effective_peak_time)
  double undershoot_pct = 0.0;           // initial wrong-way excursion: max(0, −min y/y∞)·100
  std::optional<double> settling_time_s; // last exit from the ±band around y∞ (= the final entry
                                         // into the band); empty: not settled
  std::optional<double> rise_time_s;     // first reach of 90 % minus first reach of 10 % of y∞
  std::optional<double> band_entry_time_s;  // first time y comes within the settling band
  double post_peak_dip_pct = 0.0;        // deepest fall below y∞ after the peak, (y∞ − y)/|y∞|·100;
                                         // 0 when there is no peak or no such fall
  double steady_state_error = 0.0;       // (r − y∞)/r, exact (final-value theorem)
  double effort_peak = 0.0;              // max |u(t)| over the horizon, including t = 0+
  std::optional<double> command_peak;    // nonlinear loop: max |u_c(t)|, the controller's output before
                                         // the actuator's limits (the applied u is effort_peak); empty
                                         // on the linear loop, where the two are one signal
  double iae = 0.0;                      // ∫|e| dt, e = y∞ − y (see README)
  double ise = 0.0;                      // ∫e² dt
  double itae = 0.0;                     // ∫t·|e| dt
  // The response to a step load at the plant input (README, "Regulators"): filled only where a
  // load requirement or the load_iae objective needs it (design/regulation.hpp; the nonlinear
  // loop after its load step); the simulators leave them empty. Times from the load step.
  std::optional<double> load_iae;              // ∫|y − y∞| dt, output units × time
  std::optional<double> load_peak;             // max |y − y∞|
  std::optional<double> load_recovery_time_s;  // last exit from the regulator's band; empty: not recovered
};

enum class StepStatus {
  ok,
  unstable,           // a closed-loop pole on or right of the imaginary axis
  zero_final_value,   // y∞ = 0: relative metrics are undefined
  numerical_failure,  // a non-finite number appeared (reported, never written as NaN)
};
std::string_view status_name(StepStatus s);

/// How the time grid is chosen from the closed-loop poles (README, "Time grid").
struct TimeGridRules {
  double decay_fraction = 1e-4;   // horizon T = ln(1/decay_fraction)/σ_slow (slowest mode decayed)
  int min_samples = 2000;         // samples on [0, T] at least (t = 0 included)
  int max_samples = 20000;        // cap; with it the resolution rule below may loosen
  double max_step_pole_product = 0.5;  // h·|p| <= this for every pole still alive, within the cap
                                       // (0.5: the integrals' corrected trapezoid errs by about
                                       // (2h|p|)⁴/720 for ISE, whose integrand rings at 2|p|)
};

/// Two uniform segments: a fine step while fast modes are alive, then a coarse one. A single
/// segment has coarse_intervals = 0.
struct TimeGrid {
  double step_s = 0.0;          // fine step h₁
  int fine_intervals = 0;       // [0, T₁], T₁ = h₁·fine_intervals
  double coarse_step_s = 0.0;   // h₂
  int coarse_intervals = 0;     // [T₁, T]
  int samples = 0;              // fine_intervals + coarse_intervals + 1 (t = 0 included)
  double horizon_s() const { return step_s * fine_intervals + coarse_step_s * coarse_intervals; }
};

/// Chooses h and the number of samples from stable closed-loop poles.
TimeGrid choose_time_grid(const std::vector<Complex>& poles, const TimeGridRules& rules);

namespace exact_step {
/// Private to the simulator (src/sim/modal.hpp), declared here because StepSimulator holds one:
/// a loop's eigenvector basis and modal blocks (up to 8 states).
struct ModalBasis {
  int n = 0;
  double v[8][8];      // x − x∞ = V·w (row-major); unit columns
  double v_inv[8][8];  // V⁻¹
  double condition = 0.0;  // ‖V‖∞·‖V⁻¹‖∞
  // Block j (rows 2j, 2j + 1): a complex pair σ ± jω (`complex`; first = σ, second = ω) or two
  // real eigenvalues (first, second); the last, for odd n, a real eigenvalue in `first`.
  struct Block {
    bool complex = false;
    double first = 0.0, second = 0.0;
  };
  Block block[4];
  int blocks() const { return (n + 1) / 2; }
};

/// Private to the simulator (src/sim/step_kernels.hpp), declared here because StepSimulator holds
/// one: what the fixed-size recurrence need not write, because y gives it (decided once per loop
/// by kernel_layout, and read back the same way by StoredStates and the metrics):
/// - `output_from_y`: the output coordinate z_p is not stored; it is y itself (C_y ≠ 0 and
///   D_y·r = 0, as for every strictly proper plant: y = 1·z_p + 0 exactly);
/// - `effort_from_y`: u is not written either; u_k = u_const + u_gain·y_k, the kernel's own
///   formula (u affine in y: the effort row in z uses z_p alone, see effort_follows_output).
struct KernelLayout {
  bool output_from_y = false;
  bool effort_from_y = false;
  int p = 0;  // the output coordinate (OutputCoordinates::p)
  double u_const = 0.0, u_gain = 0.0;
  double effort(double y) const { return u_const + u_gain * y; }
};
}  // namespace exact_step

/// Sampled responses kept only when asked for (plots, tests).
struct StepTrace {
  std::vector<double> time_s, output, effort;
};

/// Exact step simulation with a reusable workspace: after the first call for a given state
/// count and sample count, `simulate` allocates nothing (the optimizer's hot path).
class StepSimulator {
 public:
  explicit StepSimulator(TimeGridRules rules = {});

  /// Simulates the closed loop `loop` (outputs: row 0 = y, row 1 = u, as from close_loop)
  /// for a step of `amplitude`, measuring with a settling band of `band_fraction` (0.02 = 2 %).
  /// `trace`, when given, receives the sampled y and u.
  StepStatus simulate(const StateSpace& loop, double amplitude, double band_fraction,
                      StepMetrics& metrics, StepTrace* trace = nullptr);

  /// The closed-loop poles (eigenvalues of A) found by the last call.
  const std::vector<Complex>& poles() const { return poles_; }
  /// The grid used by the last successful call.
  const TimeGrid& grid() const { return grid_; }

 private:
  void prepare(int states, int samples);
  void discretize(const StateSpace& loop, double amplitude, double step, Eigen::MatrixXd& phi, Eigen::VectorXd& gamma);
  // Fills outputs_ and out_const_: the rows giving y, y', u, u' from the state.
  void output_rows(const StateSpace& loop, double amplitude);
  // Writes samples first … first + count − 1 with the step h (the segment's), from x_ (w_ when
  // modal_), which it leaves at the next sample.
  void recur(const StateSpace& loop, double amplitude, int first, int count, double h);
  // Fills poles_ with the eigenvalues of a; false when the solver fails.
  bool eigenvalues(const Eigen::MatrixXd& a);
  // y∞/r of the loop: D_y − C_y·A⁻¹·B.
  double dc_gain(const StateSpace& loop);
  // Writes y_, u_ and the stored states over grid_'s segments (the recurrence), from rest;
  // y_inf: the final value (the modal recurrence settles on it exactly).
  void run_segments(const StateSpace& loop, double amplitude, double y_inf);

  TimeGridRules rules_;
  TimeGrid grid_;
  exact_step::KernelLayout layout_;  // what the recurrence leaves for y to give (step_kernels.hpp)
  // The modal recurrence (src/sim/modal.hpp), when the loop's eigenvector basis V is this well
  // conditioned. Measured against a long-double reference (Taylor exponential, 64-bit mantissa)
  // on 800 random P and PI loops with poles over two to six decades, the largest sample error
  // relative to max|y|: modal 5e-12 with cond(V) <= 1e4 (1e-10 on one loop up to 1e5); the dense
  // kernel 7e-10 on the same loops (its error grows on graded loops, the modal one's does not).
  static constexpr double kMaxModalCondition = 1e4;
  bool modal_ = false;
  exact_step::ModalBasis basis_;
  double modal_rows_[4][8];  // outputs_'s rows acting on w (x − x∞ = V·w)
  double w_[8];              // the modal state between segments
  double modal_final_[2];    // y∞ and u∞ (the modal recurrence's constants)
  std::vector<Complex> poles_;
  // Workspace (sized on demand, then reused).
  int states_ = -1;
  Eigen::EigenSolver<Eigen::MatrixXd> eigen_;
  Eigen::PartialPivLU<Eigen::MatrixXd> lu_state_;
  Eigen::PartialPivLU<Eigen::MatrixXd> lu_pade_;
  Eigen::MatrixXd augmented_, power2_, power4_, power6_, even_, odd_, numer_, denom_;
  Eigen::MatrixXd phi_, outputs_;  // Φ and [C_y; C_y·A; C_u; C_u·A]
  Eigen::VectorXd gamma_, out_const_, x_, x_next_, solve_;
  // The sample buffers start on a cache line: the recurrence's 32-byte stores then never straddle
  // two lines (with malloc's 16-byte alignment every other one did: about 5 % of the recurrence).
  template <class T>
  struct LineAligned {
    using value_type = T;
    LineAligned() = default;
    template <class U>
    LineAligned(const LineAligned<U>&) {}
    T* allocate(std::size_t n) { return static_cast<T*>(::operator new(n * sizeof(T), std::align_val_t{64})); }
    void deallocate(T* p, std::size_t) { ::operator delete(p, std::align_val_t{64}); }
    bool operator==(const LineAligned&) const { return true; }
  };
  using Samples = std::vector<double, LineAligned<double>>;
  Samples y_, u_;  // sampled output and effort (times follow from grid_; u_ unused when layout_.effort_from_y)
  Samples states_store_;  // the state at every sample, for slopes on demand (layout:
                          // exact_step::StoredStates, src/sim/step_kernels.hpp)
  // One bit per sample, 64 to a word: e = y∞ − y < 0; |y/y∞ − 1| > band; y[k+1] < y[k].
  std::vector<std::uint64_t> below_bits_, outside_bits_, falling_bits_;
  std::vector<double> word_sums_;  // the integral sums of each 64 samples (exact_step::ScanBits)
};

namespace detail {
/// The simulator's inner loops have wider (AVX) variants chosen at run time when the processor has
/// AVX; they give the same bits as the portable (SSE2) ones. Tests force the portable ones to
/// compare both on this machine. Not thread-safe to change while simulations run.
void use_portable_kernels(bool portable);
bool wide_kernels_available();  // compiled in and supported by this processor
/// Loops of up to 8 states with a well-conditioned eigenvector basis run the modal recurrence
/// (src/sim/modal.hpp); tests switch it off to compare it with the dense one. Not thread-safe to
/// change while simulations run.
void use_modal_kernels(bool modal);
}  // namespace detail

}  // namespace specloop
