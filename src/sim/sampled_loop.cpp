// The sampled loop's exact step response (see sampled_loop.hpp for the method): the loop at the
// samples as one discrete system, its poles, final value and time grid, and the stepping that
// records the output between the samples; the metrics are measured in sampled_metrics.cpp.
#include "specloop/sim/sampled_loop.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <string>
#include <unsupported/Eigen/MatrixFunctions>
#include <utility>

#include "sim/sampled_metrics.hpp"

namespace specloop {

void zero_order_hold(const Eigen::MatrixXd& a, const Eigen::VectorXd& b, double h, Eigen::MatrixXd& phi,
                     Eigen::VectorXd& gamma) {
  const Eigen::Index n = a.rows();
  Eigen::MatrixXd aug = Eigen::MatrixXd::Zero(n + 1, n + 1);
  aug.topLeftCorner(n, n) = a * h;
  aug.topRightCorner(n, 1) = b * h;
  const Eigen::MatrixXd e = aug.exp();
  phi = e.topLeftCorner(n, n);
  gamma = e.topRightCorner(n, 1);
}

namespace {

constexpr double kDecay = 1e-4;        // horizon: the slowest mode decayed to this fraction
constexpr int kSegmentSamples = 1000;  // about this many samples in each of the two segments
constexpr int kMaxSubsteps = 64;       // sub-steps per period, at most
constexpr double kResolve = 0.1;       // h·ρ between recorded samples, at most (within the caps)

// The loop at the samples: z[k+1] = M·z[k] + N·r with z = [x; s], the plant's state and the
// controller's in transposed direct form (u[k] = rn0·r − mn0·y[k] + s1[k];
// s_i[k+1] = s_{i+1}[k] + rn_i·r − mn_i·y[k] − a_i·u[k]); u = Ku·z + ku·r, y = Ky·z (D = 0).
struct DiscreteLoop {
  int n = 0, dim = 0;  // plant states; plant and controller states
  Eigen::MatrixXd mm;
  Eigen::VectorXd nn;
  Eigen::RowVectorXd c, ku_row, ky_row;
  double ku = 0.0;
  /// y∞ from the fixed point z∞ = (I − M)⁻¹·N·r.
  double final_value(double amplitude) const {
    const Eigen::VectorXd z_inf = (Eigen::MatrixXd::Identity(dim, dim) - mm).partialPivLu().solve(nn * amplitude);
    return ky_row.dot(z_inf);
  }
};

// Builds the discrete loop of `plant` (strictly proper, single-input single-output) under `eq` at
// period ts; "" or why it cannot.
std::string discrete_loop_of(const StateSpace& plant, const DifferenceEquation& eq, double ts, DiscreteLoop& loop) {
  const int n = plant.states();
  const std::size_t len = std::max({eq.reference_numerator.size(), eq.measurement_numerator.size(), eq.denominator.size()});
  std::vector<double> rn(len, 0.0), mn(len, 0.0), a(len, 0.0);
  std::copy(eq.reference_numerator.begin(), eq.reference_numerator.end(), rn.begin());
  std::copy(eq.measurement_numerator.begin(), eq.measurement_numerator.end(), mn.begin());
  std::copy(eq.denominator.begin(), eq.denominator.end(), a.begin());
  if (a[0] != 1.0) return "difference equation denominator must start with 1";
  const int mc = static_cast<int>(len) - 1;
  const int dim = n + mc;
  loop.n = n;
  loop.dim = dim;

  Eigen::MatrixXd phi;
  Eigen::VectorXd gamma;
  zero_order_hold(plant.A, plant.B, ts, phi, gamma);
  loop.c = plant.C.row(0);
  Eigen::RowVectorXd& ku_row = loop.ku_row;
  Eigen::RowVectorXd& ky_row = loop.ky_row;
  ku_row = Eigen::RowVectorXd::Zero(dim);
  ky_row = Eigen::RowVectorXd::Zero(dim);
  ky_row.head(n) = loop.c;
  ku_row.head(n) = -mn[0] * loop.c;
  if (mc > 0) ku_row(n) = 1.0;
  const double ku = loop.ku = rn[0];
  Eigen::MatrixXd& mm = loop.mm;
  Eigen::VectorXd& nn = loop.nn;
  mm = Eigen::MatrixXd::Zero(dim, dim);
  nn = Eigen::VectorXd::Zero(dim);
  mm.topLeftCorner(n, n) = phi;
  mm.topRows(n) += gamma * ku_row;
  nn.head(n) = gamma * ku;
  for (int i = 1; i <= mc; ++i) {
    const int row = n + i - 1;
    if (i < mc) mm(row, row + 1) += 1.0;
    mm.row(row) += -mn[static_cast<std::size_t>(i)] * ky_row - a[static_cast<std::size_t>(i)] * ku_row;
    nn(row) = rn[static_cast<std::size_t>(i)] - a[static_cast<std::size_t>(i)] * ku;
  }
  if (!mm.allFinite() || !nn.allFinite()) return "non-finite entry in the discrete loop";
  return "";
}

// The time grid in controller periods: a first segment while the fast modes are alive, then the
// rest; each either stepped every period with sub-steps between samples or jumped q periods per
// sample.
struct SampledGrid {
  long periods = 0, fine_periods = 0, coarse_periods = 0;
  long q1 = 1, q2 = 1;  // periods per recorded sample in each segment
  int substeps = 1, coarse_substeps = 1;  // sub-steps per period in each segment
};

// The grid from the discrete poles (all inside the unit circle; `slowest` the smallest decay rate
// −ln|λ|/Ts of a non-deadbeat mode, infinite if none) and the plant's speed; "" or why not.
std::string choose_grid(const std::vector<Complex>& poles, double slowest, const StateSpace& plant, double ts,
                        SampledGrid& grid, double decay = kDecay) {
  // Horizon and grid from the modes' continuous-equivalent decay rates σ = −ln|λ|/Ts and
  // speeds ρ = |ln λ|/Ts (at most the Nyquist rate π/Ts; a mode at λ = 0 dies within a few periods).
  const double nyquist = std::numbers::pi / ts;
  std::vector<double> sigma, speed;
  for (const Complex& l : poles) {
    const bool dead = !(std::abs(l) > 0.0);
    sigma.push_back(dead ? std::numeric_limits<double>::infinity() : -std::log(std::abs(l)) / ts);
    speed.push_back(dead ? nyquist : std::min(std::abs(std::log(l)) / ts, nyquist));
  }
  const double slow = std::isfinite(slowest) ? slowest : 1.0 / ts;  // all modes deadbeat
  const double horizon_wanted = std::max(std::log(1.0 / decay) / slow, 20.0 * ts);
  const double periods_wanted = std::ceil(horizon_wanted / ts - 1e-9);
  if (periods_wanted > static_cast<double>(SampledStepSimulator::kMaxPeriods))
    return "the horizon needs more than " + std::to_string(SampledStepSimulator::kMaxPeriods) + " controller periods";
  const long periods = grid.periods = static_cast<long>(periods_wanted);
  // First segment: while the modes faster than 4× the slowest are alive (each decayed to 1e-4).
  double fast_until = 10.0 * ts, fast_speed = 0.0, slow_speed = 0.0;
  for (std::size_t i = 0; i < poles.size(); ++i) {
    if (sigma[i] >= 4.0 * slow) {
      if (std::isfinite(sigma[i])) fast_until = std::max(fast_until, std::log(1.0 / kDecay) / sigma[i]);
      fast_speed = std::max(fast_speed, speed[i]);
    } else {
      slow_speed = std::max(slow_speed, speed[i]);
    }
  }
  fast_speed = std::max(fast_speed, slow_speed);
  const long fine_periods = grid.fine_periods = std::min(periods, static_cast<long>(std::ceil(fast_until / ts)));
  Eigen::EigenSolver<Eigen::MatrixXd> ep(plant.A, false);
  const double plant_speed = ep.info() == Eigen::Success ? ep.eigenvalues().cwiseAbs().maxCoeff() : 0.0;
  // Resolution: between recorded samples h·ρ ≤ kResolve for the modes alive there (the cubic
  // Hermite interpolant's error is O((h·ρ)⁴)). Sub-steps resolve the plant between samples when a
  // period is long against its modes (or the first segment has few periods); otherwise a segment
  // jumps q periods per sample.
  const double fine_speed = std::max(plant_speed, fast_speed);
  if (ts * fine_speed > kResolve || fine_periods <= kSegmentSamples) {
    grid.substeps = static_cast<int>(std::ceil(std::max(ts * plant_speed / kResolve, static_cast<double>(kSegmentSamples) /
                                                                                        static_cast<double>(std::max(1L, fine_periods)))));
    grid.substeps = std::clamp(grid.substeps, 1, kMaxSubsteps);
  } else {
    grid.q1 = std::max(1L, std::min(static_cast<long>(std::floor(kResolve / (ts * fine_speed))), fine_periods / kSegmentSamples));
  }
  const long coarse_periods = grid.coarse_periods = periods - fine_periods;
  if (coarse_periods > kSegmentSamples && slow_speed > 0.0)
    grid.q2 = std::max(1L, std::min(static_cast<long>(std::floor(kResolve / (ts * slow_speed))), coarse_periods / kSegmentSamples));
  if (grid.q2 == 1 && coarse_periods > 0) {
    grid.coarse_substeps = static_cast<int>(std::ceil(ts * plant_speed / kResolve));
    grid.coarse_substeps = std::clamp(grid.coarse_substeps, 1, std::max(1, static_cast<int>(std::min<long>(kMaxSubsteps, 8L * kSegmentSamples / coarse_periods))));
  }
  return "";
}

// The simulator's recorded output (its workspace).
struct Recording {
  std::vector<double>& t;
  std::vector<double>& y;
  std::vector<double>& u;
  std::vector<double>& slope_right;
  std::vector<double>& slope_left;
};

// Steps the discrete loop over the grid and records the plant's output: at every sample, and
// between samples under the held u where a segment has sub-steps. Stepping on z = [x; s] with
// plain row-major arrays: for the few states of a loop, Eigen's dynamic-size products cost more in
// dispatch than in arithmetic.
class LoopStepper {
 public:
  LoopStepper(const DiscreteLoop& loop, const StateSpace& plant, double amplitude, double ts, const SampledGrid& grid,
              Recording out)
      : loop_(loop), amplitude_(amplitude), ts_(ts), grid_(grid), out_(out),
        ud_(static_cast<std::size_t>(loop.dim)), un_(static_cast<std::size_t>(loop.n)) {
    Eigen::MatrixXd phi_h, phi_h2;
    Eigen::VectorXd gamma_h, gamma_h2;
    zero_order_hold(plant.A, plant.B, ts / grid.substeps, phi_h, gamma_h);
    zero_order_hold(plant.A, plant.B, ts / grid.coarse_substeps, phi_h2, gamma_h2);
    const Eigen::RowVectorXd ca = loop.c * plant.A;
    cb_ = loop.c.dot(plant.B);
    mv_ = flat(loop.mm);
    ph1_ = flat(phi_h);
    ph2_ = flat(phi_h2);
    for (std::vector<double>* v : {&nv_, &kuv_, &zn_}) v->resize(ud_);
    z_.assign(ud_, 0.0);
    for (std::vector<double>* v : {&gh1_, &gh2_, &cv_, &cav_, &xs_, &xn_}) v->resize(un_);
    for (std::size_t i = 0; i < ud_; ++i) {
      nv_[i] = loop.nn(static_cast<Eigen::Index>(i)) * amplitude;
      kuv_[i] = loop.ku_row(static_cast<Eigen::Index>(i));
    }
    for (std::size_t i = 0; i < un_; ++i) {
      gh1_[i] = gamma_h(static_cast<Eigen::Index>(i));
      gh2_[i] = gamma_h2(static_cast<Eigen::Index>(i));
      cv_[i] = loop.c(static_cast<Eigen::Index>(i));
      cav_[i] = ca(static_cast<Eigen::Index>(i));
    }
    u_r_ = loop.ku * amplitude;
  }

