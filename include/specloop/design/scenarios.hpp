// The plants a robust design is judged on ([uncertainty]): the nominal plant, the corners of the
// box of ranges, seeded Latin-hypercube samples inside it, and a fresh uniform sample drawn after
// the search to verify the claim. Each scenario is the nominal problem with its own plant.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "specloop/design/problem.hpp"
#include "specloop/spec/spec.hpp"

namespace specloop {

/// How a scenario was drawn. `found`: a fresh verification plant that refuted a first worst-case
/// optimum, added to the set for a second search.
enum class ScenarioKind { nominal, corner, sample, verification, found };
/// "nominal", "corner", "sample", "verification", "found".
std::string_view scenario_kind_name(ScenarioKind kind);

/// One plant of the uncertainty: its values of the ranged keys and the problem built with them.
struct Scenario {
  ScenarioKind kind = ScenarioKind::nominal;
  std::vector<double> values;  // one per UncertaintySpec::ranges entry, in that order
  Problem problem;             // the nominal problem with this plant (requirements, bounds, reference peak time kept)
};

/// The box [low_of, high_of] of every range (after uncertainty.scale), in the spec's order.
struct UncertaintyBox {
  std::vector<std::string> keys;
  std::vector<double> low, high, nominal;
  std::size_t size() const { return keys.size(); }
};
UncertaintyBox uncertainty_box(const UncertaintySpec& u);

/// The corners of the box, as value vectors. Every one of the 2^d when 2^d ≤ max_corners; else
/// max_corners of them chosen deterministically: all-low, all-high, each key alone at its other
/// end (from all-low and from all-high), then seeded random corners, without repeats.
std::vector<std::vector<double>> box_corners(const UncertaintyBox& box, int max_corners, std::uint64_t seed);

/// n points of a Latin hypercube in the box (each key's range cut into n equal strata, each
/// stratum used once, a uniform point inside it), from a 64-bit Mersenne Twister seeded with
/// `seed` and our own conversions to [0, 1) (the same plants on every machine and library).
std::vector<std::vector<double>> latin_hypercube(const UncertaintyBox& box, int n, std::uint64_t seed);
/// n independent uniform points in the box, from a stream distinct from latin_hypercube's (and
/// another one for each `draw`).
std::vector<std::vector<double>> uniform_sample(const UncertaintyBox& box, int n, std::uint64_t seed, int draw = 0);

/// The nominal problem with each ranged key set to `values` (the spec re-read with those values
/// and without [uncertainty]); the requirements, bounds, action and reference peak time stay the
/// nominal's. A plant.delay value too short for the numerics (the reader's "negligible: leave
/// it out") is set to 0 in the plant and in `values`. Throws SpecError naming the values when
/// that plant is not a valid spec plant.
Problem scenario_problem(const Problem& nominal, std::vector<double>& values);

/// The scenario set of the search: the nominal plant first, then the corners, then the samples.
std::vector<Scenario> scenario_set(const Problem& nominal);
/// The fresh verification plants (uncertainty.verify_samples), independent of the set's samples;
/// `draw` 1, 2, … gives further samples, independent of the first.
std::vector<Scenario> verification_plants(const Problem& nominal, int draw = 0);

/// "plant.gain = 200, plant.poles[0] = -0.9": a scenario's values, for messages and reports.
std::string scenario_values_text(const UncertaintyBox& box, const std::vector<double>& values);

/// A two-sided confidence interval of a proportion met/of (Wilson's score interval, E. B.
/// Wilson, JASA 22 (1927) 209–212), in percent; z = 1.96 gives 95 %. of = 0 gives [0, 100].
struct ProportionInterval {
  double low_pct = 0.0, high_pct = 100.0;
};
ProportionInterval wilson_interval(int met, int of, double z = 1.959963984540054);

}  // namespace specloop
