// Exact ZOH step simulation: the time grid, the discretization, the recurrence over the grid's
// two segments; the metrics are measured in step_metrics.cpp, the kernels live in
// step_kernels.cpp.
//
// A step input is constant between samples, so x[k+1] = Φ·x[k] + Γ·r is exact at the samples
// (Φ = e^{Ah}, Γ = ∫₀ʰ e^{Aτ}dτ·B, both from one exponential of the augmented matrix
// [[A, B], [0, 0]]·h). The state derivative x' = A·x + B·r is exact at every sample too, so
// each output is known with its slope at both ends of each interval; peaks, band crossings
// and integrals between samples use the cubic Hermite interpolant of those four numbers.
#include "specloop/sim/response.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

#include "sim/modal.hpp"
#include "sim/step_kernels.hpp"
#include "sim/step_metrics.hpp"
#include "specloop/sim/eigenvalues.hpp"

namespace specloop {

using exact_step::kChains;
using exact_step::OutputCoordinates;
using exact_step::output_coordinates;
using exact_step::to_output_coordinates;
using exact_step::with_fixed_size;

std::string_view status_name(StepStatus s) {
  switch (s) {
    case StepStatus::ok: return "ok";
    case StepStatus::unstable: return "unstable";
    case StepStatus::zero_final_value: return "zero final value";
    case StepStatus::numerical_failure: return "numerical failure";
  }
  return "?";
}

namespace {
// |p| without std::abs's overflow-safe hypot (a call of its own, measured at about 1 % of a
// simulation): the simulator's poles are far inside the range where p² is finite.
double magnitude(const Complex& p) { return std::sqrt(p.real() * p.real() + p.imag() * p.imag()); }
}  // namespace

TimeGrid choose_time_grid(const std::vector<Complex>& poles, const TimeGridRules& rules) {
  TimeGrid grid;
  const int min_intervals = rules.min_samples - 1, max_intervals = rules.max_samples - 1;
  if (poles.empty()) {  // a static loop: nothing moves; a short grid keeps the code uniform
    grid.step_s = 1.0 / min_intervals;
    grid.fine_intervals = min_intervals;
    grid.samples = rules.min_samples;
    return grid;
  }
  const double decay = std::log(1.0 / rules.decay_fraction);
  double slowest = std::numeric_limits<double>::infinity(), fastest = 0.0;
  for (const Complex& p : poles) {
    slowest = std::min(slowest, -p.real());
    fastest = std::max(fastest, magnitude(p));
  }
  const double horizon = decay / slowest;
  const double coarse = horizon / min_intervals;
  // Fast modes: those the coarse step would not resolve. They need the fine step only until
  // they have decayed like the slowest one does by the horizon.
  double fast_alive = 0.0;
  for (const Complex& p : poles)
    if (magnitude(p) * coarse > rules.max_step_pole_product) fast_alive = std::max(fast_alive, decay / -p.real());
  if (fast_alive == 0.0) {
    grid.step_s = coarse;
    grid.fine_intervals = min_intervals;
  } else {
    const double fine = rules.max_step_pole_product / fastest;
    const double t1 = std::min(fast_alive, horizon);
    // Counted in double and capped before the conversion: a barely damped fast pair (σ tiny,
    // |p| large) asks for more intervals than an int holds.
    const double fine_wanted = std::ceil(t1 / fine);
    const int coarse_n = t1 < horizon ? static_cast<int>(std::ceil((horizon - t1) / coarse)) : 0;
    int fine_n = 0;
    if (!(fine_wanted + coarse_n <= max_intervals)) {  // the cap: loosen the fine step
      fine_n = std::max(1, max_intervals - coarse_n);
    } else {
      fine_n = std::max(1, static_cast<int>(fine_wanted));
    }
    grid.step_s = t1 / fine_n;
    grid.fine_intervals = fine_n;
    grid.coarse_intervals = coarse_n;
    grid.coarse_step_s = coarse_n > 0 ? (horizon - t1) / coarse_n : 0.0;
  }
  grid.samples = grid.fine_intervals + grid.coarse_intervals + 1;
  return grid;
}

StepSimulator::StepSimulator(TimeGridRules rules) : rules_(rules) {}

void StepSimulator::prepare(int n, int samples) {
  if (n != states_) {
    const int m = n + 1;
    if (n > kSmallEigenCapacity) eigen_ = Eigen::EigenSolver<Eigen::MatrixXd>(n);
    lu_state_ = Eigen::PartialPivLU<Eigen::MatrixXd>(n);
    lu_pade_ = Eigen::PartialPivLU<Eigen::MatrixXd>(m);
    for (Eigen::MatrixXd* mat : {&augmented_, &power2_, &power4_, &power6_, &even_, &odd_, &numer_, &denom_})
      mat->resize(m, m);
    phi_.resize(n, n);
    outputs_.resize(4, n);
    gamma_.resize(n);
    out_const_.resize(4);
    x_.resize(n);
    x_next_.resize(n);
    solve_.resize(n);
    poles_.reserve(static_cast<std::size_t>(n));
    states_ = n;
  }
  // One sample more than used: the scan reads y[k + 1] beside y[k] (see scan_samples).
  if (static_cast<int>(y_.size()) < samples + 1) {
    for (auto* v : {&y_, &u_}) v->resize(static_cast<std::size_t>(samples) + 1);
  }
  const std::size_t words = static_cast<std::size_t>(samples + 63) / 64;
  if (below_bits_.size() < words) {
    for (auto* v : {&below_bits_, &outside_bits_, &falling_bits_}) v->resize(words);
    word_sums_.resize(3 * words);
  }
  // Room for the fixed-size kernels' blocks: each segment starts on a whole block and its last,
  // partial block is stored whole.
  const std::size_t store = static_cast<std::size_t>(samples + 2 * kChains) * static_cast<std::size_t>(n);
  if (states_store_.size() < store) states_store_.resize(store);
}

void StepSimulator::discretize(const StateSpace& loop, double amplitude, double h, Eigen::MatrixXd& phi,
                               Eigen::VectorXd& gamma) {
  const int n = loop.states();
  // Augmented exponential: exp([[A, B·r], [0, 0]]·h) = [[Φ, Γ·r], [0, 1]].
  const bool fixed = with_fixed_size(n, [&](auto size) {
    constexpr int N = decltype(size)::value, M = N + 1;
    using Mat = Eigen::Matrix<double, M, M>;
    Mat a = Mat::Zero(), p2, p4, p6, even, odd, numer, denom;
    Eigen::PartialPivLU<Mat> lu;
    a.template topLeftCorner<N, N>() = loop.A * h;
    a.template topRightCorner<N, 1>() = loop.B * (amplitude * h);
    exact_step::pade_exponential(a, p2, p4, p6, even, odd, numer, denom, lu);
    phi = a.template topLeftCorner<N, N>();
    gamma = a.template topRightCorner<N, 1>();
  });
  if (!fixed) {
    augmented_.setZero();
    augmented_.topLeftCorner(n, n) = loop.A * h;
    augmented_.topRightCorner(n, 1) = loop.B * (amplitude * h);
    exact_step::pade_exponential(augmented_, power2_, power4_, power6_, even_, odd_, numer_, denom_, lu_pade_);
    phi = augmented_.topLeftCorner(n, n);
    gamma = augmented_.topRightCorner(n, 1);
  }
}

void StepSimulator::output_rows(const StateSpace& loop, double amplitude) {
  // Outputs and their slopes: y = C_y x + D_y r, y' = C_y A x + C_y B r (likewise u).
  outputs_.row(0) = loop.C.row(0);
  outputs_.row(1).noalias() = loop.C.row(0) * loop.A;
  outputs_.row(2) = loop.C.row(1);
  outputs_.row(3).noalias() = loop.C.row(1) * loop.A;
  out_const_(0) = loop.D(0) * amplitude;
  out_const_(1) = loop.C.row(0).dot(loop.B) * amplitude;
  out_const_(2) = loop.D(1) * amplitude;
  out_const_(3) = loop.C.row(1).dot(loop.B) * amplitude;
}

void StepSimulator::recur(const StateSpace& loop, double amplitude, int first, int count, double h) {
  const int n = loop.states();
  double* y = y_.data() + first;
  double* u = u_.data() + first;
  // Fixed-size kernels store blocks of kChains samples, each segment from a whole block on, and
  // leave out what y gives (layout_).
  const int base = n <= 8 && first > 0 ? (first + kChains - 1) / kChains * kChains : first;
  const int rows = n <= 8 && layout_.output_from_y ? n - 1 : n;
  double* states = states_store_.data() + static_cast<std::size_t>(base) * static_cast<std::size_t>(rows);
  if (modal_) {  // the step in closed form, no exponential
    const exact_step::ModalStep one = exact_step::modal_step(basis_, h);
    const exact_step::ModalStep chain = exact_step::modal_step(basis_, kChains * h);
    exact_step::recur_modal(n, one, chain, modal_rows_[0], modal_rows_[2], modal_final_[0], modal_final_[1],
                            !layout_.effort_from_y, w_, count, y, u, states);
    return;
  }
  discretize(loop, amplitude, h, phi_, gamma_);
  if (exact_step::recur_fixed_size(n, phi_, gamma_, outputs_, out_const_, layout_, x_, count, y, u, states)) return;
  for (int k = 0; k < count; ++k) {
    Eigen::Map<Eigen::VectorXd>(states + static_cast<std::ptrdiff_t>(k) * n, n) = x_;
    y[k] = outputs_.row(0).dot(x_) + out_const_(0);
    u[k] = outputs_.row(2).dot(x_) + out_const_(2);
    x_next_.noalias() = phi_ * x_;
    x_next_ += gamma_;
    x_.swap(x_next_);
  }
}

bool StepSimulator::eigenvalues(const Eigen::MatrixXd& a) {
  if (a.rows() <= kSmallEigenCapacity) return small_eigenvalues(a, poles_);
  eigen_.compute(a, false);
  if (eigen_.info() != Eigen::Success) return false;
  for (int i = 0; i < a.rows(); ++i) poles_.push_back(eigen_.eigenvalues()(i));
  return true;
}

// y∞/r = D_y − C_y·A⁻¹·B (the solve fixed-size up to 8 states).
double StepSimulator::dc_gain(const StateSpace& loop) {
  const int n = loop.states();
  double dc = loop.D(0);
  if (n > 0) {
    const bool fixed = with_fixed_size(n, [&](auto size) {
      constexpr int N = decltype(size)::value;
      const Eigen::PartialPivLU<Eigen::Matrix<double, N, N>> lu(loop.A);
      const Eigen::Matrix<double, N, 1> solved = lu.solve(loop.B);
      dc -= loop.C.row(0).dot(solved);
    });
    if (!fixed) {
      lu_state_.compute(loop.A);
      solve_ = lu_state_.solve(loop.B);
      dc -= loop.C.row(0).dot(solve_);
    }
  }
  return dc;
}

void StepSimulator::run_segments(const StateSpace& loop, double amplitude, double y_inf) {
  const int n = loop.states();
  const int fine_samples = grid_.fine_intervals + 1;
  if (n > 0) {
    // The fine segment writes samples 0 .. T₁ − h₁ and leaves x_ at T₁; the coarse segment
    // writes T₁ .. T with the coarse step. Without a coarse segment the fine one runs to T.
    output_rows(loop, amplitude);
    layout_ = n <= 8 ? exact_step::kernel_layout(outputs_, out_const_) : exact_step::KernelLayout{};
    // Modal coordinates where they are as accurate as the dense kernel's (modal.hpp): then every
    // component of w is stored (y is no coordinate), and the rows act on w.
    modal_ = n <= exact_step::kModalCapacity && exact_step::modal_kernels_enabled() &&
             exact_step::modal_basis(loop.A, poles_, kMaxModalCondition, basis_);
    if (modal_) {
      layout_.output_from_y = false;
      for (int r = 0; r < 4; ++r)
        for (int j = 0; j < n; ++j) {
          double v = 0.0;
          for (int i = 0; i < n; ++i) v += outputs_(r, i) * basis_.v[i][j];
          modal_rows_[r][j] = v;
        }
      // From rest: w(0) = −V⁻¹·x∞, x∞ = −A⁻¹·B·r; the final values y∞ (the measurement's) and u∞.
      double x_inf[8];
      with_fixed_size(n, [&](auto size) {
        constexpr int N = decltype(size)::value;
        const Eigen::Matrix<double, N, 1> solved = Eigen::PartialPivLU<Eigen::Matrix<double, N, N>>(loop.A).solve(loop.B);
        for (int i = 0; i < N; ++i) x_inf[i] = -solved(i) * amplitude;
      });
      modal_final_[0] = y_inf;
      modal_final_[1] = out_const_(2);
      for (int i = 0; i < n; ++i) modal_final_[1] += outputs_(2, i) * x_inf[i];
      for (int i = 0; i < n; ++i) {
        double w = 0.0;
        for (int j = 0; j < n; ++j) w -= basis_.v_inv[i][j] * x_inf[j];
        w_[i] = w;
      }
    }
    x_.setZero();
    if (grid_.coarse_intervals == 0) {
      recur(loop, amplitude, 0, fine_samples, grid_.step_s);
    } else {
      recur(loop, amplitude, 0, fine_samples - 1, grid_.step_s);
      recur(loop, amplitude, fine_samples - 1, grid_.coarse_intervals + 1, grid_.coarse_step_s);
    }
    if (modal_) {  // the stored states are w: the slope rows now act on w, and y′ = C·A·V·w exactly
      for (int j = 0; j < n; ++j) {  // (A·x∞ + B·r = 0)
        outputs_(1, j) = modal_rows_[1][j];
        outputs_(3, j) = modal_rows_[3][j];
      }
      out_const_(1) = out_const_(3) = 0.0;
    } else if (n <= 8) {  // the fixed-size kernels stored z = T·x: the slope rows now act on z
      const OutputCoordinates oc = output_coordinates(outputs_);
      to_output_coordinates(outputs_.row(1), outputs_.row(0), oc);
      to_output_coordinates(outputs_.row(3), outputs_.row(0), oc);
    }
  } else {
    layout_ = exact_step::KernelLayout{};
    modal_ = false;
    for (int k = 0; k < grid_.samples; ++k) {
      y_[k] = loop.D(0) * amplitude;
      u_[k] = loop.D(1) * amplitude;
    }
  }
}

StepStatus StepSimulator::simulate(const StateSpace& loop, double amplitude, double band_fraction,
                                   StepMetrics& m, StepTrace* trace) {
  const int n = loop.states();
  if (n != states_) prepare(n, 0);
  m = StepMetrics{};

  // Stability first, from the poles.
  poles_.clear();
  if (n > 0) {
    if (!eigenvalues(loop.A)) return StepStatus::numerical_failure;
    sort_roots(poles_);
    if (!all_stable(poles_)) return StepStatus::unstable;
  }

  // Final value: y∞ = r·(D_y − C_y A⁻¹ B).
  const double y_inf = amplitude * dc_gain(loop);
  if (!std::isfinite(y_inf)) return StepStatus::numerical_failure;
  if (std::abs(y_inf) <= 1e-12 * std::abs(amplitude)) return StepStatus::zero_final_value;
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  // Below 1e-12 the error is the DC-gain solve's rounding (a loop with an integrator): report 0.
  if (std::abs(m.steady_state_error) < 1e-12) m.steady_state_error = 0.0;

  grid_ = choose_time_grid(poles_, rules_);
  prepare(n, grid_.samples);
  const int K = grid_.samples;
  run_segments(loop, amplitude, y_inf);
  const double u_last = layout_.effort_from_y ? layout_.effort(y_[K - 1]) : u_[K - 1];
  if (!std::isfinite(y_[K - 1]) || !std::isfinite(u_last)) return StepStatus::numerical_failure;

  double fastest_pole = 0.0;
  for (const Complex& p : poles_) fastest_pole = std::max(fastest_pole, magnitude(p));
  const exact_step::SampleTimes time(grid_, K);
  const exact_step::SimulatedStep step{
      loop, amplitude, band_fraction, y_inf, y_.data(), layout_.effort_from_y ? nullptr : u_.data(), layout_, K, grid_,
      time,
      exact_step::StoredStates{states_store_.data(), n, grid_.fine_intervals, grid_.coarse_intervals, y_.data(),
                               layout_.output_from_y ? layout_.p : -1},
      modal_ ? basis_.v : nullptr,
      outputs_, out_const_, x_next_.data(), solve_.data(),
      exact_step::ScanBits{below_bits_.data(), outside_bits_.data(), falling_bits_.data(), word_sums_.data()},
      fastest_pole};
  const StepStatus status = exact_step::measure_step(step, m);
  if (status != StepStatus::ok) return status;

  if (trace) {
    trace->output.assign(y_.data(), y_.data() + K);
    if (layout_.effort_from_y) {
      trace->effort.resize(static_cast<std::size_t>(K));
      for (int k = 0; k < K; ++k) trace->effort[static_cast<std::size_t>(k)] = layout_.effort(y_[k]);
    } else {
      trace->effort.assign(u_.data(), u_.data() + K);
    }
    trace->time_s.resize(static_cast<std::size_t>(K));
    for (int k = 0; k < K; ++k) trace->time_s[static_cast<std::size_t>(k)] = time(k);
  }
  return StepStatus::ok;
}

}  // namespace specloop
