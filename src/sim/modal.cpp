// Modal coordinates of a closed loop (modal.hpp): eigenvectors by inverse iteration, the real
// block basis, its conditioning, and the closed-form step of the block-diagonal system.
#include "sim/modal.hpp"

#include <algorithm>
#include <atomic>
#include <cmath>
#include <limits>
#include <type_traits>

#include "sim/step_kernels.hpp"
#include "sim/vector_pack.hpp"

namespace specloop::exact_step {

namespace {

std::atomic<bool> g_modal_enabled{true};
constexpr int kCap = kModalCapacity;
constexpr double kEps = std::numeric_limits<double>::epsilon();

// A complex number with plain arithmetic (std::complex's division goes through a library call
// that handles infinities and NaNs, several times slower, and its abs through hypot).
struct Cx {
  double re = 0.0, im = 0.0;
};
inline Cx operator-(Cx a, Cx b) { return {a.re - b.re, a.im - b.im}; }
inline Cx operator*(Cx a, Cx b) { return {a.re * b.re - a.im * b.im, a.re * b.im + a.im * b.re}; }
inline Cx operator*(Cx a, double b) { return {a.re * b, a.im * b}; }
inline double size_of(Cx a) { return std::abs(a.re) + std::abs(a.im); }  // for pivoting and scaling
inline double size_of(double a) { return std::abs(a); }
inline double square_of(Cx a) { return a.re * a.re + a.im * a.im; }
inline double square_of(double a) { return a * a; }
inline Cx reciprocal(Cx a) {
  const double d = a.re * a.re + a.im * a.im;
  return {a.re / d, -a.im / d};
}
inline double reciprocal(double a) { return 1.0 / a; }
inline bool is_zero(Cx a) { return a.re == 0.0 && a.im == 0.0; }
inline bool is_zero(double a) { return a == 0.0; }

// An eigenvector of `a` for the eigenvalue `lambda` (T = double for a real one, Cx for a pair's
// upper member) by inverse iteration: LU of A − λI with partial pivoting (a zero pivot replaced by
// ε·‖A‖, the usual guard, since λ is an eigenvalue to rounding), two solves from a fixed start,
// each normalized. Unit 2-norm. False for a non-finite result.
template <class T>
T real_value(double x) {
  if constexpr (std::is_same_v<T, double>) {
    return x;
  } else {
    return Cx{x, 0.0};
  }
}

template <int n, class T>
bool eigenvector(const double (&a)[n][n], T lambda, double norm, T* v) {
  T lu[n][n];
  T inverse_pivot[n];
  int pivot[n];
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) lu[i][j] = i == j ? real_value<T>(a[i][j]) - lambda : real_value<T>(a[i][j]);
  for (int k = 0; k < n; ++k) {
    int p = k;
    for (int i = k + 1; i < n; ++i)
      if (size_of(lu[i][k]) > size_of(lu[p][k])) p = i;
    pivot[k] = p;
    if (p != k)
      for (int j = 0; j < n; ++j) std::swap(lu[k][j], lu[p][j]);
    if (is_zero(lu[k][k])) lu[k][k] = real_value<T>(kEps * norm);
    inverse_pivot[k] = reciprocal(lu[k][k]);
    for (int i = k + 1; i < n; ++i) {
      const T f = lu[i][k] * inverse_pivot[k];
      lu[i][k] = f;
      for (int j = k + 1; j < n; ++j) lu[i][j] = lu[i][j] - f * lu[k][j];
    }
  }
  for (int i = 0; i < n; ++i) v[i] = real_value<T>(1.0 + 0.37 * i);
  for (int iteration = 0; iteration < 2; ++iteration) {
    for (int k = 0; k < n; ++k) std::swap(v[k], v[pivot[k]]);
    for (int i = 0; i < n; ++i)
      for (int j = 0; j < i; ++j) v[i] = v[i] - lu[i][j] * v[j];
    for (int i = n - 1; i >= 0; --i) {
      for (int j = i + 1; j < n; ++j) v[i] = v[i] - lu[i][j] * v[j];
      v[i] = v[i] * inverse_pivot[i];
    }
    double size = 0.0;
    for (int i = 0; i < n; ++i) size = std::max(size, size_of(v[i]));
    if (!(size > 0.0) || !std::isfinite(size)) return false;
    double squares = 0.0;
    for (int i = 0; i < n; ++i) squares += square_of(v[i] * (1.0 / size));
    const double scale = 1.0 / (size * std::sqrt(squares));
    for (int i = 0; i < n; ++i) v[i] = v[i] * scale;
  }
  return true;
}

// ‖M‖∞ of the leading n×n part.
double infinity_norm(const double (*m)[kCap], int n) {  // (n: at most kCap)
  double largest = 0.0;
  for (int i = 0; i < n; ++i) {
    double row = 0.0;
    for (int j = 0; j < n; ++j) row += std::abs(m[i][j]);
    largest = std::max(largest, row);
  }
  return largest;
}


// modal_basis for n states (every loop unrolled).
template <int n>
bool modal_basis_of(const Eigen::MatrixXd& a_in, const std::vector<Complex>& poles, double max_condition,
                    ModalBasis& out) {
  double a[n][n];
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) a[i][j] = a_in(i, j);
  // Complex pairs first (by their upper member), then the real eigenvalues two to a block.
  Complex pairs[n] = {};
  double reals[n] = {};
  int n_pairs = 0, n_reals = 0;
  for (const Complex& p : poles) {
    if (p.imag() > 0.0) {
      if (std::count(poles.begin(), poles.end(), std::conj(p)) != std::count(poles.begin(), poles.end(), p)) return false;
      pairs[n_pairs++] = p;
    } else if (p.imag() == 0.0) {
      reals[n_reals++] = p.real();
    }
  }
  if (2 * n_pairs + n_reals != n) return false;
  double norm = 0.0;
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) norm = std::max(norm, std::abs(a[i][j]));
  out.n = n;
  int column = 0, block = 0;
  for (int k = 0; k < n_pairs; ++k, ++block) {
    Cx v[n];
    if (!eigenvector<n, Cx>(a, Cx{pairs[k].real(), pairs[k].imag()}, norm, v)) return false;
    // The phase that makes Re v ⟂ Im v (vᵀv real and positive): the best-conditioned pair of
    // real columns spanning the pair's invariant plane.
    double vv_re = 0.0, vv_im = 0.0;
    for (int i = 0; i < n; ++i) {
      vv_re += v[i].re * v[i].re - v[i].im * v[i].im;
      vv_im += 2.0 * v[i].re * v[i].im;
    }
    const double angle = -0.5 * std::atan2(vv_im, vv_re);
    const Cx turn{std::cos(angle), std::sin(angle)};
    for (int i = 0; i < n; ++i) {
      const Cx c = v[i] * turn;
      out.v[i][column] = c.re;
      out.v[i][column + 1] = c.im;
    }
    // A·(p + jq) = (σ + jω)(p + jq): A·p = σp − ωq, A·q = ωp + σq, so w' = [[σ, ω], [−ω, σ]]·w.
    out.block[block] = {true, pairs[k].real(), pairs[k].imag()};
    column += 2;
  }
  for (int k = 0; k < n_reals; ++k) {
    double v[n];
    if (!eigenvector<n, double>(a, reals[k], norm, v)) return false;
    for (int i = 0; i < n; ++i) out.v[i][column] = v[i];
    if (k % 2 == 0) {
      out.block[block] = {false, reals[k], 0.0};
    } else {
      out.block[block].second = reals[k];
      ++block;
    }
    ++column;
  }
  // V⁻¹ by LU with partial pivoting, and the condition number.
  double lu[n][n];
  int pivot[n];
  for (int i = 0; i < n; ++i)
    for (int j = 0; j < n; ++j) lu[i][j] = out.v[i][j];
  for (int k = 0; k < n; ++k) {
    int p = k;
    for (int i = k + 1; i < n; ++i)
      if (std::abs(lu[i][k]) > std::abs(lu[p][k])) p = i;
    pivot[k] = p;
    if (p != k)
      for (int j = 0; j < n; ++j) std::swap(lu[k][j], lu[p][j]);
    if (lu[k][k] == 0.0) return false;
    for (int i = k + 1; i < n; ++i) {
      lu[i][k] /= lu[k][k];
      for (int j = k + 1; j < n; ++j) lu[i][j] -= lu[i][k] * lu[k][j];
    }
  }
  auto solve = [&](double* x) {  // x ← V⁻¹·x
    for (int k = 0; k < n; ++k) std::swap(x[k], x[pivot[k]]);
    for (int i = 0; i < n; ++i)
      for (int j = 0; j < i; ++j) x[i] -= lu[i][j] * x[j];
    for (int i = n - 1; i >= 0; --i) {
      for (int j = i + 1; j < n; ++j) x[i] -= lu[i][j] * x[j];
      x[i] /= lu[i][i];
    }
  };
  for (int j = 0; j < n; ++j) {
    double e[n] = {};
    e[j] = 1.0;
    solve(e);
    for (int i = 0; i < n; ++i) out.v_inv[i][j] = e[i];
  }
  out.condition = infinity_norm(out.v, n) * infinity_norm(out.v_inv, n);
  if (!(out.condition <= max_condition)) return false;
  // The decomposition itself, checked: ‖A·V − V·Λ‖ within rounding of ‖A‖ (a poor eigenvector
  // from a nearly repeated eigenvalue shows here even when V looks well conditioned).
  for (int j = 0; j < n; ++j) {
    const int blk = j / 2;
    const ModalBasis::Block& bl = out.block[blk];
    for (int i = 0; i < n; ++i) {
      double av = 0.0;
      for (int k = 0; k < n; ++k) av += a[i][k] * out.v[k][j];
      double vl = 0.0;  // (V·Λ)(i, j)
      if (bl.complex) {
        const int c0 = 2 * blk;
        vl = j == c0 ? bl.first * out.v[i][c0] - bl.second * out.v[i][c0 + 1]
                     : bl.second * out.v[i][c0] + bl.first * out.v[i][c0 + 1];
      } else {
        vl = (j % 2 == 0 ? bl.first : bl.second) * out.v[i][j];
      }
      if (!(std::abs(av - vl) <= 1e-10 * std::max(norm, 1e-300))) return false;
    }
  }
  return true;
}

}  // namespace

