// The nonlinear loop with a filtered PID (a notch N after the PID, a measurement filter F before
// it): the PID's parallel law with F and N as their own states must be the same linear
// controller as the two-input realization u = N·(C_r·r − C·F·y) (controller_realization) when no
// anti-windup acts, and the anti-windup must act on its integrator. The references: the exact
// linear step (matrix exponential), a fixed-step classical Runge–Kutta integration of the
// two-input realization with the saturation (written here), the exact sampled simulation of the
// difference equation. Plants and controllers are invented for the tests.
#include <catch2/catch.hpp>
#include <algorithm>
#include <array>
#include <cmath>
#include <vector>

#include <Eigen/Dense>

#include "specloop/sim/nonlinear.hpp"
#include "specloop/sim/response.hpp"
#include "specloop/sim/sampled_loop.hpp"

using namespace specloop;
using Catch::Matchers::Contains;

namespace {

// A lag with a lightly damped resonance: 2.5/(s² + 3.5 s + 2.5) · 144/(s² + 1.2 s + 144).
StateSpace resonant_plant() {
  const Polynomial den = Polynomial({1.0, 3.5, 2.5}) * Polynomial({1.0, 1.2, 144.0});
  return realize(TransferFunction(Polynomial({360.0}), den));
}

// PID (Kp 2, zeros at ω0 1.2 rad/s, ζc 0.9, N 10) with a notch at the resonance and a
// first-order measurement filter.
Controller filtered_pid(bool second_order_filter = false) {
  const Controller c = make_controller(Structure::pid, {2.0, 1.2, 0.9}, 10.0);
  return with_filters(c, NotchFilter{12.0, 0.1, 0.4}, MeasurementFilter{second_order_filter ? 2 : 1, 0.02});
}

LoopOptions tight_options(double horizon) {
  LoopOptions opt;
  opt.relative_tolerance = 1e-12;
  opt.absolute_tolerance = 1e-14;
  opt.horizon_s = horizon;
  opt.anti_windup = AntiWindup::none;
  return opt;
}

// The loop plant + two-input controller with u = clip(u_c, lo, hi), no anti-windup, integrated
// by classical RK4 with a fixed step h; y at the multiples of `every` steps.
std::vector<double> rk4_two_input(const StateSpace& plant, const TwoInputRealization& k, double r, double lo, double hi,
                                  double h, long steps, long every) {
  const Eigen::Index np = plant.A.rows(), nk = k.A.rows();
  auto rhs = [&](const Eigen::VectorXd& z) {
    const Eigen::VectorXd xp = z.head(np), xk = z.tail(nk);
    const double y = (plant.C.row(0) * xp)(0);
    const double uc = (k.c.row(0) * xk)(0) + k.d_r * r - k.d_y * y;
    const double u = std::clamp(uc, lo, hi);
    Eigen::VectorXd dz(np + nk);
    dz.head(np) = plant.A * xp + plant.B.col(0) * u;
    dz.tail(nk) = k.A * xk + k.b_r * r - k.b_y * y;
    return dz;
  };
  Eigen::VectorXd z = Eigen::VectorXd::Zero(np + nk);
  std::vector<double> y{0.0};
  for (long i = 1; i <= steps; ++i) {
    const Eigen::VectorXd k1 = rhs(z), k2 = rhs(z + h / 2 * k1), k3 = rhs(z + h / 2 * k2), k4 = rhs(z + h * k3);
    z += h / 6 * (k1 + 2 * k2 + 2 * k3 + k4);
    if (i % every == 0) y.push_back((plant.C.row(0) * z.head(np))(0));
  }
  return y;
}

// The overshoot of the saturating loop (limits ±1.2) under each anti-windup law — none,
// back-calculation, conditional integration — with a continuous controller (ts = 0) or one sampled
// at ts; every run must saturate and none may note a skipped anti-windup (continuous: the
// conditional integration must hold the integrator some of the time).
std::array<double, 3> windup_overshoots(const StateSpace& plant, const Controller& c, double ts) {
  ActuatorModel act;
  act.min = -1.2;
  act.max = 1.2;
  std::array<double, 3> overshoot{};
  const AntiWindup laws[3] = {AntiWindup::none, AntiWindup::back_calculation, AntiWindup::conditional_integration};
  for (int i = 0; i < 3; ++i) {
    LoopOptions opt;
    opt.horizon_s = 20.0;
    opt.sample_time_s = ts;
    opt.anti_windup = laws[i];
    const NonlinearResult r = simulate_nonlinear(plant, c, act, opt, 1.0, 0.02);
    REQUIRE(r.status == NonlinearStatus::ok);
    REQUIRE(r.saturated_fraction > 0.01);
    overshoot[static_cast<std::size_t>(i)] = r.metrics.overshoot_pct;
    for (const auto& note : r.notes) CHECK_THAT(note, !Contains("anti-windup not applied"));
    if (ts == 0.0 && laws[i] == AntiWindup::conditional_integration) CHECK(r.integrator_held_fraction > 0.0);
  }
  return overshoot;
}

}  // namespace

