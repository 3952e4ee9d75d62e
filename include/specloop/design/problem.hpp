// The search problem built from a spec: the plant's linear model and realizations, the
// requirement list, the settling band, the search margin and bounds — everything the designs and
// the search do not change, computed once per spec.
#pragma once

#include <optional>
#include <utility>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/design/characterize.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

/// Everything the search does not change, computed once per spec.
struct Problem {
  Spec spec;
  TransferFunction plant;                 // the linear model: G(s), times the delay approximant
  double action = 1.0;                    // loop_action(plant): +1 direct, −1 reverse; every controller carries it
  TransferFunction normalized_plant;      // action·plant: what the design rules (reference gain, root locus,
                                          // ultimate gain) work on, with positive gains
  StateSpace plant_realization;           // of `plant`
  StateSpace delay_free_realization;      // of G(s) alone, for the nonlinear loop (exact delay)
  std::optional<double> reference_peak_time_s;  // from the characterization (P gain at the limit)
  std::vector<Requirement> requirements;
  double band_fraction = 0.02;
  double search_margin = 0.01;                  // search.margin_pct/100: see `tightened` (requirements.hpp)
  double tracking_window_s = 1.0;               // W of the tracking objectives (see tracking_objective)
  bool needs_margins = false;                   // a margin requirement or the Ms objective
  bool needs_peaks = false;                     // noise_gain_max or complementary_peak_max (add_closed_loop_peaks)
  bool needs_load = false;                      // a load requirement or the load_iae objective (regulation.hpp)
  std::vector<ParameterInfo> parameters;        // of the spec's structure, then b when search.tune_setpoint_weight
  std::vector<std::pair<double, double>> bounds;  // per parameter, natural units, lo < hi
  /// controller.sample_time is set and the plant is strictly proper: the linear loop of every
  /// measurement and of the search is the sampled one (sampled_loop.hpp), not the continuous one.
  bool sampled = false;
};

/// The filters a search vector's filter entries stand for (after the structure's and b), or the
/// spec's given ones where nothing is searched.
struct SearchedFilters {
  std::optional<NotchFilter> notch;
  std::optional<MeasurementFilter> measurement;
};
SearchedFilters filters_from(const ControllerSpec& cs, const double* filter_params);
/// How many of Problem::parameters are the searched filters' (0, 1, 3 or 4; the last ones).
std::size_t filter_parameter_count(const ControllerSpec& cs);

/// The count of the structure's own parameters in Problem::parameters (all of them, or all but
/// the trailing set-point weight b when the search tunes it).
std::size_t structure_parameter_count(const Problem& problem);
/// The controller a search vector (natural units, Problem::parameters order) stands for: the
/// structure's parameters, and b when the search tunes it. Throws as make_controller does.
Controller controller_from(const Problem& problem, const double* params);
Controller controller_from(const Problem& problem, const std::vector<double>& params);
/// A controller's search vector: its series parameters, then its b (the spec's when it has none)
/// when the search tunes b.
std::vector<double> search_vector(const Problem& problem, const Controller& c);
/// The set-point weight b the controller runs with: its own when the search tuned it, else the
/// spec's controller.setpoint_weight.
double setpoint_weight_of(const ControllerSpec& spec, const Controller& c);

/// Builds the Problem: default search bounds from the plant's pole/zero scale and the reference
/// gain, overridden by [search.bounds]. Throws SpecError for a bound that names no parameter.
Problem make_problem(const Spec& spec, const Characterization& ch);

}  // namespace specloop