  // Both segments and the last sample, at the horizon (left limits: the next control is not
  // applied); returns the peak |u| over every period (u is piecewise constant).
  double run() {
    const std::size_t expected = static_cast<std::size_t>(grid_.fine_periods / grid_.q1 * grid_.substeps +
                                                          grid_.coarse_periods / grid_.q2 * grid_.coarse_substeps + 4);
    for (std::vector<double>* v : {&out_.t, &out_.y, &out_.u, &out_.slope_right, &out_.slope_left}) {
      v->clear();
      v->reserve(expected);
    }
    segment(0, grid_.fine_periods, grid_.q1, grid_.substeps, ph1_, gh1_);
    segment(grid_.fine_periods, grid_.periods, grid_.q2, grid_.coarse_substeps, ph2_, gh2_);
    const double u_last = u_prev_;
    record(static_cast<double>(grid_.periods) * ts_, u_last);
    out_.slope_right.back() = out_.slope_left.back();
    out_.u.back() = u_last;
    return u_peak_;
  }

 private:
  static std::vector<double> flat(const Eigen::MatrixXd& mat) {
    std::vector<double> out(static_cast<std::size_t>(mat.rows() * mat.cols()));
    for (Eigen::Index i = 0; i < mat.rows(); ++i)
      for (Eigen::Index j = 0; j < mat.cols(); ++j) out[static_cast<std::size_t>(i * mat.cols() + j)] = mat(i, j);
    return out;
  }
  static double dot(const std::vector<double>& row, const std::vector<double>& v, std::size_t size) {
    double acc = 0.0;
    for (std::size_t i = 0; i < size; ++i) acc += row[i] * v[i];
    return acc;
  }
  // Jumps of q − 1 periods: z ← M^{q−1}·z + (Σ_{i<q−1} M^i)·N·r, by binary powering.
  std::pair<std::vector<double>, Eigen::VectorXd> jump_for(long q) const {
    const int dim = loop_.dim;
    Eigen::MatrixXd power = Eigen::MatrixXd::Identity(dim, dim), sum = Eigen::MatrixXd::Zero(dim, dim);
    Eigen::MatrixXd base = loop_.mm, base_sum = Eigen::MatrixXd::Identity(dim, dim);  // M^a, Σ_{i<a} M^i for a = 2^bit
    for (long e = q - 1; e > 0; e >>= 1) {
      if (e & 1) {
        sum = sum + power * base_sum;
        power = power * base;
      }
      base_sum = base_sum + base * base_sum;
      base = base * base;
    }
    return std::make_pair(flat(power), Eigen::VectorXd(sum * loop_.nn * amplitude_));
  }
  void apply(const std::vector<double>& mat, const std::vector<double>& add) {  // z ← mat·z + add
    for (std::size_t i = 0; i < ud_; ++i) {
      double v = add[i];
      const double* r = mat.data() + i * ud_;
      for (std::size_t j = 0; j < ud_; ++j) v += r[j] * z_[j];
      zn_[i] = v;
    }
    z_.swap(zn_);
  }
  double control() const { return dot(kuv_, z_, ud_) + u_r_; }
  void record(double tk, double u) {
    const double cax = dot(cav_, z_, un_);
    out_.t.push_back(tk);
    out_.y.push_back(dot(cv_, z_, un_));
    out_.u.push_back(u);
    out_.slope_right.push_back(cax + cb_ * u);
    out_.slope_left.push_back(cax + cb_ * u_prev_);
  }
  // The plant between the sample at tk and the next, under the held u: subs − 1 sub-steps of h.
  void between_samples(double tk, double u, int subs, double h, const std::vector<double>& ph,
                       const std::vector<double>& gh) {
    std::copy(z_.begin(), z_.begin() + static_cast<std::ptrdiff_t>(un_), xs_.begin());
    for (int j = 1; j < subs; ++j) {
      for (std::size_t i = 0; i < un_; ++i) {
        double v = gh[i] * u;
        const double* r = ph.data() + i * un_;
        for (std::size_t l = 0; l < un_; ++l) v += r[l] * xs_[l];
        xn_[i] = v;
      }
      xs_.swap(xn_);
      const double slope = dot(cav_, xs_, un_) + cb_ * u;
      out_.t.push_back(tk + j * h);
      out_.y.push_back(dot(cv_, xs_, un_));
      out_.u.push_back(u);
      out_.slope_right.push_back(slope);
      out_.slope_left.push_back(slope);
    }
  }
  // One segment [from, to) in periods, a sample every q periods (q = 1: every period, with the
  // sub-steps between samples).
  void segment(long from, long to, long q, int subs, const std::vector<double>& ph, const std::vector<double>& gh) {
    const double h = ts_ / subs;
    const auto jump = q > 1 ? jump_for(q) : std::make_pair(std::vector<double>{}, Eigen::VectorXd{});
    std::vector<double> jump_add(ud_, 0.0);
    for (std::size_t i = 0; q > 1 && i < ud_; ++i) jump_add[i] = jump.second(static_cast<Eigen::Index>(i));
    for (long k = from; k < to;) {
      const double tk = static_cast<double>(k) * ts_;
      double u = control();
      u_peak_ = std::max(u_peak_, std::abs(u));
      record(tk, u);
      if (subs > 1) between_samples(tk, u, subs, h, ph, gh);
      const long step = std::min(q, to - k);
      if (step > 1) {
        if (step == q) {
          apply(jump.first, jump_add);
        } else {
          for (long i = 0; i + 1 < step; ++i) apply(mv_, nv_);
        }
        u = control();
        u_peak_ = std::max(u_peak_, std::abs(u));
      }
      u_prev_ = u;
      apply(mv_, nv_);
      k += step;
    }
  }

