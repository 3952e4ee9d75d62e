// Vector registers for the simulator's kernels (private to the sim layer): L doubles to a vector
// (GCC/Clang vector extension; L = 2 is one SSE2 register on x86-64, L = 4 one AVX register;
// plain scalar code elsewhere), and whether the AVX variants may run. The AVX variants do the same
// arithmetic as the SSE2 ones on twice the lanes, so they give the same bits; they are compiled
// for "avx" only (no fused multiply-add) and chosen at run time. Defining SPECLOOP_NO_AVX leaves
// them out (to compare the two builds' results).
#pragma once

#include <cstdint>

namespace specloop::exact_step {

template <int L>
struct PackOf;
template <>
struct PackOf<2> {
  typedef double type __attribute__((vector_size(16)));
  typedef double unaligned __attribute__((vector_size(16), aligned(8)));
  typedef std::uint64_t bits __attribute__((vector_size(16)));
};
template <>
struct PackOf<4> {
  typedef double type __attribute__((vector_size(32)));
  typedef double unaligned __attribute__((vector_size(32), aligned(8)));
  typedef std::uint64_t bits __attribute__((vector_size(32)));
};

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__)) && !defined(SPECLOOP_NO_AVX)
#define SPECLOOP_AVX_KERNELS 1
/// True when the processor has AVX and no test asked for the portable kernels
/// (detail::use_portable_kernels; step_kernels.cpp).
bool has_avx();
#endif

}  // namespace specloop::exact_step
