// Compiled as C++17: see implicit_stepper.hpp.
#include "sim/implicit_stepper.hpp"

#include <algorithm>
#include <cmath>

#include <boost/numeric/odeint.hpp>
#include <boost/numeric/odeint/stepper/rosenbrock4.hpp>
#include <boost/numeric/odeint/stepper/rosenbrock4_controller.hpp>
#include <boost/numeric/odeint/stepper/rosenbrock4_dense_output.hpp>

namespace specloop::detail {

namespace odeint = boost::numeric::odeint;
using Vector = boost::numeric::ublas::vector<double>;
using Matrix = boost::numeric::ublas::matrix<double>;
using Dense = odeint::rosenbrock4_dense_output<odeint::rosenbrock4_controller<odeint::rosenbrock4<double>>>;

struct ImplicitDenseStepper::Impl {
  Dense dense;
  Rhs rhs = nullptr;
  const void* context = nullptr;
  bool time_varying = false;
  mutable Vector scratch;

  Impl(std::size_t n, double atol, double rtol, double max_dt)
      : dense(odeint::rosenbrock4_controller<odeint::rosenbrock4<double>>(atol, rtol, max_dt)), scratch(n) {}

  void f(const Vector& x, Vector& dxdt, double t) const { rhs(context, &x.data()[0], &dxdt.data()[0], t); }

  void jacobian(const Vector& x, Matrix& jac, double t, Vector& dfdt) const {
    const std::size_t n = x.size();
    Vector xs = x, fp(n), fm(n);
    for (std::size_t j = 0; j < n; ++j) {
      const double h = 1e-6 * std::max(1.0, std::abs(x[j]));
      xs[j] = x[j] + h;
      f(xs, fp, t);
      xs[j] = x[j] - h;
      f(xs, fm, t);
      xs[j] = x[j];
      for (std::size_t i = 0; i < n; ++i) jac(i, j) = (fp[i] - fm[i]) / (2.0 * h);
    }
    if (!time_varying) {
      std::fill(dfdt.begin(), dfdt.end(), 0.0);
      return;
    }
    const double h = 1e-6 * std::max(1.0, std::abs(t));
    f(x, fp, t + h);
    f(x, fm, t - h);
    for (std::size_t i = 0; i < n; ++i) dfdt[i] = (fp[i] - fm[i]) / (2.0 * h);
  }
};

ImplicitDenseStepper::ImplicitDenseStepper(std::size_t size, double absolute_tolerance, double relative_tolerance,
                                           double max_dt)
    : impl_(std::make_unique<Impl>(size, absolute_tolerance, relative_tolerance, max_dt)) {}

ImplicitDenseStepper::~ImplicitDenseStepper() = default;

void ImplicitDenseStepper::set_system(Rhs rhs, const void* context, bool time_varying) {
  impl_->rhs = rhs;
  impl_->context = context;
  impl_->time_varying = time_varying;
}

void ImplicitDenseStepper::initialize(const double* x, double t, double dt) {
  Vector v(impl_->scratch.size());
  std::copy(x, x + v.size(), v.begin());
  impl_->dense.initialize(v, t, dt);
}

std::pair<double, double> ImplicitDenseStepper::do_step() {
  const Impl& impl = *impl_;
  auto system = [&impl](const Vector& x, Vector& dxdt, double t) { impl.f(x, dxdt, t); };
  auto jacobian = [&impl](const Vector& x, Matrix& jac, double t, Vector& dfdt) { impl.jacobian(x, jac, t, dfdt); };
  return impl_->dense.do_step(std::make_pair(system, jacobian));
}

void ImplicitDenseStepper::calc_state(double t, double* x) const {
  impl_->dense.calc_state(t, impl_->scratch);
  std::copy(impl_->scratch.begin(), impl_->scratch.end(), x);
}

const double* ImplicitDenseStepper::current_state() const { return &impl_->dense.current_state().data()[0]; }
double ImplicitDenseStepper::current_time() const { return impl_->dense.current_time(); }
double ImplicitDenseStepper::current_time_step() const { return impl_->dense.current_time_step(); }

}  // namespace specloop::detail
