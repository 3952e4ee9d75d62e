// Plants written as expressions ([plant.nonlinear]): numerical Jacobians against analytic
// derivatives, the equilibrium solve, the linearized transfer function against its closed form,
// the state-space → transfer-function conversion, small-step agreement with the linear loop
// (a property: the error shrinks quadratically with the amplitude), a NaN during a simulation,
// and the spec parser's checks. The tanks and the pendulum are invented for the tests; each
// analytic derivative is derived in the comment beside it.
#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <memory>
#include <string>
#include <vector>

#include "specloop/design/characterize.hpp"
#include "specloop/core/compensator.hpp"
#include "specloop/design/design.hpp"
#include "specloop/sim/expression_plant.hpp"
#include "specloop/sim/nonlinear.hpp"
#include "specloop/spec/spec.hpp"

using namespace specloop;
using Catch::Matchers::Contains;

namespace {

// Tank: area·h' = q_gain·u − outlet·√h (Torricelli outflow), y = h.
//   f(h, u) = (q_gain·u − outlet·√h)/area
//   ∂f/∂h = −outlet/(2·area·√h),  ∂f/∂u = q_gain/area,  ∂h/∂h = 1
//   equilibrium with u = u0: √h0 = q_gain·u0/outlet.
constexpr double kArea = 0.8, kGain = 0.05, kOutlet = 0.02;

ExpressionDefinition tank_definition() {
  ExpressionDefinition d;
  d.states = {"h"};
  d.derivatives = {"(q_gain*u - outlet*sqrt(h))/area"};
  d.output = "h";
  d.parameters = {{"area", kArea}, {"q_gain", kGain}, {"outlet", kOutlet}};
  return d;
}

// Pendulum with viscous friction, torque input, angle output (m, L, b, g invented):
//   θ' = ω,  ω' = −(g/L)·sin θ − b/(m·L²)·ω + u/(m·L²)
//   A = [[0, 1], [−(g/L)·cos θ0, −b/(m·L²)]],  B = [0, 1/(m·L²)],  C = [1, 0]
//   equilibrium with u = u0: ω0 = 0, sin θ0 = u0/(m·g·L).
constexpr double kMass = 0.3, kLength = 0.5, kFriction = 0.04, kGravity = 9.81;

ExpressionDefinition pendulum_definition() {
  ExpressionDefinition d;
  d.states = {"theta", "omega"};
  d.derivatives = {"omega", "-(g/len)*sin(theta) - friction/(mass*len^2)*omega + u/(mass*len^2)"};
  d.output = "theta";
  d.parameters = {{"g", kGravity}, {"len", kLength}, {"friction", kFriction}, {"mass", kMass}};
  return d;
}

double relative_error(double value, double exact) { return std::abs(value - exact) / std::abs(exact); }

}  // namespace

TEST_CASE("tank: numerical Jacobian against the analytic one", "[expression]") {
  const ExpressionPlant tank(tank_definition());
  // Away from equilibrium too: the Jacobian is a property of f at any point.
  for (const double h0 : {0.05, 0.6, 1.2, 7.0}) {
    const double u0 = 0.43;
    const Linearization lin = tank.jacobians_at({h0}, u0);
    INFO("h0 = " << h0);
    const double a = -kOutlet / (2.0 * kArea * std::sqrt(h0));
    const double b = kGain / kArea;
    // Central differences with h = ε^(1/3)·max(|x|, 1): expected relative error ~ε^(2/3) ≈ 4e-11
    // (Nocedal & Wright, Numerical Optimization, 2006, §8.1; recalled from memory). Stated
    // tolerance 1e-8, with room for the curvature of √h at small h.
    CHECK(relative_error(lin.model.A(0, 0), a) < 1e-8);
    // f is linear in u, so only rounding remains: about ε·|terms of f|/(h·|b|) ≈ 1e-11 here.
    CHECK(relative_error(lin.model.B(0), b) < 1e-9);
    CHECK(relative_error(lin.model.C(0, 0), 1.0) < 1e-12);
    CHECK(lin.model.D(0) == 0.0);
  }
}

