// The allocation counter of the hot-path tests: tests/sim/test_hot_path.cpp replaces malloc and
// operator new for the whole test executable and counts every allocation made while `counting`
// is set. Every test_hot_path.cpp is left out of sanitizer builds (their allocator owns malloc).
#pragma once

#include <atomic>

namespace specloop::testing {
extern std::atomic<bool> counting;
extern std::atomic<long> allocations;
}  // namespace specloop::testing
