// The modal coordinates of a closed loop (private to the sim layer; modal.cpp): the step response
// as its distance from the final state, x − x∞ = V·w with V real and w' = Λ·w (homogeneous: the
// step input only sets w(0) = −V⁻¹·x∞), Λ block diagonal — a 2×2 block [[σ, ω], [−ω, σ]] per
// complex pair σ ± jω, two real eigenvalues to a block [[λ₁, 0], [0, λ₂]], a last 1×1 block when n
// is odd. In these coordinates the step over h is block diagonal and known in closed form (exp,
// cos, sin), so the recurrence costs 4 products and 2 sums per block and sample instead of n²
// of each, no matrix exponential is needed, and y = y∞ + C·V·w settles on the final value exactly
// (with x itself, a steady-state offset of the eigenvectors' rounding, up to 3e-10 of y on a
// lightly damped slow loop, stayed to the end). Used only when V is well conditioned
// (modal_basis); otherwise the simulator keeps its dense kernel in output coordinates.
#pragma once

#include <Eigen/Dense>
#include <vector>

#include "specloop/core/polynomial.hpp"
#include "specloop/sim/response.hpp"

namespace specloop::exact_step {

/// Largest loop the modal kernels take (the fixed-size kernels' range).
inline constexpr int kModalCapacity = 8;

// ModalBasis (V, V⁻¹, the blocks) is declared in response.hpp, where StepSimulator holds one.
static_assert(kModalCapacity == 8, "ModalBasis (response.hpp) is sized for 8 states");

/// Builds the basis of the state matrix `a` (n ≤ kModalCapacity) from its eigenvalues `poles`
/// (each complex pair listed with both members): eigenvectors by inverse
/// iteration (two solves with the LU factors of A − λI), columns scaled to unit length. False —
/// use the dense kernel — when n is out of range, a pair is not an exact conjugate pair, V's
/// condition number exceeds `max_condition` (the recurrence's rounding is then multiplied by up to
/// that much: repeated or nearly repeated poles, a nearly defective loop), or A·V − V·Λ is not
/// within 1e-10·max|a_ij|.
bool modal_basis(const Eigen::MatrixXd& a, const std::vector<Complex>& poles, double max_condition, ModalBasis& out);

/// The discrete step of the modal system over h: w ← M·w, M = e^{Λh} block diagonal (entries
/// m[j][row][col] of block j; a 1×1 last block in m[j][0][0]), in closed form.
struct ModalStep {
  double m[(kModalCapacity + 1) / 2][2][2];
};
ModalStep modal_step(const ModalBasis& basis, double h);

/// False while a test has switched the modal kernels off (detail::use_modal_kernels).
bool modal_kernels_enabled();

/// The modal recurrence for 1 ≤ n ≤ 8: w ← chain.m·w per kChains samples (`one`, the single
/// step, starts the chains from w_io), y = y_inf + c_y·w and, when `write_u`, u = u_inf + c_u·w;
/// every component of w stored, in the layout of recur_fixed_size (step_kernels.hpp). w_io is
/// left at the state after the last sample.
void recur_modal(int n, const ModalStep& one, const ModalStep& chain, const double* c_y, const double* c_u,
                 double y_inf, double u_inf, bool write_u, double* w_io, int count, double* y, double* u, double* states);

}  // namespace specloop::exact_step
