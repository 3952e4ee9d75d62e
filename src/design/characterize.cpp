// The P-only characterization behind `specloop analyze`.
#include "specloop/design/characterize.hpp"

#include <algorithm>
#include <boost/math/tools/roots.hpp>
#include <cmath>
#include <fmt/format.h>
#include <limits>
#include <numbers>

namespace specloop {

namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
// Rules of thumb for dominance (common practice): a pole five times farther left than the
// dominant pair, or contributing under 5 % of the response, can be neglected; the same distance
// rule applies to zeros; the approximation "holds" when the predictions are within 10 %.
constexpr double kFarRatio = 5.0;
constexpr double kNegligibleShare = 0.05;
constexpr double kAgreementPct = 10.0;
// Contributions whose sizes add up to more than this multiple of their sum cancel one another
// (more of them is cancelled than remains).
constexpr double kCancellingSize = 2.0;

// Coefficients of p(r·w) as a polynomial in r (highest power first), complex.
std::vector<Complex> scaled_argument(const Polynomial& p, Complex w) {
  const int n = p.degree();
  std::vector<Complex> out(static_cast<std::size_t>(n + 1));
  Complex wk = 1.0;
  for (int k = 0; k <= n; ++k) {  // power k sits at index n − k
    out[static_cast<std::size_t>(n - k)] = p.coefficients[static_cast<std::size_t>(n - k)] * wk;
    wk *= w;
  }
  return out;
}

// Removes from `poles` the two members closest to pair and conj(pair); returns the rest.
std::vector<Complex> without_pair(std::vector<Complex> poles, Complex pair) {
  for (Complex target : {pair, std::conj(pair)}) {
    auto it = std::min_element(poles.begin(), poles.end(), [&](Complex a, Complex b) {
      return std::abs(a - target) < std::abs(b - target);
    });
    if (it != poles.end()) poles.erase(it);
  }
  return poles;
}

double decay_ratio_of(const std::vector<Complex>& others, Complex pair) {
  double ratio = kInf;
  for (const Complex& p : others) ratio = std::min(ratio, -p.real() / -pair.real());
  return ratio;
}

std::string fmt_pole(Complex p) {
  if (p.imag() == 0.0) return fmt::format("{:.4g}", p.real());
  return fmt::format("{:.4g} ± j{:.4g}", p.real(), std::abs(p.imag()));
}

// The smallest overshoot an error is taken relative to, percentage points (1e-4 of the step: no
// plot shows less).
constexpr double kVisibleOvershootPct = 0.01;

double relative_error_pct(double simulated, double predicted) {
  return (simulated - predicted) / predicted * 100.0;
}

}  // namespace

Asymptotes locus_asymptotes(const TransferFunction& g) {
  Asymptotes a;
  const auto poles = g.poles();
  const auto zeros = g.numerator.is_zero() ? std::vector<Complex>{} : g.zeros();
  const int excess = static_cast<int>(poles.size()) - static_cast<int>(zeros.size());
  if (excess <= 0) return a;
  double sum = 0.0;
  for (const Complex& p : poles) sum += p.real();
  for (const Complex& z : zeros) sum -= z.real();
  a.centroid = sum / excess;
  for (int q = 0; q < excess; ++q) a.angles_deg.push_back((2.0 * q + 1.0) * 180.0 / excess);
  return a;
}

std::vector<double> locus_breakaway_points(const TransferFunction& g) {
  // K(s) = −D(s)/N(s); dK/ds = 0 ⇔ N·D' − N'·D = 0.
  const Polynomial& n = g.numerator;
  const Polynomial& d = g.denominator;
  const Polynomial condition = n * d.derivative() - n.derivative() * d;
  std::vector<double> points;
  if (condition.is_zero() || condition.degree() == 0) return points;
  for (const Complex& r : condition.roots()) {
    if (std::abs(r.imag()) > 1e-9 * std::max(1.0, std::abs(r))) continue;
    const double s = r.real();
    const double nv = n(s);
    if (nv == 0.0) continue;
    const double k = -d(s) / nv;
    if (k > 0.0) points.push_back(s);
  }
  std::sort(points.begin(), points.end(), std::greater<>());
  return points;
}

