// The modal recurrence (src/sim/modal.hpp) against the dense one it replaces where it is used,
// on many random closed loops. Both are exact zero-order-hold recurrences of the same loop, so
// they may differ only by rounding: the dense kernel's (Padé exponential, products in output
// coordinates) and the modal one's (eigenvectors, closed-form block exponentials), each a few
// ε·cond. Tolerances: samples within 1e-11 of max|y| and integrals, overshoot, times within
// 1e-9 relative — a hundred times the largest difference measured on 2000 such loops (4e-12 and
// 3e-11), and far below what any check of the tool reads (1e-7 points in the SciPy oracle).
#include <catch2/catch.hpp>
#include <cmath>
#include <random>

#include "specloop/core/lti.hpp"
#include "specloop/sim/response.hpp"

using namespace specloop;

namespace {

struct Pair {
  StepStatus status_modal, status_dense;
  StepMetrics modal, dense;
  StepTrace trace_modal, trace_dense;
};

Pair both_ways(const StateSpace& loop) {
  Pair r;
  StepSimulator a, b;
  detail::use_modal_kernels(true);
  r.status_modal = a.simulate(loop, 1.5, 0.02, r.modal, &r.trace_modal);
  detail::use_modal_kernels(false);
  r.status_dense = b.simulate(loop, 1.5, 0.02, r.dense, &r.trace_dense);
  detail::use_modal_kernels(true);
  return r;
}

bool close(double a, double b, double rel) { return std::abs(a - b) <= rel * std::max(std::abs(b), 1e-300); }

}  // namespace

TEST_CASE("the modal recurrence agrees with the dense one to rounding", "[response][modal]") {
  std::mt19937_64 rng(31337);
  std::uniform_real_distribution<double> unit(0.0, 1.0);
  int modal_runs = 0, compared = 0;
  for (int trial = 0; trial < 400; ++trial) {
    // 1 … 6 plant poles over two decades, real or in pairs of damping 0.05 … 0.95; P or PI.
    const int order = 1 + trial % 6;
    std::vector<Complex> poles;
    for (int i = 0; i < order;) {
      const double mag = std::pow(10.0, 2.0 * (unit(rng) - 0.5));
      if (order - i >= 2 && unit(rng) < 0.5) {
        const double zeta = 0.05 + 0.9 * unit(rng);
        poles.emplace_back(-zeta * mag, mag * std::sqrt(1.0 - zeta * zeta));
        poles.push_back(std::conj(poles.back()));
        i += 2;
      } else {
        poles.emplace_back(-mag, 0.0);
        ++i;
      }
    }
    const auto plant = TransferFunction::from_zeros_poles({}, poles, 1.0);
    const double k = std::abs(plant.denominator.constant()) * (0.1 + 2.0 * unit(rng));
    const TransferFunction c = trial % 2 ? TransferFunction(Polynomial({k}), Polynomial({1.0}))
                                         : TransferFunction(Polynomial({k, 0.3 * k}), Polynomial({1.0, 0.0}));
    const StateSpace loop = close_loop(realize(plant), realize(c));
    const Pair r = both_ways(loop);
    INFO("trial " << trial << ", " << loop.states() << " states");
    REQUIRE(r.status_modal == r.status_dense);
    if (r.status_modal != StepStatus::ok) continue;
    ++compared;
    REQUIRE(r.trace_modal.output.size() == r.trace_dense.output.size());
    double scale = 0.0, largest = 0.0;
    bool identical = true;
    for (std::size_t i = 0; i < r.trace_dense.output.size(); ++i) {
      scale = std::max(scale, std::abs(r.trace_dense.output[i]));
      largest = std::max(largest, std::abs(r.trace_modal.output[i] - r.trace_dense.output[i]));
      identical = identical && r.trace_modal.output[i] == r.trace_dense.output[i];
    }
    if (!identical) ++modal_runs;
    CHECK(largest <= 1e-11 * scale);
    CHECK(close(r.modal.itae, r.dense.itae, 1e-9));
    CHECK(close(r.modal.iae, r.dense.iae, 1e-9));
    CHECK(close(r.modal.ise, r.dense.ise, 1e-9));
    CHECK(std::abs(r.modal.overshoot_pct - r.dense.overshoot_pct) <= 1e-9 * std::max(1.0, r.dense.overshoot_pct));
    CHECK(close(r.modal.effort_peak, r.dense.effort_peak, 1e-9));
    REQUIRE(r.modal.settling_time_s.has_value() == r.dense.settling_time_s.has_value());
    if (r.dense.settling_time_s) CHECK(close(*r.modal.settling_time_s, *r.dense.settling_time_s, 1e-9));
    REQUIRE(r.modal.peak_time_s.has_value() == r.dense.peak_time_s.has_value());
    if (r.dense.peak_time_s) CHECK(close(*r.modal.peak_time_s, *r.dense.peak_time_s, 1e-9));
  }
  CHECK(compared >= 300);
  CHECK(modal_runs >= compared / 2);  // the modal path did run (its rounding differs in the last bits)
}

TEST_CASE("graded and repeated-pole loops keep the dense recurrence", "[response][modal]") {
  // Poles 1e-3, 2 and 1e6 (graded: the modal recurrence's rounding would reach the slow mode),
  // and a triple pole (a defective loop at K = 0; nearly repeated poles at small K): the result
  // must be the dense kernel's, bit for bit.
  const auto graded = TransferFunction::from_zeros_poles({}, {Complex(-1e-3, 0.0), Complex(-2.0, 0.0), Complex(-1e6, 0.0)}, 2e6);
  const auto triple = TransferFunction::from_zeros_poles({}, {Complex(-1.0, 0.0), Complex(-1.0, 0.0), Complex(-1.0, 0.0)}, 1.0);
  for (const StateSpace& loop : {close_loop(realize(graded), static_gain(1.0)), close_loop(realize(triple), static_gain(1e-9))}) {
    const Pair r = both_ways(loop);
    REQUIRE(r.status_modal == StepStatus::ok);
    CHECK(r.trace_modal.output == r.trace_dense.output);
    CHECK(r.modal.itae == r.dense.itae);
  }
}
