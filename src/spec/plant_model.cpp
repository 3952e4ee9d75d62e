// The modelling step (plant_model.hpp, and model_spec of spec.hpp): a nonlinear plant compiled,
// its equilibrium and linearization found and turned into a transfer function, then every check
// that needed it — the plant's ranges, the controller and noise times against its fastest time
// constant, a zero steady-state error's integrator — with the reader's messages and lines.
#include "spec/plant_model.hpp"

#include "spec/plant_checks.hpp"
#include "specloop/core/lti.hpp"
#include "specloop/sim/expression_plant.hpp"

#include <algorithm>
#include <cmath>
#include <memory>
#include <stdexcept>

namespace specloop {

namespace reading {

namespace {

ExpressionDefinition definition_of(const NonlinearPlantSpec& nl) {
  ExpressionDefinition definition;
  definition.states = nl.states;
  definition.derivatives = nl.derivatives;
  definition.output = nl.output;
  definition.parameters = nl.parameters;
  return definition;
}

/// Where an ExpressionError points: the element, key or parameter it names.
[[noreturn]] void fail_expression(const ExpressionError& e, const ExpressionDefinition& definition,
                                  const SpecSources& sources) {
  using Part = ExpressionError::Part;
  const NonlinearSources& where = sources.nonlinear;
  std::string key;
  Position at{};
  switch (e.part) {
    case Part::state:
      key = fmt::format("plant.nonlinear.states[{}]", e.index);
      at = e.index < where.states.size() ? where.states[e.index] : where.states_entry;
      break;
    case Part::parameter:
      key = fmt::format("plant.nonlinear.parameters.{}", definition.parameters[e.index].first);
      at = where.parameters[e.index];
      break;
    case Part::derivative:
      if (e.index < where.derivatives.size()) {
        key = fmt::format("plant.nonlinear.derivatives[{}]", e.index);
        at = where.derivatives[e.index];
      } else {
        key = "plant.nonlinear.derivatives";
        at = where.derivatives_entry;
      }
      break;
    case Part::output:
      key = "plant.nonlinear.output";
      at = where.output_entry;
      break;
  }
  std::string message = e.what();
  if (e.position >= 0 && message.find("position") == std::string::npos && message.find("character") == std::string::npos)
    message += fmt::format(" (at character {} of the expression)", e.position + 1);
  fail_at(sources.path, at, key, message);
}

std::shared_ptr<ExpressionPlant> compiled(const ExpressionDefinition& definition, const SpecSources& sources) {
  try {
    return std::make_shared<ExpressionPlant>(definition);
  } catch (const ExpressionError& e) {
    fail_expression(e, definition, sources);
  }
}

/// The operating point's entries matched to the states and u, now that the names are known to be
/// valid: a guess per state into nl.state_guess, u into nl.input.
void match_operating_point(NonlinearPlantSpec& nl, const SpecSources& sources) {
  const NonlinearSources& where = sources.nonlinear;
  std::vector<std::string> point_names = nl.states;
  point_names.emplace_back("u");
  for (const PointEntry& p : where.point_entries) {
    if (std::find(point_names.begin(), point_names.end(), p.key) != point_names.end()) continue;
    const auto suggestion = likely_name(p.key, point_names);
    fail_at(sources.path, p.at, fmt::format("plant.nonlinear.operating_point.{}", p.key),
            fmt::format("not a state or u{}; expected u and a guess for each state: {}",
                        suggestion ? fmt::format(" (did you mean '{}'?)", *suggestion) : "",
                        fmt::join(point_names, ", ")));
  }
  nl.state_guess.clear();
  for (const auto& name : point_names) {
    const std::string key = fmt::format("plant.nonlinear.operating_point.{}", name);
    const auto found = std::find_if(where.point_entries.begin(), where.point_entries.end(),
                                    [&](const PointEntry& p) { return p.key == name; });
    if (found == where.point_entries.end())
      fail_at(sources.path, where.operating_point, key,
              name == "u" ? std::string("missing; the actuator value held at the operating point (absolute units)")
                          : fmt::format("missing; a guess for state '{}' (the equilibrium is searched from it)", name));
    if (!found->value.number)
      fail_at(sources.path, found->at, key, fmt::format("expected {}, got {}", found->value.expected, found->value.got));
    if (name == "u") {
      nl.input = found->value.number->value;
    } else {
      nl.state_guess.push_back(found->value.number->value);
    }
  }
}

/// A nonlinear plant's actuator limits are absolute values; the loop starts at rest at the
/// operating point, so u0 must lie within them.
void check_operating_input_within_limits(const Spec& spec, const SpecSources& sources) {
  if (!spec.actuator.limited || !sources.actuator_limits) return;
  const double u0 = spec.plant.nonlinear->input;
  if (u0 >= spec.actuator.min && u0 <= spec.actuator.max) return;
  const auto& entries = sources.nonlinear.point_entries;
  const auto u = std::find_if(entries.begin(), entries.end(), [](const PointEntry& p) { return p.key == "u"; });
  fail_at(sources.path, u->at, "plant.nonlinear.operating_point.u",
          fmt::format("{} lies outside the actuator limits [{}, {}]; for a nonlinear plant actuator.min and "
                      "actuator.max are absolute actuator values and the loop starts at rest at the operating "
                      "point, so u must lie within them",
                      u->value.number->shown, sources.actuator_limits->min, sources.actuator_limits->max));
}

struct OperatingPoint {
  Equilibrium equilibrium;
  Linearization linearization;
};

/// Newton from the guess with u held, then the Jacobians there.
OperatingPoint operating_point(const ExpressionPlant& model, const NonlinearPlantSpec& nl,
                               const ExpressionDefinition& definition, const SpecSources& sources) {
  OperatingPoint point;
  try {
    point.equilibrium = model.find_equilibrium(nl.state_guess, nl.input);
    point.linearization = model.jacobians_at(point.equilibrium.states, nl.input);
  } catch (const ExpressionError& e) {
    fail_expression(e, definition, sources);
  } catch (const std::runtime_error& e) {
    fail_at(sources.path, sources.nonlinear.operating_point, "plant.nonlinear.operating_point", e.what());
  }
  return point;
}

/// The linearization's transfer function; refused when u cannot move the plant, the output sees
/// nothing, or u does not reach the output.
TransferFunction linearized_transfer_function(const StateSpace& lin, const SpecSources& sources) {
  const NonlinearSources& where = sources.nonlinear;
  if (lin.B.cwiseAbs().maxCoeff() == 0.0)
    fail_at(sources.path, where.derivatives_entry, "plant.nonlinear.derivatives",
            fmt::format("no derivative changes with u at the operating point (∂f/∂u = 0 there): the input cannot "
                        "move the plant, so no loop can control it at this point"));
  if (lin.C.cwiseAbs().maxCoeff() == 0.0)
    fail_at(sources.path, where.output_entry, "plant.nonlinear.output",
            "does not change with any state at the operating point (∂h/∂x = 0 there): the loop would see nothing");
  const TransferFunction g = transfer_function_of(lin);
  if (g.numerator.is_zero())
    fail_at(sources.path, where.operating_point, "plant.nonlinear.operating_point",
            "the linearization's transfer function is zero: u does not reach the output at this operating point "
            "(the states u moves are not those the output sees)");
  for (double v : g.numerator.coefficients)
    if (!std::isfinite(v))
      fail_at(sources.path, where.operating_point, "plant.nonlinear.operating_point", "the linearization is not finite");
  return g;
}

/// What the modelling found, into the spec: the equilibrium, y0, Newton's figures, A, B, C, D.
void record_operating_point(NonlinearPlantSpec& nl, const Equilibrium& equilibrium, const StateSpace& lin) {
  nl.equilibrium = equilibrium.states;
  nl.output_value = equilibrium.output;
  nl.newton_iterations = equilibrium.iterations;
  nl.residual = equilibrium.residual;
  for (Eigen::Index i = 0; i < lin.A.rows(); ++i) {
    nl.a.emplace_back();
    for (Eigen::Index j = 0; j < lin.A.cols(); ++j) nl.a.back().push_back(lin.A(i, j));
    nl.b.push_back(lin.B(i));
    nl.c.push_back(lin.C(0, i));
  }
  nl.d = lin.D(0);
}

}  // namespace

PlantSources model_nonlinear_plant(PlantSpec& plant, const SpecSources& sources) {
  NonlinearPlantSpec& nl = *plant.nonlinear;
  const ExpressionDefinition definition = definition_of(nl);
  const std::shared_ptr<ExpressionPlant> model = compiled(definition, sources);
  match_operating_point(nl, sources);
  const OperatingPoint point = operating_point(*model, nl, definition, sources);
  const TransferFunction g = linearized_transfer_function(point.linearization.model, sources);
  record_operating_point(nl, point.equilibrium, point.linearization.model);
  model->set_operating_point(point.equilibrium.states, nl.input);
  nl.model = model;

  plant.given_as_zeros_poles = false;
  plant.numerator = g.numerator.coefficients;
  plant.denominator = g.denominator.coefficients;
  plant.zeros = polynomial_roots(plant.numerator);
  plant.poles = polynomial_roots(plant.denominator);
  plant.gain = plant.numerator.front() / plant.denominator.front();

  // The linearization's roots and gain come from the operating point.
  PlantSources where;
  const Position point_header = sources.nonlinear.operating_point;
  for (const auto& z : plant.zeros) where.zeros.push_back({z, "plant.nonlinear.operating_point", point_header});
  for (const auto& p : plant.poles) where.poles.push_back({p, "plant.nonlinear.operating_point", point_header});
  where.gain = {"plant.nonlinear.operating_point", point_header};
  where.delay = sources.plant.delay;
  return where;
}

}  // namespace reading

Spec model_spec(SpecAsRead read) {
  Spec spec = std::move(read.spec);
  if (!spec.plant.nonlinear || spec.plant.nonlinear->model) return spec;  // linear: read_spec checked it all
  if (!read.sources) throw std::logic_error("model_spec: a SpecAsRead without its sources (not made by read_spec)");
  const SpecSources& sources = *read.sources;
  const reading::PlantSources where = reading::model_nonlinear_plant(spec.plant, sources);
  const reading::TimeRule times = reading::check_plant_numerics(sources.path, spec.plant, where);
  reading::check_operating_input_within_limits(spec, sources);
  for (const reading::PendingTime& time : sources.pending_times) reading::check_pending_time(sources.path, time, times);
  reading::check_zero_error_integrator(sources.path, spec, sources);
  return spec;
}

}  // namespace specloop
