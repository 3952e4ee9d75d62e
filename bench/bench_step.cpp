// specloop_bench: times one closed-loop step simulation with all metrics (the optimizer's hot
// path) on a fixed fourth-order loop at exactly 2000 samples, reusing one StepSimulator.
//
// The loop: an invented plant G(s) = 8 / ((s + 1)(s + 2)(s² + 3s + 6.25)) under P control K = 2
// (closed-loop poles ≈ −0.50 ± j1.70 and −2.50 ± j1.70), unit step, 2 % band.
//
// Prints `key value` lines (times in microseconds): median, p10 and p90 of single-call timings
// for `simulate` without and with the trace, for building the loop plus simulating, and for one
// whole cost evaluation of the search (CandidateEvaluator::evaluate: parameters → controller →
// realization → closed loop → simulation → metrics → violation → objective) of a P controller
// with K = 2 on the same plant, the Problem built from a spec text as `design` builds it (two
// requirements, the ITAE objective), and of a PID on it (for information); the number of heap
// allocations made by the timed calls after the first (glibc builds count every malloc); and the
// loop's coefficients and horizon so that bench/run_bench.sh can time SciPy on the very same
// loop. No pass/fail here: run_bench.sh compares ratios measured in one run.
//
// Usage: specloop_bench [repetitions]   (default 20000)
#include <algorithm>
#include <atomic>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <string>
#include <vector>

#include "specloop/core/lti.hpp"
#include "specloop/design/characterize.hpp"
#include "specloop/design/evaluate.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/design/search.hpp"
#include "specloop/sim/response.hpp"
#include "specloop/spec/spec.hpp"

// Allocation counter: on glibc, interpose malloc (forwarding to the real allocator) so that
// allocations by Eigen (which calls malloc directly) and by operator new are both seen.
namespace {
std::atomic<long> g_mallocs{0};
}
#if defined(__GLIBC__)
extern "C" void* __libc_malloc(std::size_t size);
extern "C" void* malloc(std::size_t size) {
  g_mallocs.fetch_add(1, std::memory_order_relaxed);
  return __libc_malloc(size);
}
constexpr bool kCountsAllocations = true;
#else
constexpr bool kCountsAllocations = false;
#endif

namespace {

using namespace specloop;
using Clock = std::chrono::steady_clock;

struct Summary {
  double median = 0.0, p10 = 0.0, p90 = 0.0;
};

Summary summarize(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  auto at = [&](double q) { return v[static_cast<std::size_t>(q * static_cast<double>(v.size() - 1) + 0.5)]; };
  return {at(0.5), at(0.1), at(0.9)};
}

template <class F>
Summary time_calls(int repetitions, long& allocations, F&& call) {
  for (int i = 0; i < 50; ++i) call();  // warm-up: first call sizes the workspace, then caches
  std::vector<double> us(static_cast<std::size_t>(repetitions));
  const long before = g_mallocs.load();
  for (int i = 0; i < repetitions; ++i) {
    const auto t0 = Clock::now();
    call();
    const auto t1 = Clock::now();
    us[static_cast<std::size_t>(i)] = std::chrono::duration<double, std::micro>(t1 - t0).count();
  }
  allocations = g_mallocs.load() - before;
  return summarize(std::move(us));
}

void print_summary(const char* name, const Summary& s, long allocations, int repetitions) {
  std::printf("%s_median_us %.3f\n%s_p10_us %.3f\n%s_p90_us %.3f\n", name, s.median, name, s.p10, name, s.p90);
  if (kCountsAllocations)
    std::printf("%s_allocations_per_call %.3f\n", name, static_cast<double>(allocations) / repetitions);
  else
    std::printf("%s_allocations_per_call unknown\n", name);
}

std::string coefficients(const Polynomial& p) {
  std::string out;
  for (double c : p.coefficients) {
    char buf[40];
    std::snprintf(buf, sizeof buf, "%s%.17g", out.empty() ? "" : ",", c);
    out += buf;
  }
  return out;
}

// The bench plant as a spec (the same G(s): k = 8, poles −1, −2, −1.5 ± j2), with `structure`.
Spec bench_spec(const char* structure) {
  std::string text = R"(
[plant]
poles = [-1.0, -2.0, [-1.5, 2.0]]
gain = 8.0
[controller]
structure = ")";
  text += structure;
  text += R"("
[requirements]
overshoot_max_pct = 40.0
settling_time_max = 12.0
)";
  return parse_spec(text, "bench.toml");
}

}  // namespace

