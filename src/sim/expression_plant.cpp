// Expression plants: muparser compiles each right-hand side once, with its variables bound by
// pointer to one buffer (states, parameters, u) that every evaluation fills first. See
// expression_plant.hpp for the contract, the finite-difference step rule and the Newton solve.
#include "specloop/sim/expression_plant.hpp"

#include "specloop/core/vocabulary.hpp"

#include <fmt/format.h>
#include <fmt/ranges.h>
#include <muParser.h>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <limits>
#include <set>

namespace specloop {

namespace {

constexpr const char* kTimeName = "t";
constexpr const char* kInputName = "u";

bool is_identifier(const std::string& name) {
  if (name.empty() || !std::isalpha(static_cast<unsigned char>(name[0]))) return false;
  return std::all_of(name.begin(), name.end(),
                     [](char c) { return std::isalnum(static_cast<unsigned char>(c)) || c == '_'; });
}

bool is_name_char(char c) { return std::isalnum(static_cast<unsigned char>(c)) || c == '_'; }

// Position of `name` as a whole word in `text`, or −1.
int word_position(const std::string& text, const std::string& name) {
  for (std::size_t at = text.find(name); at != std::string::npos; at = text.find(name, at + 1)) {
    const bool left = at == 0 || !is_name_char(text[at - 1]);
    const bool right = at + name.size() >= text.size() || !is_name_char(text[at + name.size()]);
    if (left && right) return static_cast<int>(at);
  }
  return -1;
}

// muparser's "=" assigns to a variable; only the comparisons ==, <=, >=, != are allowed.
int assignment_position(const std::string& text) {
  for (std::size_t i = 0; i < text.size(); ++i) {
    if (text[i] != '=') continue;
    const bool after_comparison = i > 0 && std::string_view("<>!=").find(text[i - 1]) != std::string_view::npos;
    const bool doubled = i + 1 < text.size() && text[i + 1] == '=';
    if (!after_comparison && !doubled) return static_cast<int>(i);
    if (doubled) ++i;
  }
  return -1;
}

std::string hint_for(double v) {
  return std::isnan(v) ? "NaN (a square root or logarithm of a negative number, or 0/0?)"
                       : fmt::format("{} (a division by zero or an overflow?)", v);
}

constexpr double kEpsilon = std::numeric_limits<double>::epsilon();

}  // namespace

bool is_reserved_name(const std::string& name) {
  if (name == kInputName || name == kTimeName) return true;
  static const std::set<std::string> builtin = [] {
    mu::Parser probe;
    std::set<std::string> names;
    for (const auto& entry : probe.GetFunDef()) names.insert(entry.first);
    for (const auto& entry : probe.GetConst()) names.insert(entry.first);
    return names;
  }();
  return builtin.count(name) > 0;
}

struct ExpressionPlant::Compiled {
  std::vector<double> buffer;  // states (n), parameters (p), u: the parsers read these by pointer
  std::vector<std::unique_ptr<mu::Parser>> derivatives;
  std::unique_ptr<mu::Parser> output;
  std::size_t input_slot = 0;
  std::vector<double> plus, minus;  // output_rate's points, allocated once
};

ExpressionPlant::ExpressionPlant(ExpressionDefinition definition)
    : definition_(std::move(definition)), compiled_(std::make_unique<Compiled>()) {
  using Part = ExpressionError::Part;
  const auto& d = definition_;
  const std::size_t n = d.states.size(), p = d.parameters.size();
  if (n == 0) throw ExpressionError(Part::state, 0, -1, "expected at least one state name, got none");
  if (d.derivatives.size() != n)
    throw ExpressionError(Part::derivative, std::min(d.derivatives.size(), n), -1,
                          fmt::format("expected one derivative per state ({} state{}: {}), got {}", n, n == 1 ? "" : "s",
                                      fmt::join(d.states, ", "), d.derivatives.size()));
  // Names: identifiers, not reserved, unique across states and parameters.
  std::vector<std::string> names;
  const auto check_name = [&](const std::string& name, Part part, std::size_t index) {
    if (!is_identifier(name))
      throw ExpressionError(part, index, -1,
                            fmt::format("\"{}\" is not a valid name (a letter, then letters, digits or underscores)", name));
    if (name == kInputName)
      throw ExpressionError(part, index, -1, "\"u\" is reserved for the plant input");
    if (name == kTimeName)
      throw ExpressionError(part, index, -1, "\"t\" is reserved (time; the plant must be time-invariant)");
    if (is_reserved_name(name))
      throw ExpressionError(part, index, -1,
                            fmt::format("\"{}\" is a built-in function or constant of the expression language", name));
    // The expression parser's own rules for a variable name (it refuses names over 100 characters).
    try {
      mu::Parser probe;
      double slot = 0.0;
      probe.DefineVar(name, &slot);
    } catch (const mu::Parser::exception_type& e) {
      throw ExpressionError(part, index, -1,
                            fmt::format("\"{}\" is not a name the expression parser takes ({} characters): {}",
                                        name.size() > 40 ? name.substr(0, 40) + "..." : name, name.size(), e.GetMsg()));
    }
    if (std::find(names.begin(), names.end(), name) != names.end())
      throw ExpressionError(part, index, -1, fmt::format("\"{}\" is already a state or parameter name", name));
    names.push_back(name);
  };
  for (std::size_t i = 0; i < n; ++i) check_name(d.states[i], Part::state, i);
  for (std::size_t i = 0; i < p; ++i) {
    check_name(d.parameters[i].first, Part::parameter, i);
    if (!std::isfinite(d.parameters[i].second))
      throw ExpressionError(Part::parameter, i, -1, fmt::format("expected a finite value, got {}", d.parameters[i].second));
  }

  Compiled& c = *compiled_;
  c.buffer.assign(n + p + 1, 0.0);
  for (std::size_t i = 0; i < p; ++i) c.buffer[n + i] = d.parameters[i].second;
  c.input_slot = n + p;

  std::vector<std::string> known = names;
  known.push_back(kInputName);
  const auto compile = [&](const std::string& text, Part part, std::size_t index, bool allow_input) {
    auto parser = std::make_unique<mu::Parser>();
    if (text.find_first_not_of(" \t") == std::string::npos) throw ExpressionError(part, index, -1, "the expression is empty");
    if (const int at = assignment_position(text); at >= 0)
      throw ExpressionError(part, index, at, fmt::format("'=' at character {} assigns; use '==' to compare", at + 1));
    bool uses_state = false;
    try {
      // Inside the try: no muparser error may leave here as anything but an ExpressionError.
      for (std::size_t i = 0; i < n; ++i) parser->DefineVar(d.states[i], &c.buffer[i]);
      for (std::size_t i = 0; i < p; ++i) parser->DefineVar(d.parameters[i].first, &c.buffer[n + i]);
      if (allow_input) parser->DefineVar(kInputName, &c.buffer[c.input_slot]);
      parser->SetExpr(text);
      for (const auto& [name, pointer] : parser->GetUsedVar()) {
        if (std::find(d.states.begin(), d.states.end(), name) != d.states.end()) uses_state = true;
        if (pointer != nullptr) continue;
        const int at = word_position(text, name);
        if (name == kInputName)
          throw ExpressionError(part, index, at,
                                "the output may use states and parameters, not u (a direct feedthrough would make an "
                                "algebraic loop)");
        if (name == kTimeName)
          throw ExpressionError(part, index, at,
                                "unknown name \"t\": time is not available (the plant must be time-invariant to be "
                                "linearized at an operating point)");
        const auto suggestion = likely_name(name, allow_input ? known : names);
        throw ExpressionError(
            part, index, at,
            fmt::format("unknown name \"{}\"{}; known names: {}{}", name,
                        suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "", fmt::join(names, ", "),
                        allow_input ? ", u" : ""));
      }
      int results = 0;
      parser->Eval(results);
      if (results != 1)
        throw ExpressionError(part, index, -1,
                              fmt::format("expected one expression, got {} separated by commas", results));
    } catch (const mu::Parser::exception_type& e) {
      throw ExpressionError(part, index, e.GetPos(), fmt::format("cannot parse: {}", e.GetMsg()));
    }
    if (!allow_input && !uses_state)
      throw ExpressionError(part, index, -1,
                            fmt::format("the output must depend on at least one state ({})", fmt::join(d.states, ", ")));
    return parser;
  };
  for (std::size_t i = 0; i < n; ++i) c.derivatives.push_back(compile(d.derivatives[i], Part::derivative, i, true));
  c.output = compile(d.output, Part::output, 0, false);
  x0_.assign(n, 0.0);
}

ExpressionPlant::~ExpressionPlant() = default;

void ExpressionPlant::rates_at(const double* x, double u, double* rate) const {
  Compiled& c = *compiled_;
  const std::size_t n = definition_.states.size();
  std::copy(x, x + n, c.buffer.begin());
  c.buffer[c.input_slot] = u;
  try {
    for (std::size_t i = 0; i < n; ++i) rate[i] = c.derivatives[i]->Eval();
  } catch (const mu::Parser::exception_type& e) {
    throw PlantEvaluationError(fmt::format("plant expression failed: {}", e.GetMsg()));
  }
}

double ExpressionPlant::output_at(const double* x) const {
  Compiled& c = *compiled_;
  std::copy(x, x + definition_.states.size(), c.buffer.begin());
  try {
    return c.output->Eval();
  } catch (const mu::Parser::exception_type& e) {
    throw PlantEvaluationError(fmt::format("plant output expression failed: {}", e.GetMsg()));
  }
}

std::string ExpressionPlant::describe_point(const double* x, double u) const {
  std::vector<std::string> parts;
  for (std::size_t i = 0; i < definition_.states.size(); ++i)
    parts.push_back(fmt::format("{} = {:.6g}", definition_.states[i], x[i]));
  parts.push_back(fmt::format("u = {:.6g}", u));
  return fmt::format("{}", fmt::join(parts, ", "));
}

Linearization ExpressionPlant::jacobians_at(const std::vector<double>& x, double u) const {
  using Part = ExpressionError::Part;
  const int n = states();
  const auto un = static_cast<std::size_t>(n);
  if (x.size() != un) throw std::invalid_argument("jacobians_at: expected one value per state");
  Linearization lin;
  StateSpace& m = lin.model;
  m.A = Eigen::MatrixXd::Zero(n, n);
  m.B = Eigen::VectorXd::Zero(n);
  m.C = Eigen::MatrixXd::Zero(1, n);
  m.D = Eigen::VectorXd::Zero(1);
  std::vector<double> fp(un), fm(un), xp = x, xm = x;
  const double cube_root_eps = std::cbrt(kEpsilon);
  const auto step_for = [&](double v) {
    // The step actually taken: (v + h) − v, exactly representable (so the quotient uses it).
    volatile double up = v + cube_root_eps * std::max(std::abs(v), 1.0);
    return up - v;
  };
  const auto require_finite = [&](const double* values, const std::vector<double>& at, double uu, const char* where) {
    for (std::size_t i = 0; i < un; ++i)
      if (!std::isfinite(values[i]))
        throw ExpressionError(Part::derivative, i, -1,
                              fmt::format("is {} at {} ({} of the numerical Jacobian); the operating point is at the "
                                          "edge of the expression's domain",
                                          hint_for(values[i]), describe_point(at.data(), uu), where));
  };
  const auto require_finite_output = [&](double value, const std::vector<double>& at, const char* where) {
    if (!std::isfinite(value))
      throw ExpressionError(Part::output, 0, -1,
                            fmt::format("is {} at {} ({} of the numerical Jacobian)", hint_for(value),
                                        describe_point(at.data(), u), where));
  };
  // Finite values whose difference quotient overflows (a jump of 1e308 across the step, a slope
  // beyond the double range) would make an infinite Jacobian and a NaN plant downstream.
  const auto require_finite_slope = [&](double slope, Part part, std::size_t i, const std::string& over) {
    if (!std::isfinite(slope))
      throw ExpressionError(part, i, -1,
                            fmt::format("changes too steeply with {} at {} for a numerical Jacobian (the central "
                                        "difference is {}: a jump or a slope beyond the floating-point range there)",
                                        over, describe_point(x.data(), u), slope));
  };
  for (std::size_t j = 0; j < un; ++j) {
    const double h = step_for(x[j]);
    lin.state_steps.push_back(h);
    xp[j] = x[j] + h;
    xm[j] = x[j] - h;
    rates_at(xp.data(), u, fp.data());
    require_finite(fp.data(), xp, u, "a forward step");
    rates_at(xm.data(), u, fm.data());
    require_finite(fm.data(), xm, u, "a backward step");
    for (std::size_t i = 0; i < un; ++i) {
      const double slope = (fp[i] - fm[i]) / (2.0 * h);
      require_finite_slope(slope, Part::derivative, i, definition_.states[j]);
      m.A(static_cast<Eigen::Index>(i), static_cast<Eigen::Index>(j)) = slope;
    }
    const double yp = output_at(xp.data()), ym = output_at(xm.data());
    require_finite_output(yp, xp, "a forward step");
    require_finite_output(ym, xm, "a backward step");
    const double output_slope = (yp - ym) / (2.0 * h);
    require_finite_slope(output_slope, Part::output, 0, definition_.states[j]);
    m.C(0, static_cast<Eigen::Index>(j)) = output_slope;
    xp[j] = xm[j] = x[j];
  }
  const double hu = step_for(u);
  lin.input_step = hu;
  rates_at(x.data(), u + hu, fp.data());
  require_finite(fp.data(), x, u + hu, "a forward step in u");
  rates_at(x.data(), u - hu, fm.data());
  require_finite(fm.data(), x, u - hu, "a backward step in u");
  for (std::size_t i = 0; i < un; ++i) {
    const double slope = (fp[i] - fm[i]) / (2.0 * hu);
    require_finite_slope(slope, Part::derivative, i, kInputName);
    m.B(static_cast<Eigen::Index>(i)) = slope;
  }
  return lin;  // D = 0: the output does not use u (checked when compiling)
}

Equilibrium ExpressionPlant::find_equilibrium(const std::vector<double>& guess, double u) const {
  using Part = ExpressionError::Part;
  const int n = states();
  const auto un = static_cast<std::size_t>(n);
  if (guess.size() != un) throw std::invalid_argument("find_equilibrium: expected one guess per state");
  std::vector<double> x = guess, f(un), trial(un), ft(un);
  rates_at(x.data(), u, f.data());
  for (std::size_t i = 0; i < un; ++i)
    if (!std::isfinite(f[i]))
      throw ExpressionError(Part::derivative, i, -1,
                            fmt::format("is {} at the operating point guess ({})", hint_for(f[i]),
                                        describe_point(x.data(), u)));
  const double y_guess = output_at(x.data());
  if (!std::isfinite(y_guess))
    throw ExpressionError(Part::output, 0, -1,
                          fmt::format("is {} at the operating point guess ({})", hint_for(y_guess),
                                      describe_point(x.data(), u)));
  constexpr int kMaxIterations = 100;
  constexpr double kTolerance = 1e-10;
  std::vector<double> scale(un);
  const auto weighted_norm = [&](const std::vector<double>& values) {
    double worst = 0.0;
    for (std::size_t i = 0; i < un; ++i)
      worst = std::max(worst, scale[i] > 0.0 ? std::abs(values[i]) / scale[i] : (values[i] == 0.0 ? 0.0 : std::numeric_limits<double>::infinity()));
    return worst;
  };
  for (int iteration = 0;; ++iteration) {
    Linearization lin;
    try {
      lin = jacobians_at(x, u);
    } catch (const ExpressionError& e) {
      throw std::runtime_error(fmt::format("no equilibrium found with u = {:.6g}: after {} Newton iteration{} the "
                                           "iterate {} is at the edge of the domain of {}[{}], which {} (change the "
                                           "guess or u)",
                                           u, iteration, iteration == 1 ? "" : "s", describe_point(x.data(), u),
                                           e.part == ExpressionError::Part::output ? "output" : "derivatives", e.index,
                                           e.what()));
    }
    for (std::size_t i = 0; i < un; ++i) {
      double s = std::abs(lin.model.B(static_cast<Eigen::Index>(i))) * std::max(std::abs(u), 1.0);
      for (std::size_t j = 0; j < un; ++j)
        s += std::abs(lin.model.A(static_cast<Eigen::Index>(i), static_cast<Eigen::Index>(j))) *
             std::max(std::abs(x[j]), 1.0);
      scale[i] = s;
    }
    const double residual = weighted_norm(f);
    if (residual <= kTolerance) {
      // Polish: up to two more full Newton steps, each kept only if it lowers the residual.
      for (int polish = 0; polish < 2 && residual > 0.0; ++polish) {
        Eigen::CompleteOrthogonalDecomposition<Eigen::MatrixXd> cod(lin.model.A);
        const Eigen::VectorXd step = cod.solve(-Eigen::Map<const Eigen::VectorXd>(f.data(), n));
        if (!step.allFinite()) break;
        for (std::size_t i = 0; i < un; ++i) trial[i] = x[i] + step(static_cast<Eigen::Index>(i));
        rates_at(trial.data(), u, ft.data());
        if (!std::all_of(ft.begin(), ft.end(), [](double v) { return std::isfinite(v); }) ||
            !(weighted_norm(ft) < weighted_norm(f)))
          break;
        x = trial;
        f = ft;
      }
      Equilibrium eq;
      eq.states = x;
      eq.input = u;
      eq.output = output_at(x.data());
      eq.iterations = iteration;
      for (double v : f) eq.residual = std::max(eq.residual, std::abs(v));
      if (!std::isfinite(eq.output))
        throw ExpressionError(Part::output, 0, -1,
                              fmt::format("is {} at the equilibrium ({})", hint_for(eq.output),
                                          describe_point(x.data(), u)));
      return eq;
    }
    if (iteration >= kMaxIterations)
      throw std::runtime_error(fmt::format("no equilibrium found from the guess with u = {:.6g}: after {} Newton "
                                           "iterations the residual is still {:.3g} of the right-hand side's scale",
                                           u, kMaxIterations, residual));
    Eigen::CompleteOrthogonalDecomposition<Eigen::MatrixXd> cod;
    cod.setThreshold(1e-9);
    cod.compute(lin.model.A);
    const Eigen::VectorXd rhs = -Eigen::Map<const Eigen::VectorXd>(f.data(), n);
    const Eigen::VectorXd step = cod.solve(rhs);
    bool improved = false;
    if (step.allFinite() && step.norm() > 0.0) {
      for (double lambda = 1.0; lambda > 1e-12; lambda *= 0.5) {
        for (std::size_t i = 0; i < un; ++i) trial[i] = x[i] + lambda * step(static_cast<Eigen::Index>(i));
        rates_at(trial.data(), u, ft.data());
        if (std::all_of(ft.begin(), ft.end(), [](double v) { return std::isfinite(v); }) &&
            weighted_norm(ft) < residual) {
          improved = true;
          break;
        }
      }
    }
    if (!improved)
      throw std::runtime_error(fmt::format(
          "no equilibrium found with u = {:.6g}: Newton's method stalled at {} with the residual {:.3g} of the "
          "right-hand side's scale (no state values make every derivative zero near the guess; change the guess "
          "or u)",
          u, describe_point(x.data(), u), residual));
    x = trial;
    f = ft;
  }
}

void ExpressionPlant::set_operating_point(const std::vector<double>& x0, double u0) {
  if (x0.size() != definition_.states.size()) throw std::invalid_argument("set_operating_point: one value per state");
  x0_ = x0;
  u0_ = u0;
  y0_ = output_at(x0_.data());
}

void ExpressionPlant::derivative(const double* deviation, double input_deviation, double* rate) const {
  const std::size_t n = definition_.states.size();
  double* x = compiled_->buffer.data();
  for (std::size_t i = 0; i < n; ++i) x[i] = x0_[i] + deviation[i];
  const double u = u0_ + input_deviation;
  compiled_->buffer[compiled_->input_slot] = u;
  for (std::size_t i = 0; i < n; ++i) {
    double v;
    try {
      v = compiled_->derivatives[i]->Eval();
    } catch (const mu::Parser::exception_type& e) {
      throw PlantEvaluationError(fmt::format("derivatives[{}] failed: {}", i, e.GetMsg()));
    }
    if (!std::isfinite(v)) {
      std::vector<double> at(x, x + n);
      throw PlantEvaluationError(fmt::format("derivatives[{}] (d{}/dt = {}) returned {} at {}", i, definition_.states[i],
                                             definition_.derivatives[i], hint_for(v), describe_point(at.data(), u)));
    }
    rate[i] = v;
  }
}

double ExpressionPlant::output(const double* deviation) const {
  const std::size_t n = definition_.states.size();
  double* x = compiled_->buffer.data();
  for (std::size_t i = 0; i < n; ++i) x[i] = x0_[i] + deviation[i];
  double y;
  try {
    y = compiled_->output->Eval();
  } catch (const mu::Parser::exception_type& e) {
    throw PlantEvaluationError(fmt::format("output failed: {}", e.GetMsg()));
  }
  if (!std::isfinite(y)) {
    std::vector<double> at(x, x + n);
    throw PlantEvaluationError(fmt::format("output ({}) returned {} at {}", definition_.output, hint_for(y),
                                           describe_point(at.data(), compiled_->buffer[compiled_->input_slot])));
  }
  return y - y0_;
}

double ExpressionPlant::output_rate(const double* deviation, const double* rate) const {
  // Directional central difference along `rate`, the step in each state at most the Jacobian's.
  const std::size_t n = definition_.states.size();
  double tau = std::numeric_limits<double>::infinity();
  for (std::size_t i = 0; i < n; ++i)
    if (rate[i] != 0.0)
      tau = std::min(tau, std::cbrt(kEpsilon) * std::max(std::abs(x0_[i] + deviation[i]), 1.0) / std::abs(rate[i]));
  if (!std::isfinite(tau)) return 0.0;
  std::vector<double>& plus = compiled_->plus;
  std::vector<double>& minus = compiled_->minus;
  plus.resize(n);
  minus.resize(n);
  for (std::size_t i = 0; i < n; ++i) {
    plus[i] = deviation[i] + tau * rate[i];
    minus[i] = deviation[i] - tau * rate[i];
  }
  return (output(plus.data()) - output(minus.data())) / (2.0 * tau);
}

}  // namespace specloop
