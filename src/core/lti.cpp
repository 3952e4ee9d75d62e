// Transfer functions, the cascade realization and the closed-loop interconnection.
#include "specloop/core/lti.hpp"

#include <algorithm>
#include <cmath>
#include <fmt/format.h>
#include <limits>
#include <stdexcept>

namespace specloop {

namespace {
// The coefficient of the lowest power of s that is not zero.
double lowest_nonzero_coefficient(const Polynomial& p) {
  return p.coefficients[p.coefficients.size() - 1 - static_cast<std::size_t>(p.roots_at_origin())];
}
}  // namespace

TransferFunction::TransferFunction(Polynomial num, Polynomial den)
    : numerator(std::move(num)), denominator(std::move(den)) {
  if (denominator.is_zero()) throw std::invalid_argument("transfer function with a zero denominator");
}

TransferFunction TransferFunction::from_zeros_poles(const std::vector<Complex>& zeros,
                                                    const std::vector<Complex>& poles, double gain) {
  return {Polynomial::from_roots(zeros, gain), Polynomial::from_roots(poles)};
}

TransferFunction TransferFunction::normalized() const {
  const double lead = denominator.leading();
  return {(1.0 / lead) * numerator, (1.0 / lead) * denominator};
}

int TransferFunction::system_type() const {
  return denominator.roots_at_origin() - numerator.roots_at_origin();
}

double TransferFunction::dc_gain() const {
  if (numerator.is_zero()) return 0.0;
  const int type = system_type();
  if (type < 0) return 0.0;
  const double ratio = lowest_nonzero_coefficient(numerator) / lowest_nonzero_coefficient(denominator);
  return type > 0 ? std::copysign(std::numeric_limits<double>::infinity(), ratio) : ratio;
}

double loop_action(const TransferFunction& plant) {
  if (plant.numerator.is_zero()) return 1.0;
  return lowest_nonzero_coefficient(plant.numerator) / plant.denominator.leading() < 0.0 ? -1.0 : 1.0;
}

const char* action_name(double action) { return action < 0.0 ? "reverse" : "direct"; }

std::string action_reason(const TransferFunction& plant) {
  const bool reverse = loop_action(plant) < 0.0;
  const int type = plant.system_type();
  const std::string which =
      type > 0 ? "its velocity gain lim s·G(s), s → 0" : type == 0 ? "its DC gain G(0)" : "its lowest-order gain";
  const bool flipped = !plant.numerator.is_zero() &&
                       (lowest_nonzero_coefficient(plant.numerator) / lowest_nonzero_coefficient(plant.denominator) < 0.0) !=
                           reverse;
  return fmt::format("{} action: every controller gain is {}, because b_low/a_n {} 0 for this plant (its lowest-order "
                     "numerator coefficient over its leading denominator coefficient; {}); the other sign can never give "
                     "a stable loop that settles on the reference",
                     reverse ? "reverse" : "direct", reverse ? "negative" : "positive", reverse ? "<" : ">",
                     flipped ? "the opposite of the sign of " + which +
                                   ", because an odd number of real poles lie in the right half plane"
                             : "here the sign of " + which);
}

TransferFunction operator*(const TransferFunction& a, const TransferFunction& b) {
  return {a.numerator * b.numerator, a.denominator * b.denominator};
}

ErrorConstants error_constants(const TransferFunction& open_loop) {
  // lim s^k·L(s) as s → 0: with L of type t, it is infinite for k < t, the ratio of the lowest
  // nonzero coefficients for k = t, and 0 for k > t.
  const int type = open_loop.system_type();
  const double ratio = lowest_nonzero_coefficient(open_loop.numerator) /
                       lowest_nonzero_coefficient(open_loop.denominator);
  auto limit = [&](int k) {
    if (k < type) return std::numeric_limits<double>::infinity();
    if (k == type) return std::abs(ratio);
    return 0.0;
  };
  return {limit(0), limit(1), limit(2)};
}

namespace {

// One section k·N(s)/D(s) with deg D in {1, 2}, deg N <= deg D, D monic, N monic or constant 1.
StateSpace first_order_section(double pole, const std::vector<double>& zeros) {
  StateSpace ss;
  ss.A = Eigen::MatrixXd::Constant(1, 1, pole);
  ss.B = Eigen::VectorXd::Ones(1);
  ss.C.resize(1, 1);
  ss.D.resize(1);
  if (zeros.empty()) {
    ss.C(0, 0) = 1.0;
    ss.D(0) = 0.0;
  } else {  // (s − z)/(s − p) = 1 + (p − z)/(s − p)
    ss.C(0, 0) = pole - zeros[0];
    ss.D(0) = 1.0;
  }
  return ss;
}

// (b2 s² + b1 s + b0)/(s² + a1 s + a0) in companion form scaled by w = sqrt(|a0|).
StateSpace second_order_section(double a1, double a0, double b2, double b1, double b0) {
  const double w = a0 != 0.0 ? std::sqrt(std::abs(a0)) : 1.0;
  StateSpace ss;
  ss.A.resize(2, 2);
  ss.A << 0.0, w, -a0 / w, -a1;
  ss.B = Eigen::Vector2d(0.0, 1.0);
  ss.C.resize(1, 2);
  ss.C << (b0 - b2 * a0) / w, b1 - b2 * a1;
  ss.D = Eigen::VectorXd::Constant(1, b2);
  return ss;
}

}  // namespace

StateSpace static_gain(double k) {
  StateSpace ss;
  ss.A.resize(0, 0);
  ss.B.resize(0);
  ss.C.resize(1, 0);
  ss.D = Eigen::VectorXd::Constant(1, k);
  return ss;
}

StateSpace cascade(const StateSpace& first, const StateSpace& second) {
  const int n1 = first.states(), n2 = second.states();
  StateSpace ss;
  ss.A = Eigen::MatrixXd::Zero(n1 + n2, n1 + n2);
  ss.A.topLeftCorner(n1, n1) = first.A;
  ss.A.bottomRightCorner(n2, n2) = second.A;
  ss.A.bottomLeftCorner(n2, n1) = second.B * first.C.row(0);
  ss.B.resize(n1 + n2);
  ss.B.head(n1) = first.B;
  ss.B.tail(n2) = second.B * first.D(0);
  ss.C.resize(1, n1 + n2);
  ss.C.leftCols(n1) = second.D(0) * first.C.row(0);
  ss.C.rightCols(n2) = second.C.row(0);
  ss.D = Eigen::VectorXd::Constant(1, second.D(0) * first.D(0));
  return ss;
}

TransferFunction transfer_function_of(const StateSpace& s) {
  const int n = s.states();
  if (s.outputs() < 1) throw std::invalid_argument("transfer_function_of: the state space has no output");
  const double d = s.D.size() > 0 ? s.D(0) : 0.0;
  if (n == 0) return TransferFunction(Polynomial(std::vector<double>{d}), Polynomial(std::vector<double>{1.0}));
  const Eigen::RowVectorXd c = s.C.row(0);
  std::vector<double> den{1.0};
  std::vector<double> adj;  // C·N_k·B, k = 0..n−1: coefficients of s^(n−1−k)
  Eigen::MatrixXd nk = Eigen::MatrixXd::Identity(n, n);
  for (int k = 1; k <= n; ++k) {
    adj.push_back(c.dot(nk * s.B));
    const Eigen::MatrixXd an = s.A * nk;
    const double ck = -an.trace() / k;
    den.push_back(ck);
    nk = an;
    nk.diagonal().array() += ck;
  }
  // Numerator C·adj(sI − A)·B + D·det(sI − A), degree ≤ n.
  std::vector<double> num(static_cast<std::size_t>(n) + 1, 0.0);
  for (int k = 0; k <= n; ++k) num[static_cast<std::size_t>(k)] = d * den[static_cast<std::size_t>(k)];
  for (int k = 0; k < n; ++k) num[static_cast<std::size_t>(k) + 1] += adj[static_cast<std::size_t>(k)];
  // Drop leading coefficients that are rounding: each weighted by w^power at the frequency scale w.
  double w = 1.0;
  if (s.A.allFinite()) {
    const Eigen::VectorXcd eig = s.A.eigenvalues();
    double rho = 0.0;
    for (Eigen::Index i = 0; i < eig.size(); ++i) rho = std::max(rho, std::abs(eig(i)));
    if (rho > 0.0) w = rho;
  }
  std::vector<double> weighted(num.size());
  double largest = 0.0;
  for (std::size_t k = 0; k < num.size(); ++k) {
    weighted[k] = std::abs(num[k]) * std::pow(w, static_cast<double>(num.size() - 1 - k));
    largest = std::max(largest, weighted[k]);
  }
  std::size_t first = 0;
  while (first + 1 < num.size() && weighted[first] <= 1e-9 * largest) ++first;
  num.erase(num.begin(), num.begin() + static_cast<std::ptrdiff_t>(first));
  if (largest == 0.0) num = {0.0};
  return TransferFunction(Polynomial(num), Polynomial(den));
}

StateSpace realize(const TransferFunction& g) {
  if (!g.is_proper())
    throw std::invalid_argument("cannot realize an improper transfer function (numerator degree " +
                                std::to_string(g.numerator.degree()) + " > denominator degree " +
                                std::to_string(g.denominator.degree()) + ")");
  const double k = g.leading_gain();
  if (g.numerator.is_zero()) {
    StateSpace ss = static_gain(0.0);
    return ss;
  }
  std::vector<Complex> poles = g.poles();
  std::vector<Complex> zeros = g.zeros();

  // Group poles into sections: conjugate pairs, then real poles two by two, a last one alone.
  struct Section {
    std::vector<Complex> poles;
    std::vector<Complex> zeros;
  };
  std::vector<Section> sections;
  std::vector<double> real_poles;
  for (const Complex& p : poles) {
    if (p.imag() > 0.0) sections.push_back({{p, std::conj(p)}, {}});
    else if (p.imag() == 0.0) real_poles.push_back(p.real());
  }
  for (std::size_t i = 0; i + 1 < real_poles.size(); i += 2)
    sections.push_back({{real_poles[i], real_poles[i + 1]}, {}});
  if (real_poles.size() % 2 == 1) sections.push_back({{real_poles.back()}, {}});

  // Complex zero pairs to second-order sections first, then real zeros wherever there is room.
  std::vector<double> real_zeros;
  std::size_t next_pair_section = 0;
  for (const Complex& z : zeros) {
    if (z.imag() > 0.0) {
      while (next_pair_section < sections.size() && sections[next_pair_section].poles.size() != 2) ++next_pair_section;
      if (next_pair_section == sections.size()) throw std::logic_error("realize: no section for a complex zero pair");
      sections[next_pair_section++].zeros = {z, std::conj(z)};
    } else if (z.imag() == 0.0) {
      real_zeros.push_back(z.real());
    }
  }
  std::size_t next_zero = 0;
  for (Section& s : sections) {
    while (next_zero < real_zeros.size() && s.zeros.size() < s.poles.size()) s.zeros.emplace_back(real_zeros[next_zero++]);
  }
  if (next_zero != real_zeros.size()) throw std::logic_error("realize: zeros left without a section");

  StateSpace result = static_gain(k);
  bool first = true;
  for (const Section& s : sections) {
    StateSpace block;
    if (s.poles.size() == 1) {
      std::vector<double> z;
      for (const Complex& c : s.zeros) z.push_back(c.real());
      block = first_order_section(s.poles[0].real(), z);
    } else {
      const Polynomial den = Polynomial::from_roots(s.poles);
      const Polynomial num = Polynomial::from_roots(s.zeros);
      std::vector<double> b(3, 0.0);
      std::copy(num.coefficients.begin(), num.coefficients.end(), b.end() - static_cast<std::ptrdiff_t>(num.coefficients.size()));
      block = second_order_section(den.coefficients[1], den.coefficients[2], b[0], b[1], b[2]);
    }
    result = first ? cascade(block, result) : cascade(result, block);
    first = false;
  }
  if (sections.empty()) return static_gain(k);
  return result;
}

void realize_low_order(const std::vector<double>& numerator, const std::vector<double>& denominator, StateSpace& out) {
  const std::size_t m = denominator.size() - 1;  // degree
  if (denominator.empty() || m > 2 || numerator.empty() || numerator.size() > denominator.size())
    throw std::invalid_argument("realize_low_order: needs a proper ratio with a denominator of degree at most 2");
  if (numerator.front() == 0.0 || denominator.front() == 0.0)
    throw std::invalid_argument("realize_low_order: a leading coefficient is zero");
  const double k = numerator.front() / denominator.front();  // high-frequency gain, as realize
  // The monic numerator's coefficients, right-aligned in b (b[0] for s², b[2] for s⁰).
  double b[3] = {0.0, 0.0, 0.0}, a[3] = {1.0, 0.0, 0.0};
  for (std::size_t i = 0; i < numerator.size(); ++i) b[3 - numerator.size() + i] = numerator[i] / numerator.front();
  for (std::size_t i = 1; i <= m; ++i) a[i] = denominator[i] / denominator.front();
  const int n = static_cast<int>(m);
  out.A.resize(n, n);
  out.B.resize(n);
  out.C.resize(1, n);
  out.D.resize(1);
  if (m == 0) {
    out.D(0) = k;
  } else if (m == 1) {  // first_order_section: (s − z)/(s − p) = 1 + (p − z)/(s − p), or 1/(s − p)
    const double pole = -a[1];
    out.A(0, 0) = pole;
    out.B(0) = 1.0;
    if (numerator.size() == 2) {
      out.C(0, 0) = k * (pole - (-b[2]));
      out.D(0) = k * 1.0;
    } else {
      out.C(0, 0) = k * 1.0;
      out.D(0) = k * 0.0;
    }
  } else {  // second_order_section, scaled by w = √|a0|
    const double a1 = a[1], a0 = a[2], b2 = b[0], b1 = b[1], b0 = b[2];
    const double w = a0 != 0.0 ? std::sqrt(std::abs(a0)) : 1.0;
    out.A << 0.0, w, -a0 / w, -a1;
    out.B << 0.0, 1.0;
    out.C << k * ((b0 - b2 * a0) / w), k * (b1 - b2 * a1);
    out.D(0) = k * b2;
  }
}

namespace {

// A two-input controller x' = A x + B_r r − B_y y, u = C x + d_r r − d_y y (references to its
// parts: the single-input loop passes its controller's matrices, shared by both inputs).
struct TwoInputController {
  const Eigen::MatrixXd& A;
  const Eigen::VectorXd& b_r;
  const Eigen::VectorXd& b_y;
  const Eigen::MatrixXd& c;  // row 0
  double d_r = 0.0, d_y = 0.0;
};

// The loop y = P·u with that controller into `cl`, in place. Outputs: row 0 = y, row 1 = u.
// Plain loops over the entries, each computed as the matrix expressions u_x = [−d_y·C_p, c]/den,
// y_x = D_p·u_x + [C_p, 0], A = [A_p 0; 0 A] + [B_p·u_x; −B_y·y_x] would (the same products and
// sums, so the same bits as before this was written in place).
void assemble_loop(const StateSpace& plant, const TwoInputController& k, StateSpace& cl) {
  const int np = plant.states(), nc = static_cast<int>(k.A.rows()), n = np + nc;
  const double dp = plant.D(0);
  const double denom = 1.0 + k.d_y * dp;
  if (std::abs(denom) < 1e-12) throw std::domain_error("closed loop is ill-posed: 1 + Dc·Dp = 0");
  cl.A.resize(n, n);
  cl.B.resize(n);
  cl.C.resize(2, n);
  cl.D.resize(2);
  // u = (C xc + d_r r − d_y Cp xp)/denom ;  y = Cp xp + Dp u (rows 1 and 0 of C).
  for (int j = 0; j < np; ++j) cl.C(1, j) = -k.d_y * plant.C(0, j) / denom;
  for (int j = 0; j < nc; ++j) cl.C(1, np + j) = k.c(0, j) / denom;
  const double u_r = k.d_r / denom;
  for (int j = 0; j < n; ++j) cl.C(0, j) = dp * cl.C(1, j);
  for (int j = 0; j < np; ++j) cl.C(0, j) += plant.C(0, j);
  const double y_r = dp * u_r;
  // xp' = Ap xp + Bp u
  for (int j = 0; j < n; ++j)
    for (int i = 0; i < np; ++i) {
      cl.A(i, j) = plant.B(i) * cl.C(1, j);
      if (j < np) cl.A(i, j) += plant.A(i, j);
    }
  for (int i = 0; i < np; ++i) cl.B(i) = plant.B(i) * u_r;
  // xc' = A xc + B_r r − B_y y
  for (int j = 0; j < n; ++j)
    for (int i = 0; i < nc; ++i) {
      cl.A(np + i, j) = -k.b_y(i) * cl.C(0, j);
      if (j >= np) cl.A(np + i, j) += k.A(i, j - np);
    }
  for (int i = 0; i < nc; ++i) cl.B(np + i) = k.b_r(i) - k.b_y(i) * y_r;
  cl.D << y_r, u_r;
}

}  // namespace

StateSpace close_loop(const StateSpace& plant, const StateSpace& controller) {
  StateSpace loop;
  close_loop_into(plant, controller, loop);
  return loop;
}

void close_loop_into(const StateSpace& plant, const StateSpace& controller, StateSpace& loop) {
  // e = r − y drives the controller: both inputs share its B and D.
  assemble_loop(plant, {controller.A, controller.B, controller.B, controller.C, controller.D(0), controller.D(0)}, loop);
}

void load_loop_into(const StateSpace& plant, const StateSpace& controller, double load, double offset,
                    StateSpace& loop) {
  // A is the set-point loop's (the reference path only changes B and D; they are replaced below).
  assemble_loop(plant, {controller.A, controller.B, controller.B, controller.C, controller.D(0), controller.D(0)}, loop);
  const int np = plant.states(), nc = controller.states();
  const double dp = plant.D(0);
  const double denom = 1.0 + controller.D(0) * dp;
  // The plant's input is u + d with u = (C_c x_c − D_c·(C_p x_p + D_p·d))/denom, so
  // x_p' gains B_p·d/denom, y = C_p x_p + D_p·(u + d) gains D_p·d/denom, x_c' = … − B_c·y.
  for (int i = 0; i < np; ++i) loop.B(i) = plant.B(i) * load / denom;
  const double y_d = dp * load / denom;
  for (int i = 0; i < nc; ++i) loop.B(np + i) = -controller.B(i) * y_d;
  for (int j = 0; j < np + nc; ++j) loop.C(1, j) = loop.C(0, j);
  loop.D << y_d + offset, y_d;
}

void filtered_controller_into(const Eigen::MatrixXd& ak, const Eigen::VectorXd& kbr, const Eigen::VectorXd& kby,
                              const Eigen::MatrixXd& kc, double kdr, double kdy, const StateSpace* f, const StateSpace* notch,
                              TwoInputRealization& out) {
  if (f != nullptr && f->D(0) != 0.0) throw std::invalid_argument("filtered_controller_into: the measurement filter must be strictly proper");
  const int nf = f != nullptr ? f->states() : 0, nk = static_cast<int>(ak.rows()), nn = notch != nullptr ? notch->states() : 0;
  const int n = nf + nk + nn;
  out.A.resize(n, n);
  out.A.setZero();
  out.b_r.resize(n);
  out.b_y.resize(n);
  out.c.resize(1, n);
  // K reads r and v = C_f x_f (y itself without F): x_k' = A_k x_k + b_r·r − b_y·v,
  // w = c_k x_k + d_r·r − d_y·v; the notch x_n' = A_n x_n + B_n·w, u = C_n x_n + D_n·w.
  const double dn = notch != nullptr ? notch->D(0) : 1.0;
  const bool filtered = nf > 0;
  for (int i = 0; i < nf; ++i) {
    for (int j = 0; j < nf; ++j) out.A(i, j) = f->A(i, j);
    out.b_r(i) = 0.0;
    out.b_y(i) = -f->B(i);  // x_f' = A_f x_f + B_f·y
  }
  for (int i = 0; i < nk; ++i) {
    for (int j = 0; j < nf; ++j) out.A(nf + i, j) = -kby(i) * f->C(0, j);
    for (int j = 0; j < nk; ++j) out.A(nf + i, nf + j) = ak(i, j);
    out.b_r(nf + i) = kbr(i);
    out.b_y(nf + i) = filtered ? 0.0 : kby(i);
  }
  for (int i = 0; i < nn; ++i) {
    const double bn = notch->B(i);
    for (int j = 0; j < nf; ++j) out.A(nf + nk + i, j) = -bn * kdy * f->C(0, j);
    for (int j = 0; j < nk; ++j) out.A(nf + nk + i, nf + j) = bn * kc(0, j);
    for (int j = 0; j < nn; ++j) out.A(nf + nk + i, nf + nk + j) = notch->A(i, j);
    out.b_r(nf + nk + i) = bn * kdr;
    out.b_y(nf + nk + i) = filtered ? 0.0 : bn * kdy;
  }
  for (int j = 0; j < nf; ++j) out.c(0, j) = -dn * kdy * f->C(0, j);
  for (int j = 0; j < nk; ++j) out.c(0, nf + j) = dn * kc(0, j);
  for (int j = 0; j < nn; ++j) out.c(0, nf + nk + j) = notch->C(0, j);
  out.d_r = dn * kdr;
  out.d_y = filtered ? 0.0 : dn * kdy;
}

void filtered_controller_into(const StateSpace& k, const StateSpace* f, const StateSpace* notch, TwoInputRealization& out) {
  filtered_controller_into(k.A, k.B, k.B, k.C, k.D(0), k.D(0), f, notch, out);
}

StateSpace close_loop(const StateSpace& plant, const TwoInputRealization& controller) {
  StateSpace loop;
  close_loop_into(plant, controller, loop);
  return loop;
}

void close_loop_into(const StateSpace& plant, const TwoInputRealization& k, StateSpace& loop) {
  assemble_loop(plant, {k.A, k.b_r, k.b_y, k.c, k.d_r, k.d_y}, loop);
}

void load_loop_into(const StateSpace& plant, const TwoInputRealization& k, double load, double offset, StateSpace& loop) {
  assemble_loop(plant, {k.A, k.b_r, k.b_y, k.c, k.d_r, k.d_y}, loop);
  const int np = plant.states(), nc = static_cast<int>(k.A.rows());
  const double dp = plant.D(0);
  const double denom = 1.0 + k.d_y * dp;
  for (int i = 0; i < np; ++i) loop.B(i) = plant.B(i) * load / denom;
  const double y_d = dp * load / denom;
  for (int i = 0; i < nc; ++i) loop.B(np + i) = -k.b_y(i) * y_d;
  for (int j = 0; j < np + nc; ++j) loop.C(1, j) = loop.C(0, j);
  loop.D << y_d + offset, y_d;
}

TwoInputRealization two_input_controller(const TransferFunction& controller, const TransferFunction& reference) {
  // Observable canonical form of the two-input controller over the monic common denominator
  // d(s) = s^m + a1 s^(m−1) + … + am: A has −a in its first column and ones above the diagonal,
  // B = numerator − n0·a (per path), C = [1 0 … 0], D = n0.
  const TransferFunction fb = controller.normalized();
  const TransferFunction rf = reference.normalized();
  const auto& den = fb.denominator.coefficients;
  const int m = fb.denominator.degree();
  if (rf.denominator.degree() != m || fb.numerator.degree() > m || rf.numerator.degree() > m)
    throw std::invalid_argument("two-input controller: both paths need one proper common denominator");
  for (int i = 0; i <= m; ++i)
    if (std::abs(rf.denominator.coefficients[static_cast<std::size_t>(i)] - den[static_cast<std::size_t>(i)]) >
        1e-9 * std::max(1.0, std::abs(den[static_cast<std::size_t>(i)])))
      throw std::invalid_argument("two-input controller: the paths' denominators differ");
  auto padded = [&](const Polynomial& p) {
    std::vector<double> c(static_cast<std::size_t>(m) + 1, 0.0);
    std::copy(p.coefficients.begin(), p.coefficients.end(), c.end() - static_cast<std::ptrdiff_t>(p.coefficients.size()));
    return c;
  };
  const auto ny = padded(fb.numerator), nr = padded(rf.numerator);
  Eigen::MatrixXd a = Eigen::MatrixXd::Zero(m, m), c = Eigen::MatrixXd::Zero(1, m);
  Eigen::VectorXd b_r(m), b_y(m);
  if (m > 0) c(0, 0) = 1.0;
  for (int i = 0; i < m; ++i) {
    const auto ai = den[static_cast<std::size_t>(i) + 1];
    a(i, 0) = -ai;
    if (i + 1 < m) a(i, i + 1) = 1.0;
    b_r(i) = nr[static_cast<std::size_t>(i) + 1] - nr[0] * ai;
    b_y(i) = ny[static_cast<std::size_t>(i) + 1] - ny[0] * ai;
  }
  return {a, b_r, b_y, c, nr[0], ny[0]};
}

StateSpace close_loop(const StateSpace& plant, const TransferFunction& controller, const TransferFunction& reference) {
  const TwoInputRealization k = two_input_controller(controller, reference);
  StateSpace loop;
  assemble_loop(plant, {k.A, k.b_r, k.b_y, k.c, k.d_r, k.d_y}, loop);
  return loop;
}

ClosedLoopTF close_loop(const TransferFunction& plant, const TransferFunction& controller) {
  const Polynomial loop_num = controller.numerator * plant.numerator;
  const Polynomial loop_den = controller.denominator * plant.denominator;
  const Polynomial characteristic = loop_den + loop_num;
  return {TransferFunction(loop_num, characteristic),
          TransferFunction(controller.numerator * plant.denominator, characteristic)};
}

TransferFunction delay_approximant(double delay_s, int order) {
  if (!(delay_s >= 0.0) || order < 1) throw std::invalid_argument("delay_approximant: needs delay >= 0 and order >= 1");
  if (delay_s == 0.0) return {Polynomial({1.0}), Polynomial({1.0})};
  // c_k by the recurrence c_{k+1} = c_k·(m − k)/((2m − k)(k + 1)), c_0 = 1.
  std::vector<double> num(static_cast<std::size_t>(order) + 1), den(num.size());
  double c = 1.0, lk = 1.0;
  for (int k = 0; k <= order; ++k) {
    const std::size_t at = static_cast<std::size_t>(order - k);  // highest power first
    den[at] = c * lk;
    num[at] = ((k % 2 == 0) ? 1.0 : -1.0) * c * lk;
    c *= static_cast<double>(order - k) / (static_cast<double>(2 * order - k) * (k + 1));
    lk *= delay_s;
  }
  return {Polynomial(num), Polynomial(den)};
}

bool all_stable(const std::vector<Complex>& poles, double tolerance) {
  return std::all_of(poles.begin(), poles.end(), [&](const Complex& p) {
    return p.real() < -tolerance * std::max(1.0, std::abs(p));
  });
}

}  // namespace specloop
