// Published tuning rules (tuning_rules.hpp): Skogestad's half rule to a first- or second-order
// model with delay, then the SIMC and AMIGO settings, each turned into a controller of the spec's
// structure or left out with its reason.
#include "specloop/design/tuning_rules.hpp"

#include "specloop/design/classical.hpp"

#include <algorithm>
#include <cmath>
#include <fmt/format.h>
#include <limits>
#include <stdexcept>
#include <variant>

namespace specloop {

namespace {

// A left-half-plane zero (T0·s + 1) taken out against the lag τ0 (Skogestad 2003, rules T1–T3):
// the lag is removed and replaced by `new_lag` (0: none); the model's gain is multiplied by `factor`.
struct ZeroRule {
  std::string name;
  double lag = 0.0;       // τ0, the lag it acted on
  double factor = 1.0;
  double new_lag = 0.0;
};

// The rule for T0 against the lags (descending) with the final model's delay θ; nullopt when there
// is no finite lag. The closest larger lag (T2 or T3), else the closest smaller one (T1, T1a, T1b).
std::optional<ZeroRule> zero_rule(double t0, const std::vector<double>& lags, double theta) {
  const double* larger = nullptr;
  const double* smaller = nullptr;
  for (const double& tau : lags) {
    if (tau > t0 && (!larger || tau < *larger)) larger = &tau;
    if (tau <= t0 && (!smaller || tau > *smaller)) smaller = &tau;
  }
  if (larger) {
    const double tau0 = *larger;
    if (t0 >= 5.0 * theta) return ZeroRule{"T2", tau0, t0 / tau0, 0.0};  // τ0 ≥ T0 ≥ 5θ
    const double tilde = std::min(tau0, 5.0 * theta);                    // τ̃0 ≥ T0
    return ZeroRule{"T3", tau0, tilde / tau0, tilde - t0};
  }
  if (!smaller) return std::nullopt;
  const double tau0 = *smaller;
  if (tau0 >= theta) return ZeroRule{"T1", tau0, t0 / tau0, 0.0};  // T0 ≥ τ0 ≥ θ
  if (t0 >= theta) return ZeroRule{"T1a", tau0, t0 / theta, 0.0};  // T0 ≥ θ ≥ τ0
  return ZeroRule{"T1b", tau0, 1.0, 0.0};                          // θ ≥ T0 ≥ τ0
}

// The plant's factors, read once: lags (descending), LHP zeros' T0 (descending), RHP zeros' T.
struct Factors {
  std::vector<double> lags, lhp_zeros, rhp_zeros;
  bool integrating = false;
  double gain = 0.0;  // k·Π(−z)/Π(−p) over the nonzero poles
};

std::string number(double v) { return fmt::format("{:.4g}", v); }

// Factors of the plant, or the reason the half rule does not apply.
std::variant<Factors, std::string> plant_factors(const PlantSpec& plant) {
  Factors f;
  double gain = plant.gain;
  int at_origin = 0;
  for (const auto& p : plant.poles) {
    if (p.imag() != 0.0)
      return fmt::format("the plant has complex poles {} ± j{} (an oscillatory mode): the half rule is stated for real "
                         "lags", number(p.real()), number(std::abs(p.imag())));
    if (p.real() > 0.0)
      return fmt::format("the plant has an unstable pole at s = {}: the rules assume a stable or integrating plant",
                         number(p.real()));
    if (p.real() == 0.0) {
      ++at_origin;
      continue;
    }
    f.lags.push_back(-1.0 / p.real());
    gain /= -p.real();
  }
  if (at_origin > 1)
    return fmt::format("the plant has {} poles at s = 0: the rules cover a stable or singly integrating plant", at_origin);
  f.integrating = at_origin == 1;
  for (const auto& z : plant.zeros) {
    if (z.imag() != 0.0)
      return fmt::format("the plant has complex zeros {} ± j{}: the half rule is stated for real zeros", number(z.real()),
                         number(std::abs(z.imag())));
    if (z.real() == 0.0) return std::string("the plant has a zero at s = 0 (no steady-state gain): the rules need one");
    (z.real() > 0.0 ? f.rhp_zeros : f.lhp_zeros).push_back(std::abs(1.0 / z.real()));
    gain *= -z.real();
  }
  std::sort(f.lags.rbegin(), f.lags.rend());
  std::sort(f.lhp_zeros.rbegin(), f.lhp_zeros.rend());
  f.gain = gain;
  return f;
}

// The half rule on lags already cleared of LHP zeros: the model of `order`, its delay and steps.
// `lags` descending; the integrator, when present, is the largest lag (T → ∞, k' = k/T).
ReducedModel split_lags(const std::vector<double>& lags, bool integrating, int order, double delay0,
                        std::vector<std::string>& steps) {
  ReducedModel m;
  m.order = order;
  m.integrating = integrating;
  m.delay_s = delay0;
  // Retained finite lags: order − (1 if integrating) of them.
  const std::size_t keep = static_cast<std::size_t>(order - (integrating ? 1 : 0));
  std::vector<double> kept(lags.begin(), lags.begin() + static_cast<std::ptrdiff_t>(std::min(keep, lags.size())));
  if (lags.size() > keep) {
    const double largest = lags[keep];
    m.delay_s += largest / 2.0;
    if (!kept.empty()) {
      steps.push_back(fmt::format("the largest neglected lag {} s: half to the delay, half to the lag {} s (half rule)",
                                  number(largest), number(kept.back())));
      kept.back() += largest / 2.0;
    } else {
      steps.push_back(fmt::format("the largest neglected lag {} s: half to the delay, half to the integrator (a lag "
                                  "T → ∞, unchanged) (half rule)", number(largest)));
    }
    for (std::size_t i = keep + 1; i < lags.size(); ++i) {
      m.delay_s += lags[i];
      steps.push_back(fmt::format("lag {} s to the delay", number(lags[i])));
    }
  }
  if (integrating) {
    m.second_lag_s = order == 2 && !kept.empty() ? kept[0] : 0.0;
  } else if (order == 1) {
    m.lag_s = kept.empty() ? 0.0 : kept[0];
  } else {
    m.lag_s = kept.empty() ? 0.0 : kept[0];
    m.second_lag_s = kept.size() > 1 ? kept[1] : 0.0;
  }
  return m;
}

}  // namespace

ModelOutcome half_rule_model(const PlantSpec& plant, int order, double sample_time_s) {
  if (order != 1 && order != 2) throw std::invalid_argument("half_rule_model: order must be 1 or 2");
  auto read = plant_factors(plant);
  if (auto* why = std::get_if<std::string>(&read)) return {std::nullopt, *why};
  const Factors& f = std::get<Factors>(read);
  double delay0 = plant.delay_s;
  std::vector<std::string> fixed;
  if (plant.delay_s > 0.0) fixed.push_back(fmt::format("the plant's delay {} s", number(plant.delay_s)));
  for (const double t : f.rhp_zeros) {
    delay0 += t;
    fixed.push_back(fmt::format("right-half-plane zero at s = {}: its time constant {} s to the delay (inverse response)",
                                number(1.0 / t), number(t)));
  }
  if (sample_time_s > 0.0) {
    delay0 += sample_time_s / 2.0;
    fixed.push_back(fmt::format("half the sample time, {} s, to the delay (sampling)", number(sample_time_s / 2.0)));
  }
  // LHP zeros: the rules read the final model's delay θ, which depends on which lags they take;
  // start from the delay without them and repeat until θ no longer changes (a few rounds).
  ReducedModel m;
  std::vector<std::string> steps;
  double theta = -1.0;
  {
    std::vector<std::string> ignored;
    theta = split_lags(f.lags, f.integrating, order, delay0, ignored).delay_s;
  }
  for (int round = 0; round < 20; ++round) {
    std::vector<double> lags = f.lags;
    double gain = f.gain;
    steps = fixed;
    for (const double t0 : f.lhp_zeros) {
      const auto rule = zero_rule(t0, lags, theta);
      if (!rule)
        return {std::nullopt, fmt::format("the plant's zero at s = {} has no lag to be taken out against (Skogestad's "
                                          "rules T1–T3 need one)", number(-1.0 / t0))};
      lags.erase(std::find(lags.begin(), lags.end(), rule->lag));
      if (rule->new_lag > 0.0) lags.push_back(rule->new_lag);
      std::sort(lags.rbegin(), lags.rend());
      gain *= rule->factor;
      steps.push_back(
          rule->new_lag > 0.0
              ? fmt::format("zero at s = {} (T0 = {} s) against the lag {} s by rule {} (θ = {} s): a lag {} s, gain × {}",
                            number(-1.0 / t0), number(t0), number(rule->lag), rule->name, number(theta),
                            number(rule->new_lag), number(rule->factor))
              : fmt::format("zero at s = {} (T0 = {} s) against the lag {} s by rule {} (θ = {} s): the pair becomes the "
                            "gain factor {}", number(-1.0 / t0), number(t0), number(rule->lag), rule->name, number(theta),
                            number(rule->factor)));
    }
    m = split_lags(lags, f.integrating, order, delay0, steps);
    m.gain = gain;
    const bool settled = std::abs(m.delay_s - theta) <= 1e-12 * std::max(1.0, std::abs(theta));
    theta = m.delay_s;
    if (f.lhp_zeros.empty() || settled) break;
  }
  const std::size_t lags_needed = static_cast<std::size_t>(order - (f.integrating ? 1 : 0));
  m.exact = f.lhp_zeros.empty() && f.rhp_zeros.empty() && sample_time_s == 0.0 && f.lags.size() <= lags_needed;
  if (f.integrating) steps.insert(steps.begin(), "the pole at s = 0 kept as the integrator");
  if (m.exact) steps.push_back("the plant is already of this form: the model is exact");
  m.steps = std::move(steps);
  return {m, ""};
}

StandardForm standard_from_series(const SeriesSettings& s, double derivative_filter) {
  StandardForm f;
  f.kp = s.kc * (1.0 + s.td / s.ti);
  f.ti = s.ti + s.td;
  f.td = s.ti * s.td / (s.ti + s.td);
  f.n = derivative_filter;
  f.has_integral = true;
  f.has_derivative = s.td > 0.0;
  return f;
}

SeriesSettings simc_settings(const ReducedModel& m, double tau_c_s) {
  const double k = std::abs(m.gain), sum = tau_c_s + m.delay_s;
  SeriesSettings s;
  if (m.integrating) {
    s.kc = 1.0 / (k * sum);
    s.ti = 4.0 * sum;
  } else {
    s.kc = m.lag_s / (k * sum);
    s.ti = std::min(m.lag_s, 4.0 * sum);
  }
  s.td = m.order == 2 ? m.second_lag_s : 0.0;
  return s;
}

StandardForm amigo_settings(const ReducedModel& m, bool pid, double derivative_filter) {
  const double k = std::abs(m.gain), t = m.lag_s, l = m.delay_s;
  StandardForm f;
  f.n = derivative_filter;
  f.has_integral = true;
  if (pid) {
    f.kp = (0.2 + 0.45 * t / l) / k;
    f.ti = l * (0.4 * l + 0.8 * t) / (l + 0.1 * t);
    f.td = 0.5 * l * t / (0.3 * l + t);
    f.has_derivative = true;
  } else {
    f.kp = 0.15 / k + (0.35 - l * t / ((l + t) * (l + t))) * t / (k * l);
    f.ti = 0.35 * l + 13.0 * l * t * t / (t * t + 12.0 * l * t + 7.0 * l * l);
  }
  return f;
}

RuleInputs tuning_rule_inputs(const Problem& problem) {
  const Spec& spec = problem.spec;
  RuleInputs in;
  in.structure = spec.controller.structure;
  in.derivative_filter = spec.controller.derivative_filter;
  in.sample_time_s = problem.sampled ? spec.controller.sample_time_s : 0.0;
  in.action = problem.action;
  in.simc_tau_c_s = spec.rules.simc_tau_c_s;
  return in;
}

namespace {

// The controller of a standard form, or the reason it cannot be built.
void build_controller(RuleOutcome& out, const StandardForm& f, const RuleInputs& in) {
  const auto series = series_from_standard(in.structure, f);
  try {
    if (!series) throw std::invalid_argument("no series form");
    out.controller = make_controller(in.structure, *series, in.derivative_filter, in.action);
  } catch (const std::invalid_argument& e) {
    out.reason = fmt::format("the settings give no valid {} controller ({})", structure_name(in.structure), e.what());
  }
}

std::string structure_reason(std::string_view rule, Structure s) {
  return fmt::format("{} gives PI or PID settings; the spec's structure is {}", rule, structure_name(s));
}

}  // namespace

RuleOutcome simc_rule(const PlantSpec& plant, const RuleInputs& in) {
  RuleOutcome out;
  out.rule = "simc";
  if (in.structure != Structure::pi && in.structure != Structure::pid) {
    out.reason = structure_reason("SIMC", in.structure);
    return out;
  }
  const bool pid = in.structure == Structure::pid;
  ModelOutcome mo = half_rule_model(plant, pid ? 2 : 1, in.sample_time_s);
  if (!mo.model) {
    out.reason = mo.reason;
    return out;
  }
  out.model = mo.model;
  const ReducedModel& m = *out.model;
  if (in.simc_tau_c_s) {
    out.tau_c_s = in.simc_tau_c_s;
    out.tau_c_source = "rules.simc_tau_c";
  } else if (m.delay_s > 0.0) {
    out.tau_c_s = m.delay_s;
    out.tau_c_source = "the model's delay";
  } else {
    out.reason = "the model has no delay, so τc = L (the default) is 0: set rules.simc_tau_c";
    return out;
  }
  if (pid && m.second_lag_s <= 0.0) {
    out.reason = "the second-order model has no second lag (τD = T2 = 0: no derivative action); structure pi takes SIMC's PI";
    return out;
  }
  const SeriesSettings s = simc_settings(m, *out.tau_c_s);
  out.formula = m.integrating
                    ? fmt::format("Kc = 1/(|k'|·(τc + L)) = {}, τI = 4·(τc + L) = {} s", number(s.kc), number(s.ti))
                    : fmt::format("Kc = T{}/(|k|·(τc + L)) = {}, τI = min(T{}, 4·(τc + L)) = {} s", pid ? "1" : "",
                                  number(s.kc), pid ? "1" : "", number(s.ti));
  if (pid)
    out.formula += fmt::format(", τD = T2 = {} s (series form; as standard form Kp = Kc·(1 + τD/τI), Ti = τI + τD, "
                               "Td = τI·τD/(τI + τD), with the spec's N = {})",
                               number(s.td), number(in.derivative_filter));
  build_controller(out, standard_from_series(s, in.derivative_filter), in);
  return out;
}

RuleOutcome amigo_rule(const PlantSpec& plant, const RuleInputs& in) {
  RuleOutcome out;
  out.rule = "amigo";
  if (in.structure != Structure::pi && in.structure != Structure::pid) {
    out.reason = structure_reason("AMIGO", in.structure);
    return out;
  }
  const bool pid = in.structure == Structure::pid;
  ModelOutcome mo = half_rule_model(plant, 1, in.sample_time_s);
  if (!mo.model) {
    out.reason = mo.reason;
    return out;
  }
  out.model = mo.model;
  const ReducedModel& m = *out.model;
  if (m.integrating) {
    out.reason = "the plant is integrating: AMIGO's form for integrating plants is not applied here";
    return out;
  }
  if (m.delay_s <= 0.0) {
    out.reason = "the first-order model has no delay (L = 0): the AMIGO rules divide by L";
    return out;
  }
  const StandardForm f = amigo_settings(m, pid, in.derivative_filter);
  const double tau = m.delay_s / (m.delay_s + m.lag_s);
  out.formula = pid ? fmt::format("K = (0.2 + 0.45·T/L)/|k| = {}, Ti = L·(0.4·L + 0.8·T)/(L + 0.1·T) = {} s, "
                                  "Td = 0.5·L·T/(0.3·L + T) = {} s (standard form, with the spec's N = {}); "
                                  "normalized delay L/(L + T) = {:.3g}",
                                  number(f.kp), number(f.ti), number(f.td), number(in.derivative_filter), tau)
                    : fmt::format("K = 0.15/|k| + (0.35 − L·T/(L + T)²)·T/(|k|·L) = {}, "
                                  "Ti = 0.35·L + 13·L·T²/(T² + 12·L·T + 7·L²) = {} s; normalized delay L/(L + T) = {:.3g}",
                                  number(f.kp), number(f.ti), tau);
  build_controller(out, f, in);
  return out;
}

void screen_rule_loop(RuleOutcome& rule, const TransferFunction& plant) {
  if (!rule.controller) return;
  const ClosedLoopTF loop = close_loop(plant, rule.controller->transfer);
  double fastest = 0.0, slowest = std::numeric_limits<double>::infinity();
  for (const Complex& p : loop.output.poles())
    if (std::abs(p) > 0.0) {
      fastest = std::max(fastest, std::abs(p));
      slowest = std::min(slowest, std::abs(p));
    }
  // A plant pole at the range's edge moves a little under any feedback: 1 % is allowed for it.
  constexpr double kEdgeMove = 1.01;
  if (fastest <= kMaxRate * kEdgeMove && slowest >= kMinRate / kEdgeMove) return;
  rule.reason = fmt::format(
      "its closed loop has a pole of magnitude {} rad/s, outside [{}, {}], the range the numerics honour (as for a "
      "plant's poles){}",
      number(fastest > kMaxRate ? fastest : slowest), number(kMinRate), number(kMaxRate),
      rule.rule == "simc" && fastest > kMaxRate ? "; a larger rules.simc_tau_c slows it" : "");
  rule.controller.reset();
}

std::string model_text(const ReducedModel& m) {
  const std::string delay = m.delay_s > 0.0 ? fmt::format("·e^(−{}·s)", number(m.delay_s)) : "";
  auto lag = [](double t) { return fmt::format("({}·s + 1)", number(t)); };
  std::string den;
  if (m.integrating) {
    den = m.order == 2 && m.second_lag_s > 0.0 ? "(s·" + lag(m.second_lag_s) + ")" : "s";
  } else {
    den = lag(m.lag_s);
    if (m.order == 2 && m.second_lag_s > 0.0) den = "(" + den + lag(m.second_lag_s) + ")";
  }
  return fmt::format("{}{}/{}", number(m.gain), delay, den);
}

}  // namespace specloop
