// Shared by the libFuzzer harnesses: how a harness reports a broken invariant (a message on stderr,
// then abort(), which libFuzzer records as a crash with the input saved), and small checks.
#pragma once

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <exception>
#include <string>
#include <string_view>

#include <fmt/format.h>

/// Checks an invariant of harness `harness`; the message (fmt syntax) is only formatted on failure.
#define SPECLOOP_FUZZ_CHECK(harness, condition, ...)                                \
  do {                                                                              \
    if (!(condition)) ::specloop_fuzz::fail(harness, fmt::format(__VA_ARGS__));     \
  } while (false)

namespace specloop_fuzz {

/// Reports a broken invariant and stops the process; libFuzzer saves the input as crash-*.
[[noreturn]] inline void fail(std::string_view harness, const std::string& what) {
  std::fprintf(stderr, "\n==specloop-fuzz== %.*s: INVARIANT BROKEN: %s\n", static_cast<int>(harness.size()),
               harness.data(), what.c_str());
  std::fflush(stderr);
  std::abort();
}

/// An exception other than the documented error type escaped: the same, naming it.
[[noreturn]] inline void fail_exception(std::string_view harness, const std::exception& error) {
  fail(harness, std::string("undocumented exception escaped: ") + error.what());
}

inline bool finite(double v) { return std::isfinite(v); }

}  // namespace specloop_fuzz
