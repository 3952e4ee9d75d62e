// The designs by rule (classical.hpp): the root-locus (hand) design at a target dominant pole,
// moved along the ζ-line when the structure cannot reach it, and the ultimate-gain baseline by
// the Ziegler–Nichols closed-loop rules.
#include "specloop/design/classical.hpp"

#include <algorithm>
#include <boost/math/tools/roots.hpp>
#include <cmath>
#include <fmt/format.h>
#include <limits>
#include <numbers>

namespace specloop {

namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kDeg = 180.0 / std::numbers::pi;

// The hand design aims a hair inside the limits it is built from, as the reference P design does:
// where the second-order approximation is exact (a P loop on two real poles) it would otherwise land
// on the limit itself, and a verdict there turns with the last bits (a 1e-6 move of the plant moves
// the overshoot by some 1e-5 points). Overshoot in percentage points (at most 1 % of the limit), and
// the peak time relative.
constexpr double kInsideOvershootPct = 1e-4;
constexpr double kInsidePeakTime = 1e-5;

}  // namespace

std::optional<DesiredPole> desired_pole(const Problem& problem, const Characterization& ch) {
  const Requirements& r = problem.spec.requirements;
  const double zeta =
      r.overshoot_max_pct
          ? damping_from_overshoot(*r.overshoot_max_pct - std::min(kInsideOvershootPct, 0.01 * *r.overshoot_max_pct))
          : std::sqrt(0.5);
  const std::string zeta_from = r.overshoot_max_pct
                                    ? fmt::format("ζ = {:.4f} from {:.4g} % overshoot", zeta, *r.overshoot_max_pct)
                                    : std::string("ζ = 0.7071 (no overshoot limit; common practice)");
  std::optional<double> tp;
  std::string tp_from;
  if (r.peak_time_ratio && problem.reference_peak_time_s) {
    tp = *r.peak_time_ratio * *problem.reference_peak_time_s;
    tp_from = fmt::format("target peak time {:.4g} s = {:.4g} × reference {:.4g} s", *tp, *r.peak_time_ratio,
                          *problem.reference_peak_time_s);
  }
  if (r.peak_time_max_s && (!tp || *r.peak_time_max_s < *tp)) {
    tp = *r.peak_time_max_s;
    tp_from = fmt::format("target peak time {:.4g} s from peak_time_max", *tp);
  }
  const double root = std::sqrt(1.0 - zeta * zeta);
  if (tp) {
    const double wd = std::numbers::pi / (*tp * (1.0 - kInsidePeakTime));
    return DesiredPole{Complex(-zeta * wd / root, wd), zeta_from + ", " + tp_from + ", ω_d = π/t_p"};
  }
  if (r.settling_time_max_s) {
    const double sigma = -std::log(problem.band_fraction) / *r.settling_time_max_s;
    return DesiredPole{Complex(-sigma, sigma * root / zeta),
                       zeta_from + fmt::format(", σ = −ln(band)/t_s from settling_time_max {:.4g} s", *r.settling_time_max_s)};
  }
  if (ch.dominant_index) {
    // The crossing's speed on the aimed ζ-line (the crossing itself lies on the limit's).
    const double speed = std::abs(ch.crossings[*ch.dominant_index].pair_pole);
    const Complex pole(-zeta * speed, root * speed);
    return DesiredPole{pole, zeta_from + ", speed of the P-only dominant crossing (no time requirement)"};
  }
  return std::nullopt;
}

