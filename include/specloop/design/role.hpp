// The role a design plays in a run: which rule made it. One spelling per role, written to
// result.json, the reports and the sweep store.
#pragma once

#include <string_view>

namespace specloop {

/// The designs of a run, in the order the run makes them (DesignRun::designs keeps this order).
enum class DesignRole {
  reference,      // the P controller whose overshoot is at the limit
  classical,      // the root-locus (hand) design
  ultimate_gain,  // the Ziegler–Nichols rules from the ultimate gain
  simc,           // Skogestad's SIMC rules on the half-rule model (tuning_rules.hpp)
  amigo,          // Åström–Hägglund's AMIGO rules on the half-rule model
  optimized,      // the NLopt search against the simulated response
};

/// The role's spelling in every output: "reference", "classical", "ultimate_gain", "simc", "amigo",
/// "optimized".
constexpr std::string_view role_name(DesignRole role) {
  switch (role) {
    case DesignRole::reference: return "reference";
    case DesignRole::classical: return "classical";
    case DesignRole::ultimate_gain: return "ultimate_gain";
    case DesignRole::simc: return "simc";
    case DesignRole::amigo: return "amigo";
    case DesignRole::optimized: return "optimized";
  }
  return "unknown";
}

}  // namespace specloop
