// Compensator structures: the series parameterization the optimizer searches (a gain and
// zero/pole locations, all positive, searched on log scales), and its conversions to a
// transfer function, to parallel gains (Kp, Ki, Kd, Tf) and to the standard form (Kp, Ti, Td, N).
#pragma once

#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/core/lti.hpp"
#include "specloop/core/vocabulary.hpp"

namespace specloop {

/// The name of the set-point weight b as a search parameter (search.tune_setpoint_weight): in
/// [search.bounds] and in the search's parameter list, after the structure's own.
inline constexpr std::string_view kSetpointWeightParameter = "setpoint_weight";
/// The searched filters' parameters (controller.notch / controller.measurement_filter = "search"),
/// after the structure's own and b, in this order.
inline constexpr std::string_view kNotchFrequencyParameter = "notch_frequency";
inline constexpr std::string_view kNotchDepthParameter = "notch_depth";
inline constexpr std::string_view kNotchWidthParameter = "notch_width";
inline constexpr std::string_view kFilterTimeParameter = "filter_time_constant";

/// One named series parameter of a structure.
struct ParameterInfo {
  std::string name;   // as in [search.bounds] and result.json ("gain", "zero", ...)
  std::string unit;   // "rad/s", "" (ratio), or "controller units"
  std::string meaning;
};

/// The series parameters of a structure, in vector order:
///   p        C = K
///   pi       C = K·(s + z)/s                                   [gain, integral_zero]
///   pd       C = K·(s/z + 1)/(s/((N+1)·z) + 1)                 [gain, zero]
///   pid      C = Kp·(1 + Ti⁻¹/s + Td·s/(Td/N·s + 1)) written as
///            Kc·(s² + 2ζc·ω0·s + ω0²)/(s·(Tf·s + 1))          [gain (Kp), zero_frequency ω0, zero_damping ζc]
///   lead     C = K·(s/z + 1)/(s/(α·z) + 1), α > 1              [gain, zero, ratio]
///   lag      C = K·(s + z)/(s + z/β), β > 1                     [gain, zero, ratio]
///   lead-lag lead·lag with one gain                              [gain, zero, ratio, lag_zero, lag_ratio]
const std::vector<ParameterInfo>& structure_parameters(Structure s);

/// Parallel gains: C = Kp + Ki/s + Kd·s/(Tf·s + 1).
struct ParallelGains {
  double kp = 0.0, ki = 0.0, kd = 0.0, filter_time = 0.0;
};
/// Standard (ideal, filtered) form: C = Kp·(1 + 1/(Ti·s) + Td·s/(Td/N·s + 1)); Ti = ∞ without I.
struct StandardForm {
  double kp = 0.0, ti = 0.0, td = 0.0, n = 0.0;
  bool has_integral = false;
  bool has_derivative = false;
};

/// A notch N(s) = (s² + 2·ζz·ωn·s + ωn²)/(s² + 2·ζp·ωn·s + ωn²) in series with the controller's
/// output (controller.notch). `depth` is |N(jωn)| = ζz/ζp in (0, 1); `width` is ζp in (0, 1]
/// (the −3 dB band of the dip is about 2·ζp·ωn wide for a deep notch).
struct NotchFilter {
  double frequency = 0.0;  // ωn, rad/s
  double depth = 0.0;      // the gain at ωn, ratio in (0, 1)
  double width = 0.0;      // ζp, in (0, 1]
};
/// A low-pass F(s) on the measured output (controller.measurement_filter): order 1, 1/(Tf·s + 1);
/// order 2, 1/((Tf·s)²/2 + Tf·s + 1) (poles at (−1 ± j)/Tf: damping 1/√2, Butterworth at
/// ωc = √2/Tf).
struct MeasurementFilter {
  int order = 1;                // 1 or 2
  double time_constant = 0.0;   // Tf, s (> 0)
};

/// The filters' numerator and denominator (highest power first), for the hot path.
void notch_polynomials(const NotchFilter& f, double* num3, double* den3);
void measurement_filter_polynomials(const MeasurementFilter& f, std::vector<double>& den);

/// The default range of a searched notch's frequency: [0.5·ω_min, 2·ω_max] over the plant's
/// lightly damped pairs (ζ < kLightDamping), its top kept below 0.9× the Nyquist frequency of a
/// sampled controller (sample_time > 0). Empty when the plant has no such pair (or the range
/// is empty below Nyquist).
inline constexpr double kLightDamping = 0.3;
std::optional<std::pair<double, double>> notch_frequency_range(const std::vector<Complex>& poles, double sample_time);

/// A concrete controller: its structure, series parameters, and what follows from them.
struct Controller {
  Structure structure = Structure::p;
  std::vector<double> series;             // values in structure_parameters order (magnitudes, all positive)
  double action = 1.0;                    // +1 direct, −1 reverse (loop_action of the plant): multiplies C(s)
                                          // and every gain of the parallel and standard forms
  double derivative_filter = 10.0;        // N (pd, pid)
  TransferFunction transfer;              // C(s), continuous time
  std::optional<ParallelGains> parallel;  // empty for lag and lead-lag (no PID equivalent)
  std::optional<StandardForm> standard;
  /// The set-point weight b when the search tuned it (search.tune_setpoint_weight); empty: the
  /// spec's controller.setpoint_weight applies (setpoint_weight_of in design/problem.hpp).
  std::optional<double> setpoint_weight;
  /// The filters in series (with_filters): `transfer` is then the whole C(s)·F(s)·N(s) the loop
  /// sees from the measurement, while `series`, `parallel` and `standard` stay the PID part's.
  std::optional<NotchFilter> notch;
  std::optional<MeasurementFilter> measurement_filter;
  bool notch_searched = false, measurement_filter_searched = false;  // chosen by the search
};

/// The controller with its filters: C(s) becomes C·F·N (`transfer`), the filters are recorded.
/// Throws std::invalid_argument for a filter value out of its range (NotchFilter, MeasurementFilter).
Controller with_filters(Controller c, const std::optional<NotchFilter>& notch,
                        const std::optional<MeasurementFilter>& measurement);

/// The controller's filters in words for tables ("" without filters), e.g. "notch: ωn = 29.9 rad/s,
/// depth 0.1 (-20 dB), width ζp = 0.3 (searched); measurement filter: order 1, Tf = 0.002 s (given)".
/// `time_unit` labels Tf.
std::string filters_text(const Controller& c, const std::string& time_unit);

/// The controller u = N·(C_r·r − C·F·y) as one two-input state space built from its sections (the
/// structure's two-input C/C_r with set-point weights b and c, F before its measurement input, N
/// after its output): better conditioned than one canonical form of C·F·N, whose degree reaches 6.
/// Without filters: two_input_controller(C, C_r).
TwoInputRealization controller_realization(const Controller& c, double setpoint_weight, double derivative_weight);

/// The PID part's C(s) alone (without the filters): the transfer function of the series parameters.
TransferFunction structure_transfer(const Controller& c);

/// The controller without its notch and measurement filter: the same structure and parameters,
/// its transfer the structure's own (structure_transfer).
Controller without_filters(const Controller& c);

/// Builds the controller from series parameters and the action (+1 direct, −1 reverse: the sign
/// of C(s), Kp, Ki, Kd and the standard form's Kp; Ti, Td, Tf and N stay positive). Throws
/// std::invalid_argument when a value is not positive and finite, the count is wrong or the
/// action is not ±1.
Controller make_controller(Structure s, const std::vector<double>& series, double derivative_filter, double action = 1.0);

/// The series parameters as shown and written (result.json, the store, tables): the gain (always
/// the first) carries the action, so C(s) reads off them directly; the others as they are.
std::vector<double> signed_series(const Controller& c);

/// The reference path of a two-degree-of-freedom controller u = C_r(s)·r − C(s)·y with
/// C_r = Kp·b + Ki/s + Kd·c·s/(Tf·s + 1) (set-point weights b and c; Åström–Hägglund). It shares
/// C's denominator. b = c = 1 gives C itself; lag and lead-lag (no parallel form) only allow that.
/// With filters (u = N·(C_r·r − C·F·y)) the reference path is C_r·N over C·F·N's denominator.
TransferFunction reference_path(const Controller& c, double setpoint_weight, double derivative_weight);

/// Writes C(s) for the series parameters and action (±1) into `num`/`den` without building the
/// rest (hot path).
void controller_polynomials(Structure s, const double* series, double derivative_filter, double action,
                            std::vector<double>& num, std::vector<double>& den);

/// The lower bound on the PID zero damping ζc that keeps Tf real: 1/√(N + 1).
double pid_min_zero_damping(double derivative_filter);

}  // namespace specloop