std::vector<LocusCrossing> damping_line_crossings(const TransferFunction& g, double zeta) {
  const Complex w(-zeta, std::sqrt(1.0 - zeta * zeta));  // unit direction of the ζ-line
  const auto dw = scaled_argument(g.denominator, w);
  const auto nw = scaled_argument(g.numerator, w);
  // Im(D(rw)·conj(N(rw))) as a real polynomial in r.
  std::vector<double> im(dw.size() + nw.size() - 1, 0.0);
  for (std::size_t i = 0; i < dw.size(); ++i)
    for (std::size_t j = 0; j < nw.size(); ++j) im[i + j] += (dw[i] * std::conj(nw[j])).imag();
  const Polynomial condition(im);
  std::vector<LocusCrossing> out;
  if (condition.is_zero()) return out;

  const Polynomial slope = condition.derivative();
  for (const Complex& root : condition.degree() > 0 ? condition.roots() : std::vector<Complex>{}) {
    if (std::abs(root.imag()) > 1e-7 * std::max(1.0, std::abs(root))) continue;
    double r = root.real();
    if (!(r > 1e-12)) continue;
    for (int it = 0; it < 3; ++it) {  // Newton polish on the condition itself
      const double dv = slope(r);
      if (dv == 0.0) break;
      const double step = condition(r) / dv;
      if (!std::isfinite(step) || std::abs(step) > 1e-3 * r) break;
      r -= step;
    }
    const Complex s = r * w;
    const Complex nv = g.numerator(s);
    if (std::abs(nv) == 0.0) continue;
    const Complex k = -g.denominator(s) / nv;
    if (!(k.real() > 0.0) || std::abs(k.imag()) > 1e-6 * std::abs(k)) continue;
    LocusCrossing c;
    c.gain = k.real();
    c.pair_pole = s;
    c.poles = (g.denominator + c.gain * g.numerator).roots();
    c.stable = all_stable(c.poles);
    c.decay_ratio = decay_ratio_of(without_pair(c.poles, s), s);
    out.push_back(std::move(c));
  }
  std::sort(out.begin(), out.end(), [](const auto& a, const auto& b) { return a.gain < b.gain; });
  // Roots found twice (a double root of the condition) collapse into one crossing.
  out.erase(std::unique(out.begin(), out.end(), [](const auto& a, const auto& b) {
              return std::abs(a.gain - b.gain) <= 1e-9 * std::abs(b.gain);
            }), out.end());
  return out;
}

std::vector<ModeShare> mode_shares(const TransferFunction& t) {
  // Step response Y(s) = T(s)/s; residue at a simple pole p: N(p)/(p·D'(p)). Its term of
  // y(t) − y∞ at t = 0⁺ is the residue (2·Re for a pair); negated and divided by y∞, that is the
  // mode's signed contribution.
  std::vector<ModeShare> out;
  const double y_inf = t.dc_gain();
  const Polynomial d_slope = t.denominator.derivative();
  std::size_t without = 0;
  double known = 0.0;
  for (const Complex& p : t.poles()) {
    if (p.imag() < 0.0) continue;  // the upper member stands for the pair
    ModeShare m;
    m.pole = p;
    const Complex dd = d_slope(p);
    const double scale = std::max(1.0, std::abs(p));
    if (std::abs(dd) > 1e-9 * std::abs(t.denominator.leading()) * std::pow(scale, t.denominator.degree() - 1) &&
        std::abs(p) > 0.0 && std::isfinite(y_inf) && y_inf != 0.0) {
      const Complex residue = t.numerator(p) / (p * dd);
      m.share = std::abs(residue) * (p.imag() > 0.0 ? 2.0 : 1.0) / std::abs(y_inf);
      m.contribution = -residue.real() * (p.imag() > 0.0 ? 2.0 : 1.0) / y_inf;
      known += *m.contribution;
    } else {
      ++without;
    }
    out.push_back(m);
  }
  // One mode without a simple residue (a repeated real pole counted once, or a pair): it holds
  // the rest of the sum, exactly.
  if (without == 1 && std::isfinite(y_inf) && y_inf != 0.0)
    for (ModeShare& m : out)
      if (!m.contribution) m.contribution = contribution_total(t) - known;
  return out;
}