namespace {

// ∠(C1·G)(s) in degrees, wrapped to (−180, 180]; the angle condition wants ±180°.
double angle_error_deg(const TransferFunction& loop, Complex s) {
  return wrap_degrees(std::arg(loop(s)) * kDeg + 180.0);
}

// Finds x in [lo, hi] (log-scanned) where angle_error_deg(loop(x), target) = 0, the root whose
// x is closest (in log distance) to `prefer`.
template <typename MakeLoop>
std::optional<double> solve_angle(MakeLoop make_loop, Complex target, double lo, double hi, double prefer) {
  const int points = 400;
  std::optional<double> best;
  auto f = [&](double x) { return angle_error_deg(make_loop(x), target); };
  double prev_x = lo, prev_f = f(lo);
  for (int i = 1; i <= points; ++i) {
    const double x = lo * std::pow(hi / lo, static_cast<double>(i) / points);
    const double fx = f(x);
    // A sign change with small values on both sides is a root; a jump across ±180° is not.
    if ((prev_f <= 0.0) != (fx <= 0.0) && std::abs(prev_f) < 90.0 && std::abs(fx) < 90.0) {
      boost::uintmax_t iterations = 100;
      const auto [a, b] = boost::math::tools::toms748_solve(f, prev_x, x, prev_f, fx,
                                                           boost::math::tools::eps_tolerance<double>(45), iterations);
      const double root = 0.5 * (a + b);
      if (!best || std::abs(std::log(root / prefer)) < std::abs(std::log(*best / prefer))) best = root;
    }
    prev_x = x;
    prev_f = fx;
  }
  return best;
}

// Gain from the magnitude condition |K·C1·G| = 1 at s.
double magnitude_gain(const TransferFunction& unit_loop, Complex s) { return 1.0 / std::abs(unit_loop(s)); }

// Ogata's bisector rule for a lead: zero and pole where lines at ±φ/2 around the bisector of the
// angle between the horizontal through s_d and the line from s_d to the origin meet the real axis.
std::optional<std::pair<double, double>> bisector_lead(Complex sd, double phi_deg) {
  const double sigma = -sd.real(), wd = sd.imag();
  const double to_origin = std::atan2(-wd, sigma) * kDeg;  // direction from s_d to the origin
  const double bisector = (to_origin - 180.0) / 2.0;
  auto meet = [&](double dir_deg) -> std::optional<double> {
    const double th = dir_deg / kDeg;
    if (!(std::sin(th) < 0.0)) return std::nullopt;
    const double t = wd / -std::sin(th);
    const double x = sd.real() + t * std::cos(th);
    if (!(x < 0.0)) return std::nullopt;
    return -x;
  };
  const auto z = meet(bisector + phi_deg / 2.0);
  const auto p = meet(bisector - phi_deg / 2.0);
  if (!z || !p || !(*p > *z)) return std::nullopt;
  return std::make_pair(*z, *p);
}

// Lag boost β from a steady-state error limit on a type-0 loop (position constant needed over the
// one the P-only loop has), else 10 (common practice).
double lag_ratio(const TransferFunction& plant, double p_gain, std::optional<double> sse_max) {
  if (sse_max && *sse_max > 0.0 && plant.system_type() == 0) {
    const double kp_needed = (1.0 - *sse_max) / *sse_max;
    const double kp_now = std::abs(p_gain * plant.dc_gain());
    return std::clamp(1.1 * kp_needed / kp_now, 1.5, 100.0);
  }
  return 10.0;
}

std::optional<double> gain_at_crossing(const TransferFunction& unit_loop, double zeta, std::vector<std::string>& notes) {
  const auto crossings = damping_line_crossings(unit_loop, zeta);
  std::string why;
  const auto i = dominant_crossing(unit_loop, crossings, why);
  if (!i) {
    notes.push_back("no usable ζ-line crossing of the compensated locus: " + why);
    return std::nullopt;
  }
  notes.push_back(fmt::format("gain at the ζ-line crossing {:.4g} ± j{:.4g} of the compensated locus ({})",
                              crossings[*i].pair_pole.real(), crossings[*i].pair_pole.imag(), why));
  return crossings[*i].gain;
}

}  // namespace

