// The modelling step of a nonlinear plant (private to the spec layer; the public step is
// model_spec in spec.hpp): the expressions compiled, the operating point matched to the states,
// the equilibrium found by Newton from the guess, the Jacobians there, and the transfer function
// of that linearization.
#pragma once

#include "spec/reader_core.hpp"

namespace specloop::reading {

/// Models plant.nonlinear as read: compiles its expressions (ExpressionPlant), matches the
/// operating point's entries to the states and u, finds the equilibrium with u held there,
/// linearizes there, and fills the
/// plant's linear forms (both), plant.nonlinear's found values and its model (set to deviation
/// variables). Each failure is a SpecError at the key and line `sources` names. Returns where the
/// plant checks blame the linearization's roots and gain (the operating point) and the delay.
PlantSources model_nonlinear_plant(PlantSpec& plant, const SpecSources& sources);

}  // namespace specloop::reading
