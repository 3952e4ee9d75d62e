// The plant's refusals (plant_checks.hpp): hidden modes, the ranges the numerics honour, the gain
// scale; the zero-error integrator check; the roots of the coefficient form.
#include "spec/plant_checks.hpp"

#include "specloop/core/lti.hpp"

#include <algorithm>
#include <cmath>
#include <iterator>
#include <limits>
#include <unsupported/Eigen/Polynomials>

namespace specloop::reading {

namespace {

constexpr double kInf = std::numeric_limits<double>::infinity();

std::string root_text(std::complex<double> r) {
  if (r.imag() == 0.0) return fmt::format("{:.6g}", r.real());
  return fmt::format("{:.6g} {} j{:.6g}", r.real(), r.imag() > 0.0 ? '+' : '-', std::abs(r.imag()));
}

/// A plant pole in the closed right half plane (Re p ≥ 0, the imaginary axis included) that a
/// zero cancels is a mode the output never shows and no controller can act on. (A cancelled
/// stable pair is only noted by `analyze`.)
void check_hidden_modes(const std::string& path, const PlantSpec& plant, const PlantSources& where) {
  for (const LocatedRoot& p : where.poles) {
    if (p.value.real() < -kCancellationTolerance * std::abs(p.value)) continue;
    for (const LocatedRoot& z : where.zeros) {
      if (std::abs(p.value - z.value) > kCancellationTolerance * std::max(std::abs(p.value), std::abs(z.value))) continue;
      const bool on_axis = p.value.real() <= kCancellationTolerance * std::abs(p.value);
      if (plant.nonlinear)
        fail_at(path, z.at, z.key,
                fmt::format("the linearization at this operating point has a mode at {} {} that u cannot move or the "
                            "output cannot see (its pole is cancelled by a zero in G(s)): {}, and no controller can "
                            "reach it; expected every state that does not decay on its own to be driven by u and seen "
                            "in the output",
                            root_text(p.value), on_axis ? "on the imaginary axis" : "in the right half plane",
                            on_axis ? "it never decays" : "it grows unseen"));
      fail_at(path, z.at, z.key,
              fmt::format("zero {} cancels the pole {} ({}) {}: the plant has a hidden mode that the output never shows "
                          "and that no controller can reach, so the loop can never be internally stable{}; expected no "
                          "zero within a relative {} of a pole with Re ≥ 0. If that mode truly does not exist, remove "
                          "both the pole and the zero",
                          root_text(z.value), root_text(p.value), p.key,
                          on_axis ? "on the imaginary axis" : "in the right half plane",
                          on_axis ? " (the mode never decays: an integrator holds any offset, an undamped pair rings "
                                    "forever)"
                                  : " (the mode grows without bound)",
                          limit_text(kCancellationTolerance)));
    }
  }
}

/// A root whose magnitude lies outside [kMinRate, kMaxRate]: the message names what to change.
[[noreturn]] void fail_magnitude(const std::string& path, const PlantSpec& plant, const LocatedRoot& r, double m) {
  if (r.key == "plant.delay") {
    // The approximant's pole magnitudes for a 1 s delay scale as 1/delay.
    double unit_delay_fastest = 0.0, unit_delay_slowest = kInf;
    for (const Complex& p : delay_approximant(1.0, kDelayApproximantOrder).poles()) {
      unit_delay_fastest = std::max(unit_delay_fastest, std::abs(p));
      unit_delay_slowest = std::min(unit_delay_slowest, std::abs(p));
    }
    fail_at(path, r.at, r.key,
            fmt::format("{:g} s puts the poles of its order-{} Padé approximant (which every linear computation uses) "
                        "at {:.3g} rad/s; expected every pole and zero magnitude within [{}, {}] rad/s, i.e. a "
                        "delay between about {:.2g} s and {:.2g} s{}",
                        plant.delay_s, kDelayApproximantOrder, m, limit_text(kMinRate), limit_text(kMaxRate),
                        unit_delay_fastest / kMaxRate, unit_delay_slowest / kMinRate,
                        m > kMaxRate ? " (a delay this short is negligible: leave it out)" : ""));
  }
  fail_at(path, r.at, r.key,
          fmt::format("{} {} has magnitude {:.3g} rad/s; expected every nonzero pole and zero magnitude within "
                      "[{}, {}] rad/s (time constants from 10 µs to about 28 h), where the step simulation and "
                      "the search keep their accuracy; for a plant this {} express time in {} throughout the spec",
                      r.key.find("zero") != std::string::npos || r.key == "plant.numerator" ? "zero" : "pole",
                      root_text(r.value), m, limit_text(kMinRate), limit_text(kMaxRate), m > kMaxRate ? "fast" : "slow",
                      m > kMaxRate ? "milliseconds or microseconds" : "minutes or hours"));
}

/// The gain scale: |G| at the geometric mean `w` of the pole and zero magnitudes. The controller's
/// gains come out near its inverse.
void check_gain_scale(const std::string& path, const PlantSpec& plant, const PlantSources& where, double w) {
  const TransferFunction g(Polynomial(plant.numerator), Polynomial(plant.denominator));
  const double magnitude = std::abs(g(Complex(0.0, w)));
  if (!(magnitude >= kMinGainScale && magnitude <= kMaxGainScale))
    fail_at(path, where.gain.second, where.gain.first,
            fmt::format("the plant's gain |G(jω)| at ω = {:.4g} rad/s (the geometric mean of its pole and zero "
                        "magnitudes) is {:.3g}; expected within [{}, {}]: the controller's gains come out near its "
                        "inverse, and beyond this range the step simulation and the search lose accuracy; express the "
                        "input or the output in other units (e.g. % of span, kV instead of V)",
                        w, magnitude, limit_text(kMinGainScale), limit_text(kMaxGainScale)));
}

}  // namespace

TimeRule check_plant_numerics(const std::string& path, const PlantSpec& plant, const PlantSources& where) {
  check_hidden_modes(path, plant, where);
  // Every nonzero pole and zero magnitude within [kMinRate, kMaxRate], at most kMaxSpread
  // apart; the delay's approximant (every linear computation uses it) counts as plant poles.
  std::vector<LocatedRoot> roots = where.poles;
  roots.insert(roots.end(), where.zeros.begin(), where.zeros.end());
  if (plant.delay_s > 0.0)
    for (const Complex& p : delay_approximant(plant.delay_s, kDelayApproximantOrder).poles())
      roots.push_back({p, "plant.delay", where.delay});
  TimeRule rule;
  const LocatedRoot* slowest = nullptr;
  const LocatedRoot* fastest = nullptr;
  double log_sum = 0.0;
  int counted = 0;
  for (const LocatedRoot& r : roots) {
    const double m = std::abs(r.value);
    if (m == 0.0) continue;
    if (!(m >= kMinRate && m <= kMaxRate)) fail_magnitude(path, plant, r, m);
    if (r.key != "plant.delay") rule.fastest_rate = std::max(rule.fastest_rate, m);
    if (!slowest || m < std::abs(slowest->value)) slowest = &r;
    if (!fastest || m > std::abs(fastest->value)) fastest = &r;
    if (r.key != "plant.delay") {
      log_sum += std::log(m);
      ++counted;
    }
  }
  if (slowest && std::abs(fastest->value) > kMaxSpread * std::abs(slowest->value)) {
    const LocatedRoot& blamed = fastest->key == "plant.delay" || slowest->key != "plant.delay" ? *fastest : *slowest;
    fail_at(path, blamed.at, blamed.key,
            fmt::format("the plant's pole and zero magnitudes span a factor {:.3g}, from {:.3g} rad/s ({}) to {:.3g} "
                        "rad/s ({}){}; expected at most {} between the fastest and the slowest: a mode that much "
                        "faster than the slowest acts as a plain gain at the loop's speed, so leave it out of the model",
                        std::abs(fastest->value) / std::abs(slowest->value), std::abs(slowest->value), slowest->key,
                        std::abs(fastest->value), fastest->key,
                        fastest->key == "plant.delay" || slowest->key == "plant.delay"
                            ? " (the delay counts through its Padé approximant's poles)"
                            : "",
                        limit_text(kMaxSpread)));
  }
  check_gain_scale(path, plant, where, counted > 0 ? std::exp(log_sum / counted) : 1.0);
  return rule;
}

void check_pending_time(const std::string& path, const PendingTime& time, const TimeRule& rule) {
  if (!rule.admits(time.number.value))
    fail_at(path, time.number.at, time.key,
            fmt::format("expected {}, got {}", rule.expected(time.what, time.otherwise), time.number.shown));
}

void check_zero_error_integrator(const std::string& path, const Spec& spec, const SpecSources& sources) {
  const auto& required_error = spec.requirements.steady_state_error_max;
  if (!required_error || *required_error != 0.0) return;
  // Net poles at s = 0: a zero at s = 0 cancels one of them.
  const auto plant_integrators = static_cast<long>(trailing_zero_count(spec.plant.denominator)) -
                                 static_cast<long>(trailing_zero_count(spec.plant.numerator));
  if (plant_integrators > 0 || has_integrator(spec.controller.structure)) return;
  fail_at(path, *sources.steady_state_error_at, "requirements.steady_state_error_max",
          fmt::format("zero steady-state error to a step needs an integrator in the loop, but the "
                      "plant has no (uncancelled) pole at s = 0 and structure '{}' has none; use structure = "
                      "\"pi\" or \"pid\", or allow a small nonzero error",
                      structure_name(spec.controller.structure)));
}

std::string biproper_refusal() {
  return "a biproper plant, whose output follows the input instantly (a direct feedthrough), is not supported; "
         "expected fewer zeros than poles (degree(numerator) < degree(denominator)): with a feedthrough the "
         "controller's proportional and derivative action close an algebraic loop with the plant through the "
         "actuator's saturation, which the nonlinear confirmation does not solve. Every path from actuator to sensor "
         "has some lag: add it as a pole (e.g. the sensor's filter)";
}

std::size_t trailing_zero_count(const std::vector<double>& highest_first) {
  const auto nonzero =
      std::find_if(highest_first.rbegin(), highest_first.rend(), [](double c) { return c != 0.0; });
  return static_cast<std::size_t>(std::distance(highest_first.rbegin(), nonzero));
}

std::vector<std::complex<double>> polynomial_roots(const std::vector<double>& highest_first) {
  const std::size_t zero_roots = trailing_zero_count(highest_first);
  std::vector<std::complex<double>> roots(zero_roots, std::complex<double>(0.0, 0.0));
  const std::size_t kept = highest_first.size() - zero_roots;
  if (kept >= 2) {
    Eigen::VectorXd lowest_first(static_cast<Eigen::Index>(kept));
    for (std::size_t i = 0; i < kept; ++i) {
      lowest_first[static_cast<Eigen::Index>(i)] = highest_first[kept - 1 - i];
    }
    Eigen::PolynomialSolver<double, Eigen::Dynamic> solver(lowest_first);
    for (const auto& root : solver.roots()) roots.push_back(root);
  }
  std::sort(roots.begin(), roots.end(), [](const std::complex<double>& a, const std::complex<double>& b) {
    if (a.real() != b.real()) return a.real() > b.real();
    if (std::abs(a.imag()) != std::abs(b.imag())) return std::abs(a.imag()) < std::abs(b.imag());
    return a.imag() > b.imag();
  });
  return roots;
}

}  // namespace specloop::reading
