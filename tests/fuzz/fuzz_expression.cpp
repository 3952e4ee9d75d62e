// libFuzzer harness: the expression plant (muparser behind our name checks, the Newton solve, the
// Jacobians, the deviation-variable model). The input is text, one field per line:
//   line 1      state names, comma-separated
//   next lines  one derivative expression per state
//   next line   the output expression
//   the rest    parameters "name=value", and optionally "@g1,g2,...;u" (operating-point guess and u)
// Allowed outcomes: ExpressionError from construction, Jacobians and the equilibrium search; the
// std::runtime_error "no equilibrium found ..." from find_equilibrium; PlantEvaluationError from
// the deviation model. Invariants: an equilibrium and its Jacobians are finite, the model at zero
// deviation reproduces the equilibrium (output exactly 0, rates = f at the equilibrium).
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string>
#include <string_view>
#include <vector>

#include <fmt/format.h>

#include "fuzz_common.hpp"
#include "specloop/sim/expression_plant.hpp"

namespace {

using specloop_fuzz::finite;
constexpr std::string_view kHarness = "fuzz_expression";

#define CHECK(condition, ...) SPECLOOP_FUZZ_CHECK(kHarness, condition, __VA_ARGS__)

std::vector<std::string> split(std::string_view text, char separator) {
  std::vector<std::string> parts;
  std::size_t start = 0;
  while (true) {
    const auto at = text.find(separator, start);
    parts.emplace_back(text.substr(start, at == std::string_view::npos ? std::string_view::npos : at - start));
    if (at == std::string_view::npos) break;
    start = at + 1;
  }
  return parts;
}

// Guesses and u are finite numbers in a spec (the reader refuses others), so they are here too.
double number(const std::string& text) {
  const double v = std::strtod(text.c_str(), nullptr);
  return finite(v) ? v : 0.0;
}

void check_linearization(const specloop::Linearization& lin, std::size_t n) {
  const auto& m = lin.model;
  const auto rows = static_cast<long>(n);
  CHECK(m.A.rows() == rows && m.A.cols() == rows && m.B.size() == rows && m.C.cols() == rows,
          "Jacobian sizes do not match the state count");
  CHECK(m.A.allFinite() && m.B.allFinite() && m.C.allFinite() && m.D.allFinite(),
          "jacobians_at returned a non-finite Jacobian instead of throwing ExpressionError");
  CHECK(finite(lin.input_step) && lin.input_step > 0.0, "non-positive input step");
  for (double h : lin.state_steps) CHECK(finite(h) && h > 0.0, "non-positive state step");
}

void exercise(specloop::ExpressionPlant& plant, const std::vector<double>& guess, double u) {
  const std::size_t n = guess.size();
  std::vector<double> rate(n);
  // Raw evaluation at a few points: NaN/inf are allowed, crashes are not.
  for (double v : {0.0, 1.0, -1.0, 1e300}) {
    std::vector<double> x(n, v);
    plant.rates_at(x.data(), v, rate.data());
    (void)plant.output_at(x.data());
  }
  try {
    check_linearization(plant.jacobians_at(guess, u), n);
  } catch (const specloop::ExpressionError&) {
  }
  specloop::Equilibrium eq;
  try {
    eq = plant.find_equilibrium(guess, u);
  } catch (const specloop::ExpressionError&) {
    return;
  } catch (const std::runtime_error& e) {
    const std::string_view message = e.what();
    CHECK(message.rfind("no equilibrium found", 0) == 0, "find_equilibrium threw an unexpected runtime_error: {}",
          message);
    return;
  }
  CHECK(eq.states.size() == n, "equilibrium has the wrong size");
  for (double v : eq.states) CHECK(finite(v), "equilibrium state not finite");
  CHECK(finite(eq.output) && finite(eq.residual) && eq.input == u, "equilibrium output/residual not finite");
  specloop::Linearization lin;
  try {
    lin = plant.jacobians_at(eq.states, u);
  } catch (const specloop::ExpressionError&) {
    return;  // the equilibrium may sit at a domain edge; the spec reader refuses it then
  }
  check_linearization(lin, n);

  plant.set_operating_point(eq.states, u);
  std::vector<double> zero(n, 0.0), at_eq(n);
  plant.rates_at(eq.states.data(), u, at_eq.data());
  try {
    plant.derivative(zero.data(), 0.0, rate.data());
    for (std::size_t i = 0; i < n; ++i)
      CHECK(rate[i] == at_eq[i], "the deviation model at zero deviation differs from f at the equilibrium");
    CHECK(plant.output(zero.data()) == 0.0, "the deviation model's output at zero deviation is not 0");
    (void)plant.output_rate(zero.data(), rate.data());
    std::vector<double> away(n, 0.5);
    plant.derivative(away.data(), 0.25, rate.data());
    (void)plant.output(away.data());
    (void)plant.output_rate(away.data(), rate.data());
  } catch (const specloop::PlantEvaluationError&) {
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  const auto lines = split(text, '\n');
  specloop::ExpressionDefinition definition;
  definition.states = split(lines[0], ',');
  if (definition.states.size() > 6) return 0;  // keep single inputs fast; size is not the point here
  std::size_t next = 1;
  for (std::size_t i = 0; i < definition.states.size() && next < lines.size(); ++i)
    definition.derivatives.push_back(lines[next++]);
  if (next < lines.size()) definition.output = lines[next++];
  std::vector<double> guess(definition.states.size(), 1.0);
  double u = 0.0;
  for (; next < lines.size(); ++next) {
    const std::string& line = lines[next];
    if (!line.empty() && line[0] == '@') {
      const auto halves = split(std::string_view(line).substr(1), ';');
      const auto values = split(halves[0], ',');
      for (std::size_t i = 0; i < guess.size() && i < values.size(); ++i) guess[i] = number(values[i]);
      if (halves.size() > 1) u = number(halves[1]);
      continue;
    }
    const auto eq = line.find('=');
    if (eq == std::string::npos) continue;
    definition.parameters.emplace_back(line.substr(0, eq), std::strtod(line.substr(eq + 1).c_str(), nullptr));
  }
  try {
    specloop::ExpressionPlant plant(definition);
    CHECK(plant.states() == static_cast<int>(definition.states.size()), "state count changed");
    exercise(plant, guess, u);
  } catch (const specloop::ExpressionError& e) {
    CHECK(e.position >= -1, "ExpressionError with a position below -1");
  } catch (const std::exception& e) {
    specloop_fuzz::fail_exception(kHarness, e);
  }
  return 0;
}
