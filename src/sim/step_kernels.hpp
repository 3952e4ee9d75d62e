// The exact step simulation's kernels (private to the sim layer; step_kernels.cpp): the matrix
// exponential for Φ and Γ, the recurrence that writes the samples, the scan that finds the
// samples' extremes and bit masks, the integral sums; and the layout in which the recurrence
// stores the states (StoredStates). The vector kernels have AVX variants chosen at run time that
// give the same bits (DEVELOPERS.md, "Recurrence").
#pragma once

#include <Eigen/Dense>

#include <cmath>
#include <cstddef>
#include <bit>
#include <cstdint>
#include <limits>
#include <type_traits>

#include "specloop/sim/response.hpp"

namespace specloop::exact_step {

// ---- Matrix exponential -------------------------------------------------------------------

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

// ---- Recurrence ---------------------------------------------------------------------------

// Interleaved recurrence chains; the stored states come in blocks of this many samples.
constexpr int kChains = 4;

// Output coordinates for the fixed-size kernels: z = T·x with z_p = c_y·x (p the index of the
// largest |c_y,j|) and z_j = x_j otherwise, so y = z_p + D_y·r costs no product per sample. T⁻¹
// only rescales coordinate p and subtracts multiples of the others (|c_y,j/c_y,p| ≤ 1), so the
// change is well conditioned. With c_y = 0 (a constant output) T = I and y is its constant.
struct OutputCoordinates {
  int p = 0;
  bool active = false;
};
inline OutputCoordinates output_coordinates(const Eigen::MatrixXd& outputs) {
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

// KernelLayout (what the recurrence need not write, because y gives it) is declared in
// response.hpp, where StepSimulator holds one.
/// The layout for a loop with output rows `outputs` and constants `out_const` (1 ≤ n ≤ 8).
KernelLayout kernel_layout(const Eigen::MatrixXd& outputs, const Eigen::VectorXd& out_const);

/// The recurrence for 1 ≤ n ≤ 8 states (the fixed-size kernels, step_kernels.cpp): writes samples
/// [0, count) of y and (unless layout.effort_from_y) u and the states themselves (all but z_p
/// when layout.output_from_y), in output coordinates z = T·x, starting from x_io, which is left
/// at the state after the last sample (ready for the next segment). `outputs` are the rows
/// [C_y; C_y·A; C_u; C_u·A], `out_const` their constants. False (nothing done) for other n.
bool recur_fixed_size(int n, const Eigen::MatrixXd& phi, const Eigen::VectorXd& gamma, const Eigen::MatrixXd& outputs,
                      const Eigen::VectorXd& out_const, const KernelLayout& layout, Eigen::VectorXd& x_io, int count,
                      double* y, double* u, double* states);

/// Where the recurrence left the state of each sample: above 8 states x per sample, one after
/// the other; up to 8 (the fixed-size kernels) z = T·x in blocks of kChains samples,
/// component-major, each segment of the grid starting on a whole block, without the component
/// that y gives (from_y, when the layout says so).
struct StoredStates {
  const double* data;
  int n;               // states
  int fine_intervals;  // the grid's segments (TimeGrid)
  int coarse_intervals;
  const double* y = nullptr;  // the output samples, for component from_y
  int from_y = -1;            // the component not stored, z_p = y (−1: all stored)
  /// The rows stored per sample, and the distance between a sample's rows.
  int rows() const { return from_y >= 0 ? n - 1 : n; }
  std::ptrdiff_t stride() const { return n > 8 ? 1 : kChains; }
  /// Sample k's first stored row; row r at [r·stride()] holds component r, or r + 1 from from_y on.
  const double* stored(int k) const {
    if (n > 8) return data + static_cast<std::ptrdiff_t>(k) * n;
    int local = k, base = 0;  // blocks of kChains samples, component-major, per segment (see recur)
    if (coarse_intervals > 0 && k >= fine_intervals) {
      local = k - fine_intervals;
      base = (fine_intervals + kChains - 1) / kChains * kChains;
    }
    return data + static_cast<std::ptrdiff_t>(base + local / kChains * kChains) * rows() + local % kChains;
  }
  /// The state of sample k, n components: the store itself above 8 states, else assembled in
  /// `buffer` (8 entries).
  const double* state(int k, double* buffer) const {
    const double* x = stored(k);
    if (n > 8) return x;
    const std::ptrdiff_t step = kChains;
    if (from_y < 0) {
      for (int i = 0; i < n; ++i) buffer[i] = x[i * step];
      return buffer;
    }
    for (int i = 0; i < from_y; ++i) buffer[i] = x[i * step];
    buffer[from_y] = y[k];
    for (int i = from_y + 1; i < n; ++i) buffer[i] = x[(i - 1) * step];
    return buffer;
  }
};

// ---- Sample scan and sums -----------------------------------------------------------------

// One pass over the samples: the extremes of y and u (u = nullptr: u is not read, and its
// extremes are left to the caller), the integral sums of each word (ScanBits::sums; four partial
// sums each, samples j ≡ 0 … 3 mod 4, added as (0 + 1) + (2 + 3): one four-lane vector (AVX)
// or two two-lane vectors (SSE2) add the same numbers in the same order), and three bit masks (64 samples a word, bit
// j of word w is sample 64w + j): `below`, e = y∞ − y < 0 (the sign bit of e); `outside`,
// |y/y∞ − 1| > band; `falling`, y[k+1] < y[k] (the caller keeps y[count] readable; bit count − 1
// is meaningless). Sign changes of e, band exits and the samples where y turns (sample extrema)
// are then found a word at a time.
struct SampleExtremes {
  double y_hi, y_lo, u_hi, u_lo;
};
struct ScanBits {
  std::uint64_t *below, *outside, *falling;
  double* sums;  // per word, of e = y∞ − y: Σe², Σ|e|, Σ j·|e| (j = 0 … 63 within the word)
};
SampleExtremes scan_samples(const double* y, const double* u, int count, double y_inf, double inv, double band,
                            const ScanBits& bits);

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

// Σe², Σ|e| and Σt·|e| over samples first..last of one uniform segment (t = t_first + (k − first)·h),
// e = y∞ − y: the scan's word sums for the words inside the segment, sample by sample at its
// ends.
struct SegmentSums {
  double squares, absolute, time_absolute;
};
SegmentSums segment_sums(const ScanBits& bits, const double* y, int first, int last, double y_inf, double t_first,
                         double h);

}  // namespace specloop::exact_step