TEST_CASE("tank: the equilibrium is found from a guess", "[expression]") {
  const ExpressionPlant tank(tank_definition());
  const double u0 = 0.43;
  const double h_exact = std::pow(kGain * u0 / kOutlet, 2.0);  // √h0 = q_gain·u0/outlet
  const Equilibrium eq = tank.find_equilibrium({0.3}, u0);
  CHECK(relative_error(eq.states[0], h_exact) < 1e-12);
  CHECK(relative_error(eq.output, h_exact) < 1e-12);
  CHECK(eq.iterations > 0);
}

TEST_CASE("tank: no equilibrium when the outflow cannot balance the inflow", "[expression]") {
  // With a negative inflow no level makes h' = 0 (√h >= 0): Newton must fail with a reason.
  const ExpressionPlant tank(tank_definition());
  CHECK_THROWS_WITH(tank.find_equilibrium({1.0}, -0.2), Contains("no equilibrium") || Contains("edge"));
}

TEST_CASE("pendulum: Jacobians, equilibrium and transfer function against the analytic ones", "[expression]") {
  const ExpressionPlant pendulum(pendulum_definition());
  const double inertia = kMass * kLength * kLength;
  for (const double theta0 : {0.0, 0.5}) {
    const double u0 = kMass * kGravity * kLength * std::sin(theta0);
    const Equilibrium eq = pendulum.find_equilibrium({theta0 + 0.2, 0.1}, u0);
    CHECK(std::abs(eq.states[0] - theta0) < 1e-12);
    CHECK(std::abs(eq.states[1]) < 1e-12);
    const Linearization lin = pendulum.jacobians_at(eq.states, u0);
    const double a21 = -(kGravity / kLength) * std::cos(theta0), a22 = -kFriction / inertia, b2 = 1.0 / inertia;
    CHECK(lin.model.A(0, 0) == 0.0);  // θ' = ω does not depend on θ: the difference is exactly 0
    CHECK(relative_error(lin.model.A(0, 1), 1.0) < 1e-12);
    CHECK(relative_error(lin.model.A(1, 0), a21) < 1e-8);
    CHECK(relative_error(lin.model.A(1, 1), a22) < 1e-8);
    CHECK(lin.model.B(0) == 0.0);
    CHECK(relative_error(lin.model.B(1), b2) < 1e-10);
    CHECK(relative_error(lin.model.C(0, 0), 1.0) < 1e-12);
    CHECK(lin.model.C(0, 1) == 0.0);

    // G(s) = (1/(mL²)) / (s² + b/(mL²)·s + (g/L)·cos θ0): no zeros, DC gain 1/(m·g·L·cos θ0).
    const TransferFunction g = transfer_function_of(lin.model);
    REQUIRE(g.numerator.degree() == 0);
    REQUIRE(g.denominator.degree() == 2);
    const TransferFunction n = g.normalized();
    CHECK(relative_error(n.denominator.coefficients[1], -a22) < 1e-8);
    CHECK(relative_error(n.denominator.coefficients[2], -a21) < 1e-8);
    CHECK(relative_error(g.dc_gain(), 1.0 / (kMass * kGravity * kLength * std::cos(theta0))) < 1e-8);
    // Poles: −β ± j·√(ω0² − β²), β = b/(2mL²), ω0² = (g/L)·cos θ0 (underdamped here).
    const double beta = kFriction / (2.0 * inertia), wd = std::sqrt(-a21 - beta * beta);
    for (const Complex& p : g.poles()) {
      CHECK(std::abs(p.real() + beta) < 1e-8 * wd);
      CHECK(std::abs(std::abs(p.imag()) - wd) < 1e-8 * wd);
    }
  }
}

TEST_CASE("state space to transfer function: a companion form with a zero", "[expression][lti]") {
  // Controllable companion form of (s + 4)/((s + 1)(s + 2)(s + 3)) = (s + 4)/(s³ + 6s² + 11s + 6):
  // A = [[0,1,0],[0,0,1],[−6,−11,−6]], B = e3, C = [4, 1, 0] (a standard textbook realization,
  // derived: C·(sI − A)⁻¹·B = (c0 + c1·s + c2·s²)/den).
  StateSpace s;
  s.A = Eigen::MatrixXd{{0, 1, 0}, {0, 0, 1}, {-6, -11, -6}};
  s.B = Eigen::VectorXd{{0, 0, 1}};
  s.C = Eigen::MatrixXd{{4, 1, 0}};
  s.D = Eigen::VectorXd{{0.5}};
  const TransferFunction g = transfer_function_of(s);
  // With D = 0.5: N = (s + 4) + 0.5·den.
  const std::vector<double> num{0.5, 3.0, 6.5, 7.0}, den{1.0, 6.0, 11.0, 6.0};
  REQUIRE(g.numerator.coefficients.size() == num.size());
  REQUIRE(g.denominator.coefficients.size() == den.size());
  for (std::size_t i = 0; i < num.size(); ++i) CHECK(std::abs(g.numerator.coefficients[i] - num[i]) < 1e-12);
  for (std::size_t i = 0; i < den.size(); ++i) CHECK(std::abs(g.denominator.coefficients[i] - den[i]) < 1e-12);
}