int main(int argc, char** argv) {
  int repetitions = 20000;
  if (argc > 1) {
    repetitions = std::atoi(argv[1]);
    if (repetitions < 10) {
      std::fprintf(stderr, "usage: specloop_bench [repetitions >= 10]\n");
      return 2;
    }
  }
  const double gain = 2.0, amplitude = 1.0, band = 0.02;
  const TransferFunction plant(Polynomial({8.0}),
                               Polynomial({1.0, 1.0}) * Polynomial({1.0, 2.0}) * Polynomial({1.0, 3.0, 6.25}));
  const StateSpace loop = close_loop(realize(plant), static_gain(gain));

  TimeGridRules rules;
  rules.min_samples = rules.max_samples = 2000;
  StepSimulator sim(rules);
  StepMetrics metrics;
  StepTrace trace;

  if (sim.simulate(loop, amplitude, band, metrics) != StepStatus::ok) {
    std::fprintf(stderr, "specloop_bench: the benchmark loop did not simulate\n");
    return 1;
  }
  if (sim.grid().samples != 2000) {
    std::fprintf(stderr, "specloop_bench: expected exactly 2000 samples, the grid has %d\n", sim.grid().samples);
    return 1;
  }
  std::printf("loop fourth_order_p\n");
  std::printf("plant_numerator %s\nplant_denominator %s\ngain %.17g\namplitude %.17g\n",
              coefficients(plant.numerator).c_str(), coefficients(plant.denominator).c_str(), gain, amplitude);
  std::printf("states %d\nsamples %d\nstep_s %.17g\nhorizon_s %.17g\nrepetitions %d\n", loop.states(),
              sim.grid().samples, sim.grid().step_s, sim.grid().horizon_s(), repetitions);
  std::printf("overshoot_pct %.6f\nsettling_time_s %.6f\n", metrics.overshoot_pct, metrics.settling_time_s.value_or(-1.0));

  volatile double sink = 0.0;  // keeps the results observable
  long allocations = 0;
  // Warm-up for the processor (clock and caches) before the first timed block: without it the
  // first block, `simulate`, read up to 25 % slower than later blocks of the same work in short
  // runs, which skewed the evaluation-to-simulation ratio.
  for (const auto start = Clock::now(); Clock::now() - start < std::chrono::milliseconds(300);) {
    sim.simulate(loop, amplitude, band, metrics);
    sink = sink + metrics.itae;
  }
  const Summary plain = time_calls(repetitions, allocations, [&] {
    sim.simulate(loop, amplitude, band, metrics);
    sink = sink + metrics.itae;
  });
  print_summary("simulate", plain, allocations, repetitions);

  const Summary traced = time_calls(repetitions, allocations, [&] {
    sim.simulate(loop, amplitude, band, metrics, &trace);
    sink = sink + trace.output.back();
  });
  print_summary("simulate_trace", traced, allocations, repetitions);

  // For information: the per-gain cost when the loop is rebuilt from the transfer function too
  // (realize + close_loop allocate their matrices; that is outside the simulator's promise).
  const Summary rebuilt = time_calls(repetitions, allocations, [&] {
    const StateSpace l = close_loop(realize(plant), static_gain(gain));
    sim.simulate(l, amplitude, band, metrics);
    sink = sink + metrics.iae;
  });
  print_summary("build_and_simulate", rebuilt, allocations, repetitions);

  // One cost evaluation of the search on the same loop (P, K = 2), then a PID on the same plant.
  for (const char* structure : {"p", "pid"}) {
    const Spec spec = bench_spec(structure);
    const Problem problem = make_problem(spec, characterize(spec));
    const SearchOptions options = search_options(spec);
    CandidateEvaluator evaluator(problem, options);
    const std::vector<double> params = std::string(structure) == "p" ? std::vector<double>{gain}
                                                                      : std::vector<double>{1.0, 1.5, 0.8};
    const CandidateOutcome first = evaluator.evaluate(problem, params.data());
    if (!first.stable) {
      std::fprintf(stderr, "specloop_bench: the %s candidate is not stable\n", structure);
      return 1;
    }
    if (std::string(structure) == "p" && evaluator.linear_grid().horizon_s != sim.grid().horizon_s()) {
      std::fprintf(stderr, "specloop_bench: the evaluation's grid differs from the bench loop's\n");
      return 1;
    }
    const Summary evaluated = time_calls(repetitions, allocations, [&] {
      const CandidateOutcome o = evaluator.evaluate(problem, params.data());
      sink = sink + o.objective;
    });
    print_summary(std::string(structure) == "p" ? "evaluate_p" : "evaluate_pid", evaluated, allocations, repetitions);
  }
  return 0;
}