double contribution_total(const TransferFunction& t) {
  // y(0⁺) = lim s·T(s)/s = T(∞): the ratio of leading coefficients when T is biproper, else 0.
  const double y_inf = t.dc_gain();
  const double y0 = t.numerator.degree() == t.denominator.degree() ? t.numerator.leading() / t.denominator.leading() : 0.0;
  return 1.0 - y0 / y_inf;
}

std::optional<std::string> cancellation_note(const std::vector<ModeShare>& modes, double total) {
  double size = 0.0;
  for (const ModeShare& m : modes)
    if (m.contribution) size += std::abs(*m.contribution);
  if (!(size > kCancellingSize * std::max(std::abs(total), 1e-12))) return std::nullopt;
  return fmt::format("the contributions' sizes add up to {:.0f} % but their sum is {:.0f} %: terms of opposite sign "
                     "largely cancel one another (poles close to a zero or to each other), so no single mode's size "
                     "says how much of the response it shapes",
                     size * 100.0, total * 100.0);
}

std::optional<GainPoint> measure_gain(const TransferFunction& plant, double gain, double amplitude,
                                      double band_fraction, StepSimulator& simulator) {
  const StateSpace loop = close_loop(realize(plant), static_gain(gain));
  GainPoint point;
  point.gain = gain;
  const StepStatus status = simulator.simulate(loop, amplitude, band_fraction, point.simulated);
  if (status != StepStatus::ok) return std::nullopt;
  point.poles = (plant.denominator + gain * plant.numerator).roots();
  point.constants = error_constants(TransferFunction(gain * plant.numerator, plant.denominator));
  return point;
}

std::optional<std::size_t> dominant_crossing(const TransferFunction& plant,
                                           const std::vector<LocusCrossing>& crossings, std::string& why) {
  std::optional<std::size_t> best_far, best_ratio;
  for (std::size_t i = 0; i < crossings.size(); ++i) {
    const auto& c = crossings[i];
    if (!c.stable) continue;
    // Slower poles that carry a real share of the response disqualify the pair as dominant.
    const TransferFunction t = close_loop(plant, TransferFunction(Polynomial({c.gain}), Polynomial({1.0}))).output;
    bool slower_significant = false;
    for (const auto& m : mode_shares(t)) {
      if (std::abs(m.pole - c.pair_pole) <= 1e-6 * std::abs(c.pair_pole)) continue;
      if (-m.pole.real() < -c.pair_pole.real() && (!m.share || *m.share > kNegligibleShare)) slower_significant = true;
    }
    if (!slower_significant && !best_far) best_far = i;
    if (!best_ratio || c.decay_ratio > crossings[*best_ratio].decay_ratio) best_ratio = i;
  }
  if (crossings.empty()) {
    why = "the root locus of K·G never crosses the ζ-line for K > 0";
    return std::nullopt;
  }
  if (best_far) {
    why = fmt::format("lowest gain at which the closed loop is stable and no slower mode carries more than "
                      "{:.0f} % of the step response", kNegligibleShare * 100);
    return best_far;
  }
  if (best_ratio) {
    why = "no crossing has the pair as the slowest significant mode; chose the stable crossing whose "
          "other poles are farthest left relative to the pair";
    return best_ratio;
  }
  why = "the closed loop is unstable at every crossing of the ζ-line";
  return std::nullopt;
}

std::string contribution_words(const ModeShare& m) {
  if (!m.contribution) return "carries an unknown part of the response (repeated pole)";
  std::string words = fmt::format("contributes {:+.0f} % of the step's final value", *m.contribution * 100.0);
  // A pair's term oscillates: its size at t = 0 can be far below its amplitude.
  if (m.pole.imag() != 0.0 && m.share) words += fmt::format(" (amplitude {:.0f} %)", *m.share * 100.0);
  return words;
}