TEST_CASE("spec: a tank plant loads as its linearization", "[expression][spec]") {
  // One state: G(s) = (q_gain/area)/(s + outlet/(2·area·√h0)); pole −outlet/(2·area·√h0), DC gain
  // 2·q_gain·√h0/outlet (from the Jacobians above).
  const Spec spec = parse_spec(R"(
[plant.nonlinear]
states = ["h"]
derivatives = ["(q_gain*u - outlet*sqrt(h))/area"]
output = "h"
parameters = { area = 0.8, q_gain = 0.05, outlet = 0.02 }
[plant.nonlinear.operating_point]
h = 1.0
u = 0.43
[actuator]
min = 0.0
max = 1.0
)", "tank.toml");
  REQUIRE(spec.plant.nonlinear);
  const double sqrt_h0 = kGain * 0.43 / kOutlet, h0 = sqrt_h0 * sqrt_h0;
  CHECK(relative_error(spec.plant.nonlinear->equilibrium[0], h0) < 1e-12);
  CHECK(relative_error(spec.plant.nonlinear->output_value, h0) < 1e-12);
  REQUIRE(spec.plant.poles.size() == 1);
  CHECK(relative_error(spec.plant.poles[0].real(), -kOutlet / (2.0 * kArea * sqrt_h0)) < 1e-8);
  CHECK(spec.plant.zeros.empty());
  const TransferFunction g(Polynomial(spec.plant.numerator), Polynomial(spec.plant.denominator));
  CHECK(relative_error(g.dc_gain(), 2.0 * kGain * sqrt_h0 / kOutlet) < 1e-8);
  CHECK(spec.actuator.min == 0.0);  // absolute limits are kept as written
}

namespace {

// A PI loop on the tank at h0 (u0 = 0.43), wide actuator: the nonlinear simulation against the
// same simulator on the linearization, at the same samples. Returns max |Δy|.
double small_step_error(double amplitude) {
  auto tank = std::make_shared<ExpressionPlant>(tank_definition());
  const double u0 = 0.43;
  const Equilibrium eq = tank->find_equilibrium({1.0}, u0);
  tank->set_operating_point(eq.states, u0);
  const StateSpace linear = realize(transfer_function_of(tank->jacobians_at(eq.states, u0).model));
  const Controller pi = make_controller(Structure::pi, {2.0, 0.02}, 10.0);
  LoopOptions options;
  options.horizon_s = 400.0;
  options.output_step_s = 0.5;
  options.relative_tolerance = 1e-11;
  options.absolute_tolerance = 1e-14;
  const ActuatorModel wide;
  const NonlinearResult lin = simulate_nonlinear(linear, pi, wide, options, amplitude, 0.02);
  options.plant_model = tank;
  const NonlinearResult nl = simulate_nonlinear(linear, pi, wide, options, amplitude, 0.02);
  REQUIRE(lin.status == NonlinearStatus::ok);
  REQUIRE(nl.status == NonlinearStatus::ok);
  REQUIRE(lin.output.size() == nl.output.size());
  double worst = 0.0;
  for (std::size_t k = 0; k < nl.output.size(); ++k) worst = std::max(worst, std::abs(nl.output[k] - lin.output[k]));
  return worst;
}

}  // namespace

TEST_CASE("small steps: the nonlinear loop approaches the linear one quadratically", "[expression][nonlinear]") {
  // Property (Taylor): f(x0 + δx, u0 + δu) = A·δx + B·δu + O(|δ|²), so the difference between the
  // nonlinear and the linearized response to a step of size a is O(a²): halving a quarters it.
  const double e1 = small_step_error(0.04), e2 = small_step_error(0.02), e3 = small_step_error(0.01);
  INFO("max |Δy| at a = 0.04, 0.02, 0.01: " << e1 << ", " << e2 << ", " << e3);
  CHECK(e1 / e2 > 3.5);
  CHECK(e1 / e2 < 4.5);
  CHECK(e2 / e3 > 3.5);
  CHECK(e2 / e3 < 4.5);
  CHECK(e3 / 0.01 < 1e-2);  // relative to the step: small, the linearization is a good model here
}

