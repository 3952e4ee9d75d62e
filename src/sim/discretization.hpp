// The sampled controller's discretization (private to the sim layer; discretization.cpp), beside
// the public controller_difference_equation (nonlinear.hpp).
#pragma once

#include <vector>

#include "specloop/core/compensator.hpp"

namespace specloop::nonlinear_loop {

/// Whether the sampled controller runs the parallel law (PID family) or Tustin of the whole C(s).
bool samples_parallel_law(const Controller& controller);

/// Whether a controller with filters runs the parallel law (its PID part is of the PID family):
/// the sampled loop then runs the PID's terms (integral and derivative by Tustin) on F·y and N
/// after them, with the anti-windup on the integrator.
bool samples_filtered_parallel_law(const Controller& controller);

/// A filter's difference equation in w = z⁻¹ (lowest power first, den[0] = 1).
struct DiscreteSection {
  std::vector<double> num, den;
};
/// F(s) by Tustin; N(s) by Tustin prewarped at its frequency (README "Filters"). The notch's
/// frequency must lie below the Nyquist frequency π/Ts (else std::invalid_argument).
DiscreteSection measurement_filter_section(const MeasurementFilter& f, double ts);
DiscreteSection notch_section(const NotchFilter& f, double ts);

}  // namespace specloop::nonlinear_loop
