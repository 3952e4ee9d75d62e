// Compensator structures and their conversions between parameterizations.
#include "specloop/core/compensator.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

#include <fmt/format.h>

namespace specloop {

const std::vector<ParameterInfo>& structure_parameters(Structure s) {
  static const std::vector<ParameterInfo> p{{"gain", "controller units", "proportional gain K"}};
  static const std::vector<ParameterInfo> pi{{"gain", "controller units", "proportional gain K"},
                                             {"integral_zero", "rad/s", "PI zero z = Ki/Kp = 1/Ti"}};
  static const std::vector<ParameterInfo> pd{{"gain", "controller units", "proportional gain K"},
                                             {"zero", "rad/s", "PD zero; the filter pole sits at (N+1)·z"}};
  static const std::vector<ParameterInfo> pid{
      {"gain", "controller units", "proportional gain Kp"},
      {"zero_frequency", "rad/s", "ω0: the PID zeros are the roots of s² + 2ζc·ω0·s + ω0²"},
      {"zero_damping", "", "ζc: ≥ 1 two real zeros, below 1 a complex pair"}};
  static const std::vector<ParameterInfo> lead{{"gain", "controller units", "DC gain K"},
                                               {"zero", "rad/s", "lead zero z"},
                                               {"ratio", "", "α = pole/zero > 1"}};
  static const std::vector<ParameterInfo> lag{{"gain", "controller units", "high-frequency gain K"},
                                              {"zero", "rad/s", "lag zero z"},
                                              {"ratio", "", "β = zero/pole > 1 (DC gain boost)"}};
  static const std::vector<ParameterInfo> lead_lag{{"gain", "controller units", "lead DC gain × lag high-frequency gain"},
                                                   {"zero", "rad/s", "lead zero"},
                                                   {"ratio", "", "lead pole/zero > 1"},
                                                   {"lag_zero", "rad/s", "lag zero"},
                                                   {"lag_ratio", "", "lag zero/pole > 1"}};
  switch (s) {
    case Structure::p: return p;
    case Structure::pi: return pi;
    case Structure::pd: return pd;
    case Structure::pid: return pid;
    case Structure::lead: return lead;
    case Structure::lag: return lag;
    case Structure::lead_lag: return lead_lag;
  }
  throw std::logic_error("structure_parameters: unknown structure");
}

double pid_min_zero_damping(double derivative_filter) { return 1.0 / std::sqrt(derivative_filter + 1.0); }

namespace {

// PID filter time constant from ω0, ζc and N: the smaller root of
// (N+1)·ω0²·Tf² − 2(N+1)·ζc·ω0·Tf + 1 = 0 (matching Kc·(s² + 2ζcω0 s + ω0²)/(s(Tf s + 1)) with
// Kp + Ki/s + Kd·s/(Tf s + 1) under Tf = Kd/(N·Kp)).
double pid_filter_time(double w0, double zc, double n) {
  const double a = (n + 1.0) * w0 * w0;
  const double b = 2.0 * (n + 1.0) * zc * w0;
  const double disc = std::max(0.0, b * b - 4.0 * a);
  return 2.0 / (b + std::sqrt(disc));  // = (b − √disc)/(2a), computed without cancellation
}

void set(std::vector<double>& v, std::initializer_list<double> values) { v.assign(values); }

void direct_action_polynomials(Structure s, const double* x, double n, std::vector<double>& num,
                               std::vector<double>& den);

}  // namespace

void controller_polynomials(Structure s, const double* x, double n, double action, std::vector<double>& num,
                            std::vector<double>& den) {
  direct_action_polynomials(s, x, n, num, den);
  if (action < 0.0)
    for (double& c : num) c = -c;
}

namespace {

void direct_action_polynomials(Structure s, const double* x, double n, std::vector<double>& num,
                               std::vector<double>& den) {
  switch (s) {
    case Structure::p:
      set(num, {x[0]});
      set(den, {1.0});
      return;
    case Structure::pi:  // K(s + z)/s
      set(num, {x[0], x[0] * x[1]});
      set(den, {1.0, 0.0});
      return;
    case Structure::pd: {  // K(s/z + 1)/(s/((N+1)z) + 1)
      const double z = x[1], p = (n + 1.0) * z;
      set(num, {x[0] / z, x[0]});
      set(den, {1.0 / p, 1.0});
      return;
    }
    case Structure::pid: {
      const double kp = x[0], w0 = x[1], zc = x[2];
      const double tf = pid_filter_time(w0, zc, n);
      const double kc = kp * (n + 1.0) * tf;
      set(num, {kc, kc * 2.0 * zc * w0, kc * w0 * w0});
      set(den, {tf, 1.0, 0.0});
      return;
    }
    case Structure::lead: {  // K(s/z + 1)/(s/(αz) + 1)
      const double z = x[1], p = x[2] * z;
      set(num, {x[0] / z, x[0]});
      set(den, {1.0 / p, 1.0});
      return;
    }
    case Structure::lag:  // K(s + z)/(s + z/β)
      set(num, {x[0], x[0] * x[1]});
      set(den, {1.0, x[1] / x[2]});
      return;
    case Structure::lead_lag: {
      const double z = x[1], p = x[2] * z, zg = x[3], pg = x[3] / x[4];
      // K·(s/z + 1)(s + zg) / ((s/p + 1)(s + pg))
      set(num, {x[0] / z, x[0] * (1.0 + zg / z), x[0] * zg});
      set(den, {1.0 / p, 1.0 + pg / p, pg});
      return;
    }
  }
  throw std::logic_error("controller_polynomials: unknown structure");
}

}  // namespace

Controller make_controller(Structure s, const std::vector<double>& series, double n, double action) {
  if (action != 1.0 && action != -1.0) throw std::invalid_argument("the controller's action must be +1 or -1");
  const auto& info = structure_parameters(s);
  if (series.size() != info.size())
    throw std::invalid_argument("structure '" + std::string(structure_name(s)) + "' takes " +
                                std::to_string(info.size()) + " parameters, got " + std::to_string(series.size()));
  for (std::size_t i = 0; i < series.size(); ++i)
    if (!(series[i] > 0.0) || !std::isfinite(series[i]))
      throw std::invalid_argument("controller parameter '" + info[i].name + "' must be positive and finite");
  if ((s == Structure::pd || s == Structure::pid) && !(n > 0.0))
    throw std::invalid_argument("derivative filter N must be positive");
  if ((s == Structure::lead || s == Structure::lag || s == Structure::lead_lag) && !(series[2] > 1.0))
    throw std::invalid_argument("the ratio of a lead or lag must exceed 1");
  if (s == Structure::lead_lag && !(series[4] > 1.0)) throw std::invalid_argument("lag_ratio must exceed 1");
  if (s == Structure::pid && series[2] < pid_min_zero_damping(n) * (1.0 - 1e-12))
    throw std::invalid_argument("zero_damping below 1/√(N+1) has no real derivative filter");

  Controller c;
  c.structure = s;
  c.series = series;
  c.derivative_filter = n;
  c.action = action;
  std::vector<double> num, den;
  controller_polynomials(s, series.data(), n, action, num, den);
  c.transfer = TransferFunction(Polynomial(num), Polynomial(den));

  // Every gain carries the action; time constants and ratios do not.
  const double k = action * series[0];
  const double inf = std::numeric_limits<double>::infinity();
  switch (s) {
    case Structure::p:
      c.parallel = ParallelGains{k, 0.0, 0.0, 0.0};
      c.standard = StandardForm{k, inf, 0.0, 0.0, false, false};
      break;
    case Structure::pi:
      c.parallel = ParallelGains{k, k * series[1], 0.0, 0.0};
      c.standard = StandardForm{k, 1.0 / series[1], 0.0, 0.0, true, false};
      break;
    case Structure::pd:
    case Structure::lead: {
      // K(s/z + 1)/(s/p + 1) = Kp + Kd·s/(Tf s + 1) with Kp = K, Tf = 1/p, Kd = K(1/z − 1/p).
      const double z = series[1];
      const double p = s == Structure::pd ? (n + 1.0) * z : series[2] * z;
      const double tf = 1.0 / p, kd = k * (1.0 / z - 1.0 / p);
      c.parallel = ParallelGains{k, 0.0, kd, tf};
      c.standard = StandardForm{k, inf, kd / k, (kd / k) / tf, false, true};
      break;
    }
    case Structure::pid: {
      const double w0 = series[1], zc = series[2];
      const double tf = pid_filter_time(w0, zc, n);
      const double kc = k * (n + 1.0) * tf;
      const double ki = kc * w0 * w0, kd = n * k * tf;
      c.parallel = ParallelGains{k, ki, kd, tf};
      c.standard = StandardForm{k, k / ki, kd / k, n, true, true};
      break;
    }
    case Structure::lag:
    case Structure::lead_lag:
      break;  // a pole away from the origin: no PID equivalent
  }
  return c;
}

}  // namespace specloop

