// Eigenvalues of the small real matrices of the simulator's hot path (a closed loop of at most
// kSmallEigenCapacity states), on fixed-capacity arrays: no allocation, none of a general
// solver's dispatch on dynamic sizes (Eigen's EigenSolver took about 3.5 µs on the benchmark's
// fourth-order loop, this one about 1 µs).
#pragma once

#include <Eigen/Dense>
#include <vector>

#include "specloop/core/polynomial.hpp"

namespace specloop {

/// The largest matrix small_eigenvalues takes (rows).
inline constexpr int kSmallEigenCapacity = 16;

/// Appends the eigenvalues of the square matrix `a` (at most kSmallEigenCapacity rows; a complex
/// pair as two exact conjugates, in no particular order) to `out`, allocating nothing when `out`
/// has the capacity. Method: balancing by powers of 2 (Parlett & Reinsch; exact, and it keeps a
/// stiff loop's slow poles accurate: on poles 1e-3, 2 and 1e6 under unit feedback the slow pair
/// came out 6e-13 relative off, against 9e-9 from the unbalanced general solver), reduction to
/// Hessenberg form by Householder reflections, then the implicitly double-shifted QR iteration
/// (Francis) on the active window, with a subdiagonal entry taken as zero when it is below ε
/// times its two diagonal neighbours (or below ε² times the matrix's norm), ad hoc shifts when a
/// window stops progressing (see eigenvalues.cpp), and each 1×1 or 2×2 block's eigenvalues in
/// closed form. Backward stable like any method of exact scalings and orthogonal similarities.
/// False (with `out` unchanged) for a larger matrix, a non-finite entry, or no convergence
/// within 40 iterations per row.
bool small_eigenvalues(const Eigen::MatrixXd& a, std::vector<Complex>& out);

}  // namespace specloop
