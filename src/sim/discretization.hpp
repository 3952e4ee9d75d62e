// The sampled controller's discretization (private to the sim layer; discretization.cpp), beside
// the public controller_difference_equation (nonlinear.hpp).
#pragma once

#include "specloop/core/compensator.hpp"

namespace specloop::nonlinear_loop {

/// Whether the sampled controller runs the parallel law (PID family) or Tustin of the whole C(s).
bool samples_parallel_law(const Controller& controller);

}  // namespace specloop::nonlinear_loop