DominanceDiagnosis diagnose_dominance(const TransferFunction& t, Complex pair_pole, const SecondOrderPrediction& pred,
                                      const StepMetrics& sim) {
  DominanceDiagnosis d;
  d.modes = mode_shares(t);
  d.contribution_sum = contribution_total(t);
  d.cancellation = cancellation_note(d.modes, d.contribution_sum);
  const double sigma = -pair_pole.real();
  const auto cl_poles = t.poles();
  for (const auto& m : d.modes) {
    if (std::abs(m.pole - pair_pole) <= 1e-6 * std::abs(pair_pole)) continue;
    const double ratio = -m.pole.real() / sigma;
    const bool significant = !m.share || *m.share > kNegligibleShare;
    if (ratio < kFarRatio && significant) {
      d.slow_poles.push_back(m.pole);
      d.reasons.push_back(fmt::format(
          "closed-loop pole {} decays at {:.2f}× the dominant pair's rate (needs ≥ {:.0f}×) and {}", fmt_pole(m.pole),
          ratio, kFarRatio, contribution_words(m)));
    }
  }
  if (!t.numerator.is_zero()) {
    for (const Complex& z : t.zeros()) {
      if (z.imag() < 0.0) continue;
      const double ratio = std::abs(z.real()) / sigma;
      if (ratio >= kFarRatio) continue;
      const bool cancelled = std::any_of(cl_poles.begin(), cl_poles.end(), [&](Complex p) {
        return std::abs(p - z) <= 0.1 * std::max(std::abs(z), sigma);
      });
      if (cancelled) continue;
      d.near_zeros.push_back(z);
      d.reasons.push_back(fmt::format(
          "closed-loop zero {} lies {:.2f}× the pair's σ from the imaginary axis (needs ≥ {:.0f}×) with no pole "
          "near it to cancel it{}", fmt_pole(z), ratio, kFarRatio, z.real() > 0.0 ? " (right half plane)" : ""));
    }
  }
  // Relative to the prediction, but not to less than kVisibleOvershootPct: a pair damped close to
  // ζ = 1 predicts an overshoot that underflows to 0, and 0/0 is no error figure.
  d.overshoot_error_pct = (sim.overshoot_pct - pred.overshoot_pct) / std::max(pred.overshoot_pct, kVisibleOvershootPct) * 100.0;
  if (sim.peak_time_s) d.peak_time_error_pct = relative_error_pct(*sim.peak_time_s, pred.peak_time_s);
  if (sim.settling_time_s) d.settling_time_error_pct = relative_error_pct(*sim.settling_time_s, pred.settling_time_s);
  const bool os_ok = std::abs(d.overshoot_error_pct) <= kAgreementPct;
  const bool tp_ok = d.peak_time_error_pct && std::abs(*d.peak_time_error_pct) <= kAgreementPct;
  d.holds = os_ok && tp_ok;
  std::string measured = fmt::format(
      "simulated overshoot {:.2f} % vs {:.2f} % predicted ({:+.0f} %), peak time {} vs {:.4g} s predicted",
      sim.overshoot_pct, pred.overshoot_pct, d.overshoot_error_pct,
      sim.peak_time_s ? fmt::format("{:.4g} s ({:+.0f} %)", *sim.peak_time_s, *d.peak_time_error_pct)
                      : std::string("none (no overshoot)"),
      pred.peak_time_s);
  if (d.holds) {
    d.verdict = fmt::format("the second-order approximation holds here: {}", measured);
    if (d.reasons.empty())
      d.reasons.push_back(fmt::format("every other pole is ≥ {:.0f}× farther left or carries under {:.0f} % of the response, "
                                      "and no zero sits near the pair", kFarRatio, kNegligibleShare * 100));
    else
      d.reasons.insert(d.reasons.begin(), "the predictions agree within 10 % despite the following:");
  } else {
    d.verdict = fmt::format("the second-order approximation fails here: {}", measured);
    if (d.reasons.empty())
      d.reasons.push_back("no single pole or zero stands out: the remaining modes together shift the response");
  }
  return d;
}