  const DiscreteLoop& loop_;
  double amplitude_, ts_;
  const SampledGrid& grid_;
  Recording out_;
  std::size_t ud_, un_;  // dim, n
  double cb_ = 0.0, u_r_ = 0.0;
  std::vector<double> mv_, ph1_, ph2_;          // M, and Φ_h of each segment's sub-step, row-major
  std::vector<double> nv_, gh1_, gh2_, cv_, cav_, kuv_;  // N·r, Γ_h, C, C·A, Ku
  std::vector<double> z_, zn_, xs_, xn_;
  double u_peak_ = 0.0;
  double u_prev_ = 0.0;  // the control in force before the current sample (0: the loop at rest)
};

// The checks both runs share, the discrete loop of `plant` under `eq`, its poles (z-plane) and
// the slowest decay rate of a non-deadbeat mode: ok, unstable, or numerical_failure with `failure`.
StepStatus open_loop(const StateSpace& plant, const DifferenceEquation& eq, DiscreteLoop& loop,
                     std::vector<Complex>& poles, double& slowest, std::string& failure) {
  failure.clear();
  poles.clear();
  auto fail = [&](const std::string& why) {
    failure = why;
    return StepStatus::numerical_failure;
  };
  const double ts = eq.sample_time_s;
  if (!(ts > 0.0) || !std::isfinite(ts)) return fail("sample time not a finite number > 0");
  if (plant.outputs() != 1 || plant.states() < 1) return fail("plant not single-input single-output");
  if (plant.D(0) != 0.0) return fail("plant not strictly proper (a direct feedthrough)");
  if (const std::string why = discrete_loop_of(plant, eq, ts, loop); !why.empty()) return fail(why);
  Eigen::EigenSolver<Eigen::MatrixXd> es(loop.mm, false);
  if (es.info() != Eigen::Success) return fail("eigenvalues of the discrete loop not found");
  slowest = std::numeric_limits<double>::infinity();
  for (Eigen::Index i = 0; i < loop.dim; ++i) poles.push_back(es.eigenvalues()(i));
  for (const Complex& l : poles) {
    if (!(std::abs(l) < 1.0 - 1e-12)) return StepStatus::unstable;
    if (std::abs(l) > 0.0) slowest = std::min(slowest, -std::log(std::abs(l)) / ts);
  }
  return StepStatus::ok;
}

}  // namespace

double SampledStepSimulator::instability() const {
  double r = 0.0;
  for (const Complex& p : poles_) r = std::max(r, std::abs(p) - 1.0);
  return std::max(0.0, r);
}

StepStatus SampledStepSimulator::simulate(const StateSpace& plant, const DifferenceEquation& eq, double amplitude,
                                          double band, StepMetrics& m, StepTrace* trace) {
  m = StepMetrics{};
  horizon_ = 0.0;
  auto fail = [this](const std::string& why) { return failed(why); };
  const double ts = eq.sample_time_s;
  DiscreteLoop loop;
  double slowest = 0.0;
  if (const StepStatus opened = open_loop(plant, eq, loop, poles_, slowest, failure_); opened != StepStatus::ok)
    return opened;
  const double y_inf = loop.final_value(amplitude);
  if (!std::isfinite(y_inf)) return fail("non-finite final value");
  if (std::abs(y_inf) <= 1e-12 * std::abs(amplitude)) return StepStatus::zero_final_value;

  SampledGrid grid;
  if (const std::string why = choose_grid(poles_, slowest, plant, ts, grid); !why.empty()) return fail(why);
  horizon_ = static_cast<double>(grid.periods) * ts;
  LoopStepper stepper(loop, plant, amplitude, ts, grid, Recording{t_, y_, u_, slope_right_, slope_left_});
  fine_step_ = static_cast<double>(grid.q1) * ts / grid.substeps;
  fine_until_ = static_cast<double>(grid.fine_periods) * ts;
  const double u_peak = stepper.run();
  for (double v : y_)
    if (!std::isfinite(v)) return fail("non-finite output sample");

  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  m.effort_peak = u_peak;
  sampled_step::measure_interpolant(sampled_step::OutputSamples{t_, y_, slope_right_, slope_left_}, y_inf, band, m);
  if (!std::isfinite(m.overshoot_pct) || !std::isfinite(m.itae) || !std::isfinite(m.effort_peak))
    return fail("non-finite metric");
  if (trace) {
    trace->time_s = t_;
    trace->output = y_;
    trace->effort = u_;
  }
  return StepStatus::ok;
}

StepStatus SampledStepSimulator::simulate_load(const StateSpace& plant, const DifferenceEquation& eq, double load,
                                               double offset, double band, StepMetrics& m, StepTrace* trace) {
  m = StepMetrics{};
  horizon_ = 0.0;
  auto fail = [this](const std::string& why) { return failed(why); };
  const double ts = eq.sample_time_s;
  if (!(std::abs(load) > 0.0) || !std::isfinite(load) || !(offset > 0.0) || !std::isfinite(offset)) {
    poles_.clear();
    return fail("load or offset not a finite nonzero number");
  }
  // The reference path made the identity (its numerator the denominator): the "reference" then
  // reaches the plant's input unchanged and nothing else, which is a load there with r = 0.
  DifferenceEquation through = eq;
  through.reference_numerator = eq.denominator;
  DiscreteLoop loop;
  double slowest = 0.0;
  if (const StepStatus opened = open_loop(plant, through, loop, poles_, slowest, failure_); opened != StepStatus::ok)
    return opened;
  const double y_inf = loop.final_value(load);
  if (!std::isfinite(y_inf)) return fail("non-finite final value");
  // Measured against y∞ + offset, as the continuous load loop is (load_loop_into): the band is
  // band·|y∞ + offset| about y∞ and the integrals are of |y − y∞|.
  const double shifted_inf = y_inf + offset;
  if (!(std::abs(shifted_inf) > 1e-12 * offset)) return fail("the load's final value cancels the offset");

  // Run until the slowest mode has decayed to 1e-9: the IAE is an integral to infinity.
  SampledGrid grid;
  if (const std::string why = choose_grid(poles_, slowest, plant, ts, grid, 1e-9); !why.empty()) return fail(why);
  horizon_ = static_cast<double>(grid.periods) * ts;
  LoopStepper stepper(loop, plant, load, ts, grid, Recording{t_, y_, u_, slope_right_, slope_left_});
  fine_step_ = static_cast<double>(grid.q1) * ts / grid.substeps;
  fine_until_ = static_cast<double>(grid.fine_periods) * ts;
  stepper.run();
  for (double v : y_)
    if (!std::isfinite(v)) return fail("non-finite output sample");

  const sampled_step::OutputSamples raw{t_, y_, slope_right_, slope_left_};
  const double peak = sampled_step::peak_magnitude(raw);
  shifted_.resize(y_.size());
  for (std::size_t k = 0; k < y_.size(); ++k) shifted_[k] = y_[k] + offset;
  sampled_step::measure_interpolant(sampled_step::OutputSamples{t_, shifted_, slope_right_, slope_left_}, shifted_inf,
                                    band, m);
  m.final_value = y_inf;
  m.effort_peak = peak;  // max |y|: where load_loop_into's second output row puts it
  if (!std::isfinite(m.iae) || !std::isfinite(m.effort_peak)) return fail("non-finite metric");
  if (trace) {
    trace->time_s = t_;
    trace->output = y_;
    trace->effort = u_;
  }
  return StepStatus::ok;
}

}  // namespace specloop
