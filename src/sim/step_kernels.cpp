// The exact step simulation's kernels (see step_kernels.hpp): the recurrence, the sample scan and
// the integral sums, each as a portable SSE2 (or scalar) kernel and an AVX variant compiled for
// "avx" only and chosen at run time, with the same arithmetic in the same order.
#include "sim/step_kernels.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdint>
#include <limits>
#if defined(__SSE2__)
#include <emmintrin.h>
#endif
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <immintrin.h>
#endif

#include "sim/vector_pack.hpp"
#include "specloop/sim/response.hpp"

namespace specloop::exact_step {

#if defined(SPECLOOP_AVX_KERNELS)
namespace {
std::atomic<bool> g_portable_kernels{false};
}  // namespace
bool has_avx() {
  static const bool avx = __builtin_cpu_supports("avx");
  return avx && !g_portable_kernels.load(std::memory_order_relaxed);
}
#endif

namespace {

#if defined(SPECLOOP_AVX_KERNELS)
// scan_samples' vector part four samples a step (AVX); max, min and comparisons are exact, so
// this finds the same extremes and bits. Returns the first sample left for the scalar tail.
template <bool WithU>
__attribute__((target("avx"))) int scan_samples_avx(const double* y, const double* u, int count, double y_inf,
                                                    double inv, double band, const ScanBits& bits,
                                                    SampleExtremes& ex) {
  const __m256d v_inf = _mm256_set1_pd(y_inf), v_inv = _mm256_set1_pd(inv), v_one = _mm256_set1_pd(1.0),
                v_band = _mm256_set1_pd(band),
                v_abs = _mm256_castsi256_pd(_mm256_set1_epi64x(0x7fffffffffffffffLL));
  const __m256d v_four = _mm256_set1_pd(4.0), v_first = _mm256_set_pd(3.0, 2.0, 1.0, 0.0);
  __m256d vyh = _mm256_set1_pd(ex.y_hi), vyl = _mm256_set1_pd(ex.y_lo), vuh = _mm256_set1_pd(ex.u_hi),
          vul = _mm256_set1_pd(ex.u_lo);
  int k = 0;
  for (; k + 64 <= count; k += 64) {
    std::uint64_t b = 0, o = 0, f = 0;
    __m256d sq = _mm256_setzero_pd(), ab = _mm256_setzero_pd(), wt = _mm256_setzero_pd(), idx = v_first;
    for (int j = 0; j < 64; j += 4) {
      const __m256d yv = _mm256_loadu_pd(y + k + j), yn = _mm256_loadu_pd(y + k + j + 1);
      const __m256d e = _mm256_sub_pd(v_inf, yv), a = _mm256_and_pd(e, v_abs);
      b |= static_cast<std::uint64_t>(_mm256_movemask_pd(e)) << j;
      sq = _mm256_add_pd(sq, _mm256_mul_pd(e, e));
      ab = _mm256_add_pd(ab, a);
      wt = _mm256_add_pd(wt, _mm256_mul_pd(idx, a));
      idx = _mm256_add_pd(idx, v_four);
      const __m256d dev = _mm256_and_pd(_mm256_sub_pd(_mm256_mul_pd(yv, v_inv), v_one), v_abs);
      o |= static_cast<std::uint64_t>(_mm256_movemask_pd(_mm256_cmp_pd(dev, v_band, _CMP_GT_OS))) << j;
      f |= static_cast<std::uint64_t>(_mm256_movemask_pd(_mm256_cmp_pd(yn, yv, _CMP_LT_OS))) << j;
      vyh = _mm256_max_pd(yv, vyh);
      vyl = _mm256_min_pd(yv, vyl);
      if constexpr (WithU) {
        const __m256d uv = _mm256_loadu_pd(u + k + j);
        vuh = _mm256_max_pd(uv, vuh);
        vul = _mm256_min_pd(uv, vul);
      }
    }
    bits.below[k / 64] = b;
    bits.outside[k / 64] = o;
    bits.falling[k / 64] = f;
    double lanes[4];
    for (int m = 0; m < 3; ++m) {
      _mm256_storeu_pd(lanes, m == 0 ? sq : m == 1 ? ab : wt);
      bits.sums[3 * (k / 64) + m] = (lanes[0] + lanes[1]) + (lanes[2] + lanes[3]);
    }
  }
  double lanes[4];
  _mm256_storeu_pd(lanes, vyh);
  ex.y_hi = std::max(std::max(lanes[0], lanes[1]), std::max(lanes[2], lanes[3]));
  _mm256_storeu_pd(lanes, vyl);
  ex.y_lo = std::min(std::min(lanes[0], lanes[1]), std::min(lanes[2], lanes[3]));
  _mm256_storeu_pd(lanes, vuh);
  ex.u_hi = std::max(std::max(lanes[0], lanes[1]), std::max(lanes[2], lanes[3]));
  _mm256_storeu_pd(lanes, vul);
  ex.u_lo = std::min(std::min(lanes[0], lanes[1]), std::min(lanes[2], lanes[3]));
  return k;
}
#endif

// True when the effort row, rewritten to act on z, uses coordinate p only (up to rounding):
// u is then an affine function of y (a proportional controller: u = K·(r − y)), and each effort
// sample costs one product instead of N. The other entries are the rounding left by
// to_output_coordinates when c_u is a multiple of c_y; they are dropped only when they are
// below a few ulps of the terms they came from.
template <class Row, class Cy>
bool effort_follows_output(const Row& c_u_x, const Row& c_u_z, const Cy& c_y, const OutputCoordinates& oc) {
  if (!oc.active) return false;
  const double rp = c_u_z(oc.p);
  for (int j = 0; j < c_y.size(); ++j) {
    if (j == oc.p) continue;
    const double scale = std::abs(c_u_x(j)) + std::abs(rp * c_y(j));
    if (std::abs(c_u_z(j)) > 4.0 * std::numeric_limits<double>::epsilon() * scale) return false;
  }
  return true;
}

// The recurrence kernel (recur_fixed_size in step_kernels.hpp). kChains interleaved chains
// (samples k … k + C − 1, each stepped by Φ^C with Γ_C = (Φ^(C−1) + … + Φ + I)·Γ) give the
// processor independent work. The chains are held state-component-major (z[i][c]: component i
// of chain c), so every operation works on whole rows of chains: no shuffles, no horizontal
// sums, and the matrix entries are read pre-broadcast from memory. The states are stored the same
// way, one block of rows×C per C samples (StoredStates), in the output coordinates z = T·x
// (OutputCoordinates), without z_p when y gives it (KernelLayout). L chains to a vector register
// (GCC/Clang vector extension: L = 2 is one SSE2 register on x86-64, L = 4 one AVX register;
// plain scalar code elsewhere). Both widths perform the same multiplications and additions in the
// same order, so they give the same bits; no fused multiply-add is involved (the AVX variant is
// compiled for "avx" only, not "fma").
template <int N, int L>
[[gnu::always_inline]] inline void recur_kernel(const Eigen::MatrixXd& phi_dyn, const Eigen::VectorXd& gamma_dyn,
                                               const Eigen::MatrixXd& out_dyn, const Eigen::VectorXd& oc_dyn,
                                               const KernelLayout& layout, Eigen::VectorXd& x_io, int samples,
                                               double* y, double* u, double* states) {
  using Vec = Eigen::Matrix<double, N, 1>;
  using Mat = Eigen::Matrix<double, N, N>;
  using RowVec = Eigen::Matrix<double, 1, N>;
  using Pack = typename PackOf<L>::type;
  // Stores through a vector type aligned like double (vector types alias their element type);
  // unlike memcpy from the chains, this keeps them in registers.
  using Unaligned = typename PackOf<L>::unaligned;
  auto put = [](double* at, Pack v) __attribute__((always_inline)) { *reinterpret_cast<Unaligned*>(at) = v; };
  constexpr int C = kChains, P = kChains / L;
  static_assert(C % L == 0);
  const OutputCoordinates oc = output_coordinates(out_dyn);
  const int q = oc.p;
  const RowVec c_y = out_dyn.row(0);
  Mat t = Mat::Identity(), t_inv = Mat::Identity();
  if (oc.active) {
    t.row(q) = c_y;
    t_inv.row(q) = -c_y / c_y(q);
    t_inv(q, q) = 1.0 / c_y(q);
  }
  // Inside the kernel the coordinates q and 0 trade places (an involution s), so that y reads
  // chain row 0: an index known at compile time keeps every row in registers (a row chosen at
  // run time made the compiler keep the chains in memory and read them back, stalling the loop
  // on store forwarding). The stored states keep the documented order: kernel row i goes to
  // block row stored_at[i] (−1: not stored, y gives it).
  Mat s = Mat::Identity();
  s.row(0).swap(s.row(q));
  const int rows = layout.output_from_y ? N - 1 : N;
  int component[N], stored_at[N];
  for (int i = 0; i < N; ++i) {
    component[i] = i == 0 ? q : i == q ? 0 : i;
    stored_at[i] = !layout.output_from_y ? component[i] : i == 0 ? -1 : component[i] < q ? component[i] : component[i] - 1;
  }
  const Mat phi_x = phi_dyn;  // fixed-size copies first: a product with a dynamic operand allocates
  const Vec gamma_x = gamma_dyn;
  const Mat phi = s * (t * phi_x * t_inv) * s;
  const Vec gamma = s * (t * gamma_x);
  // Φ^C and Γ_C = (Φ^(C−1) + … + Φ + I)·Γ by doubling: (Φᵐ, Γₘ) → (Φ²ᵐ, Φᵐ·Γₘ + Γₘ).
  Mat phi_c = phi;
  Vec gamma_c = gamma;
  for (int m = 1; m < C; m *= 2) {
    gamma_c = phi_c * gamma_c + gamma_c;
    phi_c = phi_c * phi_c;
  }
  RowVec c_u_z = out_dyn.row(2);
  to_output_coordinates(c_u_z, c_y, oc);
  const RowVec c_u = c_u_z * s;
  const bool write_u = !layout.effort_from_y;
  Pack pc[N][N], gc[N], cu[N], z[N][P], oy, ou, wy;
  for (int l = 0; l < L; ++l) {
    for (int i = 0; i < N; ++i) {
      for (int j = 0; j < N; ++j) pc[i][j][l] = phi_c(i, j);
      gc[i][l] = gamma_c(i);
      cu[i][l] = c_u(i);
    }
    oy[l] = oc_dyn(0);
    ou[l] = oc_dyn(2);
    wy[l] = oc.active ? 1.0 : 0.0;
  }
  const Vec x_start = x_io;
  Vec start = s * (t * x_start);
  for (int c = 0; c < C; ++c) {
    for (int i = 0; i < N; ++i) z[i][c / L][c % L] = start(i);
    start = phi * start + gamma;
  }
  int k = 0;
  for (;; k += C) {
    double* block = states + static_cast<std::ptrdiff_t>(k) * rows;
    for (int i = 0; i < N; ++i)
      if (stored_at[i] >= 0)
        for (int p = 0; p < P; ++p) put(block + stored_at[i] * C + L * p, z[i][p]);
    if (k + C > samples) break;  // the last, partial block: stored whole, outputs below
    for (int p = 0; p < P; ++p) {
      put(y + k + L * p, wy * z[0][p] + oy);
      if (write_u) {
        Pack ub = ou;
        for (int i = 0; i < N; ++i) ub += cu[i] * z[i][p];
        put(u + k + L * p, ub);
      }
    }
    // z ← Φ^C·z + Γ_C, each row summed in two interleaved halves (the even and the odd terms),
    // then the halves: half the dependent additions of a plain left-to-right sum.
    Pack next[N][P];
    for (int i = 0; i < N; ++i)
      for (int p = 0; p < P; ++p) {
        Pack even = gc[i] + pc[i][0] * z[0][p];
        if constexpr (N == 1) {
          next[i][p] = even;
        } else {
          Pack odd = pc[i][1] * z[1][p];
          for (int j = 2; j < N; ++j) {
            if (j % 2 == 0) even += pc[i][j] * z[j][p];
            else odd += pc[i][j] * z[j][p];
          }
          next[i][p] = even + odd;
        }
      }
    for (int i = 0; i < N; ++i)
      for (int p = 0; p < P; ++p) z[i][p] = next[i][p];
  }
  // The chains as plain numbers (vector stores), for the last samples and the final state.
  double chains[N][C];
  for (int i = 0; i < N; ++i)
    for (int p = 0; p < P; ++p) put(&chains[i][L * p], z[i][p]);
  const int rest = samples - k;  // 0 … C − 1 samples left: they sit in chains 0 .. rest − 1
  for (int c = 0; c < rest; ++c) {
    y[k + c] = wy[0] * chains[0][c] + oy[0];
    if (write_u) {
      double uv = ou[0];
      for (int i = 0; i < N; ++i) uv += cu[i][0] * chains[i][c];
      u[k + c] = uv;
    }
  }
  Vec last;
  for (int i = 0; i < N; ++i) last(component[i]) = chains[i][rest];
  x_io = t_inv * last;  // the state at sample `samples`, back in the loop's coordinates
}

// Both kernels are flattened: everything they call, the fixed-size products of their set-up
// included, is inlined into them. GCC's inliner stops at a growth limit relative to the size of
// the file, and in this file (smaller than the one the kernels came from) it left those products
// as calls, which made the recurrence about 15 % slower.
#if defined(SPECLOOP_AVX_KERNELS)
// Four chains to one AVX register: half the instructions of the SSE2 kernel, same arithmetic.
// Chosen at run time (processors without AVX take the SSE2 kernel).
template <int N>
__attribute__((target("avx"), flatten)) void recur_fixed_avx(const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma,
                                                             const Eigen::MatrixXd& out, const Eigen::VectorXd& oc,
                                                             const KernelLayout& layout, Eigen::VectorXd& x_io,
                                                             int samples, double* y, double* u, double* states) {
  recur_kernel<N, 4>(phi, gamma, out, oc, layout, x_io, samples, y, u, states);
}
#endif

template <int N>
[[gnu::flatten]] void recur_fixed_portable(const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma,
                                           const Eigen::MatrixXd& out, const Eigen::VectorXd& oc,
                                           const KernelLayout& layout, Eigen::VectorXd& x_io, int samples, double* y,
                                           double* u, double* states) {
  recur_kernel<N, 2>(phi, gamma, out, oc, layout, x_io, samples, y, u, states);
}

template <int N>
void recur_fixed(const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma, const Eigen::MatrixXd& out,
                 const Eigen::VectorXd& oc, const KernelLayout& layout, Eigen::VectorXd& x_io, int samples, double* y,
                 double* u, double* states) {
#if defined(SPECLOOP_AVX_KERNELS)
  if (has_avx()) return recur_fixed_avx<N>(phi, gamma, out, oc, layout, x_io, samples, y, u, states);
#endif
  recur_fixed_portable<N>(phi, gamma, out, oc, layout, x_io, samples, y, u, states);
}

}  // namespace

namespace {

template <bool WithU>
SampleExtremes scan_samples_kernel(const double* y, const double* u, int count, double y_inf, double inv, double band,
                                   const ScanBits& bits) {
  double yh = y[0], yl = y[0], uh = WithU ? u[0] : 0.0, ul = uh;
  int k = 0;
#if defined(SPECLOOP_AVX_KERNELS)
  if (has_avx()) {
    SampleExtremes ex{yh, yl, uh, ul};
    k = scan_samples_avx<WithU>(y, u, count, y_inf, inv, band, bits, ex);
    yh = ex.y_hi;
    yl = ex.y_lo;
    uh = ex.u_hi;
    ul = ex.u_lo;
  }
#endif
#if defined(__SSE2__)
  // Two samples a step; max/min keep the comparison order of the scalar tail (no NaN reaches
  // here unnoticed: the caller checks the last sample, which a NaN would have spread to).
  const __m128d v_inf = _mm_set1_pd(y_inf), v_inv = _mm_set1_pd(inv), v_one = _mm_set1_pd(1.0),
                v_band = _mm_set1_pd(band), v_abs = _mm_castsi128_pd(_mm_set1_epi64x(0x7fffffffffffffffLL));
  const __m128d v_four = _mm_set1_pd(4.0);
  __m128d vyh = _mm_set1_pd(yh), vyl = _mm_set1_pd(yl), vuh = _mm_set1_pd(uh), vul = _mm_set1_pd(ul);
  for (; k + 64 <= count; k += 64) {
    std::uint64_t b = 0, o = 0, f = 0;
    // The sums in the AVX kernel's four lanes: samples j ≡ 0, 1 (vector 0) and 2, 3 (vector 1) mod 4.
    __m128d sq[2] = {_mm_setzero_pd(), _mm_setzero_pd()}, ab[2] = {sq[0], sq[0]}, wt[2] = {sq[0], sq[0]},
            idx[2] = {_mm_set_pd(1.0, 0.0), _mm_set_pd(3.0, 2.0)};
    for (int j = 0; j < 64; j += 4)
      for (int h = 0; h < 2; ++h) {
        const int i = j + 2 * h;
        const __m128d yv = _mm_loadu_pd(y + k + i), yn = _mm_loadu_pd(y + k + i + 1);
        const __m128d e = _mm_sub_pd(v_inf, yv), a = _mm_and_pd(e, v_abs);
        b |= static_cast<std::uint64_t>(_mm_movemask_pd(e)) << i;
        sq[h] = _mm_add_pd(sq[h], _mm_mul_pd(e, e));
        ab[h] = _mm_add_pd(ab[h], a);
        wt[h] = _mm_add_pd(wt[h], _mm_mul_pd(idx[h], a));
        idx[h] = _mm_add_pd(idx[h], v_four);
        const __m128d dev = _mm_and_pd(_mm_sub_pd(_mm_mul_pd(yv, v_inv), v_one), v_abs);
        o |= static_cast<std::uint64_t>(_mm_movemask_pd(_mm_cmpgt_pd(dev, v_band))) << i;
        f |= static_cast<std::uint64_t>(_mm_movemask_pd(_mm_cmplt_pd(yn, yv))) << i;
        vyh = _mm_max_pd(yv, vyh);
        vyl = _mm_min_pd(yv, vyl);
        if constexpr (WithU) {
          const __m128d uv = _mm_loadu_pd(u + k + i);
          vuh = _mm_max_pd(uv, vuh);
          vul = _mm_min_pd(uv, vul);
        }
      }
    bits.below[k / 64] = b;
    bits.outside[k / 64] = o;
    bits.falling[k / 64] = f;
    double lo[2], hi[2];
    for (int m = 0; m < 3; ++m) {
      const __m128d* v = m == 0 ? sq : m == 1 ? ab : wt;
      _mm_storeu_pd(lo, v[0]);
      _mm_storeu_pd(hi, v[1]);
      bits.sums[3 * (k / 64) + m] = (lo[0] + lo[1]) + (hi[0] + hi[1]);
    }
  }
  double lanes[2];
  _mm_storeu_pd(lanes, vyh);
  yh = std::max(lanes[0], lanes[1]);
  _mm_storeu_pd(lanes, vyl);
  yl = std::min(lanes[0], lanes[1]);
  _mm_storeu_pd(lanes, vuh);
  uh = std::max(lanes[0], lanes[1]);
  _mm_storeu_pd(lanes, vul);
  ul = std::min(lanes[0], lanes[1]);
#endif
  for (; k < count; k += 64) {  // the rest (everything without SSE2)
    std::uint64_t b = 0, o = 0, f = 0;
    double sq[4] = {0.0, 0.0, 0.0, 0.0}, ab[4] = {0.0, 0.0, 0.0, 0.0}, wt[4] = {0.0, 0.0, 0.0, 0.0};
    for (int j = 0; j < 64 && k + j < count; ++j) {
      const double yk = y[k + j], dev = std::abs(yk * inv - 1.0), e = y_inf - yk, a = std::abs(e);
      sq[j % 4] += e * e;
      ab[j % 4] += a;
      wt[j % 4] += j * a;
      b |= static_cast<std::uint64_t>(std::signbit(e)) << j;
      o |= static_cast<std::uint64_t>(dev > band) << j;
      f |= static_cast<std::uint64_t>(y[k + j + 1] < yk) << j;
      yh = yk > yh ? yk : yh;
      yl = yk < yl ? yk : yl;
      if constexpr (WithU) {
        const double uk = u[k + j];
        uh = uk > uh ? uk : uh;
        ul = uk < ul ? uk : ul;
      }
    }
    bits.below[k / 64] = b;
    bits.outside[k / 64] = o;
    bits.falling[k / 64] = f;
    bits.sums[3 * (k / 64)] = (sq[0] + sq[1]) + (sq[2] + sq[3]);
    bits.sums[3 * (k / 64) + 1] = (ab[0] + ab[1]) + (ab[2] + ab[3]);
    bits.sums[3 * (k / 64) + 2] = (wt[0] + wt[1]) + (wt[2] + wt[3]);
  }
  return {yh, yl, uh, ul};
}

}  // namespace

SampleExtremes scan_samples(const double* y, const double* u, int count, double y_inf, double inv, double band,
                            const ScanBits& bits) {
  return u ? scan_samples_kernel<true>(y, u, count, y_inf, inv, band, bits)
           : scan_samples_kernel<false>(y, u, count, y_inf, inv, band, bits);
}

SegmentSums segment_sums(const ScanBits& bits, const double* y, int first, int last, double y_inf, double t_first,
                         double h) {
  double squares = 0.0, absolute = 0.0, weighted = 0.0;  // weighted: Σ (k − first)·|e|
  for (int w = first / 64; w <= last / 64; ++w) {
    const int lo = 64 * w, hi = lo + 63;
    if (lo >= first && hi <= last) {  // a whole word: the scan's sums
      squares += bits.sums[3 * w];
      absolute += bits.sums[3 * w + 1];
      weighted += bits.sums[3 * w + 2] + (lo - first) * bits.sums[3 * w + 1];
      continue;
    }
    for (int k = std::max(lo, first); k <= std::min(hi, last); ++k) {  // a segment's end: sample by sample
      const double e = y_inf - y[k], a = std::abs(e);
      squares += e * e;
      absolute += a;
      weighted += (k - first) * a;
    }
  }
  return {squares, absolute, t_first * absolute + h * weighted};
}

KernelLayout kernel_layout(const Eigen::MatrixXd& outputs, const Eigen::VectorXd& out_const) {
  KernelLayout layout;
  const OutputCoordinates oc = output_coordinates(outputs);
  layout.p = oc.p;
  layout.output_from_y = oc.active && out_const(0) == 0.0;
  if (!layout.output_from_y) return layout;
  // The effort row rewritten for z (to_output_coordinates, on plain numbers), then the test of
  // effort_follows_output.
  const int n = static_cast<int>(outputs.cols()), p = oc.p;
  const double rp = outputs(2, p) / outputs(0, p);
  layout.effort_from_y = true;
  for (int j = 0; j < n; ++j) {
    if (j == p) continue;
    const double entry = outputs(2, j) - rp * outputs(0, j);
    const double scale = std::abs(outputs(2, j)) + std::abs(rp * outputs(0, j));
    if (std::abs(entry) > 4.0 * std::numeric_limits<double>::epsilon() * scale) layout.effort_from_y = false;
  }
  layout.u_const = out_const(2);
  layout.u_gain = rp;
  return layout;
}

bool recur_fixed_size(int n, const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma, const Eigen::MatrixXd& outputs,
                      const Eigen::VectorXd& out_const, const KernelLayout& layout, Eigen::VectorXd& x_io, int count,
                      double* y, double* u, double* states) {
  switch (n) {
    case 1: recur_fixed<1>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 2: recur_fixed<2>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 3: recur_fixed<3>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 4: recur_fixed<4>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 5: recur_fixed<5>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 6: recur_fixed<6>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 7: recur_fixed<7>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    case 8: recur_fixed<8>(phi, gamma, outputs, out_const, layout, x_io, count, y, u, states); return true;
    default: return false;
  }
}

}  // namespace specloop::exact_step

namespace specloop::detail {
void use_portable_kernels(bool portable) {
#if defined(SPECLOOP_AVX_KERNELS)
  exact_step::g_portable_kernels.store(portable, std::memory_order_relaxed);
#else
  (void)portable;
#endif
}
bool wide_kernels_available() {
#if defined(SPECLOOP_AVX_KERNELS)
  return __builtin_cpu_supports("avx");
#else
  return false;
#endif
}
}  // namespace specloop::detail