namespace {

// How close the reference's simulated overshoot must come to the limit, percentage points; and
// how far below the limit it is aimed, so that its own overshoot check still holds when the
// nonlinear confirmation re-simulates it (its integrator and samples read a few 1e-7 points off).
constexpr double kReferenceTolerancePct = 0.01;
constexpr double kReferenceBelowPct = 1e-4;

// The smallest P gain whose simulated overshoot equals the limit (within kReferenceTolerancePct,
// else `note` says why not; aimed kReferenceBelowPct below it), searched within the stable gains
// (ch.p_stability); gains are magnitudes on the plant with direct action.
std::optional<GainPoint> find_reference(const TransferFunction& plant, const Characterization& ch, double limit,
                                        double amplitude, StepSimulator& sim, std::string& note) {
  const double action = ch.action;
  auto signed_gain = [&](double k) { return fmt::format("{:.4g}", action * k); };
  if (ch.p_stability.never_stable()) {
    note = fmt::format("no P gain gives a stable loop: the closed loop is {}", ch.p_stability.text(action));
    return std::nullopt;
  }
  double anchor = 0.0;
  if (ch.dominant) anchor = ch.dominant->gain;
  else if (!ch.crossings.empty()) anchor = ch.crossings.front().gain;
  else {
    // A gain scale from the plant's magnitude at its pole scale.
    double w = 0.0;
    for (const Complex& p : plant.poles()) w = std::max(w, std::abs(p));
    w = std::max(w, 1.0);
    anchor = std::abs(plant.denominator(Complex(0.0, w)) / plant.numerator(Complex(0.0, w)));
  }
  auto overshoot = [&](double k) -> std::optional<double> {
    StepMetrics m;
    if (sim.simulate(close_loop(realize(plant), static_gain(k)), amplitude, ch.band_fraction, m) != StepStatus::ok)
      return std::nullopt;
    return m.overshoot_pct;
  };
  // Geometric scan upward through each stable range of gains (from well below the anchor when
  // the range starts at 0; up to well above it when it has no end). The first scan interval where
  // the overshoot passes the aim brackets the reference; the rest of the scan says whether the
  // overshoot is monotonic in K (a lag with a lightly damped pair can peak on different
  // oscillations at different gains).
  const int points = 120;
  const double aim = limit - kReferenceBelowPct;
  std::vector<std::pair<double, double>> scan;  // (K, overshoot) over every stable range, increasing K
  for (const StableGainSet::Range& range : ch.p_stability.ranges) {
    if (range.state != StableGainSet::State::stable) continue;
    // Stay a hair inside the range: at its ends a pole sits on the imaginary axis.
    const double lo = range.low > 0.0 ? range.low * (1.0 + 1e-6) : anchor * 1e-4;
    const double hi = std::isinf(range.high) ? std::max(anchor, lo) * 1e4 : range.high * (1.0 - 1e-6);
    if (!(hi > lo)) continue;
    for (int i = 0; i <= points; ++i) {
      const double k = lo * std::pow(hi / lo, static_cast<double>(i) / points);
      if (const auto os = overshoot(k)) scan.emplace_back(k, *os);  // none at the edge of the range: rounding
    }
  }
  std::size_t first = scan.size();
  for (std::size_t i = 0; i < scan.size(); ++i)
    if (scan[i].second >= aim) {
      first = i;
      break;
    }
  if (first == scan.size()) {
    double largest = 0.0;
    for (const auto& [k, os] : scan) largest = std::max(largest, os);
    note = fmt::format("the closed loop is {}, and no stable P gain reaches {:.4g} % overshoot (largest seen {:.3g} %)",
                       ch.p_stability.text(action), limit, largest);
    return std::nullopt;
  }
  // The bracket must lie within one stable range: the scan point before `first` must be its
  // neighbour in the same range (no unstable gains between them).
  const auto same_range = [&](double a, double b) {
    for (const StableGainSet::Range& range : ch.p_stability.ranges)
      if (range.state == StableGainSet::State::stable && a >= range.low && b <= range.high) return true;
    return false;
  };
  if (first == 0 || !same_range(scan[first - 1].first, scan[first].first)) {
    note = fmt::format("the closed loop is {}, and even K = {} already overshoots {:.4g} %", ch.p_stability.text(action),
                       signed_gain(scan[first].first), scan[first].second);
    return std::nullopt;
  }
  // Crossings of the limit over the whole scan: more than one means the overshoot is not
  // monotonic in K; the reference is then the lowest-gain branch, and a note says so.
  int crossings = 0;
  std::vector<std::string> later;
  for (std::size_t i = 1; i < scan.size(); ++i)
    if ((scan[i - 1].second >= aim) != (scan[i].second >= aim)) {
      ++crossings;
      if (i > first) later.push_back(signed_gain(std::sqrt(scan[i - 1].first * scan[i].first)));
    }
  boost::uintmax_t iterations = 100;
  const auto f = [&](double kk) { return overshoot(kk).value_or(1e9) - aim; };
  const auto [a, b] = boost::math::tools::toms748_solve(f, scan[first - 1].first, scan[first].first,
                                                       scan[first - 1].second - aim, scan[first].second - aim,
                                                       boost::math::tools::eps_tolerance<double>(40), iterations);
  // The bracket's end at or below the limit (the reference's own check must hold), unless the
  // other end is closer to it.
  const double fa = f(a), fb = f(b);
  double k_ref = fa <= 0.0 ? a : (fb <= 0.0 ? b : (std::abs(fa) <= std::abs(fb) ? a : b));
  // The reference's own overshoot check must survive a 1e-6 move of the plant: where that moves
  // the overshoot by more than half the aim's room, aim inside by twice the largest move.
  if (const auto at = overshoot(k_ref); at && std::abs(*at - aim) <= kReferenceTolerancePct) {
    double moved = 0.0;
    for (const TransferFunction& p : knife_edge_plants(plant)) {
      StepMetrics m;
      if (sim.simulate(close_loop(realize(p), static_gain(k_ref)), amplitude, ch.band_fraction, m) == StepStatus::ok)
        moved = std::max(moved, m.overshoot_pct - *at);
    }
    const double inner = limit - 2.0 * moved;
    if (*at + moved >= limit - 0.5 * kReferenceBelowPct && inner < aim) {
      // A bracket below: the scan's last point under the new aim, in the same stable range.
      std::size_t j = first - 1;
      while (j > 0 && scan[j].second >= inner && same_range(scan[j - 1].first, scan[j].first)) --j;
      if (scan[j].second < inner) {
        const auto g = [&](double kk) { return overshoot(kk).value_or(1e9) - inner; };
        iterations = 100;
        const auto [c, e] = boost::math::tools::toms748_solve(g, scan[j].first, k_ref, scan[j].second - inner,
                                                             *at - inner, boost::math::tools::eps_tolerance<double>(40),
                                                             iterations);
        k_ref = g(c) <= 0.0 ? c : e;
      }
    }
  }
  auto point = measure_gain(plant, k_ref, amplitude, ch.band_fraction, sim);
  if (!point) {
    note = "the reference gain could not be simulated";
    return point;
  }
  const double miss = point->simulated.overshoot_pct - limit;
  if (std::abs(miss) > kReferenceTolerancePct) {
    // The overshoot jumps across the limit at this gain (the peak moves to another oscillation).
    note = fmt::format("the overshoot jumps across the {:.4g} % limit at K = {} (from {:.4g} % just below that gain to "
                       "{:.4g} % above it: the highest peak moves to another oscillation); no P gain has exactly the "
                       "limit, and the reference is the gain at the jump, with {:.4g} % overshoot",
                       limit, signed_gain(k_ref), std::min(fa, fb) + aim, std::max(fa, fb) + aim,
                       point->simulated.overshoot_pct);
  }
  if (crossings > 1) {
    note += std::string(note.empty() ? "" : "; ") +
            fmt::format("the overshoot is not monotonic in K: it crosses the {:.4g} % limit {} times up to K = {} "
                        "(again near K ≈ {}); the reference is the lowest-gain branch",
                        limit, crossings, signed_gain(scan.back().first), fmt::join(later, ", "));
  }
  return point;
}

}  // namespace