bool modal_kernels_enabled() { return g_modal_enabled.load(std::memory_order_relaxed); }

bool modal_basis(const Eigen::MatrixXd& a, const std::vector<Complex>& poles, double max_condition, ModalBasis& out) {
  const int n = static_cast<int>(a.rows());
  if (static_cast<int>(poles.size()) != n) return false;
  bool built = false;
  const bool sized = with_fixed_size(n, [&](auto size) {
    built = modal_basis_of<decltype(size)::value>(a, poles, max_condition, out);
  });
  return sized && built;
}

ModalStep modal_step(const ModalBasis& basis, double h) {
  ModalStep step{};
  for (int j = 0; j < basis.blocks(); ++j) {
    const ModalBasis::Block& bl = basis.block[j];
    if (bl.complex) {  // e^{Mh} = e^{σh}·[[cos ωh, sin ωh], [−sin ωh, cos ωh]]
      const double e = std::exp(bl.first * h), c = std::cos(bl.second * h), s = std::sin(bl.second * h);
      step.m[j][0][0] = e * c;
      step.m[j][0][1] = e * s;
      step.m[j][1][0] = -e * s;
      step.m[j][1][1] = e * c;
    } else {
      step.m[j][0][0] = std::exp(bl.first * h);
      if (2 * j + 1 < basis.n) step.m[j][1][1] = std::exp(bl.second * h);
    }
  }
  return step;
}