namespace specloop {

std::vector<double> signed_series(const Controller& c) {
  std::vector<double> out = c.series;
  if (!out.empty()) out.front() *= c.action;
  return out;
}

std::optional<std::pair<double, double>> notch_frequency_range(const std::vector<Complex>& poles, double sample_time) {
  double lo = std::numeric_limits<double>::infinity(), hi = 0.0;
  for (const Complex& p : poles) {
    const double w = std::abs(p);
    if (p.imag() == 0.0 || !(w > 0.0) || -p.real() / w >= kLightDamping) continue;
    lo = std::min(lo, 0.5 * w);
    hi = std::max(hi, 2.0 * w);
  }
  if (!(hi > 0.0)) return std::nullopt;
  if (sample_time > 0.0) hi = std::min(hi, 0.9 * 3.14159265358979323846 / sample_time);
  if (!(hi > lo)) return std::nullopt;
  return std::make_pair(lo, hi);
}

void notch_polynomials(const NotchFilter& f, double* num3, double* den3) {
  const double w = f.frequency, zp = f.width, zz = f.depth * f.width;
  num3[0] = 1.0;
  num3[1] = 2.0 * zz * w;
  num3[2] = w * w;
  den3[0] = 1.0;
  den3[1] = 2.0 * zp * w;
  den3[2] = w * w;
}

void measurement_filter_polynomials(const MeasurementFilter& f, std::vector<double>& den) {
  const double t = f.time_constant;
  if (f.order == 2) den.assign({t * t / 2.0, t, 1.0});
  else den.assign({t, 1.0});
}

std::string filters_text(const Controller& c, const std::string& time_unit) {
  std::string s;
  if (c.notch)
    s += fmt::format("notch: ωn = {:.5g} rad/{}, depth {:.4g} ({:.1f} dB), width ζp = {:.4g} ({})", c.notch->frequency,
                     time_unit, c.notch->depth, 20.0 * std::log10(c.notch->depth), c.notch->width,
                     c.notch_searched ? "searched" : "given");
  if (c.measurement_filter)
    s += fmt::format("{}measurement filter: order {}, Tf = {:.5g} {} ({})", s.empty() ? "" : "; ", c.measurement_filter->order,
                     c.measurement_filter->time_constant, time_unit, c.measurement_filter_searched ? "searched" : "given");
  return s;
}

Controller without_filters(const Controller& c) {
  Controller bare = c;
  bare.notch.reset();
  bare.measurement_filter.reset();
  bare.transfer = structure_transfer(c);
  return bare;
}

TwoInputRealization controller_realization(const Controller& c, double b, double cw) {
  if (!c.notch && !c.measurement_filter) return two_input_controller(c.transfer, reference_path(c, b, cw));
  const Controller bare = without_filters(c);
  const TwoInputRealization k = two_input_controller(bare.transfer, reference_path(bare, b, cw));
  std::optional<StateSpace> f, n;
  if (c.measurement_filter) {
    std::vector<double> fd;
    measurement_filter_polynomials(*c.measurement_filter, fd);
    f = realize(TransferFunction(Polynomial({1.0}), Polynomial(fd)));
  }
  if (c.notch) {
    double n3[3], d3[3];
    notch_polynomials(*c.notch, n3, d3);
    n = realize(TransferFunction(Polynomial({n3[0], n3[1], n3[2]}), Polynomial({d3[0], d3[1], d3[2]})));
  }
  TwoInputRealization out;
  filtered_controller_into(k.A, k.b_r, k.b_y, k.c, k.d_r, k.d_y, f ? &*f : nullptr, n ? &*n : nullptr, out);
  return out;
}

TransferFunction structure_transfer(const Controller& c) {
  std::vector<double> num, den;
  controller_polynomials(c.structure, c.series.data(), c.derivative_filter, c.action, num, den);
  return TransferFunction(Polynomial(num), Polynomial(den));
}

Controller with_filters(Controller c, const std::optional<NotchFilter>& notch,
                        const std::optional<MeasurementFilter>& measurement) {
  c.notch = notch;
  c.measurement_filter = measurement;
  TransferFunction t = structure_transfer(c);
  if (notch) {
    const NotchFilter& f = *notch;
    if (!(f.frequency > 0.0) || !std::isfinite(f.frequency)) throw std::invalid_argument("notch frequency must be positive and finite");
    if (!(f.depth > 0.0 && f.depth < 1.0)) throw std::invalid_argument("notch depth must lie in (0, 1)");
    if (!(f.width > 0.0 && f.width <= 1.0)) throw std::invalid_argument("notch width must lie in (0, 1]");
    double n3[3], d3[3];
    notch_polynomials(f, n3, d3);
    t = TransferFunction(t.numerator * Polynomial({n3[0], n3[1], n3[2]}), t.denominator * Polynomial({d3[0], d3[1], d3[2]}));
  }
  if (measurement) {
    const MeasurementFilter& f = *measurement;
    if (f.order != 1 && f.order != 2) throw std::invalid_argument("measurement filter order must be 1 or 2");
    if (!(f.time_constant > 0.0) || !std::isfinite(f.time_constant))
      throw std::invalid_argument("measurement filter time constant must be positive and finite");
    std::vector<double> den;
    measurement_filter_polynomials(f, den);
    t = TransferFunction(t.numerator, t.denominator * Polynomial(den));
  }
  c.transfer = t;
  return c;
}

TransferFunction reference_path(const Controller& c, double b, double cw) {
  if (c.notch || c.measurement_filter) {
    // u = N·(C_r·r − C·F·y): C_r·N·(F's denominator) over C·F·N's denominator.
    const TransferFunction r = reference_path(without_filters(c), b, cw);
    Polynomial num = r.numerator, den = r.denominator;
    if (c.notch) {
      double n3[3], d3[3];
      notch_polynomials(*c.notch, n3, d3);
      num = num * Polynomial({n3[0], n3[1], n3[2]});
      den = den * Polynomial({d3[0], d3[1], d3[2]});
    }
    if (c.measurement_filter) {
      std::vector<double> fd;
      measurement_filter_polynomials(*c.measurement_filter, fd);
      num = num * Polynomial(fd);
      den = den * Polynomial(fd);
    }
    const double scale = c.transfer.denominator.leading() / den.leading();
    return {scale * num, scale * den};
  }
  if (b == 1.0 && cw == 1.0) return c.transfer;
  if (!c.parallel) throw std::invalid_argument("set-point weights need a parallel form; this structure has none");
  const ParallelGains& g = *c.parallel;
  // Over the common denominator s^i·(Tf·s + 1)^d (i: integral present, d: derivative present).
  const bool integral = g.ki != 0.0, derivative = g.kd != 0.0;
  Polynomial den({1.0});
  if (integral) den = den * Polynomial({1.0, 0.0});
  if (derivative) den = den * Polynomial({g.filter_time, 1.0});
  Polynomial num = (g.kp * b) * den;
  if (integral) num = num + g.ki * (derivative ? Polynomial({g.filter_time, 1.0}) : Polynomial({1.0}));
  if (derivative) num = num + (g.kd * cw) * (integral ? Polynomial({1.0, 0.0, 0.0}) : Polynomial({1.0, 0.0}));
  // Express over C's own denominator (same roots, possibly another scaling).
  const double scale = c.transfer.denominator.leading() / den.leading();
  return {scale * num, scale * den};
}

}  // namespace specloop
