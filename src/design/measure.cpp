// A design measured on the linear loop (measure.hpp): closed-loop poles, the step response on the
// loop the spec's controller runs in (continuous or sampled), margins, the second-order
// prediction and its diagnosis, the requirement checks; and the fragility warnings.
#include "specloop/design/measure.hpp"

#include "specloop/design/regulation.hpp"

#include <cmath>
#include <fmt/format.h>
#include <stdexcept>

#include "specloop/sim/response.hpp"
#include "specloop/sim/sampled_loop.hpp"

namespace specloop {

namespace {
std::optional<Complex> slowest_complex_pair(const std::vector<Complex>& poles) {
  std::optional<Complex> best;
  for (const Complex& p : poles)
    if (p.imag() > 0.0 && (!best || p.real() > best->real())) best = p;
  return best;
}

// A check met with less normalized room than this is re-read on the knife-edge plants.
constexpr double kEdgeSlack = 1e-3;

// A met check that a 1e-6 move of the plant (knife_edge_plants) turns is on its limit: the last
// bits of the model decide it, so it is counted as not met, with the moved plant's reading as its
// violation and a note. Only checks within kEdgeSlack of their limit are re-read (the search keeps
// its designs search.margin_pct inside; the hand designs aim inside theirs), so this costs nothing
// for a design with room.
void judge_knife_edges(const Problem& problem, Design& d) {
  std::vector<std::size_t> near;
  for (std::size_t i = 0; i < d.checks.size(); ++i) {
    const RequirementCheck& c = d.checks[i];
    if (!c.met || !c.value || c.slack >= kEdgeSlack) continue;
    if (c.requirement.limit == 0.0 && std::abs(*c.value) <= 1e-9) continue;  // exact zero error: no edge
    near.push_back(i);
  }
  if (near.empty()) return;
  const ControllerSpec& cs = problem.spec.controller;
  std::optional<DifferenceEquation> eq;
  if (d.sampled)
    eq = controller_difference_equation(d.controller, cs.sample_time_s, setpoint_weight_of(cs, d.controller),
                                        cs.derivative_on_measurement ? 0.0 : 1.0);
  StepSimulator sim;
  SampledStepSimulator sampled;
  for (const TransferFunction& p : knife_edge_plants(problem.plant)) {
    const StateSpace realized = realize(p);
    StepMetrics m;
    const StepStatus status =
        d.sampled ? sampled.simulate(realized, *eq, problem.spec.reference.amplitude, problem.band_fraction, m)
                  : sim.simulate(design_loop(problem, realized, d),
                                 problem.spec.reference.amplitude, problem.band_fraction, m);
    const std::optional<Margins> margins =
        status == StepStatus::ok ? design_margins(problem, d.controller.transfer, p) : std::optional<Margins>{};
    if (status == StepStatus::ok && problem.needs_load) measure_load(problem, realized, d.controller, m);
    for (std::size_t i : near) {
      RequirementCheck& c = d.checks[i];
      if (!c.met) continue;
      std::optional<double> moved;
      double violation = 1.0;
      if (status == StepStatus::ok) {
        const RequirementCheck at = check_requirement(problem, c.requirement, m, margins);
        if (at.met) continue;
        moved = at.value;
        violation = at.violation;
      }
      c.met = false;
      c.violation = violation;
      c.slack = -violation;
      d.notes.push_back(fmt::format(
          "{} sits on its limit {:.6g}: {:.10g} here, but {} when the plant's gain or one of its poles moves by 1e-6; "
          "counted as not met",
          c.requirement.key, c.requirement.limit, *c.value,
          moved ? fmt::format("{:.10g}", *moved) : std::string(status_name(status)) + " loop"));
    }
  }
}

}  // namespace

RequirementCheck check_requirement(const Problem& problem, const Requirement& req, const StepMetrics& m,
                                   const std::optional<Margins>& margins) {
  RequirementCheck c;
  c.requirement = req;
  c.value = requirement_value(req, m, margins, problem.reference_peak_time_s, problem.band_fraction * 100.0);
  c.violation = requirement_violation(req, c.value);
  c.slack = requirement_slack(req, c.value);
  c.met = c.violation == 0.0;
  return c;
}

StateSpace design_loop(const Problem& problem, const StateSpace& plant, const Design& d) {
  const Controller& c = d.controller;
  if (!c.notch && !c.measurement_filter) return close_loop(plant, c.transfer, d.reference_path);
  const ControllerSpec& cs = problem.spec.controller;
  return close_loop(plant, controller_realization(c, setpoint_weight_of(cs, c), cs.derivative_on_measurement ? 0.0 : 1.0));
}

Design measure_design(const Problem& problem, DesignRole role, const Controller& controller) {
  Design d;
  d.role = role;
  d.controller = controller;
  const ControllerSpec& cs = problem.spec.controller;
  d.reference_path = reference_path(controller, setpoint_weight_of(cs, controller), cs.derivative_on_measurement ? 0.0 : 1.0);
  const StateSpace loop = design_loop(problem, problem.plant_realization, d);
  StepSimulator sim;
  StepMetrics continuous;
  const StepStatus continuous_status = sim.simulate(loop, problem.spec.reference.amplitude, problem.band_fraction, continuous);
  if (continuous_status == StepStatus::ok) d.linear_grid = linear_grid_of(sim.grid());
  d.status = continuous_status;
  d.simulated = continuous;
  if (problem.sampled) {
    // The loop the spec describes has a sampled controller: its linear loop is the sampled one.
    d.sampled = true;
    SampledStepSimulator sampled;
    try {
      const DifferenceEquation eq = controller_difference_equation(controller, cs.sample_time_s, setpoint_weight_of(cs, controller),
                                                                   cs.derivative_on_measurement ? 0.0 : 1.0);
      d.status = sampled.simulate(problem.plant_realization, eq, problem.spec.reference.amplitude, problem.band_fraction,
                                  d.simulated);
      if (d.status == StepStatus::ok) d.linear_grid = {sampled.horizon_s(), sampled.fine_step_s(), sampled.fine_until_s()};
      if (d.status == StepStatus::numerical_failure) d.notes.push_back("sampled loop: " + sampled.failure());
    } catch (const std::invalid_argument& e) {
      d.status = StepStatus::numerical_failure;
      d.notes.push_back(std::string("sampled loop: ") + e.what());
    }
    d.notes.push_back(fmt::format("linear metrics on the sampled loop (controller at Ts = {:.4g} s, zero-order hold, the "
                                  "plant's output between samples included); closed-loop poles, margins, the "
                                  "second-order prediction and the dominance diagnosis (its simulated response too) "
                                  "are those of the continuous C(s)·G(s)",
                                  cs.sample_time_s));
  }
  const ClosedLoopTF cl = close_loop(problem.plant, controller.transfer);
  d.closed_loop_poles = cl.output.poles();
  if (d.status == StepStatus::ok) {
    const auto pair = slowest_complex_pair(d.closed_loop_poles);
    if (pair && continuous_status == StepStatus::ok) {
      d.second_order = predict_second_order(*pair, problem.band_fraction);
      // r → y through the two-degree-of-freedom controller: C_r shares C's denominator, so
      // T = C_r,num·G_num / (C_den·G_den + C_num·G_num).
      const TransferFunction& g = problem.plant;
      const TransferFunction t(d.reference_path.numerator * g.numerator, cl.output.denominator);
      d.dominance = diagnose_dominance(t, *pair, *d.second_order, continuous);
    }
    d.margins = design_margins(problem, controller.transfer, problem.plant);
    if (problem.needs_load) {
      // The load response of the loop d.simulated was measured on (continuous or sampled).
      const StepStatus load = measure_load(problem, problem.plant_realization, controller, d.simulated,
                                           nullptr, &d.linear_grid.load_horizon_s);
      if (load != StepStatus::ok) d.notes.push_back(fmt::format("load response {}: not measured", status_name(load)));
    }
  } else {
    d.notes.push_back(fmt::format("{} loop {}: no metrics", d.sampled ? "sampled" : "linear", status_name(d.status)));
  }
  d.meets_all = d.status == StepStatus::ok;
  for (const Requirement& r : problem.requirements) {
    RequirementCheck c;
    if (d.status == StepStatus::ok) {
      c = check_requirement(problem, r, d.simulated, d.margins);
    } else {
      c.requirement = r;
      c.violation = 1.0;
      c.slack = requirement_slack(r, std::nullopt);
    }
    d.checks.push_back(c);
  }
  if (d.status == StepStatus::ok) judge_knife_edges(problem, d);
  for (const RequirementCheck& c : d.checks) d.meets_all = d.meets_all && c.met;
  return d;
}

std::vector<std::string> fragility_warnings(const Problem& problem, const Design& d, bool searched) {
  std::vector<std::string> out;
  const Spec& spec = problem.spec;
  if (d.margins && d.margins->delay_margin_s) {
    const double dm = *d.margins->delay_margin_s;
    if (dm < kDelayMarginFloor)
      out.push_back(fmt::format(
          "delay margin {:.3g} s: any loop delay longer than that (a sample-and-hold adds about half a period, a "
          "computation its time) destabilizes this loop, so it can be built only as an analog controller or one "
          "sampled faster than {:.3g} Hz with no computation delay; if that is not intended, bound the effort "
          "(actuator limits, effort_max) or require phase_margin_min_deg",
          dm, 1.0 / (2.0 * dm)));
    const double ts = spec.controller.sample_time_s;
    if (ts > 0.0 && dm < 2.0 * ts)
      out.push_back(fmt::format("delay margin {:.3g} s of the continuous loop is less than two sample periods ({:.3g} s): "
                                "the margins overstate the sampled loop's robustness (its hold alone adds about {:.3g} s "
                                "of delay)", dm, 2.0 * ts, ts / 2.0));
  }
  if (!spec.actuator.limited && !spec.requirements.effort_max) {
    // The command's final value u∞ = y∞/G(0) for a plant with a finite nonzero DC gain.
    const double g0 = problem.plant.dc_gain();
    if (std::isfinite(g0) && g0 != 0.0 && d.simulated.final_value != 0.0) {
      const double u_final = std::abs(d.simulated.final_value / g0);
      if (d.simulated.effort_peak > kEffortAmplification * u_final)
        out.push_back(fmt::format("the command peaks at {:.4g}, {:.3g}× its final value {:.4g}: with neither actuator "
                                  "limits nor effort_max in the spec nothing bounds it, and faster responses were "
                                  "bought with effort no real actuator may have — give the actuator's limits",
                                  d.simulated.effort_peak, d.simulated.effort_peak / u_final, u_final));
    }
  }
  if (d.nonlinear && d.nonlinear->status == NonlinearStatus::ok && !d.nonlinear->active_effects.empty() &&
      !d.nonlinear->simulated.settling_time_s) {
    // Every requirement may be met and yet the loop never arrives: a set point beyond the
    // actuator's reach, or a load the controller cannot take back. Say so.
    const NonlinearConfirmation& n = *d.nonlinear;
    out.push_back(fmt::format("on the loop the spec describes the response does not settle within the {:.4g} % band "
                              "around {:.4g} (where the linear loop goes) by the end of its {:.4g} s run: the set point "
                              "may lie beyond what the actuator can reach, or an effect holds the output away from it",
                              100.0 * problem.band_fraction, n.simulated.final_value, n.horizon_s));
  }
  if (searched) {
    for (std::size_t i = 0; i < problem.parameters.size() && i < d.controller.series.size(); ++i) {
      const auto [lo, hi] = problem.bounds[i];
      const double x = d.controller.series[i], span = std::log(hi / lo);
      const char* side = std::log(x / lo) <= 1e-3 * span ? "lower" : std::log(hi / x) <= 1e-3 * span ? "upper" : nullptr;
      if (side)
        out.push_back(fmt::format("{} = {:.5g} is at the {} bound of its search range [{:.4g}, {:.4g}]: the objective "
                                  "still improves beyond it (widen search.bounds.{} to see how far, or add the "
                                  "requirement that should stop it)",
                                  problem.parameters[i].name, x, side, lo, hi, problem.parameters[i].name));
    }
  }
  return out;
}

}  // namespace specloop