TEST_CASE("filtered PID without anti-windup: the filters' own states equal the two-input realization",
          "[nonlinear][filters]") {
  const StateSpace plant = resonant_plant();
  for (const bool second : {false, true}) {
    const Controller c = filtered_pid(second);
    const double b = 0.6, cw = 0.0;
    // Wide limits: against the exact linear step of the loop with controller_realization.
    StepSimulator sim;
    StepMetrics lin;
    StepTrace trace;
    REQUIRE(sim.simulate(close_loop(plant, controller_realization(c, b, cw)), 1.0, 0.02, lin, &trace) == StepStatus::ok);
    LoopOptions opt = tight_options(trace.time_s.back());
    opt.sample_times_s = trace.time_s;
    opt.setpoint_weight = b;
    opt.derivative_weight = cw;
    const NonlinearResult nl = simulate_nonlinear(plant, c, ActuatorModel{}, opt, 1.0, 0.02);
    REQUIRE(nl.status == NonlinearStatus::ok);
    REQUIRE(nl.output.size() == trace.output.size());
    double dy = 0.0, du = 0.0, umax = 0.0;
    for (std::size_t i = 0; i < trace.output.size(); ++i) {
      dy = std::max(dy, std::abs(nl.output[i] - trace.output[i]));
      du = std::max(du, std::abs(nl.control[i] - trace.effort[i]));
      umax = std::max(umax, std::abs(trace.effort[i]));
    }
    // Both are the same linear system; only the integrator's error (rtol 1e-12) remains (measured
    // ~1e-11).
    CHECK(dy / std::abs(lin.final_value) < 1e-9);
    CHECK(du / umax < 1e-9);
    CHECK(std::abs(nl.metrics.final_value - lin.final_value) <= 1e-12 * std::abs(lin.final_value));

    // Saturated, anti_windup = none: against RK4 (h = 2e-5 s) of the two-input realization with
    // the clipped command. RK4's error is O(h⁴) where smooth and O(h²) per switch of the clip
    // (measured agreement ~6e-12); a different controller (a missing filter, a wrong weight, an
    // anti-windup acting) differs by 1e-2.
    const double lo = -1.2, hi = 1.2, horizon = 8.0, h = 2e-5;
    const long steps = static_cast<long>(std::lround(horizon / h)), every = 500;
    LoopOptions sat = tight_options(horizon);
    for (long i = 0; i * every <= steps; ++i) sat.sample_times_s.push_back(static_cast<double>(i * every) * h);
    sat.setpoint_weight = b;
    sat.derivative_weight = cw;
    sat.anti_windup = AntiWindup::none;
    ActuatorModel act;
    act.min = lo;
    act.max = hi;
    const NonlinearResult ns = simulate_nonlinear(plant, c, act, sat, 1.0, 0.02);
    REQUIRE(ns.status == NonlinearStatus::ok);
    CHECK(ns.saturated_fraction > 0.01);
    const std::vector<double> ref = rk4_two_input(plant, controller_realization(c, b, cw), 1.0, lo, hi, h, steps, every);
    REQUIRE(ref.size() == ns.output.size());
    double worst = 0.0;
    for (std::size_t i = 0; i < ref.size(); ++i) worst = std::max(worst, std::abs(ns.output[i] - ref[i]));
    CHECK(worst < 1e-9);
  }
}

TEST_CASE("filtered PID: the anti-windup acts on the integrator", "[nonlinear][filters]") {
  const StateSpace plant = resonant_plant();
  const Controller c = filtered_pid();
  const std::array<double, 3> overshoot = windup_overshoots(plant, c, 0.0);
  // Windup: without anti-windup the integral charges while the command is clipped and the output
  // overshoots far more (common practice; Åström & Hägglund, Advanced PID Control, 2006,
  // anti-windup section).
  CHECK(overshoot[0] > 10.0);
  CHECK(overshoot[1] < 0.5 * overshoot[0]);
  CHECK(overshoot[2] < 0.5 * overshoot[0]);
}

TEST_CASE("sampled filtered PID: equals the linear sampled loop, and its anti-windup acts", "[nonlinear][filters][sampled]") {
  const StateSpace plant = resonant_plant();
  const Controller c = filtered_pid();
  const double ts = 0.02, b = 0.6, cw = 0.0;
  const DifferenceEquation eq = controller_difference_equation(c, ts, b, cw);
  SampledStepSimulator sim;
  StepMetrics lin;
  StepTrace trace;
  REQUIRE(sim.simulate(plant, eq, 1.0, 0.02, lin, &trace) == StepStatus::ok);
  // The nonlinear run at the controller's instants up to 10 s.
  LoopOptions opt = tight_options(10.0);
  opt.sample_time_s = ts;
  opt.setpoint_weight = b;
  opt.derivative_weight = cw;
  for (int k = 0; k <= 500; ++k) opt.sample_times_s.push_back(k * ts);
  const NonlinearResult nl = simulate_nonlinear(plant, c, ActuatorModel{}, opt, 1.0, 0.02);
  REQUIRE(nl.status == NonlinearStatus::ok);
  // The exact sampled trace at the same instants (it records every instant of its grid: match by time).
  double worst = 0.0;
  int matched = 0;
  for (std::size_t i = 0; i < trace.time_s.size(); ++i) {
    const double k = std::round(trace.time_s[i] / ts);
    if (std::abs(trace.time_s[i] - k * ts) > 1e-12 || k > 500) continue;
    worst = std::max(worst, std::abs(nl.output[static_cast<std::size_t>(k)] - trace.output[i]));
    ++matched;
  }
  CHECK(matched > 100);
  // Same difference equation, one in direct form, one as sections: rounding and the plant
  // integrator's error (rtol 1e-12) only.
  CHECK(worst < 1e-9 * std::abs(lin.final_value));

  const std::array<double, 3> overshoot = windup_overshoots(plant, c, ts);
  CHECK(overshoot[0] > 10.0);
  CHECK(overshoot[1] < 0.5 * overshoot[0]);
  CHECK(overshoot[2] < 0.5 * overshoot[0]);
}