namespace {

// The hand method at one target pole (classical_controller's steps, without the move along the
// ζ-line).
std::optional<Controller> classical_at(const TransferFunction& plant, Structure structure, double n, Complex target,
                                       double zeta, std::optional<double> sse_max, std::vector<std::string>& notes,
                                       std::string* failed_step) {
  auto failed = [&](const char* step) -> std::optional<Controller> {
    if (failed_step) *failed_step = step;
    return std::nullopt;
  };
  const double sigma = -target.real();
  const double w = std::abs(target);
  auto unit = [&](std::vector<double> series) { return make_controller(structure, std::move(series), n); };
  auto with_gain = [&](std::vector<double> series, double k) {
    series[0] = k;
    return make_controller(structure, std::move(series), n);
  };
  const double needed = wrap_degrees(-180.0 - std::arg(plant(target)) * kDeg);  // angle the compensator must add
  switch (structure) {
    case Structure::p: {
      const auto k = gain_at_crossing(plant, zeta, notes);
      if (!k) return failed("ζ-line crossing of the compensated locus");
      return with_gain({1.0}, *k);
    }
    case Structure::pi:
    case Structure::lag: {
      const double z = sigma / 10.0;
      notes.push_back(fmt::format("{} zero at −{:.4g} = σ/10 of the target pole (common practice: its angle at the "
                                  "dominant pole stays small)", structure == Structure::pi ? "PI" : "lag", z));
      std::vector<double> series{1.0, z};
      if (structure == Structure::lag) {
        const double p_gain = gain_at_crossing(plant, zeta, notes).value_or(1.0);
        series.push_back(lag_ratio(plant, p_gain, sse_max));
        notes.push_back(fmt::format("lag ratio β = {:.3g}", series.back()));
      }
      const auto k = gain_at_crossing(unit(series).transfer * plant, zeta, notes);
      if (!k) return failed("ζ-line crossing of the compensated locus");
      notes.push_back("a structure without a zero to place cannot move the locus onto the target pole; the design "
                      "keeps the compensated locus's ζ-line crossing");
      return with_gain(series, *k);
    }
    case Structure::pd:
    case Structure::pid: {
      const double integral_zero = sigma / 10.0;
      auto series_for = [&](double z) -> std::vector<double> {
        if (structure == Structure::pd) return {1.0, z};
        const double w0 = std::sqrt(z * integral_zero);
        return {1.0, w0, (z + integral_zero) / (2.0 * w0)};
      };
      const auto z = solve_angle([&](double x) { return unit(series_for(x)).transfer * plant; }, target, w * 1e-3,
                                 w * 1e3, w);
      if (!z) {
        notes.push_back(fmt::format("the angle condition at the target pole cannot be met by one zero (the plant "
                                    "leaves {:.1f}° to add)", needed));
        return failed("angle condition");
      }
      notes.push_back(fmt::format("derivative zero at −{:.4g} from the angle condition (compensator adds {:.1f}° "
                                  "with its filter pole included)", *z, needed));
      if (structure == Structure::pid)
        notes.push_back(fmt::format("PI zero at −{:.4g} = σ/10 of the target pole (common practice)", integral_zero));
      const auto series = series_for(*z);
      return with_gain(series, magnitude_gain(unit(series).transfer * plant, target));
    }
    case Structure::lead:
    case Structure::lead_lag: {
      if (!(needed > 0.0)) {
        notes.push_back(fmt::format("the target pole needs no lead (the plant is {:.1f}° past the angle condition)", -needed));
        return failed("lead angle");
      }
      std::vector<double> series;
      double extra = 0.0;
      if (structure == Structure::lead_lag) {
        // The lag's (small, negative) angle at the target is included in what the lead must add.
        const double zg = sigma / 10.0;
        const double p_gain = gain_at_crossing(plant, zeta, notes).value_or(1.0);
        const double beta = lag_ratio(plant, p_gain, sse_max);
        extra = -wrap_degrees(std::arg((target + zg) / (target + zg / beta)) * kDeg);
        series = {1.0, 0.0, 0.0, zg, beta};
        notes.push_back(fmt::format("lag zero at −{:.4g} = σ/10, lag ratio β = {:.3g}", zg, beta));
      }
      const auto zp = bisector_lead(target, needed + extra);
      if (!zp) {
        notes.push_back(fmt::format("the bisector construction fails for {:.1f}° of lead", needed + extra));
        return failed("bisector construction");
      }
      notes.push_back(fmt::format("lead zero −{:.4g} and pole −{:.4g} by the bisector rule for {:.1f}° of lead",
                                  zp->first, zp->second, needed + extra));
      if (structure == Structure::lead) series = {1.0, zp->first, zp->second / zp->first};
      else {
        series[1] = zp->first;
        series[2] = zp->second / zp->first;
      }
      return with_gain(series, magnitude_gain(unit(series).transfer * plant, target));
    }
  }
  return failed("structure");
}

}  // namespace