TEST_CASE("a NaN from the plant during the simulation is status non_finite with a note", "[expression][nonlinear]") {
  // A tank with a constant seepage besides the orifice: area·h' = q_gain·u − outlet·√h − seep.
  // Asked for a level below zero, the pump stops and h' <= −seep/area < 0 even at h = 0, so the
  // level must cross zero and √h turns NaN (an empty tank without seepage would instead stay at
  // h = 0, where h' = 0). No crash, no NaN sample: status non_finite, the expression named.
  ExpressionDefinition leaky = tank_definition();
  leaky.derivatives = {"(q_gain*u - outlet*sqrt(h) - seep)/area"};
  leaky.parameters.emplace_back("seep", 0.002);
  auto tank = std::make_shared<ExpressionPlant>(leaky);
  const double u0 = 0.43;
  const Equilibrium eq = tank->find_equilibrium({1.0}, u0);
  tank->set_operating_point(eq.states, u0);
  const StateSpace linear = realize(transfer_function_of(tank->jacobians_at(eq.states, u0).model));
  const Controller p = make_controller(Structure::p, {5.0}, 10.0);
  ActuatorModel pump;
  pump.min = 0.0 - u0;  // deviation limits of an absolute range [0, 1]
  pump.max = 1.0 - u0;
  LoopOptions options;
  options.plant_model = tank;
  options.horizon_s = 2000.0;
  const NonlinearResult r = simulate_nonlinear(linear, p, pump, options, -2.0 * eq.states[0], 0.02);
  CHECK(r.status == NonlinearStatus::non_finite);
  REQUIRE_FALSE(r.notes.empty());
  CHECK_THAT(r.notes.back(), Contains("derivatives[0]") && Contains("NaN") && Contains("t = "));
  for (double y : r.output) CHECK(std::isfinite(y));
  // The run stopped early: the samples end before the horizon.
  REQUIRE_FALSE(r.time_s.empty());
  CHECK(r.time_s.back() < options.horizon_s);
}

TEST_CASE("an empty tank without seepage stays empty: reaching the domain's edge is not an error", "[expression][nonlinear]") {
  // area·h' = −outlet·√h with the pump stopped empties the tank in the finite time
  // T = 2·area·√h0/outlet (Torricelli; integrate dh/√h), after which h = 0 is a solution (h' = 0
  // there). Trial steps past h = 0 are retried smaller, so the run ends ok with the level at 0.
  auto tank = std::make_shared<ExpressionPlant>(tank_definition());
  const double u0 = 0.43;
  const Equilibrium eq = tank->find_equilibrium({1.0}, u0);
  tank->set_operating_point(eq.states, u0);
  const StateSpace linear = realize(transfer_function_of(tank->jacobians_at(eq.states, u0).model));
  ActuatorModel pump;
  pump.min = -u0;
  pump.max = 1.0 - u0;
  LoopOptions options;
  options.plant_model = tank;
  options.horizon_s = 300.0;
  const NonlinearResult r = simulate_nonlinear(linear, make_controller(Structure::p, {5.0}, 10.0), pump, options,
                                               -2.0 * eq.states[0], 0.02);
  REQUIRE(r.status == NonlinearStatus::ok);
  const double drain_time = 2.0 * kArea * std::sqrt(eq.states[0]) / kOutlet;  // ≈ 86 s
  for (std::size_t k = 0; k < r.time_s.size(); ++k) {
    const double level = eq.states[0] + r.output[k];
    CHECK(level >= 0.0);
    if (r.time_s[k] > 1.01 * drain_time) CHECK(level < 1e-9);
    if (r.time_s[k] < 0.99 * drain_time) CHECK(level > 0.0);
  }
}

