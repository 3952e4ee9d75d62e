// The model kinds a test is fitted with, their parameters, their state-space realization and
// their exact response to the recorded input (zero-order hold between samples, continuous delay).
#pragma once

#include <Eigen/Dense>

#include <array>
#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

namespace specloop::fit {

enum class ModelKind { first_order_delay, second_order_delay, underdamped_delay, integrator_delay, poles_zeros };

/// "first-order-delay", "second-order-delay", "underdamped-delay", "integrator-delay", "poles-zeros".
std::string_view kind_name(ModelKind k);
std::optional<ModelKind> parse_kind(std::string_view name);
const std::vector<std::string>& kind_names();

/// A kind with its counts (poles-zeros only: 1..4 poles, 0..poles−1 zeros).
struct ModelShape {
  ModelKind kind = ModelKind::first_order_delay;
  int poles = 2, zeros = 0;
};
inline constexpr int kMaxPoles = 4;

/// The parameters in order (the delay L always last):
///   first-order-delay   k, T, L          k/(T s + 1)·e^(−L s)
///   second-order-delay  k, T1, T2, L     k/((T1 s + 1)(T2 s + 1))·e^(−L s)
///   underdamped-delay   k, wn, zeta, L   k·wn²/(s² + 2·zeta·wn·s + wn²)·e^(−L s)
///   integrator-delay    k, T, L          k/(s·(T s + 1))·e^(−L s)
///   poles-zeros         k, p1..pN, z1..zM, L   k·Π(s/z_j + 1)/Π(s/p_i + 1)·e^(−L s) (each set returned in
///                       ascending rate): k the static
///                       gain, poles at −p_i and zeros at −z_j (p, z > 0: stable, minimum phase)
std::vector<std::string> parameter_names(const ModelShape& shape);

/// A strictly proper model x' = A x + B u(t − L), y = C x.
struct StateModel {
  Eigen::MatrixXd A;
  Eigen::VectorXd B;
  Eigen::RowVectorXd C;
  double delay = 0.0;
};
StateModel realize(const ModelShape& shape, std::span<const double> params);

/// The model's output deviation at the recorded sample times for the recorded input deviation,
/// from rest: the input held between samples (u(t) = du[k] on [t_k, t_{k+1})), delayed by L,
/// zero before the record starts. Exact: each interval is split at the delayed switching instants
/// t_j + L inside it and stepped with the exponential of that piece's length. The instants are
/// rounded to whole multiples of 1e-13 of the record's duration from t_0 (pieces shorter than
/// that vanish), so a uniform grid needs a handful of exponentials, cached by length, the pieces
/// of an interval add up to it exactly, and no rounding accumulates; an uneven grid caches the
/// lengths that repeat. A negative L is allowed (the derivative at L = 0 looks there).
class ResponseSimulator {
 public:
  ResponseSimulator(std::vector<double> t, std::vector<double> du);
  /// Writes the response into `out` (resized to the record's length).
  void simulate(const StateModel& model, std::vector<double>& out);
  std::size_t exponentials_computed() const { return exponentials_; }

 private:
  struct Step {  // row-major Φ and Γ of one piece length, at most 8 states
    std::array<double, 64> phi{};
    std::array<double, 8> gamma{};
  };
  const Step& step_for(const StateModel& model, std::int64_t quanta);
  template <std::size_t n>
  void run(const StateModel& model, std::vector<double>& out);
  std::vector<double> t_, du_;
  double quantum_ = 0.0;
  std::unordered_map<std::int64_t, std::size_t> cache_index_;
  std::vector<Step> cache_;
  std::array<std::int64_t, 4> recent_q_{};      // the last lengths used and their entries: a
  std::array<std::size_t, 4> recent_index_{};   // uniform grid's few lengths skip the hash map
  std::size_t next_recent_ = 0;
  std::size_t exponentials_ = 0;
};

}  // namespace specloop::fit
