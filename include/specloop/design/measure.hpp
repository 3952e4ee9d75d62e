// A design's record and its measurement on the linear loop: the closed loop's poles, the step
// response (the sampled loop's when the controller is sampled), margins, the second-order
// prediction and its diagnosis, every requirement checked; and the fragility warnings read from a
// measured and confirmed design.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/compensator.hpp"
#include "specloop/core/margins.hpp"
#include "specloop/core/second_order.hpp"
#include "specloop/design/characterize.hpp"
#include "specloop/design/confirm.hpp"
#include "specloop/design/nonlinear_loop.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/design/role.hpp"

namespace specloop {

/// A design measured on the linear loop, and confirmed on the nonlinear one.
struct Design {
  DesignRole role = DesignRole::optimized;  // which rule made it (role_name: its name in every output); set by measure_design
  Controller controller;
  TransferFunction reference_path;  // C_r: u = C_r·r − C·y (equals C without set-point weights)
  StepStatus status = StepStatus::ok;
  std::vector<Complex> closed_loop_poles;
  std::optional<SecondOrderPrediction> second_order;  // from the slowest complex closed-loop pair
  std::optional<DominanceDiagnosis> dominance;        // does that prediction hold, and what breaks it
  StepMetrics simulated;
  LinearGrid linear_grid;           // the time grid `simulated` was measured on (the confirmation starts from it)
  std::optional<Margins> margins;   // empty when the closed loop is unstable
  std::vector<RequirementCheck> checks;
  bool meets_all = false;
  std::optional<NonlinearConfirmation> nonlinear;  // confirm_design; empty when the linear loop is unstable
  bool sampled = false;             // `simulated` is the sampled loop's (Problem::sampled)
  std::vector<std::string> notes;   // how it was made, what was left out
  /// Facts about the design an engineer would want flagged (fragility): a delay margin too short
  /// for any digital implementation, a command far beyond its final value with nothing bounding
  /// it, a parameter on its search bound (`fragility_warnings`).
  std::vector<std::string> warnings;
};

/// The design's linear loop u = C_r·r − C·y around `plant` (outputs y, u): close_loop of C and
/// C_r, or, with filters, of the controller's sectioned realization (controller_realization).
StateSpace design_loop(const Problem& problem, const StateSpace& plant, const Design& d);

/// A requirement read off a measured response (the problem's reference peak time and band; the
/// spec's own limit).
RequirementCheck check_requirement(const Problem& problem, const Requirement& req, const StepMetrics& m,
                                   const std::optional<Margins>& margins);

/// Measures a controller on the problem's linear loop (the sampled one when Problem::sampled) and
/// checks every requirement. The nonlinear loop is the next stage's (confirm_design).
Design measure_design(const Problem& problem, DesignRole role, const Controller& controller);

/// The fragility warnings of a measured design (Design::warnings): its delay margin below
/// kDelayMarginFloor (no digital controller is that fast) or below two sample periods of a sampled
/// controller; with neither actuator limits nor effort_max, a peak command over
/// kEffortAmplification × its final value; on the nonlinear loop (when confirmed), a response that
/// never settles; a search parameter within 0.1 % (log scale) of a bound.
std::vector<std::string> fragility_warnings(const Problem& problem, const Design& d, bool searched);
inline constexpr double kDelayMarginFloor = 1e-4;     // s
inline constexpr double kEffortAmplification = 100.0;

}  // namespace specloop