TEST_CASE("spec: expression mistakes name their key and line", "[expression][spec]") {
  const auto load = [](const std::string& nonlinear_body) {
    return parse_spec("[plant.nonlinear]\n" + nonlinear_body +
                          "[plant.nonlinear.operating_point]\nh = 1.0\nu = 0.4\n",
                      "x.toml");
  };
  const std::string tank_params = "parameters = { area = 0.8, q = 0.05, k = 0.02 }\n";
  // Reserved and invalid names.
  CHECK_THROWS_WITH(load("states = [\"sin\"]\nderivatives = [\"u\"]\noutput = \"sin\"\n"),
                    Contains("x.toml:2:") && Contains("plant.nonlinear.states[0]") && Contains("built-in"));
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"u - k*sqrt(h)\"]\noutput = \"h\"\n"
                         "parameters = { k = 1.0, h = 2.0 }\n"),
                    Contains("plant.nonlinear.parameters.h") && Contains("already"));
  CHECK_THROWS_WITH(load("states = [\"2h\"]\nderivatives = [\"u\"]\noutput = \"h\"\n"), Contains("not a valid name"));
  // Time is not available; assignment is refused; the output may not use u and must use a state.
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"u - t\"]\noutput = \"h\"\n"),
                    Contains("plant.nonlinear.derivatives[0]") && Contains("time-invariant"));
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"h = 3\"]\noutput = \"h\"\n"), Contains("assigns"));
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"u - h\"]\noutput = \"h + u\"\n"),
                    Contains("plant.nonlinear.output") && Contains("not u"));
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"u - h\"]\noutput = \"2.0\"\n"),
                    Contains("plant.nonlinear.output") && Contains("at least one state"));
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"u - h, h\"]\noutput = \"h\"\n"), Contains("one expression"));
  // Did-you-mean for a misspelt parameter.
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"(q*u - kk*sqrt(h))/area\"]\noutput = \"h\"\n" + tank_params),
                    Contains("unknown name \"kk\"") && Contains("did you mean 'k'"));
  // ∂f/∂u = 0: the input cannot move the plant.
  CHECK_THROWS_WITH(load("states = [\"h\"]\nderivatives = [\"0.4 - h\"]\noutput = \"h\"\n"),
                    Contains("plant.nonlinear.derivatives") && Contains("cannot move the plant"));
  // A missing guess and an unknown operating-point key.
  CHECK_THROWS_WITH(parse_spec("[plant.nonlinear]\nstates = [\"h\", \"q\"]\nderivatives = [\"q - h\", \"u - q\"]\n"
                               "output = \"h\"\n[plant.nonlinear.operating_point]\nh = 1.0\nu = 0.4\n",
                               "x.toml"),
                    Contains("plant.nonlinear.operating_point.q") && Contains("missing"));
  CHECK_NOTHROW(load("states = [\"h\"]\nderivatives = [\"u - h\"]\noutput = \"h\"\n"));
}

// Found by fuzzing (tests/fuzz/fuzz_expression.cpp): muparser refuses variable names over 100
// characters by throwing its own exception type, which is not a std::exception; it escaped from
// the constructor and ended `specloop analyze` in std::terminate. Every name is now checked with
// the parser's own rules, and a refusal is an ExpressionError naming the state or parameter.
TEST_CASE("names the expression parser refuses are ExpressionErrors, not its own exceptions", "[expression]") {
  const std::string longest(100, 'h'), too_long(101, 'h');
  ExpressionDefinition d;
  d.states = {longest};
  d.derivatives = {"u - " + longest};
  d.output = longest;
  CHECK_NOTHROW(ExpressionPlant(d));  // 100 characters: muparser's limit, accepted
  d.states = {too_long};
  d.derivatives = {"u - " + too_long};
  d.output = too_long;
  try {
    ExpressionPlant plant(d);
    FAIL("a 101-character state name was accepted");
  } catch (const ExpressionError& e) {
    CHECK(e.part == ExpressionError::Part::state);
    CHECK(e.index == 0);
    CHECK_THAT(e.what(), Contains("is not a name the expression parser takes (101 characters)"));
  }
  ExpressionDefinition p = tank_definition();
  p.parameters.emplace_back(std::string(120, 'k'), 1.0);
  try {
    ExpressionPlant plant(p);
    FAIL("a 120-character parameter name was accepted");
  } catch (const ExpressionError& e) {
    CHECK(e.part == ExpressionError::Part::parameter);
    CHECK(e.index == 3);
  }
  // Through the spec reader: exit 2 material, with the key and line.
  CHECK_THROWS_AS(parse_spec("[plant.nonlinear]\nstates = [\"" + too_long + "\"]\nderivatives = [\"u\"]\noutput = \"" +
                                 too_long + "\"\n[plant.nonlinear.operating_point]\n" + too_long + " = 1.0\nu = 0.4\n",
                             "x.toml"),
                  SpecError);
}

