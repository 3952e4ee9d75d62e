// The modal coordinates of a closed loop (private to the sim layer; modal.cpp): x = V·w with V
// real and w' = Λ·w + V⁻¹·B·r, Λ block diagonal — a 2×2 block [[σ, ω], [−ω, σ]] per complex pair
// σ ± jω, two real eigenvalues to a block [[λ₁, 0], [0, λ₂]], a last 1×1 block when n is odd.
// In these coordinates the step over h is block diagonal and known in closed form (exp, cos, sin),
// so the recurrence costs 4 products and 4 sums per block and sample instead of n² of each, and
// no matrix exponential is needed. Used only when V is well conditioned (modal_basis); otherwise
// the simulator keeps its dense kernel in output coordinates.
#pragma once

#include <Eigen/Dense>
#include <vector>

#include "specloop/core/polynomial.hpp"
#include "specloop/sim/response.hpp"

namespace specloop::exact_step {

/// Largest loop the modal kernels take (the fixed-size kernels' range).
inline constexpr int kModalCapacity = 8;

// ModalBasis (V, V⁻¹·B, the blocks) is declared in response.hpp, where StepSimulator holds one.
static_assert(kModalCapacity == 8, "ModalBasis (response.hpp) is sized for 8 states");

/// Builds the basis of the state matrix `a` (n ≤ kModalCapacity) with input `b` from its
/// eigenvalues `poles` (each complex pair listed with both members): eigenvectors by inverse
/// iteration (two solves with the LU factors of A − λI), columns scaled to unit length. False —
/// use the dense kernel — when n is out of range, a pair is not an exact conjugate pair, the loop
/// is graded (‖A‖∞ more than 100 times its slowest pole's magnitude: a stiff loop's slow modes),
/// V's condition number exceeds `max_condition` (the recurrence's rounding is then multiplied by
/// up to that much: repeated or nearly repeated poles, a nearly defective loop), or A·V − V·Λ is
/// not within 1e-10·max|a_ij|.
bool modal_basis(const Eigen::MatrixXd& a, const Eigen::VectorXd& b, const std::vector<Complex>& poles,
                 double max_condition, ModalBasis& out);

/// The discrete step of the modal system over h for an input held at `amplitude`: w ← M·w + g,
/// M block diagonal (entries m[j][row][col] of block j; a 1×1 last block in m[j][0][0]), g the
/// exact zero-order-hold input term, both from closed forms (expm1 and half-angle sines where a
/// difference from 1 would cancel).
struct ModalStep {
  double m[(kModalCapacity + 1) / 2][2][2];
  double g[kModalCapacity];
};
ModalStep modal_step(const ModalBasis& basis, double h, double amplitude);

/// False while a test has switched the modal kernels off (detail::use_modal_kernels).
bool modal_kernels_enabled();

/// The modal recurrence (modal.hpp) for 1 ≤ n ≤ 8: w ← chain.m·w + chain.g per kChains samples
/// (`one`, the single step, starts the chains from w_io), y = c_y·w + o_y and, when `write_u`,
/// u = c_u·w + o_u; every component of w stored, in the layout of recur_fixed_size (step_kernels.hpp). w_io is left
/// at the state after the last sample.
void recur_modal(int n, const ModalStep& one, const ModalStep& chain, const double* c_y, const double* c_u, double o_y,
                 double o_u, bool write_u, double* w_io, int count, double* y, double* u, double* states);

}  // namespace specloop::exact_step
