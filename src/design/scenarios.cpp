// The scenario plants of robust design (scenarios.hpp): the box, its corners, the Latin
// hypercube and the verification sample, each plant a re-read spec; Wilson's interval.
#include "specloop/design/scenarios.hpp"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <regex>
#include <set>

#include "specloop/design/characterize.hpp"
#include "specloop/spec/key_paths.hpp"

namespace specloop {

namespace {

/// [0, 1) from 53 random bits (portable, unlike std::uniform_real_distribution).
double unit(std::mt19937_64& g) { return static_cast<double>(g() >> 11) * 0x1.0p-53; }
/// An integer in [0, n) (n small; the bias of a 64-bit modulo is below 1e-15).
std::size_t below(std::mt19937_64& g, std::size_t n) { return static_cast<std::size_t>(g() % n); }

const std::regex real_pole(R"(plant\.poles\[\d+\])");

constexpr std::uint64_t kVerificationStream = 0x9E3779B97F4A7C15ull;
constexpr std::uint64_t kCornerStream = 0xD1B54A32D192ED03ull;
constexpr std::uint64_t kDrawStride = 0x632BE59BD9B4E019ull;

std::vector<double> corner_of(const UncertaintyBox& box, std::uint64_t bits) {
  std::vector<double> v(box.size());
  for (std::size_t k = 0; k < box.size(); ++k) v[k] = (bits >> k) & 1u ? box.high[k] : box.low[k];
  return v;
}

std::vector<Scenario> build(const Problem& nominal, ScenarioKind kind, std::vector<std::vector<double>> points) {
  std::vector<Scenario> out;
  out.reserve(points.size());
  for (auto& values : points) {
    Problem p = scenario_problem(nominal, values);
    out.push_back({kind, values, std::move(p)});
  }
  return out;
}

}  // namespace

std::string_view scenario_kind_name(ScenarioKind kind) {
  switch (kind) {
    case ScenarioKind::nominal: return "nominal";
    case ScenarioKind::corner: return "corner";
    case ScenarioKind::sample: return "sample";
    case ScenarioKind::verification: return "verification";
    case ScenarioKind::found: return "found";
  }
  return "unknown";
}

UncertaintyBox uncertainty_box(const UncertaintySpec& u) {
  UncertaintyBox box;
  for (const UncertainRange& r : u.ranges) {
    box.keys.push_back(r.key);
    box.low.push_back(u.low_of(r));
    box.high.push_back(u.high_of(r));
    box.nominal.push_back(r.nominal);
  }
  return box;
}

std::vector<std::vector<double>> box_corners(const UncertaintyBox& box, int max_corners, std::uint64_t seed) {
  const std::size_t d = box.size();
  std::vector<std::vector<double>> out;
  if (d < 63 && (std::uint64_t{1} << d) <= static_cast<std::uint64_t>(max_corners)) {
    for (std::uint64_t bits = 0; bits < (std::uint64_t{1} << d); ++bits) out.push_back(corner_of(box, bits));
    return out;
  }
  // Too many: a deterministic subset, each corner as a set of "high" keys (a bit vector).
  std::set<std::vector<bool>> seen;
  const auto add = [&](const std::vector<bool>& high) {
    if (out.size() >= static_cast<std::size_t>(max_corners) || !seen.insert(high).second) return;
    std::vector<double> v(d);
    for (std::size_t k = 0; k < d; ++k) v[k] = high[k] ? box.high[k] : box.low[k];
    out.push_back(std::move(v));
  };
  add(std::vector<bool>(d, false));
  add(std::vector<bool>(d, true));
  for (std::size_t k = 0; k < d; ++k) {
    std::vector<bool> one(d, false), all_but_one(d, true);
    one[k] = true;
    all_but_one[k] = false;
    add(one);
    add(all_but_one);
  }
  std::mt19937_64 g(seed ^ kCornerStream);
  for (int tries = 0; out.size() < static_cast<std::size_t>(max_corners) && tries < 100 * max_corners; ++tries) {
    std::vector<bool> high(d);
    for (std::size_t k = 0; k < d; ++k) high[k] = (g() >> 63) != 0;
    add(high);
  }
  return out;
}

std::vector<std::vector<double>> latin_hypercube(const UncertaintyBox& box, int n, std::uint64_t seed) {
  std::mt19937_64 g(seed);
  const std::size_t count = static_cast<std::size_t>(std::max(0, n));
  std::vector<std::vector<double>> out(count, std::vector<double>(box.size()));
  std::vector<std::size_t> strata(count);
  for (std::size_t k = 0; k < box.size(); ++k) {
    for (std::size_t i = 0; i < count; ++i) strata[i] = i;
    for (std::size_t i = count; i > 1; --i) std::swap(strata[i - 1], strata[below(g, i)]);  // Fisher–Yates
    for (std::size_t i = 0; i < count; ++i) {
      const double u = (static_cast<double>(strata[i]) + unit(g)) / static_cast<double>(count);
      out[i][k] = box.low[k] + u * (box.high[k] - box.low[k]);
    }
  }
  return out;
}

std::vector<std::vector<double>> uniform_sample(const UncertaintyBox& box, int n, std::uint64_t seed, int draw) {
  std::mt19937_64 g((seed ^ kVerificationStream) + static_cast<std::uint64_t>(draw) * kDrawStride);
  std::vector<std::vector<double>> out(static_cast<std::size_t>(std::max(0, n)), std::vector<double>(box.size()));
  for (auto& point : out)
    for (std::size_t k = 0; k < box.size(); ++k) point[k] = box.low[k] + unit(g) * (box.high[k] - box.low[k]);
  return out;
}

std::string scenario_values_text(const UncertaintyBox& box, const std::vector<double>& values) {
  std::string text;
  for (std::size_t k = 0; k < box.size() && k < values.size(); ++k)
    text += fmt::format("{}{} = {:.6g}", k ? ", " : "", box.keys[k], values[k]);
  return text;
}

Problem scenario_problem(const Problem& nominal, std::vector<double>& values) {
  const Spec& spec = nominal.spec;
  const UncertaintyBox box = uncertainty_box(spec.uncertainty);
  SpecDocument document(spec.source_text, spec.path);
  document.erase("uncertainty");
  document.erase("sweep");
  document.erase("search.objective_at");  // refused without [uncertainty]; the nominal problem keeps it
  for (std::size_t k = 0; k < box.size(); ++k) {
    // A real pole drawn closer to the origin than the numerics resolve (a range through 0: a lag
    // that turns into an integrator and beyond) is the integrator it is at that scale.
    if (std::regex_match(box.keys[k], real_pole) && values[k] != 0.0 && std::abs(values[k]) < kMinRate) values[k] = 0.0;
    document.set_number(box.keys[k], values[k]);
  }
  Spec plant_spec;
  try {
    try {
      plant_spec = document.spec(spec.path);
    } catch (const SpecError& e) {
      // A delay drawn so short that the numerics refuse it (its Padé approximant's poles beyond
      // kMaxRate, or the fastest of the plant's roots by more than kMaxSpread: "negligible, leave
      // it out") is left out: that plant has no delay, and its values say so. A delay refused for
      // being too long is an error like any other.
      const auto delay = std::find(box.keys.begin(), box.keys.end(), "plant.delay");
      if (delay == box.keys.end() || std::string_view(e.what()).find("plant.delay:") == std::string_view::npos) throw;
      double& d = values[static_cast<std::size_t>(delay - box.keys.begin())];
      SpecDocument without = document;
      without.set_number("plant.delay", 0.0);
      const Spec delay_free = without.spec(spec.path);  // throws (the plant's own fault) when that is refused too
      double fastest_root = 0.0;
      for (const auto* roots : {&delay_free.plant.poles, &delay_free.plant.zeros})
        for (const Complex& z : *roots) fastest_root = std::max(fastest_root, std::abs(z));
      double fastest_approximant = 0.0;
      for (const Complex& p : delay_approximant(d, kDelayApproximantOrder).poles())
        fastest_approximant = std::max(fastest_approximant, std::abs(p));
      if (!(d > 0.0) || fastest_approximant <= fastest_root) throw;
      d = 0.0;
      plant_spec = delay_free;
    }
  } catch (const SpecError& e) {
    // The position is in the re-written text, not the user's file: keep only what is wrong.
    static const std::regex located(R"(^.*?:\d+:\d+: )");
    throw SpecError(fmt::format("{}: [uncertainty]: the plant with {} is not a valid plant: {}", spec.path,
                                scenario_values_text(box, values), std::regex_replace(e.what(), located, "",
                                                                                        std::regex_constants::format_first_only)));
  }
  Problem p = nominal;
  p.spec.plant = plant_spec.plant;
  p.plant = linear_plant(plant_spec);
  p.normalized_plant = TransferFunction(p.action * p.plant.numerator, p.plant.denominator);
  p.plant_realization = realize(p.plant);
  p.delay_free_realization =
      plant_spec.plant.delay_s > 0.0
          ? realize(TransferFunction(Polynomial(plant_spec.plant.numerator), Polynomial(plant_spec.plant.denominator)))
          : p.plant_realization;
  p.sampled = nominal.sampled && p.plant_realization.D(0) == 0.0;
  return p;
}

std::vector<Scenario> scenario_set(const Problem& nominal) {
  const UncertaintySpec& u = nominal.spec.uncertainty;
  const UncertaintyBox box = uncertainty_box(u);
  std::vector<Scenario> out;
  out.push_back({ScenarioKind::nominal, box.nominal, nominal});
  for (Scenario& s : build(nominal, ScenarioKind::corner, box_corners(box, u.max_corners, u.seed))) out.push_back(std::move(s));
  for (Scenario& s : build(nominal, ScenarioKind::sample, latin_hypercube(box, u.samples, u.seed))) out.push_back(std::move(s));
  return out;
}

std::vector<Scenario> verification_plants(const Problem& nominal, int draw) {
  const UncertaintySpec& u = nominal.spec.uncertainty;
  return build(nominal, ScenarioKind::verification, uniform_sample(uncertainty_box(u), u.verify_samples, u.seed, draw));
}

ProportionInterval wilson_interval(int met, int of, double z) {
  if (of <= 0) return {};
  const double n = of, p = met / n, z2 = z * z;
  const double centre = (p + z2 / (2.0 * n)) / (1.0 + z2 / n);
  const double half = z / (1.0 + z2 / n) * std::sqrt(p * (1.0 - p) / n + z2 / (4.0 * n * n));
  // At 0 of n (n of n) the interval's end is 0 (100 %) exactly, not a rounding residue.
  return {met <= 0 ? 0.0 : 100.0 * std::max(0.0, centre - half), met >= of ? 100.0 : 100.0 * std::min(1.0, centre + half)};
}

}  // namespace specloop
