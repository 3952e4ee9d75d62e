// The requirements of a spec as a list of bounds, and how a measured response is read against
// them: the value each requirement reads, its normalized violation and slack, the search's
// tightened limits and tracking objectives, and the checked value as tables show it.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "specloop/core/margins.hpp"
#include "specloop/sim/response.hpp"
#include "specloop/spec/requirement_catalogue.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

/// One requirement: its spec key, whether it is an upper ("max") or lower ("min") bound, its limit.
struct Requirement {
  std::string key;      // e.g. "overshoot_max_pct", as in the spec's [requirements]
  std::string unit;     // for tables: "%", "s", "dB", "deg", ""
  bool upper = true;    // value <= limit (true) or value >= limit (false)
  double limit = 0.0;   // in the key's unit (peak_time_ratio: the ratio)
  bool magnitude = false;  // the bound applies to |value| (steady-state error: the value stays signed)
  const RequirementEntry* entry = nullptr;  // its catalogue entry (requirement_list sets it)
};

/// The requirements of a spec as a list, in the catalogue's check order (requirement_check_order;
/// peak_time_ratio stays a ratio: requirement_value divides by the reference peak time).
std::vector<Requirement> requirement_list(const Requirements& r);

/// A requirement checked on one design.
struct RequirementCheck {
  Requirement requirement;
  std::optional<double> value;  // empty when the response has no such value (see README)
  bool met = false;
  double violation = 0.0;       // normalized: (value − limit)/|limit| for upper bounds, > 0 when missed
  double slack = 0.0;           // requirement_slack: normalized room, negative when missed
};

/// The time a peak-time requirement reads (README, "Metric definitions"): the time of the peak
/// when the peak is visible — the overshoot exceeds the settling band (`band_pct`) and the
/// response never falls further below y∞ after the peak than the peak rose above it (a decaying
/// oscillation) — else the final entry into the band (the settling time), so that no response
/// is credited with a time after which it still leaves the band. `margin` (a fraction, the
/// search's) makes both tests stricter: the overshoot must exceed band_pct·(1 + margin) and the
/// dip stay below overshoot·(1 − margin), and a later hump (StepMetrics::next_peak_time_s) whose
/// height is within kPeakTieFraction + margin·overshoot of the peak is read instead of the peak
/// (two humps near a tie: the later one). Used by the requirement checks, the search and
/// sweep-report, so all three read the same time.
std::optional<double> effective_peak_time(const StepMetrics& m, double band_pct, double margin = 0.0);

/// The value a requirement reads from a measured response (std::nullopt: not defined).
/// Peak-time requirements read effective_peak_time (`band_pct`, `margin` as there).
std::optional<double> requirement_value(const Requirement& r, const StepMetrics& m,
                                        const std::optional<Margins>& margins,
                                        const std::optional<double>& reference_peak_time_s, double band_pct,
                                        double margin = 0.0);

/// The search's margin (README, `search.margin_pct`): in the search every limit is tightened by
/// the fraction `margin` of itself (an upper bound L becomes L − margin·|L|, a lower one
/// L + margin·|L|; a zero limit stays zero) and the settling band is narrowed by the same
/// fraction, so that the design it returns meets the real limits with room, not on the edge.
/// The checks of a design always use the spec's own limits.
Requirement tightened(const Requirement& r, double margin);

/// The tracking objectives itae, iae and ise as the search minimizes them (README, "Objectives"):
/// the integral about y∞ plus the integral that the offset r − y∞ alone accumulates over the
/// problem's tracking window W — ITAE + |r − y∞|·W²/2, IAE + |r − y∞|·W, ISE + (r − y∞)²·W — so
/// that following the reference r (`amplitude`) is rewarded and a gain driven to zero, which
/// shrinks the integrals about y∞ with y∞ itself, is not optimal. Throws std::logic_error for
/// the other objectives.
double tracking_objective(Objective objective, const StepMetrics& m, double amplitude, double window_s);

/// A checked value as tables show it: 4 significant digits, more when a miss would otherwise
/// print equal to the limit ("10.0002 ✗" against "≤ 10", never "10 ✗").
std::string shown_value(const RequirementCheck& c);

/// Normalized violation of a requirement by a value: (value − limit)/|limit| for an upper bound
/// (the reverse for a lower one; a zero limit is scaled by 0.01), 0 when met; a missing value
/// counts as a 100 % miss, an infinite miss as 1000.
double requirement_violation(const Requirement& r, const std::optional<double>& value);

/// Normalized room left by a value, the same scale as requirement_violation but signed: positive
/// when met with room, negative when missed; −1 for a missing value.
double requirement_slack(const Requirement& r, const std::optional<double>& value);

/// The tightest requirement among met checks (smallest slack), ignoring a zero limit met exactly
/// (zero steady-state error from an integrator is structure, not a trade-off); "" when none.
std::string tightest_requirement(const std::vector<RequirementCheck>& checks);

}  // namespace specloop
