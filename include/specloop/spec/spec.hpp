// The spec file: a TOML document of our own schema, parsed, validated and normalized.
// Every key, its unit and its default is listed in README.md ("Spec file reference").
#pragma once

#include <complex>
#include <cstdint>
#include <memory>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/core/vocabulary.hpp"

namespace specloop {

/// A bad spec: the message is complete and already reads
/// "specs/x.toml:12:1: requirements.overshoot_max_pct: expected a number in (0, 100), got -5".
class SpecError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

class ExpressionPlant;

/// [plant.nonlinear]: the plant as ODE right-hand sides (read by read_spec), and what the
/// modelling step (model_spec) found from them.
struct NonlinearPlantSpec {
  std::vector<std::string> states;            // names, in state order
  std::vector<std::string> derivatives;       // d(state)/dt, one expression per state
  std::string output;                         // y as an expression of states and parameters
  std::vector<std::pair<std::string, double>> parameters;  // as listed
  std::vector<double> state_guess;            // [plant.nonlinear.operating_point], per state
  double input = 0.0;                         // operating_point.u: the actuator value held (absolute units)
  // Found by model_spec (empty in a SpecAsRead):
  std::vector<double> equilibrium;            // states where every derivative is 0 with u = input
  double output_value = 0.0;                  // y0 = h(equilibrium)
  int newton_iterations = 0;
  double residual = 0.0;                      // max |f_i| at the equilibrium
  std::vector<std::vector<double>> a;         // ∂f/∂x at the equilibrium (rows)
  std::vector<double> b;                      // ∂f/∂u
  std::vector<double> c;                      // ∂h/∂x
  double d = 0.0;                             // ∂h/∂u (0: the output may not use u)
  /// The compiled model, its deviation variables measured from (equilibrium, input, output_value).
  std::shared_ptr<const ExpressionPlant> model;
};

/// The plant as written; both forms are filled after loading (the other one is derived). For a
/// nonlinear plant, both are the linearization at the operating point (filled by model_spec).
struct PlantSpec {
  bool given_as_zeros_poles = true;           // which form the file used
  std::vector<std::complex<double>> zeros;    // rad/s, conjugate pairs expanded, as listed
  std::vector<std::complex<double>> poles;    // rad/s, conjugate pairs expanded, as listed
  double gain = 1.0;                          // k in k·Π(s − z)/Π(s − p)
  std::vector<double> numerator;              // highest power of s first
  std::vector<double> denominator;            // highest power of s first, leading coefficient != 0
  double delay_s = 0.0;                       // transport delay, s (>= 0)
  std::optional<NonlinearPlantSpec> nonlinear;  // set when the file gave [plant.nonlinear]
};

struct ActuatorSpec {
  double min = -1e300;                        // lower saturation limit, actuator units
  double max = 1e300;                         // upper saturation limit, actuator units
  bool limited = false;                       // true when the file gave min/max
  std::optional<double> rate_max;             // |du/dt| limit, actuator units/s (> 0)
};

struct ControllerSpec {
  Structure structure = Structure::pid;
  double derivative_filter = 10.0;            // N: derivative filter pole at N/Td (> 0)
  AntiWindup anti_windup = AntiWindup::conditional_integration;
  std::optional<double> tracking_time_s;      // back-calculation Tt, s (> 0); default by rule
  double sample_time_s = 0.0;                 // > 0: a digital controller at this period, s
  double setpoint_weight = 1.0;               // b: the proportional term acts on b·r − y
  bool derivative_on_measurement = false;     // c = 0 (no derivative kick) instead of c = 1
  // The filters (README "Filters"): u = N·(C_r·r − C·F·y). Given values, or searched (then the
  // optional stays empty for the notch, and the filter's time constant is searched at `order`).
  std::optional<NotchFilter> notch;               // controller.notch = {frequency, depth, width}
  bool notch_search = false;                      // controller.notch = "search"
  std::optional<MeasurementFilter> measurement_filter;  // controller.measurement_filter = {order, time_constant}
  bool measurement_filter_search = false;         // controller.measurement_filter = "search" (order 1)
  bool has_filters() const { return notch || notch_search || measurement_filter || measurement_filter_search; }
};

/// A load disturbance: a step added at the plant input (used by the nonlinear confirmation).
struct DisturbanceSpec {
  double time_s = 0.0;                        // when it arrives, s (>= 0)
  double size = 0.0;                          // plant-input units; 0: none
  double noise_rms = 0.0;                     // measurement noise, output units (>= 0); 0: none
  double noise_period_s = 0.0;                // each noise value held this long, s; 0: default (README)
  std::uint64_t noise_seed = 1;               // seed of the noise sequence
};

/// Each requirement is optional: a requirement left out is not required.
struct Requirements {
  std::optional<double> overshoot_max_pct;       // %, in (0, 100)
  std::optional<double> peak_time_ratio;         // peak time ÷ reference peak time, > 0
  std::optional<double> peak_time_max_s;         // s, > 0
  std::optional<double> settling_time_max_s;     // s, > 0
  std::optional<double> rise_time_max_s;         // s, > 0 (10–90 %)
  double settling_band_pct = 2.0;                // %, in (0, 50)
  std::optional<double> steady_state_error_max;  // relative, >= 0
  std::optional<double> effort_max;              // peak |u|, actuator units, > 0
  std::optional<double> undershoot_max_pct;      // %, in [0, 100)
  std::optional<double> phase_margin_min_deg;    // deg, in (0, 90)
  std::optional<double> gain_margin_min_db;      // dB, in (0, 60)
  std::optional<double> sensitivity_peak_max;    // Ms = max |1/(1 + L(jω))|, > 1
  // The load response (a step load at the plant input, README "Regulators") and the noise and
  // robustness peaks of the loop.
  std::optional<double> load_iae_max;            // ∫|y| dt after the load step, output units·s, > 0
  std::optional<double> load_peak_max;           // peak |y| after the load step, output units, > 0
  std::optional<double> load_recovery_time_max_s;  // s, > 0: back within the band for good
  std::optional<double> noise_gain_max;          // max |C·S(jω)|, input units per output unit, > 0
  std::optional<double> complementary_peak_max;  // Mt = max |T(jω)|, > 1
};

struct SearchSpec {
  Objective objective = Objective::itae;
  ObjectiveAt objective_at = ObjectiveAt::nominal;  // with [uncertainty]: the nominal plant's objective or the worst
  unsigned seed = 1;                          // NLopt's random seed
  int max_evaluations = 6000;                 // cost evaluations, global + local
  double max_time_s = 20.0;                   // wall-time cap, s
  SimulateMode simulate = SimulateMode::automatic;  // search.simulate (see SimulateMode)
  double margin_pct = 1.0;                    // limits tightened by this % of themselves in the search, band narrowed too; [0, 50)
  bool tune_setpoint_weight = false;          // the set-point weight b is a search variable (PI, PID)
  /// [search.bounds]: parameter name → [lo, hi], natural units, 0 < lo < hi.
  std::vector<std::pair<std::string, std::pair<double, double>>> bounds;
};

/// One [uncertainty] range: a numeric plant key and the interval its value may take.
struct UncertainRange {
  std::string key;                            // dotted path as in `sweep --vary`, e.g. "plant.poles[1][1]"
  double low = 0.0, high = 0.0;               // as written, low < high
  double nominal = 0.0;                       // the value the file gives the key, in [low, high]
};

/// [uncertainty]: the plants the machine can be, and what a design must do over them.
struct UncertaintySpec {
  std::vector<UncertainRange> ranges;         // in file order; empty: no [uncertainty]
  int samples = 64;                           // seeded Latin-hypercube plants inside the box, besides the corners
  std::uint64_t seed = 1;                     // of those samples and of the verification sample
  RobustMode mode = RobustMode::worst_case;
  double yield_min_pct = 95.0;                // mode yield: the share of the random plants that must meet all
  int verify_samples = 1000;                  // fresh random plants the design is re-checked on after the search
  double scale = 1.0;                         // every half-width multiplied by this about the nominal (sweepable)
  int max_corners = 64;                       // every corner of the box when there are at most this many
  bool active() const { return !ranges.empty(); }
  /// The range's ends after `scale`: nominal − scale·(nominal − low), nominal + scale·(high − nominal).
  double low_of(const UncertainRange& r) const { return r.nominal - scale * (r.nominal - r.low); }
  double high_of(const UncertainRange& r) const { return r.nominal + scale * (r.high - r.nominal); }
};

/// [rules]: settings of the published tuning rules' design columns (tuning_rules.hpp).
struct RulesSpec {
  std::optional<double> simc_tau_c_s;         // SIMC's closed-loop time constant τc, s (> 0); default: the model's delay
};

struct ReferenceSpec {
  double amplitude = 1.0;                     // step size, output units (!= 0)
};

/// [units]: the names of the units, shown in figure axes, tables, the terminal and result.json.
/// Labels only: nothing is converted (with time = "min", poles are in rad/min).
struct UnitsSpec {
  std::string output = "output units";        // of y (and reference.amplitude, noise_rms)
  std::string input = "input units";          // of u (actuator limits, effort_max, disturbance.size)
  std::string time = "s";                     // of every time in the spec and the results
};

struct Spec {
  std::string path;                           // file it was read from ("<string>" for text)
  std::string name;                           // file stem, used for default output folders
  std::string source_text;                    // the TOML text parsed (what a report shows as "the spec as read")
  std::string title;
  PlantSpec plant;
  ActuatorSpec actuator;
  ControllerSpec controller;
  Requirements requirements;
  ReferenceSpec reference;
  SearchSpec search;
  DisturbanceSpec disturbance;
  UnitsSpec units;
  UncertaintySpec uncertainty;
  RulesSpec rules;
  /// [sweep] vary: the axes of `specloop sweep`, each "KEY=FROM:TO:COUNT[log]" or "KEY=a,b,c"
  /// (syntax checked here; the keys are checked against the file by the sweep).
  std::vector<std::string> sweep_vary;
};

/// One key of the spec file, as `specloop keys` prints it and the README lists it. Free names
/// are written in angle brackets ("plant.nonlinear.parameters.<name>").
struct SpecKey {
  std::string_view key;            // dotted, e.g. "controller.sample_time"; "title" at the top level
  std::string_view unit;           // "—" for none
  std::string_view default_value;  // as shown; "—" when there is none
  std::string_view meaning;        // meaning and range (Markdown: `code`)
};
/// Every key the reader accepts, section by section. The reader's unknown-key checks (valid
/// names, did-you-mean) iterate this table, so a key is accepted exactly when it is listed here.
const std::vector<SpecKey>& spec_keys();

/// What the numerics honour (README, "Spec file reference"; measured in DEVELOPERS.md). Every
/// nonzero plant pole and zero magnitude (the delay's approximant poles included), rad/s:
inline constexpr double kMinRate = 1e-5;
inline constexpr double kMaxRate = 1e5;
/// … at most this far apart (fastest ÷ slowest).
inline constexpr double kMaxSpread = 1e6;
/// |G(jω)| at the geometric mean ω of those magnitudes (the controller's gains come out near its inverse).
inline constexpr double kMinGainScale = 1e-6;
inline constexpr double kMaxGainScale = 1e6;
/// |reference.amplitude|.
inline constexpr double kMinAmplitude = 1e-6;
inline constexpr double kMaxAmplitude = 1e6;
/// controller.derivative_filter N: at most this (its pole sits N times beyond the derivative zero).
inline constexpr double kMaxDerivativeFilter = 1e3;
/// controller.sample_time, controller.tracking_time, disturbance.noise_period: at least this
/// fraction of the plant's fastest time constant (1 / the largest pole or zero magnitude).
inline constexpr double kMinTimeFraction = 1e-4;
/// A plant pole with Re ≥ −tol·|p| and a zero within tol·max(|p|, |z|) of it cancel (refused).
inline constexpr double kCancellationTolerance = 1e-6;

struct SpecSources;  // where the reader found each part (private to the spec layer)

/// A spec as read, not yet modelled: every key read and checked against its type and range. For
/// a linear plant that is every check (model_spec returns it unchanged). For [plant.nonlinear]
/// the expressions are not yet compiled, the plant's linear forms and the found values are empty,
/// and the checks that need valid names or the linearization wait for model_spec: the
/// expressions' names and syntax, the operating point's names (state_guess and input are filled
/// then), the equilibrium, the plant's ranges (kMinRate …), u0 within the actuator's limits,
/// controller.tracking_time, controller.sample_time and disturbance.noise_period against the
/// plant's fastest time constant, and a zero steady_state_error_max's integrator.
struct SpecAsRead {
  Spec spec;
  std::shared_ptr<const SpecSources> sources;  // positions for model_spec's messages
};

/// The reading half of parse_spec: TOML syntax, names, types, ranges (see SpecAsRead). Throws
/// SpecError as parse_spec does; `path` is only used in messages and for `name`.
SpecAsRead read_spec(std::string_view text, const std::string& path);

/// The modelling half of parse_spec, once per spec: for [plant.nonlinear] compiles the
/// expressions, finds the equilibrium (Newton), linearizes there, fills both plant forms and
/// plant.nonlinear's found values and model, then runs the checks that waited for it. Messages
/// name the path and line given to read_spec. Throws SpecError.
Spec model_spec(SpecAsRead spec);

/// Reads and validates a spec file. Throws SpecError (message as above) on any problem:
/// unreadable file, TOML syntax, unknown key (with a did-you-mean), wrong type, out-of-range,
/// NaN/inf, improper plant, zero leading coefficient, empty or duplicate section, contradiction.
Spec load_spec(const std::string& path);

/// load_spec with the [plant] and [uncertainty] sections of `plant_path` (a file holding only
/// those, as `specloop fit` writes plant.toml) in place of the spec's: FILE's [plant] replaces the
/// spec's whole; FILE's [uncertainty] ranges replace the spec's, whose settings (samples, seed,
/// mode, …) stay unless FILE sets them; without [uncertainty] in FILE the spec's is dropped.
/// A problem with FILE's content names FILE, line and column (SpecError). Spec::source_text is
/// the merged document (what robust design's scenarios re-read).
Spec load_spec_with_plant(const std::string& spec_path, const std::string& plant_path);

/// Same as load_spec, from text; `path` is only used in messages and for `name`.
/// model_spec(read_spec(text, path)).
Spec parse_spec(std::string_view text, const std::string& path);

}  // namespace specloop