namespace {

// The modal recurrence (recur_modal in modal.hpp): the same chains, stored blocks and
// vector widths as recur_kernel, on w = V⁻¹·(x − x∞), where the step is block diagonal and
// homogeneous (modal.hpp): each 2×2 block of e^{ΛCh} costs 4 products and 2 sums per chain row
// pair, against rows of N of each in recur_kernel; y and u are y∞, u∞ plus rows of N products on
// w (no coordinate is y itself here).
template <int N, int L>
[[gnu::always_inline]] inline void modal_kernel(const ModalStep& one, const ModalStep& chain, const double* c_y,
                                               const double* c_u, double o_y, double o_u, bool write_u, double* w_io,
                                               int samples, double* y, double* u, double* states) {
  // o_y, o_u: the final values y∞, u∞ (w is the distance from the final state).
  using Pack = typename PackOf<L>::type;
  using Unaligned = typename PackOf<L>::unaligned;
  auto put = [](double* at, Pack v) __attribute__((always_inline)) { *reinterpret_cast<Unaligned*>(at) = v; };
  constexpr int C = kChains, P = kChains / L, B = N / 2;  // full 2×2 blocks; a 1×1 last when N is odd
  Pack m[(N + 1) / 2][2][2], cy[N], cu[N], z[N][P], oy, ou;
  for (int l = 0; l < L; ++l) {
    for (int j = 0; j < (N + 1) / 2; ++j)
      for (int r = 0; r < 2; ++r)
        for (int c = 0; c < 2; ++c) m[j][r][c][l] = chain.m[j][r][c];
    for (int i = 0; i < N; ++i) {
      cy[i][l] = c_y[i];
      cu[i][l] = c_u[i];
    }
    oy[l] = o_y;
    ou[l] = o_u;
  }
  // Chain c starts at sample c: c single steps from w_io.
  double start[N];
  for (int i = 0; i < N; ++i) start[i] = w_io[i];
  for (int c = 0; c < C; ++c) {
    for (int i = 0; i < N; ++i) z[i][c / L][c % L] = start[i];
    double next[N];
    for (int j = 0; j < (N + 1) / 2; ++j) {
      const int r = 2 * j;
      if (r + 1 < N) {
        next[r] = one.m[j][0][0] * start[r] + one.m[j][0][1] * start[r + 1];
        next[r + 1] = one.m[j][1][0] * start[r] + one.m[j][1][1] * start[r + 1];
      } else {
        next[r] = one.m[j][0][0] * start[r];
      }
    }
    for (int i = 0; i < N; ++i) start[i] = next[i];
  }
  // A row of N products on w, summed in two interleaved halves like recur_kernel's rows.
  auto row = [&](const Pack* c, const Pack& o, int p, double* at) __attribute__((always_inline)) {
    Pack even = o + c[0] * z[0][p];
    if constexpr (N > 1) {
      Pack odd = c[1] * z[1][p];
      for (int i = 2; i < N; ++i) {
        if (i % 2 == 0) even += c[i] * z[i][p];
        else odd += c[i] * z[i][p];
      }
      even += odd;
    }
    put(at, even);
  };
  int k = 0;
  for (;; k += C) {
    double* block = states + static_cast<std::ptrdiff_t>(k) * N;
    for (int i = 0; i < N; ++i)
      for (int p = 0; p < P; ++p) put(block + i * C + L * p, z[i][p]);
    if (k + C > samples) break;  // the last, partial block: stored whole, outputs below
    for (int p = 0; p < P; ++p) {
      row(cy, oy, p, y + k + L * p);
      if (write_u) row(cu, ou, p, u + k + L * p);
    }
    for (int p = 0; p < P; ++p) {
      for (int j = 0; j < B; ++j) {
        const Pack a = z[2 * j][p], b = z[2 * j + 1][p];
        z[2 * j][p] = m[j][0][0] * a + m[j][0][1] * b;
        z[2 * j + 1][p] = m[j][1][0] * a + m[j][1][1] * b;
      }
      if constexpr (N % 2 == 1) z[N - 1][p] = m[B][0][0] * z[N - 1][p];
    }
  }
  double chains[N][C];
  for (int i = 0; i < N; ++i)
    for (int p = 0; p < P; ++p) put(&chains[i][L * p], z[i][p]);
  const int rest = samples - k;  // 0 … C − 1 samples left: they sit in chains 0 .. rest − 1
  auto scalar_row = [&](const double* c, double o, int ch) {
    double even = o + c[0] * chains[0][ch];
    if (N == 1) return even;
    double odd = c[1] * chains[1][ch];
    for (int i = 2; i < N; ++i) {
      if (i % 2 == 0) even += c[i] * chains[i][ch];
      else odd += c[i] * chains[i][ch];
    }
    return even + odd;
  };
  for (int c = 0; c < rest; ++c) {
    y[k + c] = scalar_row(c_y, o_y, c);
    if (write_u) u[k + c] = scalar_row(c_u, o_u, c);
  }
  for (int i = 0; i < N; ++i) w_io[i] = chains[i][rest];
}

#if defined(SPECLOOP_AVX_KERNELS)
template <int N>
__attribute__((target("avx"), flatten)) void modal_avx(const ModalStep& one, const ModalStep& chain, const double* c_y,
                                                       const double* c_u, double o_y, double o_u, bool write_u,
                                                       double* w_io, int samples, double* y, double* u,
                                                       double* states) {
  modal_kernel<N, 4>(one, chain, c_y, c_u, o_y, o_u, write_u, w_io, samples, y, u, states);
}
#endif

template <int N>
[[gnu::flatten]] void modal_portable(const ModalStep& one, const ModalStep& chain, const double* c_y,
                                     const double* c_u, double o_y, double o_u, bool write_u, double* w_io,
                                     int samples, double* y, double* u, double* states) {
  modal_kernel<N, 2>(one, chain, c_y, c_u, o_y, o_u, write_u, w_io, samples, y, u, states);
}

template <int N>
void modal_fixed(const ModalStep& one, const ModalStep& chain, const double* c_y, const double* c_u, double o_y,
                 double o_u, bool write_u, double* w_io, int samples, double* y, double* u, double* states) {
#if defined(SPECLOOP_AVX_KERNELS)
  if (has_avx()) return modal_avx<N>(one, chain, c_y, c_u, o_y, o_u, write_u, w_io, samples, y, u, states);
#endif
  modal_portable<N>(one, chain, c_y, c_u, o_y, o_u, write_u, w_io, samples, y, u, states);
}

}  // namespace

void recur_modal(int n, const ModalStep& one, const ModalStep& chain, const double* c_y, const double* c_u,
                 double y_inf, double u_inf, bool write_u, double* w_io, int count, double* y, double* u,
                 double* states) {
  with_fixed_size(n, [&](auto size) {
    modal_fixed<decltype(size)::value>(one, chain, c_y, c_u, y_inf, u_inf, write_u, w_io, count, y, u, states);
  });
}

}  // namespace specloop::exact_step

namespace specloop::detail {
void use_modal_kernels(bool modal) { exact_step::g_modal_enabled.store(modal, std::memory_order_relaxed); }
}  // namespace specloop::detail