// Found by fuzzing: values that are finite on both sides of the step but 2e308 apart made an
// infinite Jacobian; its infinite scale then let Newton's convergence test pass at the guess with
// the residual f = 2, and the spec reader reported "the linearization's transfer function is
// zero". jacobians_at now refuses a difference quotient that overflows.
TEST_CASE("a Jacobian whose difference quotient overflows is refused, never returned", "[expression]") {
  ExpressionDefinition d;
  d.states = {"x"};
  d.derivatives = {"1e308*sign(x) + u - 1"};
  d.output = "x";
  ExpressionPlant jump(d);
  CHECK_THROWS_WITH(jump.jacobians_at({0.0}, 3.0), Contains("changes too steeply with x"));
  CHECK_THROWS_AS(jump.find_equilibrium({0.0}, 3.0), std::runtime_error);
  d.derivatives = {"-x + u"};
  d.output = "1e308*sign(x)";  // the output's slope overflows the same way
  ExpressionPlant output_jump(d);
  try {
    (void)output_jump.jacobians_at({0.0}, 0.0);
    FAIL("an infinite output slope was returned");
  } catch (const ExpressionError& e) {
    CHECK(e.part == ExpressionError::Part::output);
  }
  d.derivatives = {"-x + 1e308*sign(u)"};  // and ∂f/∂u
  d.output = "x";
  CHECK_THROWS_WITH(ExpressionPlant(d).jacobians_at({0.0}, 0.0), Contains("changes too steeply with u"));
  CHECK_THROWS_WITH(parse_spec("[plant.nonlinear]\nstates = [\"x\"]\nderivatives = [\"1e308*sign(x) + u - 1\"]\n"
                               "output = \"x\"\n[plant.nonlinear.operating_point]\nx = 0\nu = 3\n",
                               "x.toml"),
                    Contains("plant.nonlinear.operating_point") && Contains("changes too steeply"));
}

TEST_CASE("free integrator: Newton stops on the line of equilibria nearest the guess", "[expression]") {
  // A drive: angle' = rate, rate' = (gain·u − rate)/lag. With u = 0 every (angle, 0) is an
  // equilibrium (A is singular); the minimum-norm Newton step changes only the rate. The linearized
  // G(s) = (gain/lag)/(s·(s + 1/lag)) has a pole exactly at 0 (derived).
  ExpressionDefinition d;
  d.states = {"angle", "rate"};
  d.derivatives = {"rate", "(gain*u - rate)/lag"};
  d.output = "angle";
  d.parameters = {{"gain", 2.0}, {"lag", 0.5}};
  const ExpressionPlant drive(d);
  const Equilibrium eq = drive.find_equilibrium({0.3, 0.2}, 0.0);
  CHECK(std::abs(eq.states[1]) < 1e-12);
  CHECK(std::abs(eq.states[0] - 0.3) < 1e-12);  // the rate was off, not the angle
  const TransferFunction g = transfer_function_of(drive.jacobians_at(eq.states, 0.0).model);
  REQUIRE(g.denominator.degree() == 2);
  CHECK(g.denominator.constant() == 0.0);  // exactly: a structural zero stays zero
  CHECK(g.system_type() == 1);
  CHECK(relative_error(g.numerator.constant() / g.denominator.leading(), 2.0 / 0.5) < 1e-10);
}

