// Exact ZOH step simulation and step metrics with between-sample refinement.
//
// A step input is constant between samples, so x[k+1] = Φ·x[k] + Γ·r is exact at the samples
// (Φ = e^{Ah}, Γ = ∫₀ʰ e^{Aτ}dτ·B, both from one exponential of the augmented matrix
// [[A, B], [0, 0]]·h). The state derivative x' = A·x + B·r is exact at every sample too, so
// each output is known with its slope at both ends of each interval; peaks, band crossings
// and integrals between samples use the cubic Hermite interpolant of those four numbers.
#include "specloop/sim/response.hpp"

#include <boost/math/tools/toms748_solve.hpp>

#include <algorithm>
#include <atomic>
#include <bit>
#include <cmath>
#include <cstring>
#include <limits>
#include <type_traits>
#if defined(__SSE2__)
#include <emmintrin.h>
#endif
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <immintrin.h>
#endif

namespace specloop {

std::string_view status_name(StepStatus s) {
  switch (s) {
    case StepStatus::ok: return "ok";
    case StepStatus::unstable: return "unstable";
    case StepStatus::zero_final_value: return "zero final value";
    case StepStatus::numerical_failure: return "numerical failure";
  }
  return "?";
}

TimeGrid choose_time_grid(const std::vector<Complex>& poles, const TimeGridRules& rules) {
  TimeGrid grid;
  const int min_intervals = rules.min_samples - 1, max_intervals = rules.max_samples - 1;
  if (poles.empty()) {  // a static loop: nothing moves; a short grid keeps the code uniform
    grid.step_s = 1.0 / min_intervals;
    grid.fine_intervals = min_intervals;
    grid.samples = rules.min_samples;
    return grid;
  }
  const double decay = std::log(1.0 / rules.decay_fraction);
  double slowest = std::numeric_limits<double>::infinity(), fastest = 0.0;
  for (const Complex& p : poles) {
    slowest = std::min(slowest, -p.real());
    fastest = std::max(fastest, std::abs(p));
  }
  const double horizon = decay / slowest;
  const double coarse = horizon / min_intervals;
  // Fast modes: those the coarse step would not resolve. They need the fine step only until
  // they have decayed like the slowest one does by the horizon.
  double fast_alive = 0.0;
  for (const Complex& p : poles)
    if (std::abs(p) * coarse > rules.max_step_pole_product) fast_alive = std::max(fast_alive, decay / -p.real());
  if (fast_alive == 0.0) {
    grid.step_s = coarse;
    grid.fine_intervals = min_intervals;
  } else {
    const double fine = rules.max_step_pole_product / fastest;
    const double t1 = std::min(fast_alive, horizon);
    // Counted in double and capped before the conversion: a barely damped fast pair (σ tiny,
    // |p| large) asks for more intervals than an int holds.
    const double fine_wanted = std::ceil(t1 / fine);
    const int coarse_n = t1 < horizon ? static_cast<int>(std::ceil((horizon - t1) / coarse)) : 0;
    int fine_n = 0;
    if (!(fine_wanted + coarse_n <= max_intervals)) {  // the cap: loosen the fine step
      fine_n = std::max(1, max_intervals - coarse_n);
    } else {
      fine_n = std::max(1, static_cast<int>(fine_wanted));
    }
    grid.step_s = t1 / fine_n;
    grid.fine_intervals = fine_n;
    grid.coarse_intervals = coarse_n;
    grid.coarse_step_s = coarse_n > 0 ? (horizon - t1) / coarse_n : 0.0;
  }
  grid.samples = grid.fine_intervals + grid.coarse_intervals + 1;
  return grid;
}

namespace {

// L doubles to a vector register (GCC/Clang vector extension): L = 2 is one SSE2 register on
// x86-64, L = 4 one AVX register; plain scalar code elsewhere.
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
// The AVX variants below (recurrence, sample scan, sums) do the same arithmetic as the SSE2
// ones on twice the lanes, so they give the same bits; they are compiled for "avx" only (no
// fused multiply-add) and chosen at run time. Defining SPECLOOP_NO_AVX leaves them out (to
// compare the two builds' results).
std::atomic<bool> g_portable_kernels{false};
bool has_avx() {
  static const bool avx = __builtin_cpu_supports("avx");
  return avx && !g_portable_kernels.load(std::memory_order_relaxed);
}
#endif

// s in [a, b] where f.value(s) equals `level`, given g_a = f(a) − level and g_b = f(b) − level on
// opposite sides (or on it). TOMS 748 (Alefeld, Potra & Shi; Boost) brackets the root to a few
// ulps in about ten evaluations, where bisection needed fifty; not bracketed (rounding at the
// band edge): plain bisection.
template <class F>
double level_crossing(const F& f, double level, double a, double b, double g_a, double g_b) {
  if (g_a == 0.0) return a;
  if (g_b == 0.0) return b;
  if ((g_a > 0.0) == (g_b > 0.0)) {
    double lo = a, hi = b;
    for (int i = 0; i < 50; ++i) {
      const double mid = 0.5 * (lo + hi);
      if ((f.value(mid) - level > 0.0) == (g_a > 0.0)) lo = mid; else hi = mid;
    }
    return 0.5 * (lo + hi);
  }
  std::uintmax_t iterations = 100;
  const auto [lo, hi] = boost::math::tools::toms748_solve([&](double x) { return f.value(x) - level; }, a, b, g_a, g_b,
                                                          boost::math::tools::eps_tolerance<double>(), iterations);
  return 0.5 * (lo + hi);
}

// The last s in [0, 1] at which f lies outside [lo, hi] (strictly), i.e. where it leaves that
// band for the last time within the interval; −1 when it stays inside throughout. f is monotone
// between its stationary points `st` (ascending, inside (0, 1)), so each piece, taken from the
// end, has at most one crossing of the edge its start violates.
template <class F>
double last_outside_of(const F& f, const double* st, int n, double f0, double f1, double lo, double hi) {
  double cuts[4] = {0.0, 0.0, 0.0, 1.0};
  for (int i = 0; i < n; ++i) cuts[1 + i] = st[i];
  cuts[1 + n] = 1.0;
  auto outside = [&](double v) { return v > hi || v < lo; };
  double v_end = f1;
  for (int piece = n; piece >= 0; --piece) {
    const double a = cuts[piece], b = cuts[piece + 1];
    if (outside(v_end)) return b;
    const double v_start = a == 0.0 ? f0 : f.value(a);
    if (outside(v_start)) {
      const double level = v_start > hi ? hi : lo;
      return level_crossing(f, level, a, b, v_start - level, v_end - level);
    }
    v_end = v_start;
  }
  return -1.0;
}

// The exact response on one sample interval [t_k, t_k + h], expanded about one of its ends
// t_b = t_k + s_b·h (s_b = 0 or 1). With the step input constant, x' = A·x + B·r gives
// x^(i+1) = A^i·x'(t_b), so y(t_k + s·h) = y_b + Σ_{i≥0} c_i ((s − s_b)·h)^{i+1}/(i+1)! with
// c_i = C·A^i·x'(t_b): the Taylor series of the exponential, which converges for every s and, on
// this grid (h·|p| ≤ 1), within a few dozen terms at most. Kept as a_i = c_i·h^{i+1}/(i+1)! so
// that value(s) = y_b + Σ a_i (s − s_b)^{i+1}. Used where a value between samples decides
// something (the peak, a hump at the band edge), instead of the cubic Hermite.
struct ExactSeries {
  static constexpr int kMaxTerms = 48;
  double base = 0.0;  // s_b
  double fb = 0.0;    // y_b
  double a[kMaxTerms] = {};
  int terms = 0;
  double value(double s) const {
    const double d = s - base;
    double v = 0.0;
    for (int j = terms - 1; j >= 0; --j) v = v * d + a[j];
    return fb + v * d;
  }
  double slope(double s) const {  // d/ds
    const double d = s - base;
    double v = 0.0;
    for (int j = terms - 1; j >= 0; --j) v = v * d + (j + 1) * a[j];
    return v;
  }
  double curvature(double s) const {  // d²/ds²
    const double d = s - base;
    double v = 0.0;
    for (int j = terms - 1; j >= 1; --j) v = v * d + (j + 1) * j * a[j];
    return v;
  }
  // The stationary point near s0 (Newton on the slope), kept within [0, 1]; s0 when Newton
  // does not settle there. From the Hermite's location (off by O(h⁴)) two steps reach 1e-12 of
  // the interval, where the value is exact to rounding (its error is quadratic in the location's).
  double stationary_near(double s0) const {
    double x = s0;
    for (int i = 0; i < 8; ++i) {
      const double c = curvature(x);
      if (c == 0.0) return s0;
      const double step = slope(x) / c;
      x -= step;
      if (!(x >= 0.0 && x <= 1.0)) return s0;
      if (std::abs(step) <= 1e-12) break;
    }
    return x;
  }
};

// Cubic Hermite interpolant on one interval of length h: values f0, f1 and slopes d0, d1.
struct Hermite {
  double f0, f1, d0, d1, h;
  double value(double s) const {  // s in [0, 1]
    const double s2 = s * s, s3 = s2 * s;
    return (2 * s3 - 3 * s2 + 1) * f0 + (s3 - 2 * s2 + s) * h * d0 + (-2 * s3 + 3 * s2) * f1 +
           (s3 - s2) * h * d1;
  }
  // Extremum (max when sign = +1, min when −1) over [0, 1]; returns {value, s}.
  std::pair<double, double> extremum(double sign) const {
    // p'(s)·h = a s² + b s + c
    const double a = 6 * f0 + 3 * h * d0 - 6 * f1 + 3 * h * d1;
    const double b = -6 * f0 - 4 * h * d0 + 6 * f1 - 2 * h * d1;
    const double c = h * d0;
    std::pair<double, double> best{f0, 0.0};
    auto consider = [&](double s) {
      if (!(s >= 0.0 && s <= 1.0)) return;
      const double v = value(s);
      if (sign * v > sign * best.first) best = {v, s};
    };
    consider(1.0);
    if (std::abs(a) > 1e-300) {
      const double disc = b * b - 4 * a * c;
      if (disc >= 0.0) {
        const double q = -0.5 * (b + std::copysign(std::sqrt(disc), b));
        if (q != 0.0) consider(c / q);
        consider(q / a);
      }
    } else if (std::abs(b) > 1e-300) {
      consider(-c / b);
    }
    return best;
  }
  // s in [a, b] where the interpolant equals `level`; its values at a and b lie on opposite sides
  // (or on it).
  double crossing(double level, double a = 0.0, double b = 1.0) const {
    return level_crossing(*this, level, a, b, (a == 0.0 ? f0 : value(a)) - level, (b == 1.0 ? f1 : value(b)) - level);
  }
  // The stationary points of the interpolant inside (0, 1), ascending; returns how many (0–2).
  int stationary(double (&s)[2]) const {
    const double a = 6 * f0 + 3 * h * d0 - 6 * f1 + 3 * h * d1;
    const double b = -6 * f0 - 4 * h * d0 + 6 * f1 - 2 * h * d1;
    const double c = h * d0;
    int n = 0;
    auto keep = [&](double r) {
      if (r > 0.0 && r < 1.0) s[n++] = r;
    };
    if (std::abs(a) > 1e-300) {
      const double disc = b * b - 4 * a * c;
      if (disc >= 0.0) {
        const double q = -0.5 * (b + std::copysign(std::sqrt(disc), b));
        if (q != 0.0) keep(c / q);
        keep(q / a);
      }
    } else if (std::abs(b) > 1e-300) {
      keep(-c / b);
    }
    if (n == 2 && s[0] > s[1]) std::swap(s[0], s[1]);
    return n;
  }
  // The last s in [0, 1] at which the interpolant lies outside [lo, hi]; −1 if never (last_outside_of).
  double last_outside(double lo, double hi) const {
    double st[2];
    const int n = stationary(st);
    return last_outside_of(*this, st, n, f0, f1, lo, hi);
  }
};

// One pass over the samples: the extremes of y and u, and three bit masks (64 samples a word, bit
// j of word w is sample 64w + j): `below`, e = y∞ − y < 0 (the sign bit of e); `outside`,
// |y/y∞ − 1| > band; `falling`, y[k+1] < y[k] (the caller keeps y[count] readable; bit count − 1
// is meaningless). Sign changes of e, band exits and the samples where y turns (sample extrema)
// are then found a word at a time.
struct SampleExtremes {
  double y_hi, y_lo, u_hi, u_lo;
};
struct ScanBits {
  std::uint64_t *below, *outside, *falling;
};

#if defined(SPECLOOP_AVX_KERNELS)
// scan_samples' vector part four samples a step (AVX); max, min and comparisons are exact, so
// this finds the same extremes and bits. Returns the first sample left for the scalar tail.
__attribute__((target("avx"))) int scan_samples_avx(const double* y, const double* u, int count, double y_inf,
                                                    double inv, double band, const ScanBits& bits,
                                                    SampleExtremes& ex) {
  const __m256d v_inf = _mm256_set1_pd(y_inf), v_inv = _mm256_set1_pd(inv), v_one = _mm256_set1_pd(1.0),
                v_band = _mm256_set1_pd(band),
                v_abs = _mm256_castsi256_pd(_mm256_set1_epi64x(0x7fffffffffffffffLL));
  __m256d vyh = _mm256_set1_pd(ex.y_hi), vyl = _mm256_set1_pd(ex.y_lo), vuh = _mm256_set1_pd(ex.u_hi),
          vul = _mm256_set1_pd(ex.u_lo);
  int k = 0;
  for (; k + 64 <= count; k += 64) {
    std::uint64_t b = 0, o = 0, f = 0;
    for (int j = 0; j < 64; j += 4) {
      const __m256d yv = _mm256_loadu_pd(y + k + j), uv = _mm256_loadu_pd(u + k + j),
                    yn = _mm256_loadu_pd(y + k + j + 1);
      b |= static_cast<std::uint64_t>(_mm256_movemask_pd(_mm256_sub_pd(v_inf, yv))) << j;
      const __m256d dev = _mm256_and_pd(_mm256_sub_pd(_mm256_mul_pd(yv, v_inv), v_one), v_abs);
      o |= static_cast<std::uint64_t>(_mm256_movemask_pd(_mm256_cmp_pd(dev, v_band, _CMP_GT_OS))) << j;
      f |= static_cast<std::uint64_t>(_mm256_movemask_pd(_mm256_cmp_pd(yn, yv, _CMP_LT_OS))) << j;
      vyh = _mm256_max_pd(yv, vyh);
      vyl = _mm256_min_pd(yv, vyl);
      vuh = _mm256_max_pd(uv, vuh);
      vul = _mm256_min_pd(uv, vul);
    }
    bits.below[k / 64] = b;
    bits.outside[k / 64] = o;
    bits.falling[k / 64] = f;
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

SampleExtremes scan_samples(const double* y, const double* u, int count, double y_inf, double inv, double band,
                            const ScanBits& bits) {
  double yh = y[0], yl = y[0], uh = u[0], ul = u[0];
  int k = 0;
#if defined(SPECLOOP_AVX_KERNELS)
  if (has_avx()) {
    SampleExtremes ex{yh, yl, uh, ul};
    k = scan_samples_avx(y, u, count, y_inf, inv, band, bits, ex);
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
  __m128d vyh = _mm_set1_pd(yh), vyl = _mm_set1_pd(yl), vuh = _mm_set1_pd(uh), vul = _mm_set1_pd(ul);
  for (; k + 64 <= count; k += 64) {
    std::uint64_t b = 0, o = 0, f = 0;
    for (int j = 0; j < 64; j += 2) {
      const __m128d yv = _mm_loadu_pd(y + k + j), uv = _mm_loadu_pd(u + k + j), yn = _mm_loadu_pd(y + k + j + 1);
      b |= static_cast<std::uint64_t>(_mm_movemask_pd(_mm_sub_pd(v_inf, yv))) << j;
      const __m128d dev = _mm_and_pd(_mm_sub_pd(_mm_mul_pd(yv, v_inv), v_one), v_abs);
      o |= static_cast<std::uint64_t>(_mm_movemask_pd(_mm_cmpgt_pd(dev, v_band))) << j;
      f |= static_cast<std::uint64_t>(_mm_movemask_pd(_mm_cmplt_pd(yn, yv))) << j;
      vyh = _mm_max_pd(yv, vyh);
      vyl = _mm_min_pd(yv, vyl);
      vuh = _mm_max_pd(uv, vuh);
      vul = _mm_min_pd(uv, vul);
    }
    bits.below[k / 64] = b;
    bits.outside[k / 64] = o;
    bits.falling[k / 64] = f;
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
    for (int j = 0; j < 64 && k + j < count; ++j) {
      const double yk = y[k + j], uk = u[k + j], dev = std::abs(yk * inv - 1.0);
      b |= static_cast<std::uint64_t>(std::signbit(y_inf - yk)) << j;
      o |= static_cast<std::uint64_t>(dev > band) << j;
      f |= static_cast<std::uint64_t>(y[k + j + 1] < yk) << j;
      yh = yk > yh ? yk : yh;
      yl = yk < yl ? yk : yl;
      uh = uk > uh ? uk : uh;
      ul = uk < ul ? uk : ul;
    }
    bits.below[k / 64] = b;
    bits.outside[k / 64] = o;
    bits.falling[k / 64] = f;
  }
  return {yh, yl, uh, ul};
}

// Σe², Σ|e| and Σt·|e| over samples first..last of one uniform segment (t = t_first + (k − first)·h),
// e = y∞ − y: four samples a step, four independent partial sums each (floating-point sums are
// not reordered by the compiler on its own, so the partial sums are written out), as two
// two-lane vectors (SSE2) or one four-lane vector (AVX), which add the same numbers in the same
// order.
struct SegmentSums {
  double squares, absolute, time_absolute;
};

template <int L>
[[gnu::always_inline]] inline SegmentSums segment_sums_kernel(const double* y, int first, int last, double y_inf,
                                                             double t_first, double h) {
  using Pack = typename PackOf<L>::type;
  using Unaligned = typename PackOf<L>::unaligned;
  using Bits = typename PackOf<L>::bits;
  constexpr int P = 4 / L;  // four samples a step, each summed in its own lane
  Pack inf, four, sq[P] = {}, ab[P] = {}, idx_ab[P] = {}, idx[P];
  Bits magnitude;
  for (int l = 0; l < L; ++l) {
    inf[l] = y_inf;
    four[l] = 4.0;
    magnitude[l] = ~(std::uint64_t{1} << 63);
    for (int p = 0; p < P; ++p) idx[p][l] = L * p + l;
  }
  int k = first;
  for (; k + 4 <= last + 1; k += 4)
    for (int p = 0; p < P; ++p) {
      const Pack yv = *reinterpret_cast<const Unaligned*>(y + k + L * p);
      const Pack e = inf - yv;
      const Pack a = (Pack)((Bits)e & magnitude);  // |e|: sign bit cleared (vector casts keep the bits)
      sq[p] += e * e;
      ab[p] += a;
      idx_ab[p] += idx[p] * a;
      idx[p] += four;
    }
  // The four lanes (samples k ≡ 0, 1, 2, 3 mod 4 from `first`) in the order (0 + 1) + (2 + 3).
  auto total = [&](const Pack* v) { return (v[0][0] + v[0][1]) + (v[P - 1][L - 2] + v[P - 1][L - 1]); };
  double squares = total(sq), absolute = total(ab), weighted = total(idx_ab);
  for (; k <= last; ++k) {
    const double e = y_inf - y[k], a = std::abs(e);
    squares += e * e;
    absolute += a;
    weighted += (k - first) * a;
  }
  return {squares, absolute, t_first * absolute + h * weighted};
}

#if defined(SPECLOOP_AVX_KERNELS)
__attribute__((target("avx"))) SegmentSums segment_sums_avx(const double* y, int first, int last, double y_inf,
                                                            double t_first, double h) {
  return segment_sums_kernel<4>(y, first, last, y_inf, t_first, h);
}
#endif

SegmentSums segment_sums(const double* y, int first, int last, double y_inf, double t_first, double h) {
#if defined(SPECLOOP_AVX_KERNELS)
  if (has_avx()) return segment_sums_avx(y, first, last, y_inf, t_first, h);
#endif
  return segment_sums_kernel<2>(y, first, last, y_inf, t_first, h);
}

// Queries on the bit masks of scan_samples for `count` samples.
class SampleBits {
 public:
  SampleBits(const ScanBits& bits, int count)
      : below_(bits.below), outside_(bits.outside), falling_(bits.falling), count_(count),
        words_((count + 63) / 64) {}
  int words() const { return words_; }
  // Word w of the samples where f = y/y∞ − 1 turns, 1 ≤ k ≤ count − 2: `maxima` (f rose into k
  // and falls after it) or minima. `f_follows_y` is true when y∞ > 0, else f mirrors y.
  // Plateaus count once, at one of their ends.
  std::uint64_t turns(int w, bool f_follows_y, bool maxima) const {
    const std::uint64_t flip = f_follows_y ? 0 : ~std::uint64_t{0};
    const std::uint64_t fall = falling_[w] ^ flip;  // f[k+1] < f[k] (up to ties)
    const std::uint64_t carry = w > 0 ? ((falling_[w - 1] ^ flip) >> 63) : 0;
    const std::uint64_t fell = (fall << 1) | carry;  // f[k] < f[k−1]
    std::uint64_t t = maxima ? (fall & ~fell) : (~fall & fell);
    if (w == 0) t &= ~std::uint64_t{1};  // k = 0 has no left neighbour
    return t & interior(w);
  }
  // Word w of the samples where f > 0: y beyond y∞ in its direction (f = 0 may count either way).
  std::uint64_t beyond(int w, bool f_follows_y) const {
    return (f_follows_y ? below_[w] : ~below_[w]) & valid(w);
  }

  // Smallest k in [from, count) where e changes sign between samples k − 1 and k; count if none.
  int next_sign_change(int from) const {
    if (from < 1) from = 1;
    for (int w = from / 64; w < words_; ++w) {
      const std::uint64_t carry = w > 0 ? below_[w - 1] >> 63 : below_[0] & 1u;
      std::uint64_t changes = (below_[w] ^ ((below_[w] << 1) | carry)) & valid(w);
      const int lo = from - 64 * w;
      if (lo > 0) changes &= ~std::uint64_t{0} << lo;
      if (changes) return 64 * w + std::countr_zero(changes);
    }
    return count_;
  }
  // First sample inside the band; count if none.
  int first_inside() const {
    for (int w = 0; w < words_; ++w)
      if (const std::uint64_t inside = ~outside_[w] & valid(w)) return 64 * w + std::countr_zero(inside);
    return count_;
  }
  // Last sample outside the band; −1 if none.
  int last_outside() const {
    for (int w = words_ - 1; w >= 0; --w)
      if (const std::uint64_t o = outside_[w] & valid(w)) return 64 * w + 63 - std::countl_zero(o);
    return -1;
  }

 private:
  std::uint64_t valid(int w) const {
    const int n = count_ - 64 * w;
    return n >= 64 ? ~std::uint64_t{0} : (std::uint64_t{1} << n) - 1;
  }
  // Samples 0 .. count − 2 (the falling bit of the last sample is meaningless).
  std::uint64_t interior(int w) const {
    const int n = count_ - 1 - 64 * w;
    return n >= 64 ? ~std::uint64_t{0} : n <= 0 ? 0 : (std::uint64_t{1} << n) - 1;
  }
  const std::uint64_t *below_, *outside_, *falling_;
  int count_, words_;
};

// Interleaved recurrence chains; the stored states come in blocks of this many samples.
constexpr int kChains = 4;

// Padé(6,6) coefficients of the exponential (Moler & Van Loan, "Nineteen dubious ways...").
constexpr double kPade[7] = {1.0, 1.0 / 2, 5.0 / 44, 1.0 / 66, 1.0 / 792, 1.0 / 15840, 1.0 / 665280};

// exp(a) in place by scaling and squaring with the Padé(6,6) approximant. One body for the
// fixed-size matrices (n ≤ 8, on the stack) and the dynamic workspace (larger loops); the
// temporaries are the caller's, so neither allocates.
template <class Mat, class Lu>
void pade_exponential(Mat& a, Mat& p2, Mat& p4, Mat& p6, Mat& even, Mat& odd, Mat& numer, Mat& denom, Lu& lu) {
  const double norm = a.cwiseAbs().rowwise().sum().maxCoeff();
  int squarings = 0;
  if (norm > 0.5) squarings = static_cast<int>(std::ceil(std::log2(norm / 0.5)));
  a *= std::ldexp(1.0, -squarings);
  p2.noalias() = a * a;
  p4.noalias() = p2 * p2;
  p6.noalias() = p4 * p2;
  even = kPade[2] * p2 + kPade[4] * p4 + kPade[6] * p6;
  even.diagonal().array() += kPade[0];
  numer = kPade[3] * p2 + kPade[5] * p4;
  numer.diagonal().array() += kPade[1];
  odd.noalias() = a * numer;
  numer = even + odd;
  denom = even - odd;
  lu.compute(denom);
  a = lu.solve(numer);
  for (int i = 0; i < squarings; ++i) {
    p2.noalias() = a * a;
    a = p2;
  }
}

// Calls f(std::integral_constant<int, N>) for 1 ≤ n ≤ 8 and returns true; false otherwise.
template <class F>
bool with_fixed_size(int n, F&& f) {
  switch (n) {
    case 1: f(std::integral_constant<int, 1>{}); return true;
    case 2: f(std::integral_constant<int, 2>{}); return true;
    case 3: f(std::integral_constant<int, 3>{}); return true;
    case 4: f(std::integral_constant<int, 4>{}); return true;
    case 5: f(std::integral_constant<int, 5>{}); return true;
    case 6: f(std::integral_constant<int, 6>{}); return true;
    case 7: f(std::integral_constant<int, 7>{}); return true;
    case 8: f(std::integral_constant<int, 8>{}); return true;
    default: return false;
  }
}

// Writes samples [0, count) of y and u, and the states themselves (for slopes computed on
// demand), starting from x_io, which is left at the state after the last sample (ready for the
// next segment). Four interleaved chains (samples k, k+1, k+2, k+3 stepped by Φ⁴ with
// Γ₄ = (Φ³ + Φ² + Φ + I)·Γ) shorten the dependency chain that bounds the loop's speed. The
// chains are held state-component-major (z[i][c]: component i of chain c), so every operation
// works on whole rows of four chains: no shuffles, no horizontal sums, and the matrix entries
// are read pre-broadcast from memory. The states are stored the same way, one block of N×4
// per four samples (see StepSimulator::state_at).
// Output coordinates for the fixed-size kernels: z = T·x with z_p = c_y·x (p the index of the
// largest |c_y,j|) and z_j = x_j otherwise, so y = z_p + D_y·r costs no product per sample. T⁻¹
// only rescales coordinate p and subtracts multiples of the others (|c_y,j/c_y,p| ≤ 1), so the
// change is well conditioned. With c_y = 0 (a constant output) T = I and y is its constant.
struct OutputCoordinates {
  int p = 0;
  bool active = false;
};
OutputCoordinates output_coordinates(const Eigen::MatrixXd& outputs) {
  OutputCoordinates oc;
  const auto cy = outputs.row(0);
  for (int j = 1; j < cy.size(); ++j)
    if (std::abs(cy(j)) > std::abs(cy(oc.p))) oc.p = j;
  oc.active = cy.size() > 0 && cy(oc.p) != 0.0;
  return oc;
}
// row ← row·T⁻¹ (a row acting on x, rewritten to act on z).
template <class Row, class Cy>
void to_output_coordinates(Row&& row, const Cy& cy, const OutputCoordinates& oc) {
  if (!oc.active) return;
  const double rp = row(oc.p) / cy(oc.p);
  for (int j = 0; j < cy.size(); ++j)
    if (j != oc.p) row(j) -= rp * cy(j);
  row(oc.p) = rp;
}

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

// The recurrence kernel, L chains to a vector register (GCC/Clang vector extension: L = 2 is
// one SSE2 register on x86-64, L = 4 one AVX register; plain scalar code elsewhere). Both widths
// perform the same multiplications and additions in the same order, so they give the same bits;
// no fused multiply-add is involved (the AVX variant is compiled for "avx" only, not "fma").
template <int N, int L>
[[gnu::always_inline]] inline void recur_kernel(const Eigen::MatrixXd& phi_dyn, const Eigen::VectorXd& gamma_dyn,
                                               const Eigen::MatrixXd& out_dyn, const Eigen::VectorXd& oc_dyn,
                                               Eigen::VectorXd& x_io, int samples, double* y, double* u,
                                               double* states) {
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
  const Mat phi_x = phi_dyn;  // fixed-size copies first: a product with a dynamic operand allocates
  const Vec gamma_x = gamma_dyn;
  const Mat phi = t * phi_x * t_inv;
  const Vec gamma = t * gamma_x;
  const Mat phi2 = phi * phi;
  const Mat phi4 = phi2 * phi2;
  const Vec gamma4 = phi2 * (phi * gamma + gamma) + phi * gamma + gamma;
  const RowVec c_u_x = out_dyn.row(2);
  RowVec c_u = c_u_x;
  to_output_coordinates(c_u, c_y, oc);
  const bool u_from_y = effort_follows_output(c_u_x, c_u, c_y, oc);
  Pack p4[N][N], g4[N], cu[N], z[N][P], oy, ou, wy;
  for (int l = 0; l < L; ++l) {
    for (int i = 0; i < N; ++i) {
      for (int j = 0; j < N; ++j) p4[i][j][l] = phi4(i, j);
      g4[i][l] = gamma4(i);
      cu[i][l] = c_u(i);
    }
    oy[l] = oc_dyn(0);
    ou[l] = oc_dyn(2);
    wy[l] = oc.active ? 1.0 : 0.0;
  }
  const Vec x_start = x_io;
  Vec start = t * x_start;
  for (int c = 0; c < C; ++c) {
    for (int i = 0; i < N; ++i) z[i][c / L][c % L] = start(i);
    start = phi * start + gamma;
  }
  int k = 0;
  for (;; k += C) {
    double* block = states + static_cast<std::ptrdiff_t>(k) * N;
    for (int i = 0; i < N; ++i)
      for (int p = 0; p < P; ++p) put(block + i * C + L * p, z[i][p]);
    if (k + C > samples) break;  // the last, partial block: stored whole, outputs below
    for (int p = 0; p < P; ++p) {
      const Pack yb = wy * z[q][p] + oy;
      Pack ub = ou;
      if (u_from_y) {
        ub += cu[q] * z[q][p];
      } else {
        for (int i = 0; i < N; ++i) ub += cu[i] * z[i][p];
      }
      put(y + k + L * p, yb);
      put(u + k + L * p, ub);
    }
    Pack next[N][P];
    for (int i = 0; i < N; ++i)
      for (int p = 0; p < P; ++p) {
        Pack v = g4[i];
        for (int j = 0; j < N; ++j) v += p4[i][j] * z[j][p];
        next[i][p] = v;
      }
    for (int i = 0; i < N; ++i)
      for (int p = 0; p < P; ++p) z[i][p] = next[i][p];
  }
  const int rest = samples - k;  // 0..3 samples left: they sit in chains 0 .. rest − 1
  for (int c = 0; c < rest; ++c) {
    const double zq = z[q][c / L][c % L];
    double yv = wy[0] * zq + oy[0], uv = ou[0];
    if (u_from_y) {
      uv += cu[q][0] * zq;
    } else {
      for (int i = 0; i < N; ++i) uv += cu[i][0] * z[i][c / L][c % L];
    }
    y[k + c] = yv;
    u[k + c] = uv;
  }
  Vec last;
  for (int i = 0; i < N; ++i) last(i) = z[i][rest / L][rest % L];
  x_io = t_inv * last;  // the state at sample `samples`, back in the loop's coordinates
}

#if defined(SPECLOOP_AVX_KERNELS)
// Four chains to one AVX register: half the instructions of the SSE2 kernel, same arithmetic.
// Chosen at run time (processors without AVX take the SSE2 kernel).
template <int N>
__attribute__((target("avx"))) void recur_fixed_avx(const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma,
                                                    const Eigen::MatrixXd& out, const Eigen::VectorXd& oc,
                                                    Eigen::VectorXd& x_io, int samples, double* y, double* u,
                                                    double* states) {
  recur_kernel<N, 4>(phi, gamma, out, oc, x_io, samples, y, u, states);
}
#endif

template <int N>
void recur_fixed(const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma, const Eigen::MatrixXd& out,
                 const Eigen::VectorXd& oc, Eigen::VectorXd& x_io, int samples, double* y, double* u,
                 double* states) {
#if defined(SPECLOOP_AVX_KERNELS)
  if (has_avx()) return recur_fixed_avx<N>(phi, gamma, out, oc, x_io, samples, y, u, states);
#endif
  recur_kernel<N, 2>(phi, gamma, out, oc, x_io, samples, y, u, states);
}

}  // namespace

StepSimulator::StepSimulator(TimeGridRules rules) : rules_(rules) {}

void StepSimulator::prepare(int n, int samples) {
  if (n != states_) {
    const int m = n + 1;
    eigen_ = Eigen::EigenSolver<Eigen::MatrixXd>(n);
    lu_state_ = Eigen::PartialPivLU<Eigen::MatrixXd>(n);
    lu_pade_ = Eigen::PartialPivLU<Eigen::MatrixXd>(m);
    for (Eigen::MatrixXd* mat : {&augmented_, &power2_, &power4_, &power6_, &even_, &odd_, &numer_, &denom_})
      mat->resize(m, m);
    phi_.resize(n, n);
    outputs_.resize(4, n);
    gamma_.resize(n);
    out_const_.resize(4);
    x_.resize(n);
    x_next_.resize(n);
    solve_.resize(n);
    poles_.reserve(static_cast<std::size_t>(n));
    states_ = n;
  }
  // One sample more than used: the scan reads y[k + 1] beside y[k] (see scan_samples).
  if (static_cast<int>(y_.size()) < samples + 1) {
    for (auto* v : {&y_, &u_}) v->resize(static_cast<std::size_t>(samples) + 1);
  }
  const std::size_t words = static_cast<std::size_t>(samples + 63) / 64;
  if (below_bits_.size() < words) {
    for (auto* v : {&below_bits_, &outside_bits_, &falling_bits_}) v->resize(words);
  }
  // Room for the fixed-size kernels' blocks: each segment starts on a whole block and its last,
  // partial block is stored whole.
  const std::size_t store = static_cast<std::size_t>(samples + 2 * kChains) * static_cast<std::size_t>(n);
  if (states_store_.size() < store) states_store_.resize(store);
}

void StepSimulator::discretize(const StateSpace& loop, double amplitude, double h, Eigen::MatrixXd& phi,
                               Eigen::VectorXd& gamma) {
  const int n = loop.states();
  // Augmented exponential: exp([[A, B·r], [0, 0]]·h) = [[Φ, Γ·r], [0, 1]].
  const bool fixed = with_fixed_size(n, [&](auto size) {
    constexpr int N = decltype(size)::value, M = N + 1;
    using Mat = Eigen::Matrix<double, M, M>;
    Mat a = Mat::Zero(), p2, p4, p6, even, odd, numer, denom;
    Eigen::PartialPivLU<Mat> lu;
    a.template topLeftCorner<N, N>() = loop.A * h;
    a.template topRightCorner<N, 1>() = loop.B * (amplitude * h);
    pade_exponential(a, p2, p4, p6, even, odd, numer, denom, lu);
    phi = a.template topLeftCorner<N, N>();
    gamma = a.template topRightCorner<N, 1>();
  });
  if (!fixed) {
    augmented_.setZero();
    augmented_.topLeftCorner(n, n) = loop.A * h;
    augmented_.topRightCorner(n, 1) = loop.B * (amplitude * h);
    pade_exponential(augmented_, power2_, power4_, power6_, even_, odd_, numer_, denom_, lu_pade_);
    phi = augmented_.topLeftCorner(n, n);
    gamma = augmented_.topRightCorner(n, 1);
  }
}

void StepSimulator::output_rows(const StateSpace& loop, double amplitude) {
  // Outputs and their slopes: y = C_y x + D_y r, y' = C_y A x + C_y B r (likewise u).
  outputs_.row(0) = loop.C.row(0);
  outputs_.row(1).noalias() = loop.C.row(0) * loop.A;
  outputs_.row(2) = loop.C.row(1);
  outputs_.row(3).noalias() = loop.C.row(1) * loop.A;
  out_const_(0) = loop.D(0) * amplitude;
  out_const_(1) = loop.C.row(0).dot(loop.B) * amplitude;
  out_const_(2) = loop.D(1) * amplitude;
  out_const_(3) = loop.C.row(1).dot(loop.B) * amplitude;
}

void StepSimulator::recur(int n, int first, int count) {
  double* y = y_.data() + first;
  double* u = u_.data() + first;
  // Fixed-size kernels store blocks of kChains samples, each segment from a whole block on.
  const int base = n <= 8 && first > 0 ? (first + kChains - 1) / kChains * kChains : first;
  double* states = states_store_.data() + static_cast<std::size_t>(base) * static_cast<std::size_t>(n);
  switch (n) {
    case 1: return recur_fixed<1>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 2: return recur_fixed<2>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 3: return recur_fixed<3>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 4: return recur_fixed<4>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 5: return recur_fixed<5>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 6: return recur_fixed<6>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 7: return recur_fixed<7>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    case 8: return recur_fixed<8>(phi_, gamma_, outputs_, out_const_, x_, count, y, u, states);
    default: break;
  }
  for (int k = 0; k < count; ++k) {
    Eigen::Map<Eigen::VectorXd>(states + static_cast<std::ptrdiff_t>(k) * n, n) = x_;
    y[k] = outputs_.row(0).dot(x_) + out_const_(0);
    u[k] = outputs_.row(2).dot(x_) + out_const_(2);
    x_next_.noalias() = phi_ * x_;
    x_next_ += gamma_;
    x_.swap(x_next_);
  }
}

bool StepSimulator::eigenvalues(const Eigen::MatrixXd& a) {
  eigen_.compute(a, false);
  if (eigen_.info() != Eigen::Success) return false;
  for (int i = 0; i < a.rows(); ++i) poles_.push_back(eigen_.eigenvalues()(i));
  return true;
}

const double* StepSimulator::stored_state(int k, std::ptrdiff_t& stride) const {
  const int n = states_;
  const double* x = states_store_.data();
  stride = 1;
  if (n <= 8) {  // blocks of kChains samples, component-major, per segment (see recur)
    int local = k, base = 0;
    if (grid_.coarse_intervals > 0 && k >= grid_.fine_intervals) {
      local = k - grid_.fine_intervals;
      base = (grid_.fine_intervals + kChains - 1) / kChains * kChains;
    }
    x += static_cast<std::ptrdiff_t>(base + local / kChains * kChains) * n + local % kChains;
    stride = kChains;
  } else {
    x += static_cast<std::ptrdiff_t>(k) * n;
  }
  return x;
}

double StepSimulator::slope(int row, int k) const {
  const int n = states_;
  if (n == 0) return 0.0;
  std::ptrdiff_t stride = 1;
  const double* x = stored_state(k, stride);
  double v = out_const_(row);
  for (int i = 0; i < n; ++i) v += outputs_(row, i) * x[i * stride];
  return v;
}

StepStatus StepSimulator::simulate(const StateSpace& loop, double amplitude, double band_fraction,
                                   StepMetrics& m, StepTrace* trace) {
  const int n = loop.states();
  if (n != states_) prepare(n, 0);
  m = StepMetrics{};

  // Stability first, from the poles.
  poles_.clear();
  if (n > 0) {
    if (!eigenvalues(loop.A)) return StepStatus::numerical_failure;
    sort_roots(poles_);
    if (!all_stable(poles_)) return StepStatus::unstable;
  }

  // Final value: y∞ = r·(D_y − C_y A⁻¹ B).
  double dc = loop.D(0);
  if (n > 0) {
    const bool fixed = with_fixed_size(n, [&](auto size) {
      constexpr int N = decltype(size)::value;
      const Eigen::PartialPivLU<Eigen::Matrix<double, N, N>> lu(loop.A);
      const Eigen::Matrix<double, N, 1> solved = lu.solve(loop.B);
      dc -= loop.C.row(0).dot(solved);
    });
    if (!fixed) {
      lu_state_.compute(loop.A);
      solve_ = lu_state_.solve(loop.B);
      dc -= loop.C.row(0).dot(solve_);
    }
  }
  const double y_inf = amplitude * dc;
  if (!std::isfinite(y_inf)) return StepStatus::numerical_failure;
  if (std::abs(y_inf) <= 1e-12 * std::abs(amplitude)) return StepStatus::zero_final_value;
  m.final_value = y_inf;
  m.steady_state_error = (amplitude - y_inf) / amplitude;
  // Below 1e-12 the error is the DC-gain solve's rounding (a loop with an integrator): report 0.
  if (std::abs(m.steady_state_error) < 1e-12) m.steady_state_error = 0.0;

  grid_ = choose_time_grid(poles_, rules_);
  prepare(n, grid_.samples);
  const int K = grid_.samples;
  const int fine_samples = grid_.fine_intervals + 1;
  if (n > 0) {
    // The fine segment writes samples 0 .. T₁ − h₁ and leaves x_ at T₁; the coarse segment
    // writes T₁ .. T with the coarse step. Without a coarse segment the fine one runs to T.
    output_rows(loop, amplitude);
    discretize(loop, amplitude, grid_.step_s, phi_, gamma_);
    x_.setZero();
    if (grid_.coarse_intervals == 0) {
      recur(n, 0, fine_samples);
    } else {
      recur(n, 0, fine_samples - 1);
      discretize(loop, amplitude, grid_.coarse_step_s, phi_, gamma_);
      recur(n, fine_samples - 1, grid_.coarse_intervals + 1);
    }
    if (n <= 8) {  // the fixed-size kernels stored z = T·x: the slope rows now act on z
      const OutputCoordinates oc = output_coordinates(outputs_);
      to_output_coordinates(outputs_.row(1), outputs_.row(0), oc);
      to_output_coordinates(outputs_.row(3), outputs_.row(0), oc);
    }
  } else {
    for (int k = 0; k < grid_.samples; ++k) {
      y_[k] = loop.D(0) * amplitude;
      u_[k] = loop.D(1) * amplitude;
    }
  }
  // Sample times: k·h₁ on the fine segment, T₁ + (k − F)·h₂ after it (F = fine intervals).
  const int last_fine = grid_.coarse_intervals > 0 ? grid_.fine_intervals : K - 1;
  const double t_switch = last_fine * grid_.step_s;
  auto t = [&](int k) { return k <= last_fine ? k * grid_.step_s : t_switch + (k - last_fine) * grid_.coarse_step_s; };
  const double* y = y_.data();
  const double* u = u_.data();
  if (!std::isfinite(y[K - 1]) || !std::isfinite(u[K - 1])) return StepStatus::numerical_failure;
  auto dy = [&](int k) { return slope(1, k); };  // exact y'(t_k)
  auto du = [&](int k) { return slope(3, k); };  // exact u'(t_k)

  const double inv = 1.0 / y_inf;
  const auto [y_hi, y_lo, u_hi, u_lo] =
      scan_samples(y, u, K, y_inf, inv, band_fraction,
                   ScanBits{below_bits_.data(), outside_bits_.data(), falling_bits_.data()});
  if (!std::isfinite(y_hi) || !std::isfinite(y_lo) || !std::isfinite(u_hi) || !std::isfinite(u_lo))
    return StepStatus::numerical_failure;
  // The lambdas below read these sums, not the bindings: clang before 16 cannot capture a
  // structured binding (C++20 P1091), and the sanitizer and fuzz builds use clang 14.
  const double y_scale = std::abs(y_hi) + std::abs(y_lo), u_scale = std::abs(u_hi) + std::abs(u_lo);
  const SampleBits bits(ScanBits{below_bits_.data(), outside_bits_.data(), falling_bits_.data()}, K);
  auto first_equal = [&](const double* f, double v) {
    int k = 0;
    while (f[k] != v) ++k;
    return k;
  };
  // Extremes of y/y∞ are extremes of y (y∞ > 0) or swapped (y∞ < 0).
  const int k_max = first_equal(y, y_inf > 0.0 ? y_hi : y_lo);
  const int k_min = first_equal(y, y_inf > 0.0 ? y_lo : y_hi);
  const int k_effort = first_equal(u, std::abs(u_hi) >= std::abs(u_lo) ? u_hi : u_lo);
  // Thresholds from the front (each scan stops early), band entry and exit from the bit masks.
  int k10 = -1, k90 = -1;
  for (int k = 0; k < K; ++k)
    if (y[k] * inv >= 0.1) { k10 = k; break; }
  for (int k = std::max(k10, 0); k10 >= 0 && k < K; ++k)
    if (y[k] * inv >= 0.9) { k90 = k; break; }
  // First entry into the band: the first sample inside it, or the first interval that jumps
  // across it (a fast rise can pass from below the band to above it between two samples: e
  // changes sign there).
  int k_entry = std::min(bits.first_inside(), bits.next_sign_change(1));
  if (k_entry >= K) k_entry = -1;
  const int k_outside = bits.last_outside();

  // x'(t_k) = A·x(t_k) + B·r from the state stored at sample k, in x_next_ (solve_ is scratch).
  const OutputCoordinates oc = n >= 1 && n <= 8 ? output_coordinates(outputs_) : OutputCoordinates{};
  auto state_rate = [&](int k) -> double* {
    std::ptrdiff_t stride = 1;
    const double* z = stored_state(k, stride);
    double* v = x_next_.data();
    double* w = solve_.data();
    for (int i = 0; i < n; ++i) w[i] = z[i * stride];
    if (oc.active) {  // back from z = T·x (see output_coordinates) to the loop's x
      double zp = w[oc.p];
      for (int i = 0; i < n; ++i)
        if (i != oc.p) zp -= outputs_(0, i) * w[i];
      w[oc.p] = zp / outputs_(0, oc.p);
    }
    // Plain loops (a few dozen products; Eigen's dynamic matrix-vector product costs more in its
    // call than in its arithmetic at this size).
    const double* a = loop.A.data();  // column-major
    for (int r = 0; r < n; ++r) {
      double acc = amplitude * loop.B(r);
      for (int col = 0; col < n; ++col) acc += a[col * n + r] * w[col];
      v[r] = acc;
    }
    return v;
  };
  // y', …, y⁽⁵⁾ at sample k: y⁽ⁱ⁺¹⁾ = C_y·Aⁱ·x'(t_k) (the step input is constant).
  auto y_derivatives = [&](int k, double (&d)[5]) {
    for (double& v : d) v = 0.0;
    if (n == 0) return;
    double* v = state_rate(k);
    double* w = solve_.data();
    const double* a = loop.A.data();
    for (int i = 0; i < 5; ++i) {
      double ci = 0.0;
      for (int col = 0; col < n; ++col) ci += loop.C(0, col) * v[col];
      d[i] = ci;
      for (int r = 0; r < n; ++r) {
        double acc = 0.0;
        for (int col = 0; col < n; ++col) acc += a[col * n + r] * v[col];
        w[r] = acc;
      }
      std::swap(v, w);
    }
  };
  // f = e² = (y − y∞)²: its third and fifth derivatives at sample k (Leibniz).
  auto square_error_odd_derivatives = [&](int k) {
    double d[5];
    y_derivatives(k, d);
    const double e = y[k] - y_inf;
    const double f3 = 2.0 * e * d[2] + 6.0 * d[0] * d[1];
    const double f5 = 2.0 * e * d[4] + 10.0 * d[0] * d[3] + 20.0 * d[1] * d[2];
    return std::pair{f3, f5};
  };

  // Integrals of e = y∞ − y, per uniform segment: the trapezoid rule with the Hermite end
  // correction h²/12·(f'(a) − f'(b)) (exact for cubics). ISE, whose integrand is smooth, also
  // takes the Euler–Maclaurin h⁴ and h⁶ terms, +h⁴/720·(f‴(b) − f‴(a)) and
  // −h⁶/30240·(f⁽⁵⁾(b) − f⁽⁵⁾(a)), from exact derivatives at the segment's ends (they telescope
  // like the h² term): on this grid (h·|p| ≤ 0.5, the integrand ringing at 2|p|) the h² rule
  // alone errs by about (2h|p|)⁴/720 ≈ 1.4e-3 relative, with them by about (2h|p|)⁸/1.2e6. Only
  // on a segment whose step resolves every pole (h·|p| ≤ 1): on the coarse segment of a stiff loop
  // a decayed fast mode still reaches the end derivatives as p⁵·(its tiny amplitude), and with
  // h·|p| far beyond 2π the series diverges there. The corrections of neighbouring intervals
  // cancel, so only the ends of each run of constant sign need the slope; an interval where e
  // changes sign is split at its linear zero. The plain sums vectorize; the few sign-change
  // intervals are patched afterwards.
  double fastest_pole = 0.0;
  for (const Complex& p : poles_) fastest_pole = std::max(fastest_pole, std::abs(p));
  double iae = 0.0, ise = 0.0, itae = 0.0;
  auto integrate_segment = [&](int first, int last, double h) {
    if (last <= first) return;
    const double c = h * h / 12.0;
    auto e = [&](int k) { return y_inf - y[k]; };
    auto de = [&](int k) { return -dy(k); };
    const auto [sum_e2, sum_abs, sum_tabs] = segment_sums(y, first, last, y_inf, t(first), h);
    auto ends = [&](double f_first, double f_last) { return 0.5 * (f_first + f_last); };
    const double e_a = e(first), e_b = e(last);
    ise += h * (sum_e2 - ends(e_a * e_a, e_b * e_b)) + c * (2.0 * e_a * de(first) - 2.0 * e_b * de(last));
    if (h * fastest_pole <= 1.0) {  // the series is asymptotic only where h resolves every mode
      const auto [f3_a, f5_a] = square_error_odd_derivatives(first);
      const auto [f3_b, f5_b] = square_error_odd_derivatives(last);
      const double h4 = h * h * h * h;
      ise += h4 / 720.0 * (f3_b - f3_a) - h4 * h * h / 30240.0 * (f5_b - f5_a);
    }
    iae += h * (sum_abs - ends(std::abs(e_a), std::abs(e_b)));
    itae += h * (sum_tabs - ends(t(first) * std::abs(e_a), t(last) * std::abs(e_b)));
    auto close_run = [&](int a, int b) {  // samples a..b share the sign of e(a)
      if (b <= a) return;
      const double sgn = e(a) >= 0.0 ? 1.0 : -1.0;
      iae += sgn * c * (de(a) - de(b));
      itae += sgn * c * ((e(a) + t(a) * de(a)) - (e(b) + t(b) * de(b)));
    };
    int run = first;
    for (int k1 = bits.next_sign_change(first + 1); k1 <= last; k1 = bits.next_sign_change(k1 + 1)) {
      const int k = k1 - 1;  // e changes sign in (t_k, t_k+1)
      const double e0 = e(k), e1 = e(k + 1), split = e0 / (e0 - e1);
      // Replace this interval's trapezoid by the two triangles either side of the zero.
      iae += 0.5 * h * (std::abs(e0) * split + std::abs(e1) * (1.0 - split) - (std::abs(e0) + std::abs(e1)));
      itae += 0.5 * h * (t(k) * std::abs(e0) * split + t(k + 1) * std::abs(e1) * (1.0 - split) -
                         (t(k) * std::abs(e0) + t(k + 1) * std::abs(e1)));
      close_run(run, k);
      run = k + 1;
    }
    close_run(run, last);
  };
  const int fine_last = grid_.coarse_intervals > 0 ? grid_.fine_intervals : K - 1;
  integrate_segment(0, fine_last, grid_.step_s);
  if (grid_.coarse_intervals > 0) integrate_segment(fine_last, K - 1, grid_.coarse_step_s);
  m.iae = iae;
  m.ise = ise;
  m.itae = itae;

  auto interval_y = [&](int k) { return Hermite{y[k], y[k + 1], dy(k), dy(k + 1), t(k + 1) - t(k)}; };
  auto interval_u = [&](int k) { return Hermite{u[k], u[k + 1], du(k), du(k + 1), t(k + 1) - t(k)}; };

  // The exact series of output row `row` (0: y, 1: u) on interval (j, j + 1) (ExactSeries),
  // expanded about the interval's end nearer to `s_near` from the state stored there, with terms
  // until they vanish at a distance `cover` (in intervals) from it; false when it does not
  // converge (then the Hermite value stands).
  auto exact_on = [&](int j, int row, double s_near, double cover, ExactSeries& e) -> bool {
    if (n == 0) return false;
    const int kb = s_near <= 0.5 ? j : j + 1;
    double* v = state_rate(kb);  // x'(t_b); then A^i·x'(t_b)
    double* w = solve_.data();
    const double* a = loop.A.data();  // column-major
    const double h = t(j + 1) - t(j);
    e.base = kb - j;
    e.fb = row == 0 ? y[kb] : u[kb];
    const double scale = row == 0 ? y_scale : u_scale;
    double power = h, reach_power = cover;  // h^{i+1}/(i+1)!, cover^{i+1}
    int negligible = 0;
    for (int i = 0; i < ExactSeries::kMaxTerms; ++i) {
      double ci = 0.0;
      for (int col = 0; col < n; ++col) ci += loop.C(row, col) * v[col];
      e.a[i] = ci * power;
      e.terms = i + 1;
      negligible = std::abs(e.a[i]) * reach_power <= 1e-17 * scale ? negligible + 1 : 0;
      if (negligible == 2) return true;
      for (int r = 0; r < n; ++r) {
        double acc = 0.0;
        for (int col = 0; col < n; ++col) acc += a[col * n + r] * v[col];
        w[r] = acc;
      }
      std::swap(v, w);
      power *= h / (i + 2);
      reach_power *= cover;
    }
    return false;
  };

  // An extremum found: its value, and where: interval (j, j + 1) at fraction s.
  struct Found {
    double v;
    int j;
    double s;
  };
  auto time_of = [&](const Found& f) { return t(f.j) + f.s * (t(f.j + 1) - t(f.j)); };
  auto at_sample = [&](const double* f, int k) { return k + 1 < K ? Found{f[k], k, 0.0} : Found{f[k], k - 1, 1.0}; };
  // The cubic Hermite's extremum over the intervals either side of sample k.
  auto refine_extremum = [&](const double* f, auto interval, int k, double sgn) {
    Found best = at_sample(f, k);
    for (int j : {k - 1, k}) {
      if (j < 0 || j + 1 >= K) continue;
      const auto [v, sp] = interval(j).extremum(sgn);
      if (sgn * v > sgn * best.v) best = {v, j, sp};
    }
    return best;
  };
  // The same extremum on the exact response: Newton on the exact slope from the Hermite's
  // location, the exact value there (never worse than the samples either side).
  auto polish = [&](Found f, int row, double sgn) {
    const double* samples = row == 0 ? y : u;
    // Only an extremum strictly between the samples and beyond both by more than rounding (a
    // response that starts flat has a Hermite "extremum" 1e-20 below its first sample) needs it.
    const double rounding = 1e-12 * (row == 0 ? y_scale : u_scale);
    const double beyond = sgn * f.v - std::max(sgn * samples[f.j], sgn * samples[f.j + 1]);
    if (!(f.s > 0.0 && f.s < 1.0) || !(beyond > rounding)) return f;
    ExactSeries e;
    if (!exact_on(f.j, row, f.s, 0.5, e)) return f;
    // One Newton step on the exact slope from the Hermite's location (off by O(h⁴)): the value
    // there is the exact maximum to rounding (its error is quadratic in the location's).
    const double c = e.curvature(f.s);
    double sp = c != 0.0 ? f.s - e.slope(f.s) / c : f.s;
    if (!(sp > 0.0 && sp < 1.0)) sp = f.s;
    Found best{e.value(sp), f.j, sp};
    for (int k : {f.j, f.j + 1})
      if (sgn * samples[k] > sgn * best.v) best = {samples[k], f.j, static_cast<double>(k - f.j)};
    return best;
  };

  const double sign = y_inf > 0.0 ? 1.0 : -1.0;  // extremes of y/y∞ are extremes of sign·y
  const bool f_follows_y = y_inf > 0.0;
  auto fn = [&](int k) { return y[k] * inv - 1.0; };  // f = y/y∞ − 1 at a sample
  // Between samples, f can pass a sample extremum by about h²|f''|/8, and the three samples
  // around it give h²|f''| as their second difference; an extremum whose samples are farther
  // than half that second difference (four times the excess) from what it must beat cannot
  // beat it, so only the others are refined.
  auto reach = [&](int k) { return 0.5 * std::abs(2.0 * fn(k) - fn(k - 1) - fn(k + 1)); };
  // The peak: the sample maximum refined, then every other sample maximum of f beyond y∞ that
  // could beat it between samples (two nearly equal peaks of a lightly damped loop); the winner
  // on the exact response.
  Found peak = refine_extremum(y, interval_y, k_max, sign);
  for (int w = 0; w < bits.words(); ++w)
    for (std::uint64_t c = bits.turns(w, f_follows_y, true) & bits.beyond(w, f_follows_y); c; c &= c - 1) {
      const int k = 64 * w + std::countr_zero(c);
      if (k == k_max || fn(k) + reach(k) < peak.v * inv - 1.0) continue;
      const Found f = refine_extremum(y, interval_y, k, sign);
      if (sign * f.v > sign * peak.v) peak = f;
    }
  peak = polish(peak, 0, sign);
  const double peak_n = peak.v * inv;
  if (peak_n > 1.0 + 1e-9) {
    m.overshoot_pct = (peak_n - 1.0) * 100.0;
    // The peak time: the latest hump within kPeakTieFraction of the highest (two humps of nearly
    // equal height are one knife edge apart; the later one is the conservative reading), then
    // the highest hump after it (StepMetrics::next_peak_*, what the search's margin reads).
    const Found top = peak;
    for (int w = std::max(0, top.j) / 64; w < bits.words(); ++w)
      for (std::uint64_t c = bits.turns(w, f_follows_y, true) & bits.beyond(w, f_follows_y); c; c &= c - 1) {
        const int k = 64 * w + std::countr_zero(c);
        if (k <= peak.j + 1 || fn(k) + reach(k) < peak_n - 1.0 - kPeakTieFraction) continue;
        const Found f = polish(refine_extremum(y, interval_y, k, sign), 0, sign);
        if (f.v * inv >= peak_n - kPeakTieFraction && time_of(f) > time_of(peak)) peak = f;
      }
    m.peak_time_s = time_of(peak);
    std::optional<Found> next;
    for (int w = std::max(0, peak.j) / 64; w < bits.words(); ++w)
      for (std::uint64_t c = bits.turns(w, f_follows_y, true) & bits.beyond(w, f_follows_y); c; c &= c - 1) {
        const int k = 64 * w + std::countr_zero(c);
        if (k <= peak.j + 1 || (next && fn(k) + reach(k) < next->v * inv - 1.0)) continue;
        const Found f = refine_extremum(y, interval_y, k, sign);
        if (time_of(f) > *m.peak_time_s && (!next || sign * f.v > sign * next->v)) next = f;
      }
    if (next) {
      m.next_peak_time_s = time_of(*next);
      m.next_peak_gap_pct = std::max(0.0, (peak_n - next->v * inv) * 100.0);
    }
    // The deepest fall below y∞ after the peak: sample minima of f below y∞, refined likewise.
    Found dip{y_inf, -1, 0.0};
    for (int w = std::max(0, peak.j) / 64; w < bits.words(); ++w)
      for (std::uint64_t c = bits.turns(w, f_follows_y, false) & ~bits.beyond(w, f_follows_y); c; c &= c - 1) {
        const int k = 64 * w + std::countr_zero(c);
        if (k <= peak.j || fn(k) - reach(k) > dip.v * inv - 1.0) continue;
        const Found f = refine_extremum(y, interval_y, k, -sign);
        if (-sign * f.v > -sign * dip.v && time_of(f) > *m.peak_time_s) dip = f;
      }
    if (dip.j >= 0) {
      // The dip decides whether the peak counts (design.hpp, effective_peak_time): on the exact
      // response when it comes within 1 % of the overshoot, else the Hermite's value stands.
      const double hermite = -(dip.v * inv - 1.0) * 100.0;
      const bool close = std::abs(hermite - m.overshoot_pct) <= 0.01 * m.overshoot_pct;
      m.post_peak_dip_pct = std::max(0.0, close ? -(polish(dip, 0, -sign).v * inv - 1.0) * 100.0 : hermite);
    }
  }
  // Undershoot only where the response really goes the wrong way: a sample beyond zero, or an
  // exact initial slope pointing away from y∞. Otherwise it is exactly 0: between samples that
  // never cross zero, the cubic interpolant of a response starting flat (y = y' = 0 at t = 0)
  // can dip by rounding-sized amounts that are not in the response.
  m.undershoot_pct = 0.0;
  if (y[k_min] * inv < 0.0 || (y[0] * inv <= 0.0 && dy(0) * inv < 0.0)) {
    const Found low = polish(refine_extremum(y, interval_y, k_min, -sign), 0, -sign);
    m.undershoot_pct = std::max(0.0, -low.v * inv) * 100.0;
  }

  const double u_sign = u[k_effort] >= 0.0 ? 1.0 : -1.0;
  m.effort_peak = std::abs(polish(refine_extremum(u, interval_u, k_effort, u_sign), 1, u_sign).v);

  auto crossing_time = [&](int k_after, double level_n) {
    // First sample at/above the level is k_after; the crossing is in (k_after − 1, k_after).
    if (k_after <= 0) return 0.0;
    const double s = interval_y(k_after - 1).crossing(level_n * y_inf);
    return t(k_after - 1) + s * (t(k_after) - t(k_after - 1));
  };
  if (k10 >= 0 && k90 >= 0) m.rise_time_s = crossing_time(k90, 0.9) - crossing_time(k10, 0.1);
  if (k_entry == 0) {
    m.band_entry_time_s = 0.0;
  } else if (k_entry > 0) {
    const double side = (y[k_entry - 1] * inv > 1.0) ? 1.0 : -1.0;
    const double s = interval_y(k_entry - 1).crossing((1.0 + side * band_fraction) * y_inf);
    m.band_entry_time_s = t(k_entry - 1) + s * (t(k_entry) - t(k_entry - 1));
  }

  // Settling: the last time y is outside the band. After the last sample outside it, y can still
  // leave the band between two samples inside it (a slow hump peaking just beyond the edge): that
  // needs an extremum of f between those samples, next to a sample extremum of f (the grid
  // resolves every mode, h·|p| ≤ 1/2, so an extremum between samples shows as a turn of the
  // samples) beyond band/2 whose samples could reach the edge; only those intervals are examined,
  // from the last one back.
  const double band_lo = y_inf > 0.0 ? (1.0 - band_fraction) * y_inf : (1.0 + band_fraction) * y_inf;
  const double band_hi = y_inf > 0.0 ? (1.0 + band_fraction) * y_inf : (1.0 - band_fraction) * y_inf;
  // The last time in interval j outside the band, or −1. Where the interpolant's extremum comes
  // within 1 % of the band's half-width of an edge, the exact response decides (its stationary
  // points by Newton from the Hermite's).
  auto exit_in = [&](int j) {
    const Hermite hm = interval_y(j);
    double st[2];
    const int ns = hm.stationary(st);
    double closest = std::numeric_limits<double>::infinity();
    for (int i = 0; i < ns; ++i) {
      const double v = hm.value(st[i]);
      closest = std::min({closest, std::abs(v - band_hi), std::abs(v - band_lo)});
    }
    double sp = -1.0;
    ExactSeries e;
    if (closest < 0.01 * band_fraction * std::abs(y_inf) && exact_on(j, 0, 0.0, 1.0, e)) {
      double se[2];
      for (int i = 0; i < ns; ++i) se[i] = e.stationary_near(st[i]);
      if (ns == 2 && se[0] > se[1]) std::swap(se[0], se[1]);
      sp = last_outside_of(e, se, ns, y[j], y[j + 1], band_lo, band_hi);
    } else {
      sp = hm.last_outside(band_lo, band_hi);
    }
    return sp < 0.0 ? -1.0 : t(j) + sp * (t(j + 1) - t(j));
  };
  double last_exit = -1.0;
  if (k_outside + 1 < K) {
    for (int w = bits.words() - 1; w >= 0 && last_exit < 0.0 && 64 * w + 63 > k_outside; --w) {
      const std::uint64_t cand = (bits.turns(w, f_follows_y, true) & bits.beyond(w, f_follows_y)) |
                                 (bits.turns(w, f_follows_y, false) & ~bits.beyond(w, f_follows_y));
      for (std::uint64_t c = cand; c && last_exit < 0.0; c &= ~(std::uint64_t{1} << (63 - std::countl_zero(c)))) {
        const int k = 64 * w + 63 - std::countl_zero(c);
        if (k <= k_outside) break;
        const double dev = std::abs(fn(k));
        if (dev <= 0.5 * band_fraction || dev + reach(k) <= band_fraction) continue;
        for (int j : {k, k - 1})
          if (j > k_outside && last_exit < 0.0) last_exit = exit_in(j);
      }
    }
    if (last_exit < 0.0 && k_outside >= 0) last_exit = exit_in(k_outside);
    m.settling_time_s = std::max(0.0, last_exit);
  }

  if (!std::isfinite(m.overshoot_pct) || !std::isfinite(m.effort_peak) || !std::isfinite(m.itae))
    return StepStatus::numerical_failure;

  if (trace) {
    trace->output.assign(y, y + K);
    trace->effort.assign(u, u + K);
    trace->time_s.resize(static_cast<std::size_t>(K));
    for (int k = 0; k < K; ++k) trace->time_s[static_cast<std::size_t>(k)] = t(k);
  }
  return StepStatus::ok;
}

namespace detail {
void use_portable_kernels(bool portable) {
#if defined(SPECLOOP_AVX_KERNELS)
  g_portable_kernels.store(portable, std::memory_order_relaxed);
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
}  // namespace detail

}  // namespace specloop
