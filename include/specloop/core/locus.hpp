// The root locus of a compensated loop as its gain varies, computed (not sketched): the closed-loop
// poles of k·L(s) on a gain grid refined until no branch jumps, sorted into continuous branches;
// and the loop's frequency response on a logarithmic grid. Both feed the report's figures.
#pragma once

#include <vector>

#include "specloop/core/lti.hpp"

namespace specloop {

/// Closed-loop poles of 1 + k·L(s) = 0, i.e. roots of D(s) + k·N(s), for gain multipliers k.
struct RootLocus {
  std::vector<double> gains;                    // increasing; contains 1 exactly (the design itself)
  std::vector<std::vector<Complex>> poles;      // poles[i][b]: branch b at gains[i]; deg D entries each
};

/// Gains from k_min to k_max (0 < k_min < 1 < k_max), geometric, `points` to start with; an
/// interval is halved (geometrically) while some branch moves farther than `max_jump` times
/// the locus's overall scale between its ends (at most 12 halvings per interval). Branches are
/// continued by matching each pole to the nearest unused one of the previous gain.
RootLocus trace_root_locus(const TransferFunction& loop, double k_min, double k_max, int points = 240,
                           double max_jump = 0.02);

/// L(jω) on a grid: magnitude in dB and phase in degrees, continuous in ω (unwrapped from the
/// lowest frequency, where the phase is taken in (−360°, 0°] for a loop with integrators).
struct FrequencySeries {
  std::vector<double> omega_rad_s, magnitude_db, phase_deg;
};
FrequencySeries loop_frequency_response(const TransferFunction& loop, double omega_min, double omega_max,
                                        int points = 600);

}  // namespace specloop
