// An implicit, dense-output integrator for stiff loops: odeint's Rosenbrock method of order 4
// with step-size control, behind a plain interface. Its implementation is compiled as C++17
// (src/implicit_stepper.cpp) because the uBLAS containers the Rosenbrock stepper uses do not
// build as C++20 with Boost 1.74 (they call allocator members C++20 removed); nothing of uBLAS
// or odeint crosses this header, so the rest of the library stays C++20.
#pragma once

#include <cstddef>
#include <memory>
#include <utility>

namespace specloop::detail {

class ImplicitDenseStepper {
 public:
  /// dx/dt = f(x, t) as a callback on the caller's context.
  using Rhs = void (*)(const void* context, const double* x, double* dxdt, double t);

  /// `time_varying`: f depends on t explicitly (then ∂f/∂t is differenced too).
  ImplicitDenseStepper(std::size_t size, double absolute_tolerance, double relative_tolerance, double max_dt);
  ~ImplicitDenseStepper();
  ImplicitDenseStepper(const ImplicitDenseStepper&) = delete;
  ImplicitDenseStepper& operator=(const ImplicitDenseStepper&) = delete;

  void set_system(Rhs rhs, const void* context, bool time_varying);
  void initialize(const double* x, double t, double dt);
  /// One accepted step; returns the interval it covered. The Jacobian ∂f/∂x (and ∂f/∂t when
  /// time-varying) is formed by central differences, step 1e-6·max(1, |x_j|).
  /// Throws std::runtime_error (from odeint) when the step size cannot be adjusted.
  std::pair<double, double> do_step();
  /// The dense-output state at t inside the last step.
  void calc_state(double t, double* x) const;
  const double* current_state() const;
  double current_time() const;
  double current_time_step() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace specloop::detail
