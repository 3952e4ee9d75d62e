// The curves a report draws, computed from a finished design run: each design's step response and
// effort on the linear loop (as it was measured), the recommended design's on the nonlinear loop,
// the root locus of the recommended loop with its open-loop roots, and the classical and optimized
// loops' frequency responses. Every series here is finite (a curve with a NaN or an infinity is
// left out whole, a frequency point alone).
#pragma once

#include <optional>
#include <utility>
#include <vector>

#include "specloop/core/locus.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/design/design_run.hpp"
#include "specloop/design/role.hpp"

namespace specloop {

/// One response curve of a design: time, output, applied control (and the command before the
/// actuator, for the nonlinear loop).
struct ResponseTrace {
  DesignRole design = DesignRole::optimized;
  bool nonlinear = false;  // the nonlinear loop (limits, rate limit, delay, sampling) or the linear one
  std::vector<double> time_s, output, control, command;
};

/// A pole or zero of the loop the locus is drawn for, and whether it belongs to the delay's Padé
/// approximant (part of that loop, not of the plant).
struct LoopRoot {
  Complex at;
  bool delay_approximant = false;
};

/// The s-plane of the recommended design.
struct LocusTrace {
  std::optional<DesignRole> design;  // whose controller the locus varies (the recommended design); empty: none
  TransferFunction loop;             // its C(s)·G(s)
  RootLocus locus;                   // gain multipliers 1e-3 … 1e3 (empty without a design)
  /// The open-loop poles and zeros: of `loop` when the locus has points, else of the plant alone
  /// (`of_plant`: no stable design to vary).
  std::vector<LoopRoot> poles, zeros;
  bool of_plant = false;
};

struct DesignTraces {
  /// The linear loop of every design whose loop simulates (in the run's order; sampled designs on
  /// the sampled loop, as measured), then the recommended design on the nonlinear loop (2000
  /// samples, over the confirmation's horizon when it has one).
  std::vector<ResponseTrace> responses;
  LocusTrace locus;
  /// The classical and optimized loops' frequency responses, over two decades beyond every corner
  /// and crossover of the loop (300 points).
  std::vector<std::pair<DesignRole, FrequencySeries>> frequency;
  /// With [uncertainty]: the recommended design's linear-loop step response on each plant of the
  /// scenario set (index into RobustRun::scenarios, at most kEnvelopeSamples points each).
  std::vector<std::pair<std::size_t, ResponseTrace>> scenarios;
  /// With a load requirement or the load_iae objective (Problem::needs_load): every design's
  /// response to the load step on the continuous linear loop (`output`: y; no control), as
  /// measured (measure_load).
  std::vector<ResponseTrace> load;
};
inline constexpr std::size_t kEnvelopeSamples = 400;

/// Computes the traces of a design run (the simulators run again here, never in the report).
DesignTraces design_traces(const DesignRun& run);

}  // namespace specloop