std::optional<Controller> classical_controller(const TransferFunction& plant, Structure structure, double n,
                                               Complex target, double zeta, std::optional<double> sse_max,
                                               std::vector<std::string>& notes, std::string* failed_step) {
  std::vector<std::string> first;
  std::string step;
  if (auto c = classical_at(plant, structure, n, target, zeta, sse_max, first, &step)) {
    notes.insert(notes.end(), first.begin(), first.end());
    return c;
  }
  // The angle conditions of a zero or a lead have a range: a zero adds 0–90°, a lead less than
  // its bisector construction allows. When the target asks for what they cannot add, the hand
  // method keeps the damping and moves the target along the ζ-line (common practice): outward
  // (faster) when the plant is already past the angle condition there, inward (slower) when it
  // needs more lead than one stage gives. The first point, in steps of 5 % in |s| up to 100×
  // either way, where every step succeeds is designed for, and the notes say so.
  const bool movable = step == "angle condition" || step == "lead angle" || step == "bisector construction";
  if (movable) {
    const double needed = wrap_degrees(-180.0 - std::arg(plant(target)) * kDeg);
    const double factor = needed <= 0.0 ? 1.05 : 1.0 / 1.05;
    Complex moved = target;
    for (int i = 0; i < 95; ++i) {
      moved *= factor;
      std::vector<std::string> trial;
      std::string trial_step;
      if (auto c = classical_at(plant, structure, n, moved, zeta, sse_max, trial, &trial_step)) {
        notes.push_back(fmt::format("at the target pole {:.4g} ± j{:.4g} the {} step cannot be done: {}", target.real(),
                                    target.imag(), step, first.empty() ? std::string("-") : first.back()));
        notes.push_back(fmt::format("target moved along the ζ-line {} to {:.4g} ± j{:.4g} ({:.3g}× |s|), the first point "
                                    "where it can (common practice: keep the damping, change the speed)",
                                    factor > 1.0 ? "outward (faster)" : "inward (slower)", moved.real(), moved.imag(),
                                    std::abs(moved) / std::abs(target)));
        notes.insert(notes.end(), trial.begin(), trial.end());
        return c;
      }
    }
  }
  notes.insert(notes.end(), first.begin(), first.end());
  if (movable)
    notes.push_back(fmt::format("{}; nor can it at any point of the ζ-line within 100× of the target's distance from the "
                                "origin, either way", first.empty() ? step : first.back()));
  if (failed_step) *failed_step = step;
  return std::nullopt;
}

// ---- ultimate gain ------------------------------------------------------------------------------

std::optional<UltimatePoint> ultimate_point(const TransferFunction& plant) {
  // The first range of stable P gains that ends where a pair of poles reaches the axis at
  // ±jω (0 < ω < ∞): raised through it, the loop starts to oscillate at Ku.
  const StableGainSet set = stable_gain_set(plant);
  for (const StableGainSet::Range& r : set.ranges) {
    if (r.state != StableGainSet::State::stable || !std::isfinite(r.high)) continue;
    if (!(r.high_frequency > 0.0 && std::isfinite(r.high_frequency))) continue;
    UltimatePoint u;
    u.gain = r.high;
    u.frequency_rad_s = r.high_frequency;
    u.period_s = 2.0 * std::numbers::pi / u.frequency_rad_s;
    return u;
  }
  return std::nullopt;
}

std::optional<StandardForm> ziegler_nichols(Structure s, const UltimatePoint& u, double n) {
  const double inf = kInf;
  switch (s) {
    case Structure::p: return StandardForm{0.5 * u.gain, inf, 0.0, 0.0, false, false};
    case Structure::pi: return StandardForm{0.45 * u.gain, u.period_s / 1.2, 0.0, 0.0, true, false};
    case Structure::pd: return StandardForm{0.8 * u.gain, inf, u.period_s / 8.0, n, false, true};
    case Structure::pid: return StandardForm{0.6 * u.gain, u.period_s / 2.0, u.period_s / 8.0, n, true, true};
    default: return std::nullopt;
  }
}

std::optional<std::vector<double>> series_from_standard(Structure s, const StandardForm& f) {
  switch (s) {
    case Structure::p: return std::vector<double>{f.kp};
    case Structure::pi: return std::vector<double>{f.kp, 1.0 / f.ti};
    case Structure::pd: return std::vector<double>{f.kp, f.n / ((f.n + 1.0) * f.td)};
    case Structure::pid: {
      const double ki = f.kp / f.ti, kd = f.kp * f.td, tf = f.td / f.n;
      const double kc = f.kp * tf + kd;
      const double w0 = std::sqrt(ki / kc);
      return std::vector<double>{f.kp, w0, (f.kp + ki * tf) / (2.0 * kc * w0)};
    }
    default: return std::nullopt;
  }
}

}  // namespace specloop