std::vector<TransferFunction> knife_edge_plants(const TransferFunction& plant, double relative) {
  const std::vector<Complex> poles = plant.poles();
  const double leading = plant.denominator.leading();
  std::vector<TransferFunction> out;
  for (double sign : {-1.0, 1.0}) {
    const double factor = 1.0 + sign * relative;
    out.emplace_back(factor * plant.numerator, plant.denominator);
    for (std::size_t i = 0; i < poles.size(); ++i) {
      if (poles[i].imag() < 0.0) continue;  // moves with its upper member
      bool seen = false;
      for (std::size_t j = 0; j < i; ++j) seen = seen || poles[j] == poles[i];
      if (seen) continue;
      std::vector<Complex> moved = poles;
      for (Complex& q : moved)
        if (q == poles[i] || q == std::conj(poles[i])) q *= factor;
      out.emplace_back(plant.numerator, leading * Polynomial::from_roots(moved));
    }
  }
  return out;
}

TransferFunction linear_plant(const Spec& spec) {
  const TransferFunction given(Polynomial(spec.plant.numerator), Polynomial(spec.plant.denominator));
  if (spec.plant.delay_s == 0.0) return given;
  return given * delay_approximant(spec.plant.delay_s, kDelayApproximantOrder);
}

Characterization characterize(const Spec& spec) {
  if (!spec.requirements.overshoot_max_pct)
    throw SpecError(spec.path + ": requirements.overshoot_max_pct: required by 'analyze' (the ζ-line comes from it)");
  Characterization ch;
  const double limit = *spec.requirements.overshoot_max_pct;
  const double amplitude = spec.reference.amplitude;
  ch.band_fraction = spec.requirements.settling_band_pct / 100.0;
  ch.damping_ratio = damping_from_overshoot(limit);
  // Every gain here is for the plant with direct action (action·G, positive gains); analyze and
  // result.json show action × gain, the gain on the plant as given.
  const TransferFunction given = linear_plant(spec);
  ch.action = loop_action(given);
  const TransferFunction plant(ch.action * given.numerator, given.denominator);
  ch.p_stability = stable_gain_set(plant);
  if (ch.action < 0.0)
    ch.notes.push_back(action_reason(given) + "; every gain here is shown with that sign");
  for (const Complex& p : spec.plant.poles)
    for (const Complex& z : spec.plant.zeros)
      if (p.imag() >= 0.0 && std::abs(p - z) <= kCancellationTolerance * std::max(std::abs(p), std::abs(z)))
        ch.notes.push_back(fmt::format("the plant's pole {} is cancelled by its zero {}: a stable mode the output never "
                                       "shows; it decays on its own, but a load at the plant input excites it unseen",
                                       fmt_pole(p), fmt_pole(z)));
  if (spec.plant.nonlinear) {
    const NonlinearPlantSpec& nl = *spec.plant.nonlinear;
    std::string point;
    for (std::size_t i = 0; i < nl.states.size(); ++i) point += fmt::format("{} = {:.6g}, ", nl.states[i], nl.equilibrium[i]);
    ch.notes.push_back(fmt::format("the plant is the linearization of [plant.nonlinear] at the operating point "
                                   "({}u = {:.6g}, y = {:.6g}; equilibrium found in {} Newton iteration{}); gains, "
                                   "poles and responses here are for deviations from that point",
                                   point, nl.input, nl.output_value, nl.newton_iterations,
                                   nl.newton_iterations == 1 ? "" : "s"));
  }
  if (spec.plant.delay_s > 0.0)
    ch.notes.push_back(fmt::format("the plant's transport delay ({:.4g} s) is represented by its order-{} Padé "
                                   "approximant in this linear analysis", spec.plant.delay_s, kDelayApproximantOrder));

  StepSimulator sim;
  ch.crossings = damping_line_crossings(plant, ch.damping_ratio);
  ch.dominant_index = dominant_crossing(plant, ch.crossings, ch.dominant_reason);
  if (ch.dominant_index) {
    const LocusCrossing& c = ch.crossings[*ch.dominant_index];
    ch.dominant = measure_gain(plant, c.gain, amplitude, ch.band_fraction, sim);
    if (ch.dominant) {
      ch.second_order = predict_second_order(c.pair_pole, ch.band_fraction);
      ch.dominance = diagnose_dominance(close_loop(plant, TransferFunction(Polynomial({c.gain}), Polynomial({1.0}))).output, c.pair_pole, *ch.second_order,
                                        ch.dominant->simulated);
    }
  }
  ch.reference = find_reference(plant, ch, limit, amplitude, sim, ch.reference_note);
  return ch;
}

}  // namespace specloop
