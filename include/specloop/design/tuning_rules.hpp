// Published tuning rules beside the optimum: the plant reduced to a first- or second-order model
// with delay by Skogestad's half rule, then the SIMC rules (Skogestad 2003) and the AMIGO rules
// (Åström & Hägglund 2004 for PI; their 2006 book for PID). Each rule gives a PI or PID
// controller, or a one-line reason it does not apply; the model and how it was obtained ride along.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

/// A low-order model of the plant:
///   first order   k·e^(−L·s)/(T·s + 1)                  (integrating: k·e^(−L·s)/s)
///   second order  k·e^(−L·s)/((T1·s + 1)(T2·s + 1))     (integrating: k·e^(−L·s)/(s·(T2·s + 1)))
/// k is the steady-state gain, or for an integrating model the gain k' of the slope; signed as the
/// plant's (the rules read |k|, the controller carries the action).
struct ReducedModel {
  int order = 1;                  // 1 or 2
  bool integrating = false;       // one pole at s = 0 (kept exactly)
  double gain = 0.0;              // k or k'
  double lag_s = 0.0;             // T (order 1) or T1 (order 2); 0 for an integrating model
  double second_lag_s = 0.0;      // T2 (order 2; 0 when the plant has no second lag)
  double delay_s = 0.0;           // L (θ in Skogestad's notation): the spec's delay plus what was moved there
  bool exact = false;             // nothing was approximated: the model is the plant
  std::vector<std::string> steps; // how each lag, zero and the sampling went where, in words
};

/// What the half rule gave for one order: the model, or why none can be made.
struct ModelOutcome {
  std::optional<ReducedModel> model;
  std::string reason;             // empty when `model` is set
};

/// Skogestad's half rule (Skogestad 2003, §3): from the plant k·Π(s − z)/Π(s − p)·e^(−delay·s),
/// with real poles p < 0 (lags τ = −1/p) and at most one pole at 0, and real zeros.
/// - The largest neglected lag is split half to the delay, half to the smallest retained lag;
///   every smaller lag goes to the delay whole; so does each right-half-plane zero's time
///   constant 1/z (inverse response); a sampled controller adds h/2 (`sample_time_s`, 0: none).
/// - A left-half-plane zero (T0·s + 1) is first taken out against a neighbouring lag τ0 by
///   Skogestad's rules T1, T1a, T1b, T2, T3 (the closest larger lag when there is one, else the
///   closest smaller), which read the final model's delay θ: iterated until θ settles.
/// - One pole at 0 is kept as the integrator: it acts as the largest lag T → ∞ with k' = k/T, so
///   the largest finite lag is the largest neglected one and goes half to the delay.
/// Not made (reason set): a complex pole or zero, an unstable pole, two or more poles at 0, a zero
/// at 0, a left-half-plane zero with no lag to take it out against. Order 2 with a single lag
/// gives T2 = 0. `order` is 1 or 2 (std::invalid_argument otherwise).
ModelOutcome half_rule_model(const PlantSpec& plant, int order, double sample_time_s = 0.0);

/// Controller settings in the series (cascade) form Kc·(1 + 1/(τI·s))·(1 + τD·s); τD = 0 for PI.
struct SeriesSettings {
  double kc = 0.0, ti = 0.0, td = 0.0;
};
/// The standard (ideal) form Kp·(1 + 1/(Ti·s) + Td·s) of series settings: Kp = Kc·(1 + τD/τI),
/// Ti = τI + τD, Td = τI·τD/(τI + τD) (common practice).
StandardForm standard_from_series(const SeriesSettings& s, double derivative_filter);

/// SIMC (Skogestad 2003, Table 1), on |k|, with closed-loop time constant τc > 0:
///   first order (PI)          Kc = T/(|k|·(τc + L)),   τI = min(T, 4·(τc + L))
///   integrating (PI)          Kc = 1/(|k|·(τc + L)),   τI = 4·(τc + L)
///   second order (PID)        Kc = T1/(|k|·(τc + L)),  τI = min(T1, 4·(τc + L)),  τD = T2
///   integrating + lag (PID)   Kc = 1/(|k|·(τc + L)),   τI = 4·(τc + L),           τD = T2
SeriesSettings simc_settings(const ReducedModel& m, double tau_c_s);

/// AMIGO on a stable first-order model with L > 0, on |k|, standard form:
///   PI  (Åström & Hägglund 2004)  K = 0.15/|k| + (0.35 − L·T/(L + T)²)·T/(|k|·L),
///                                 Ti = 0.35·L + 13·L·T²/(T² + 12·L·T + 7·L²)
///   PID (Åström & Hägglund 2006)  K = (0.2 + 0.45·T/L)/|k|,  Ti = L·(0.4·L + 0.8·T)/(L + 0.1·T),
///                                 Td = 0.5·L·T/(0.3·L + T)
/// `derivative_filter` is the N put into the form (the rules give an unfiltered Td).
StandardForm amigo_settings(const ReducedModel& m, bool pid, double derivative_filter);

/// One rule's outcome on a plant: its controller, or a one-line reason it is left out.
struct RuleOutcome {
  std::string rule;                    // "simc" or "amigo"
  std::optional<ReducedModel> model;   // the model it was applied to (also when left out after the model)
  std::optional<double> tau_c_s;       // SIMC: the τc used
  std::string tau_c_source;            // SIMC: "the model's delay" or "rules.simc_tau_c"
  std::optional<Controller> controller;  // with the spec's structure, N and the plant's action
  std::string formula;                 // the settings as computed, in words
  std::string reason;                  // why left out; empty when applied
  bool applied() const { return controller.has_value(); }
};

/// The spec's inputs to the rules, read from a Problem by `tuning_rule_inputs`.
struct RuleInputs {
  Structure structure = Structure::pi;
  double derivative_filter = 10.0;
  double sample_time_s = 0.0;          // 0: a continuous controller
  double action = 1.0;                 // ±1, applied to the controller
  std::optional<double> simc_tau_c_s;  // rules.simc_tau_c; default: the model's delay
};
RuleInputs tuning_rule_inputs(const Problem& problem);

/// SIMC on the plant: PI from the first-order model, PID from the second-order one; left out for
/// other structures, when no model can be made, when τc defaults to a zero delay, and for a PID
/// whose model has no second lag (τD = T2 = 0: no derivative action).
RuleOutcome simc_rule(const PlantSpec& plant, const RuleInputs& in);

/// AMIGO on the plant's first-order model (PI or PID); left out for other structures, when no
/// model can be made, for an integrating model (its integrating form is not applied here) and for
/// a model without delay (the rules divide by L).
RuleOutcome amigo_rule(const PlantSpec& plant, const RuleInputs& in);

/// A rule's controller is kept only when its closed loop with `plant` (the linear model every
/// design is measured on) stays inside what the numerics honour, as every plant must (spec.hpp:
/// each nonzero pole magnitude in [kMinRate, kMaxRate], 1 % allowed for a plant pole at an edge
/// that the feedback moves a little); otherwise the outcome loses its
/// controller and says why. Example: SIMC with τc = L on a plant whose only "delay" is a lag of
/// 1e-5 s puts closed-loop poles near 3e5 rad/s with a gain of 2.5e10, where the exact simulation
/// loses digits (its peak effort times the rounding exceeds the metrics' resolution).
void screen_rule_loop(RuleOutcome& rule, const TransferFunction& plant);

/// The model as a formula, times in the spec's time unit, e.g. "1.5·e^(−0.3·s)/(2·s + 1)".
std::string model_text(const ReducedModel& m);

}  // namespace specloop
