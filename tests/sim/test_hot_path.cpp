// The optimizer's hot path (discretize, recur, measure for a given realization) must not
// allocate after the first call. Global operator new (and, on glibc, malloc) is replaced here to
// count allocations, for every test of the executable (allocation_counter.hpp; the search's
// evaluation is counted in tests/design/test_hot_path.cpp).
#include <catch2/catch.hpp>
#include <atomic>
#include <cstdlib>
#include <new>

#include "allocation_counter.hpp"
#include "specloop/sim/response.hpp"

namespace specloop::testing {
std::atomic<bool> counting{false};
std::atomic<long> allocations{0};
}  // namespace specloop::testing

using specloop::testing::allocations;
using specloop::testing::counting;

// Eigen allocates with malloc, not operator new: on glibc, malloc is interposed too (forwarding to
// the real allocator), so a dynamic-size temporary in the hot path is seen.
#if defined(__GLIBC__)
extern "C" void* __libc_malloc(std::size_t size);
extern "C" void* malloc(std::size_t size) {
  if (counting.load(std::memory_order_relaxed)) allocations.fetch_add(1, std::memory_order_relaxed);
  return __libc_malloc(size);
}
#endif

void* operator new(std::size_t size) {
  if (counting.load(std::memory_order_relaxed)) allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(size == 0 ? 1 : size)) return p;
  throw std::bad_alloc();
}
void operator delete(void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }

using namespace specloop;

TEST_CASE("step simulation allocates nothing after the first call", "[response][hot-path]") {
  // The counter itself works: an allocation while counting is seen.
  counting = true;
  { std::vector<double> probe(16, 1.0); (void)probe; }
  counting = false;
  REQUIRE(allocations.load() > 0);
#if defined(__GLIBC__)
  // ... and so is one made by Eigen itself (malloc, not operator new).
  allocations = 0;
  counting = true;
  { Eigen::MatrixXd probe(6, 6); probe.setZero(); (void)probe; }
  counting = false;
  REQUIRE(allocations.load() > 0);
#endif

  StepSimulator sim;
  StepMetrics m;
  // Three loop orders: the fixed-size kernels (4 and 8 states) and the general one (10).
  for (int order : {4, 8, 10}) {
    std::vector<Complex> poles;
    double dc_scale = 1.0 / 2.5;  // plant DC gain 1: a small loop gain keeps every order stable
    for (int i = 0; i < order; ++i) {
      poles.emplace_back(-0.7 * (i + 1), 0.0);
      dc_scale *= 0.7 * (i + 1);
    }
    const auto plant = TransferFunction::from_zeros_poles({{-2.5, 0.0}}, poles, dc_scale);
    const StateSpace loop_a = close_loop(realize(plant), static_gain(0.5));
    const StateSpace loop_b = close_loop(realize(plant), static_gain(0.9));
    REQUIRE(sim.simulate(loop_a, 1.0, 0.02, m) == StepStatus::ok);  // sizes the workspace
    allocations = 0;
    counting = true;
    const StepStatus s1 = sim.simulate(loop_b, 1.0, 0.02, m);
    const StepStatus s2 = sim.simulate(loop_a, 2.0, 0.05, m);
    counting = false;
    CHECK(s1 == StepStatus::ok);
    CHECK(s2 == StepStatus::ok);
    INFO("loop order " << order);
    CHECK(allocations.load() == 0);
  }
}
