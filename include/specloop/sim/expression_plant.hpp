// A nonlinear plant written as expressions: named states with one right-hand side each, named
// parameters, the input u and an output expression, parsed and evaluated by muparser. Finds the
// equilibrium near a guess, linearizes there by central differences, and simulates in deviation
// variables around it (the PlantModel the nonlinear loop integrates).
#pragma once

#include <memory>
#include <stdexcept>
#include <string>
#include <utility>
#include <vector>

#include "specloop/core/lti.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop {

/// The plant as written in [plant.nonlinear].
struct ExpressionDefinition {
  std::vector<std::string> states;       // names; their order is the state order
  std::vector<std::string> derivatives;  // d(state_i)/dt as expressions of states, parameters, u
  std::string output;                    // y as an expression of states and parameters
  std::vector<std::pair<std::string, double>> parameters;  // name = finite value
};

/// A problem with one part of the definition. `part` and `index` say which: the state name
/// states[index], the parameter parameters[index], the expression derivatives[index], or the
/// output (index 0). `position` is the 0-based character in that expression, or −1.
class ExpressionError : public std::runtime_error {
 public:
  enum class Part { state, parameter, derivative, output };
  ExpressionError(Part which_part, std::size_t which_index, int at, const std::string& message)
      : std::runtime_error(message), part(which_part), index(which_index), position(at) {}
  Part part;
  std::size_t index;
  int position;
};

/// Jacobians at a point: A = ∂f/∂x, B = ∂f/∂u, C = ∂h/∂x, D = ∂h/∂u (0: h does not use u).
struct Linearization {
  StateSpace model;       // A, B, C (one row), D
  std::vector<double> state_steps;  // the central-difference step of each state
  double input_step = 0.0;
};

/// The equilibrium found from a guess with u fixed.
struct Equilibrium {
  std::vector<double> states;
  double input = 0.0;
  double output = 0.0;
  int iterations = 0;        // Newton iterations taken
  double residual = 0.0;     // max_i |f_i(x0, u0)| at the end
};

/// Names a state or parameter may not take: muparser's functions and constants, "u", "t".
/// (Also rejected: a name that is not letter + letters/digits/underscores.)
bool is_reserved_name(const std::string& name);

class ExpressionPlant final : public PlantModel {
 public:
  /// Validates the names (identifiers, unique, not reserved), compiles every expression once and
  /// checks each uses only known names (with a did-you-mean), is a single expression without
  /// assignment, and that the output uses at least one state and not u. Throws ExpressionError.
  explicit ExpressionPlant(ExpressionDefinition definition);
  ~ExpressionPlant() override;
  ExpressionPlant(const ExpressionPlant&) = delete;
  ExpressionPlant& operator=(const ExpressionPlant&) = delete;

  const ExpressionDefinition& definition() const { return definition_; }

  /// f(x, u) into `rate` (n values) and h(x): absolute variables, NaN/inf passed through.
  void rates_at(const double* x, double u, double* rate) const;
  double output_at(const double* x) const;

  /// Jacobians by central differences, step h_j = ε^(1/3)·max(|x_j|, 1) per variable
  /// (ε = 2.2e-16; truncation O(h²) and rounding O(ε/h) balance at a relative error of about
  /// ε^(2/3) ≈ 4e-11 for smooth right-hand sides of unit scale). Throws ExpressionError when an
  /// expression is not finite at x or at a perturbed point (too close to its domain's edge), or
  /// when a difference quotient overflows (a jump or a slope beyond the double range): every
  /// Jacobian returned is finite.
  Linearization jacobians_at(const std::vector<double>& x, double u) const;

  /// Newton's method on f(x, u) = 0 with u fixed, from `guess`: minimum-norm steps (so a plant
  /// with a free integrator, whose equilibria form a line, converges to the nearest one), halved
  /// while they lead to a non-finite or larger residual; converged when every
  /// |f_i| <= 1e-10·(Σ_j |∂f_i/∂x_j|·max(|x_j|, 1) + |∂f_i/∂u|·max(|u|, 1)), then polished by up
  /// to two more full steps kept only while the residual falls. At most 100 iterations. Throws std::runtime_error (message says why) when none is found.
  Equilibrium find_equilibrium(const std::vector<double>& guess, double u) const;

  /// Sets the point the deviation variables are measured from (y0 = h(x0)).
  void set_operating_point(const std::vector<double>& x0, double u0);

  // PlantModel: deviation variables around the operating point. Throws PlantEvaluationError
  // naming the expression when a value is NaN or infinite.
  int states() const override { return static_cast<int>(definition_.states.size()); }
  void derivative(const double* deviation, double input_deviation, double* rate) const override;
  double output(const double* deviation) const override;
  double output_rate(const double* deviation, const double* rate) const override;

 private:
  struct Compiled;
  ExpressionDefinition definition_;
  std::unique_ptr<Compiled> compiled_;
  std::vector<double> x0_;
  double u0_ = 0.0, y0_ = 0.0;
  std::string describe_point(const double* x, double u) const;
};

}  // namespace specloop
