// Linear time-invariant SISO models: transfer functions, state-space realizations and the
// unity-negative-feedback closed loop (reference → output and reference → control effort).
#pragma once

#include <Eigen/Dense>
#include <string>
#include <vector>

#include "specloop/core/polynomial.hpp"

namespace specloop {

/// N(s)/D(s), coefficients highest power first.
struct TransferFunction {
  Polynomial numerator{std::vector<double>{1.0}};
  Polynomial denominator{std::vector<double>{1.0}};

  TransferFunction() = default;
  TransferFunction(Polynomial num, Polynomial den);
  /// k·Π(s − z)/Π(s − p); complex zeros/poles must come in conjugate pairs.
  static TransferFunction from_zeros_poles(const std::vector<Complex>& zeros,
                                           const std::vector<Complex>& poles, double gain);

  Complex operator()(Complex s) const { return numerator(s) / denominator(s); }
  std::vector<Complex> zeros() const { return numerator.roots(); }
  std::vector<Complex> poles() const { return denominator.roots(); }
  /// High-frequency gain k = leading(N)/leading(D).
  double leading_gain() const { return numerator.leading() / denominator.leading(); }
  bool is_proper() const { return numerator.degree() <= denominator.degree(); }
  bool is_strictly_proper() const { return numerator.degree() < denominator.degree(); }
  /// Denominator made monic (leading coefficient 1).
  TransferFunction normalized() const;
  /// System type: poles at s = 0 minus zeros at s = 0 (negative: differentiating).
  int system_type() const;
  /// G(0); +/-infinity when the system type is positive, 0 when negative.
  double dc_gain() const;
};

TransferFunction operator*(const TransferFunction& a, const TransferFunction& b);

/// The sign the controller's gains must take for this plant: +1 direct action, −1 reverse
/// action. It is the sign of b_low/a_n, the numerator's lowest-order nonzero coefficient over the
/// denominator's leading coefficient (for k·Π(s − z)/Π(s − p): the sign of k, flipped once per
/// real zero in the right half plane). Why: every structure here has a numerator and denominator
/// with positive coefficients, so the closed loop's characteristic polynomial has its leading
/// coefficient of the sign of a_n and its lowest-order coefficient of the sign of the controller's
/// gain times b_low (with an integrator in the loop), or that plus a term the final value needs of
/// the same sign (without one); a Hurwitz polynomial has all coefficients of one sign (Stodola's
/// necessary condition), so the other sign can never give a stable loop that settles on the
/// reference. For an open-loop stable plant this is the sign of its DC gain; an odd number of
/// real right-half-plane poles makes it the opposite of the DC gain's sign; for an integrating
/// plant it is the sign of its velocity gain; a non-minimum-phase plant follows its DC gain, not
/// its high-frequency gain.
double loop_action(const TransferFunction& plant);
/// "direct" (+1) or "reverse" (−1).
const char* action_name(double action);
/// Why the plant gets its action, in one clause for the terminal, the report and result.json.
std::string action_reason(const TransferFunction& plant);

/// Static error constants of an open loop L(s) (a standard controls text: position Kp = lim L,
/// velocity Kv = lim s·L, acceleration Ka = lim s²·L as s → 0). Infinite values are +inf.
struct ErrorConstants {
  double position = 0.0;
  double velocity = 0.0;
  double acceleration = 0.0;
};
ErrorConstants error_constants(const TransferFunction& open_loop);

/// x' = A x + B u, y = C x + D u. Single input; C has one row per output.
struct StateSpace {
  Eigen::MatrixXd A;
  Eigen::VectorXd B;
  Eigen::MatrixXd C;
  Eigen::VectorXd D;
  int states() const { return static_cast<int>(A.rows()); }
  int outputs() const { return static_cast<int>(C.rows()); }
};

/// The SISO transfer function C·(sI − A)⁻¹·B + D of a state space (row 0 of C), by the
/// Faddeev–LeVerrier recursion: N_0 = I, c_k = −tr(A·N_{k−1})/k, N_k = A·N_{k−1} + c_k·I; then
/// det(sI − A) = Σ c_k s^(n−k) and C·adj(sI − A)·B = Σ (C·N_k·B) s^(n−1−k) (Gantmacher, The Theory
/// of Matrices, vol. 1, ch. IV §4; recalled from memory). Leading numerator coefficients below
/// 1e-9 of the largest (each weighted by w^power, w the spectral radius of A or 1) are dropped as
/// rounding. Meant for the few states of a hand-written plant (the recursion loses accuracy for
/// large n).
TransferFunction transfer_function_of(const StateSpace& s);

/// A well-conditioned realization of a proper transfer function: a cascade of first- and
/// second-order sections built from its poles and zeros, each section scaled so its
/// companion block is balanced (natural frequency on both off-diagonal entries).
StateSpace realize(const TransferFunction& g);
/// The realization of a static gain (no states).
StateSpace static_gain(double k);
/// Cascade connection: the output of `first` drives `second` (both single output).
StateSpace cascade(const StateSpace& first, const StateSpace& second);

/// The realization `realize` gives a proper transfer function whose denominator has degree ≤ 2
/// (one first- or second-order section times the high-frequency gain), built from the
/// coefficients (highest power first, leading ones nonzero) without computing roots, into `out`:
/// nothing is allocated when `out` already has the sizes (the search's controller, once per
/// candidate). Its numbers agree with realize's to rounding (realize rebuilds the section's
/// coefficients from computed roots). Throws std::invalid_argument for a denominator of degree
/// above 2, an improper ratio or a zero leading coefficient.
void realize_low_order(const std::vector<double>& numerator, const std::vector<double>& denominator, StateSpace& out);

/// Unity negative feedback e = r − y, u = C(e), y = P(u). Outputs: row 0 = y, row 1 = u.
/// Throws std::domain_error when the loop is algebraically ill-posed (1 + Dc·Dp = 0).
StateSpace close_loop(const StateSpace& plant, const StateSpace& controller);
/// close_loop(plant, controller) written into `loop`, reusing its storage: nothing is allocated
/// when `loop` already has the sizes. The same matrices, bit for bit.
void close_loop_into(const StateSpace& plant, const StateSpace& controller, StateSpace& loop);

/// The same loop driven by a load d at the plant's input instead of the reference (r = 0):
/// y = G/(1 + C·G)·d, with the input's step scaled by `load` (a unit input step is the load
/// `load`). Outputs: row 0 = y + `offset` (a constant, so that a step simulation, which measures
/// relative to the final value, sees y∞ = offset + y_d∞ ≠ 0: its IAE about that is ∫|y_d| dt when
/// y_d∞ = 0 and its settling band |y/y∞ − 1| ≤ b is |y_d| ≤ b·offset), row 1 = y (its peak |y| is
/// the simulation's effort peak). A is close_loop's; nothing is allocated when `loop` already
/// has the sizes (the search's second simulation).
void load_loop_into(const StateSpace& plant, const StateSpace& controller, double load, double offset,
                    StateSpace& loop);

/// A two-input controller x' = A·x + b_r·r − b_y·y, u = c·x + d_r·r − d_y·y, in storage reused
/// from call to call (the search's filtered controller).
struct TwoInputRealization {
  Eigen::MatrixXd A;
  Eigen::VectorXd b_r, b_y;
  Eigen::MatrixXd c;  // one row
  double d_r = 0.0, d_y = 0.0;
};

/// The controller u = N·(K·(r − F·y)) from the realizations of K (the structure's C(s), acting on
/// r − F·y), the measurement filter F (strictly proper; nullptr: none) and the notch N in series
/// with the output (nullptr: none), states ordered [F | K | N], into `out`: nothing is allocated
/// when `out` already has the sizes. Throws std::invalid_argument for an F with feedthrough.
void filtered_controller_into(const StateSpace& k, const StateSpace* f, const StateSpace* notch, TwoInputRealization& out);
/// The same with a two-input K (x_k' = A_k x_k + b_r·r − b_y·v, w = c_k x_k + d_r·r − d_y·v, v = F·y).
void filtered_controller_into(const Eigen::MatrixXd& ak, const Eigen::VectorXd& kbr, const Eigen::VectorXd& kby,
                              const Eigen::MatrixXd& kc, double kdr, double kdy, const StateSpace* f, const StateSpace* notch,
                              TwoInputRealization& out);
/// close_loop_into into a new loop.
StateSpace close_loop(const StateSpace& plant, const TwoInputRealization& controller);
/// The two-input controller u = C_r·r − C·y (C and C_r over one denominator, as reference_path
/// gives them) in observable canonical form, as close_loop(plant, C, C_r) builds it.
TwoInputRealization two_input_controller(const TransferFunction& controller, const TransferFunction& reference);
/// close_loop_into and load_loop_into for a two-input controller (the same conventions).
void close_loop_into(const StateSpace& plant, const TwoInputRealization& controller, StateSpace& loop);
void load_loop_into(const StateSpace& plant, const TwoInputRealization& controller, double load, double offset,
                    StateSpace& loop);

/// Two-degree-of-freedom loop u = C_r·r − C·y, y = P·u, with C_r and C over one denominator
/// (reference_path). Outputs: row 0 = y, row 1 = u. C_r = C is close_loop(plant, realize(C)).
StateSpace close_loop(const StateSpace& plant, const TransferFunction& controller, const TransferFunction& reference);

/// Closed-loop transfer functions of the same loop, as polynomials.
struct ClosedLoopTF {
  TransferFunction output;  // T(s) = L/(1 + L), reference → y
  TransferFunction effort;  // reference → u = C/(1 + L)
};
ClosedLoopTF close_loop(const TransferFunction& plant, const TransferFunction& controller);

/// Order of the Padé approximant that stands for the plant's transport delay in every linear
/// computation (analyze, the classical design, the search); the nonlinear confirmation uses the
/// exact delay.
constexpr int kDelayApproximantOrder = 3;

/// The [m/m] Padé approximant of a transport delay e^{−sL}: N(s)/D(s) with
/// D(s) = Σ c_k (sL)^k, N(s) = Σ (−1)^k c_k (sL)^k, c_k = (2m − k)!·m!/((2m)!·k!·(m − k)!)
/// (Baker & Graves-Morris, Padé Approximants). Exact in magnitude (all-pass); its phase error
/// grows with ω·L. L = 0 gives 1.
TransferFunction delay_approximant(double delay_s, int order);

/// True when every pole has real part below −tolerance·max(1, |p|).
bool all_stable(const std::vector<Complex>& poles, double tolerance = 1e-9);

}  // namespace specloop