TEST_CASE("sampled controller on an expression plant: small steps approach the linear loop", "[expression][nonlinear]") {
  // The sampled path integrates the plant between hold switches with its own functor: the same
  // quadratic property as the continuous path (Taylor), with a PI at Ts = 2 s.
  auto tank = std::make_shared<ExpressionPlant>(tank_definition());
  const Equilibrium eq = tank->find_equilibrium({1.0}, 0.43);
  tank->set_operating_point(eq.states, 0.43);
  const StateSpace linear = realize(transfer_function_of(tank->jacobians_at(eq.states, 0.43).model));
  const Controller pi = make_controller(Structure::pi, {2.0, 0.02}, 10.0);
  const auto error_at = [&](double amplitude) {
    LoopOptions options;
    options.horizon_s = 400.0;
    options.output_step_s = 1.0;
    options.sample_time_s = 2.0;
    options.relative_tolerance = 1e-11;
    options.absolute_tolerance = 1e-14;
    const NonlinearResult lin = simulate_nonlinear(linear, pi, ActuatorModel{}, options, amplitude, 0.02);
    options.plant_model = tank;
    const NonlinearResult nl = simulate_nonlinear(linear, pi, ActuatorModel{}, options, amplitude, 0.02);
    REQUIRE(lin.status == NonlinearStatus::ok);
    REQUIRE(nl.status == NonlinearStatus::ok);
    REQUIRE(nl.difference_equation);
    double worst = 0.0;
    for (std::size_t k = 0; k < nl.output.size(); ++k) worst = std::max(worst, std::abs(nl.output[k] - lin.output[k]));
    return worst;
  };
  const double e1 = error_at(0.04), e2 = error_at(0.02);
  INFO("max |Δy| at a = 0.04, 0.02: " << e1 << ", " << e2);
  CHECK(e1 / e2 > 3.5);
  CHECK(e1 / e2 < 4.5);
}

TEST_CASE("design: limits become deviations and the confirmation runs the expressions", "[expression][design]") {
  // The demo tank: absolute pump limits [0, 1] around u0 = 0.5 become [−0.5, 0.5]. The confirmation
  // must integrate the expressions, not the linearization: at a tiny step the two loops agree, at
  // the spec's 0.25 m step the tank's gain falls with the level (√ outflow) and they differ.
  Spec spec = load_spec(std::string(SPECLOOP_SOURCE_DIR) + "/specs/greywater_buffer.toml");
  REQUIRE(spec.plant.nonlinear);
  const Problem problem = make_problem(spec, characterize(spec));
  const NonlinearSetup setup = nonlinear_setup(problem, 300.0, 2000);
  CHECK(setup.actuator.min == Approx(0.0 - spec.plant.nonlinear->input));
  CHECK(setup.actuator.max == Approx(1.0 - spec.plant.nonlinear->input));
  CHECK(setup.options.plant_model != nullptr);

  const Controller pi = make_controller(Structure::pi, {2.5, 0.012}, 10.0);
  const auto overshoot_gap = [&](double amplitude) {
    Spec scaled = spec;
    scaled.reference.amplitude = amplitude;
    const Problem p = make_problem(scaled, characterize(scaled));
    const Design d = measure_and_confirm(p, DesignRole::optimized, pi);
    REQUIRE(d.nonlinear);
    REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
    return std::abs(d.nonlinear->simulated.overshoot_pct - d.simulated.overshoot_pct);
  };
  const double tiny = overshoot_gap(1e-4), full = overshoot_gap(0.25);
  INFO("overshoot gap (points) at 1e-4 m: " << tiny << ", at 0.25 m: " << full);
  CHECK(tiny < 0.01);  // sample-maximum resolution of the confirmation's metrics
  CHECK(full > 10.0 * tiny);
  CHECK(full > 0.05);
}

TEST_CASE("design: a tank asked to drain below empty is not confirmed, and the verdict says why", "[expression][design]") {
  // The seeping tank of the test above, as a spec: a step to below empty makes the level cross
  // zero (h' <= −seep/area there), √level turns NaN, and the confirmation must say so.
  const Spec spec = parse_spec(R"(
[plant.nonlinear]
states = ["level"]
derivatives = ["(q_gain*u - outlet*sqrt(level) - seep)/area"]
output = "level"
parameters = { area = 0.8, q_gain = 0.05, outlet = 0.02, seep = 0.002 }
[plant.nonlinear.operating_point]
level = 1.0
u = 0.43
[actuator]
min = 0.0
max = 1.0
[controller]
structure = "pi"
[requirements]
overshoot_max_pct = 10.0
[reference]
amplitude = -2.0
)", "seeping_tank.toml");
  const Problem problem = make_problem(spec, characterize(spec));
  const Design d = measure_and_confirm(problem, DesignRole::optimized, make_controller(Structure::pi, {2.5, 0.012}, 10.0));
  REQUIRE(d.nonlinear);
  CHECK(d.nonlinear->status == NonlinearStatus::non_finite);
  CHECK_FALSE(d.nonlinear->confirmed);
  CHECK_THAT(d.nonlinear->verdict, Contains("non_finite") && Contains("sqrt(level)") && Contains("NaN"));
}
