// The nonlinear loop's two dense-output steppers behind one interface (private to the sim layer):
// odeint's dopri5 dense-output stepper is used as it is; ImplicitDense puts the Rosenbrock stepper
// (implicit_stepper.hpp, compiled as C++17) behind the same calls. step_within_domain retries a
// step whose trial stage left a plant model's domain.
#pragma once

#include <algorithm>
#include <cmath>
#include <utility>

#include <boost/numeric/odeint.hpp>

#include "sim/implicit_stepper.hpp"
#include "sim/loop_model.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop::nonlinear_loop {

// One dense-output step that survives a plant model evaluated outside its domain at a trial
// stage: the step is retried from the same (accepted) state with a step ten times smaller, up to
// kDomainRetries times per step and kDomainRetriesPerRun over a run (a trajectory that really
// reaches the domain's edge, like a tank draining empty, would otherwise crawl along it); a
// failure at the accepted state itself, or past either budget, is rethrown (the simulation
// reports it as non_finite). Each retry counts as work.
constexpr int kDomainRetries = 12;
constexpr int kDomainRetriesPerRun = 200;
template <typename Dense, typename System>
std::pair<double, double> step_within_domain(Dense& dense, System& system, int& work, int& retries) {
  for (int attempt = 0;; ++attempt) {
    try {
      return dense.do_step(system);
    } catch (const PlantEvaluationError&) {
      if (attempt >= kDomainRetries || retries >= kDomainRetriesPerRun) throw;
      ++retries;
      ++work;
      const State x = dense.current_state();
      dense.initialize(x, dense.current_time(), dense.current_time_step() / 10.0);
    }
  }
}

// The implicit stepper behind odeint's dense-output interface, on the same State.
class ImplicitDense {
 public:
  ImplicitDense(std::size_t n, double atol, double rtol, double max_dt) : stepper_(n, atol, rtol, max_dt), state_(n) {}
  void initialize(const State& x, double t, double dt) { stepper_.initialize(x.data(), t, dt); }
  template <class System>  // evaluate(x, dxdt, t) and time_varying()
  std::pair<double, double> do_step(const System& system) {
    stepper_.set_system([](const void* c, const double* x, double* dx, double t) {
      static_cast<const System*>(c)->evaluate(x, dx, t);
    }, &system, system.time_varying());
    return stepper_.do_step();
  }
  void calc_state(double t, State& x) const { stepper_.calc_state(t, x.data()); }
  const State& current_state() {
    std::copy(stepper_.current_state(), stepper_.current_state() + state_.size(), state_.begin());
    return state_;
  }
  double current_time() const { return stepper_.current_time(); }
  double current_time_step() const { return stepper_.current_time_step(); }

 private:
  detail::ImplicitDenseStepper stepper_;
  State state_;
};

// odeint's dopri5 (controlled, dense output) on State.
inline auto make_dopri5(double absolute_tolerance, double relative_tolerance, double max_dt) {
  return boost::numeric::odeint::make_dense_output(absolute_tolerance, relative_tolerance, max_dt,
                                                   boost::numeric::odeint::runge_kutta_dopri5<State>());
}

inline bool all_finite(const State& x) {
  return std::all_of(x.begin(), x.end(), [](double v) { return std::isfinite(v); });
}

}  // namespace specloop::nonlinear_loop
