// The classical root-locus design, the ultimate-gain baseline and the requirement set, against
// published worked examples, the Routh–Hurwitz criterion and the Ziegler–Nichols table.
#include <catch2/catch.hpp>
#include <cmath>
#include <numbers>

#include "specloop/design/design.hpp"

using namespace specloop;
using Catch::Matchers::WithinAbs;
using Catch::Matchers::WithinRel;

TEST_CASE("lead design by the bisector rule reproduces a published worked example", "[classical]") {
  // Ogata, Modern Control Engineering (5th ed.), Example 6-6: G(s) = 10/(s(s + 1)), desired
  // closed-loop poles −1.5 ± j2.5981 (ζ = 0.5, ωn = 3); the bisector method gives
  // Gc(s) = 1.2287·(s + 1.9432)/(s + 4.6458). (Published values recalled from memory. Worked
  // exactly, the construction gives −1.9373 and −4.6475, whose product is ωn² = 9 as the
  // bisector geometry requires; the published pair's product is 9.03, so the book's figures carry
  // about 0.3 % of construction error. We check them within 0.5 % and the exact properties
  // tightly.)
  const TransferFunction plant(Polynomial({10.0}), Polynomial({1.0, 1.0, 0.0}));
  const Complex target(-1.5, 3.0 * std::sqrt(3.0) / 2.0);
  std::vector<std::string> notes;
  const auto c = classical_controller(plant, Structure::lead, 10.0, target, 0.5, std::nullopt, notes);
  REQUIRE(c);
  const double zero = c->series[1], pole = c->series[1] * c->series[2];
  CHECK_THAT(zero, WithinRel(1.9432, 5e-3));
  CHECK_THAT(pole, WithinRel(4.6458, 5e-3));
  const double kc = c->series[0] * c->series[2];  // K·(s/z + 1)/(s/p + 1) = K·(p/z)·(s + z)/(s + p)
  CHECK_THAT(kc, WithinRel(1.2287, 5e-3));
  CHECK_THAT(zero * pole, WithinRel(9.0, 1e-9));  // bisector rule: z·p = |s_d|²
  // The target is a closed-loop pole of the designed loop.
  const auto cl = close_loop(plant, c->transfer).output;
  CHECK(std::abs(cl.denominator(target)) < 1e-9 * std::abs(cl.denominator.leading()) * std::pow(3.0, 3));
}

TEST_CASE("PD and PID designs place a closed-loop pole at the target (angle and magnitude conditions)", "[classical]") {
  const auto plant = TransferFunction::from_zeros_poles({}, {{-1.0, 0.0}, {-3.0, 0.0}, {-8.0, 0.0}}, 24.0);
  const Complex target(-2.5, 4.0);
  for (Structure s : {Structure::pd, Structure::pid}) {
    std::vector<std::string> notes;
    const auto c = classical_controller(plant, s, 10.0, target, 0.53, std::nullopt, notes);
    REQUIRE(c);
    const Complex loop = c->transfer(target) * plant(target);
    CHECK_THAT(std::abs(loop), WithinRel(1.0, 1e-9));                             // magnitude condition
    CHECK_THAT(std::abs(std::arg(-loop)), WithinAbs(0.0, 1e-9));                  // angle condition: L = −1
  }
}

TEST_CASE("ultimate gain and period agree with the Routh–Hurwitz criterion", "[baseline]") {
  // 1/(s(s + 1)(s + 2)): characteristic s³ + 3s² + 2s + K; the Routh array's s¹ row vanishes at
  // K = 6, where the auxiliary polynomial 3s² + 6 gives ω = √2 (standard Routh–Hurwitz analysis).
  const TransferFunction a(Polynomial({1.0}), Polynomial({1.0, 3.0, 2.0, 0.0}));
  const auto ua = ultimate_point(a);
  REQUIRE(ua);
  CHECK_THAT(ua->gain, WithinRel(6.0, 1e-9));
  CHECK_THAT(ua->frequency_rad_s, WithinRel(std::sqrt(2.0), 1e-9));
  CHECK_THAT(ua->period_s, WithinRel(2.0 * std::numbers::pi / std::sqrt(2.0), 1e-9));
  // 1/(s + 1)³: s³ + 3s² + 3s + 1 + K; Routh: 3·3 = 1 + K → K = 8, auxiliary 3s² + 9 → ω = √3.
  const TransferFunction b(Polynomial({1.0}), Polynomial({1.0, 3.0, 3.0, 1.0}));
  const auto ub = ultimate_point(b);
  REQUIRE(ub);
  CHECK_THAT(ub->gain, WithinRel(8.0, 1e-9));
  CHECK_THAT(ub->frequency_rad_s, WithinRel(std::sqrt(3.0), 1e-9));
  // A second-order plant never reaches the imaginary axis under P control.
  CHECK_FALSE(ultimate_point(TransferFunction(Polynomial({1.0}), Polynomial({1.0, 2.0, 1.0}))));
}

TEST_CASE("Ziegler–Nichols closed-loop table", "[baseline]") {
  // Ziegler & Nichols (1942), "Optimum settings for automatic controllers", Trans. ASME 64:
  // P: Kp = 0.5Ku; PI: Kp = 0.45Ku, Ti = Tu/1.2; PID: Kp = 0.6Ku, Ti = Tu/2, Td = Tu/8.
  const UltimatePoint u{10.0, 2.0, std::numbers::pi};
  const auto p = ziegler_nichols(Structure::p, u, 10.0);
  const auto pi = ziegler_nichols(Structure::pi, u, 10.0);
  const auto pid = ziegler_nichols(Structure::pid, u, 10.0);
  REQUIRE(p);
  REQUIRE(pi);
  REQUIRE(pid);
  CHECK(p->kp == 5.0);
  CHECK_THAT(pi->kp, WithinRel(4.5, 1e-15));
  CHECK_THAT(pi->ti, WithinRel(2.0 / 1.2, 1e-15));
  CHECK_THAT(pid->kp, WithinRel(6.0, 1e-15));
  CHECK_THAT(pid->ti, WithinRel(1.0, 1e-15));
  CHECK_THAT(pid->td, WithinRel(0.25, 1e-15));
  CHECK_FALSE(ziegler_nichols(Structure::lead, u, 10.0));
  // The table's PID, through our series parameterization, is the same controller.
  const auto series = series_from_standard(Structure::pid, *pid);
  REQUIRE(series);
  const Controller c = make_controller(Structure::pid, *series, 10.0);
  REQUIRE(c.standard);
  CHECK_THAT(c.standard->kp, WithinRel(pid->kp, 1e-12));
  CHECK_THAT(c.standard->ti, WithinRel(pid->ti, 1e-12));
  CHECK_THAT(c.standard->td, WithinRel(pid->td, 1e-12));
}

TEST_CASE("requirements read their values from the response", "[requirements]") {
  Requirements r;
  r.overshoot_max_pct = 10.0;
  r.peak_time_ratio = 0.5;
  r.phase_margin_min_deg = 45.0;
  const auto list = requirement_list(r);
  REQUIRE(list.size() == 3);
  CHECK(list[0].key == "overshoot_max_pct");
  CHECK(list[2].upper == false);
  // Peak-time requirements (README, "Metric definitions"): the visible peak's time, else the
  // final entry into the band (the settling time), never the first entry.
  StepMetrics m;
  m.overshoot_pct = 1.0;  // inside a 2 % band: no visible peak, the final entry counts
  m.peak_time_s = 3.0;
  m.band_entry_time_s = 1.2;
  m.settling_time_s = 4.0;
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0) == 2.0);
  m.overshoot_pct = 7.0;  // a visible peak: its time
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0) == 1.5);
  // A response that touches the band early, falls back and creeps in late (seen: 0.9808 at
  // 1.1 s, back to 0.72, in the band after 45 000 s) reads its final entry, not the touch.
  StepMetrics creep;
  creep.overshoot_pct = 0.0;
  creep.band_entry_time_s = 1.1;
  creep.settling_time_s = 45000.0;
  CHECK(requirement_value(list[1], creep, std::nullopt, 2.0, 2.0) == 22500.0);
  // A bump above the band that then falls further below y∞ than it rose is no decaying
  // oscillation: its peak does not count either.
  m.post_peak_dip_pct = 28.0;
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0) == 2.0);
  m.post_peak_dip_pct = 6.9;  // an oscillation that decays: the peak counts
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0) == 1.5);
  // The search's margin makes both tests stricter: 1 % more overshoot than the band, 1 % less dip.
  m.overshoot_pct = 2.01;
  m.post_peak_dip_pct = 0.0;
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0) == 1.5);
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0, 0.01) == 2.0);
  m.overshoot_pct = 7.0;
  m.post_peak_dip_pct = 6.95;
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0) == 1.5);
  CHECK(requirement_value(list[1], m, std::nullopt, 2.0, 2.0, 0.01) == 2.0);
  // No settling within the horizon: no value (a full miss).
  m.overshoot_pct = 1.0;
  m.settling_time_s.reset();
  CHECK(!requirement_value(list[1], m, std::nullopt, 2.0, 2.0));
  Margins margins;
  CHECK(std::isinf(*requirement_value(list[2], m, margins, 2.0, 2.0)));  // no gain crossover: infinite PM
}

TEST_CASE("every limit of the requirement catalogue is listed in check order and has a measurement",
          "[requirements][catalogue]") {
  // A new catalogue entry without a value in requirement_value fails here (it throws), as does one
  // whose member requirement_list does not read.
  Requirements r;
  for (const RequirementEntry* entry : requirement_check_order()) r.*(entry->limit) = 1.5;
  const auto list = requirement_list(r);
  REQUIRE(list.size() == requirement_check_order().size());
  StepMetrics m;
  m.overshoot_pct = 5.0;
  m.peak_time_s = 1.0;
  m.settling_time_s = 2.0;
  m.rise_time_s = 0.5;
  m.load_iae = 0.7;  // a regulator's run (design/regulation.hpp) carries its load response
  m.load_peak = 0.2;
  m.load_recovery_time_s = 3.0;
  Margins margins;
  margins.sensitivity_peak = 1.3;
  margins.complementary_peak = 1.1;
  margins.noise_gain = 4.0;
  for (std::size_t i = 0; i < list.size(); ++i) {
    const Requirement& q = list[i];
    INFO(q.key);
    REQUIRE(q.entry == requirement_check_order()[i]);
    CHECK(q.key == q.entry->key);
    CHECK(q.upper == (q.entry->bound == specloop::RequirementBound::upper));
    CHECK(q.magnitude == q.entry->on_magnitude);
    CHECK_NOTHROW(requirement_value(q, m, margins, 2.0, 2.0));
    // A frequency-domain requirement has no value without the margins; a step-response one does.
    const bool needs_margins = q.entry->source == specloop::RequirementSource::frequency_response;
    CHECK(requirement_value(q, m, std::nullopt, 2.0, 2.0).has_value() == !needs_margins);
    CHECK(requirement_value(q, m, margins, 2.0, 2.0).has_value());
    // A load requirement has no value where the load response was not simulated.
    if (q.entry->source == specloop::RequirementSource::load_response)
      CHECK_FALSE(requirement_value(q, StepMetrics{}, margins, 2.0, 2.0).has_value());
  }
}

TEST_CASE("the search's margin tightens every limit by its fraction", "[requirements]") {
  // Common practice (a design margin): upper limits move down, lower ones up, a zero limit stays.
  const Requirement os{"overshoot_max_pct", "%", true, 10.0};
  const Requirement pm{"phase_margin_min_deg", "deg", false, 45.0};
  const Requirement sse{"steady_state_error_max", "", true, 0.0};
  CHECK_THAT(tightened(os, 0.01).limit, Catch::Matchers::WithinRel(9.9, 1e-14));
  CHECK_THAT(tightened(pm, 0.01).limit, Catch::Matchers::WithinRel(45.45, 1e-12));
  CHECK(tightened(sse, 0.01).limit == 0.0);
  CHECK(tightened(os, 0.0).limit == 10.0);
  // Slack: the normalized room, negative when missed (README, result.json `slack`).
  CHECK_THAT(requirement_slack(os, 9.0), Catch::Matchers::WithinRel(0.1, 1e-12));
  CHECK_THAT(requirement_slack(os, 11.0), Catch::Matchers::WithinRel(-0.1, 1e-12));
  CHECK_THAT(requirement_slack(pm, 60.0), Catch::Matchers::WithinRel(1.0 / 3.0, 1e-12));
}

TEST_CASE("the tracking objectives reward following the reference", "[requirements]") {
  // README, "Objectives": the integral about y∞ plus what the offset r − y∞ alone accumulates
  // over the window W (elementary integrals of a constant: ∫₀^W t·c dt = c·W²/2, ∫₀^W c dt = c·W).
  StepMetrics m;
  m.final_value = 0.8;
  m.itae = 0.5;
  m.iae = 0.3;
  m.ise = 0.2;
  CHECK_THAT(tracking_objective(Objective::itae, m, 1.0, 4.0), Catch::Matchers::WithinRel(0.5 + 0.2 * 8.0, 1e-12));
  CHECK_THAT(tracking_objective(Objective::iae, m, 1.0, 4.0), Catch::Matchers::WithinRel(0.3 + 0.2 * 4.0, 1e-12));
  CHECK_THAT(tracking_objective(Objective::ise, m, 1.0, 4.0), Catch::Matchers::WithinRel(0.2 + 0.04 * 4.0, 1e-12));
  m.final_value = 1.0;  // no offset: the plain integrals
  CHECK(tracking_objective(Objective::itae, m, 1.0, 4.0) == 0.5);
  // A gain driven to zero shrinks the integrals about y∞ but not the offset term.
  StepMetrics idle;
  idle.final_value = 0.0035;
  idle.itae = 1e-4;
  CHECK(tracking_objective(Objective::itae, idle, 1.0, 4.0) > tracking_objective(Objective::itae, m, 1.0, 4.0));
  CHECK_THROWS_AS(tracking_objective(Objective::effort, m, 1.0, 4.0), std::logic_error);
}

namespace {
Problem problem_from(const std::string& text) {
  const Spec spec = parse_spec(text, "specs/unit.toml");
  return make_problem(spec, characterize(spec));
}
}  // namespace

TEST_CASE("nonlinear confirmation: wide limits reproduce the linear loop", "[confirmation]") {
  // An invented winch drive, PI on two lags; limits far beyond anything the loop asks for.
  const Problem p = problem_from(
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -1e6\nmax = 1e6\n"
      "[controller]\nstructure = \"pi\"\n[requirements]\novershoot_max_pct = 10.0\nsettling_time_max = 30.0\n");
  const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {1.2, 0.6}, 10.0));
  REQUIRE(d.nonlinear);
  REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
  CHECK(d.nonlinear->confirmed);
  CHECK(d.nonlinear->saturated_fraction == 0.0);
  // Sample-based metrics (nonlinear.hpp): 20000 samples over the horizon.
  CHECK_THAT(d.nonlinear->simulated.overshoot_pct, WithinAbs(d.simulated.overshoot_pct, 1e-3));
  CHECK_THAT(d.nonlinear->simulated.itae, WithinRel(d.simulated.itae, 1e-4));
  CHECK_THAT(*d.nonlinear->simulated.settling_time_s, WithinRel(*d.simulated.settling_time_s, 1e-3));
}

TEST_CASE("nonlinear confirmation: a saturating actuator with no anti-windup is caught", "[confirmation]") {
  // The same drive with a weak actuator and no anti-windup: the integrator winds up, the
  // overshoot grows past the limit the linear design met, and the verdict says why.
  const Problem p = problem_from(
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -0.9\nmax = 0.9\n"
      "[controller]\nstructure = \"pi\"\nanti_windup = \"none\"\n"
      "[requirements]\novershoot_max_pct = 10.0\n[reference]\namplitude = 1.0\n");
  // Linear: 3.8 % overshoot with a peak effort of 2.06, so the ±0.9 actuator saturates.
  const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {2.0, 0.8}, 10.0));
  REQUIRE(d.checks.front().met);  // linear overshoot within the limit
  REQUIRE(d.nonlinear);
  CHECK(d.nonlinear->saturated_fraction > 0.0);
  CHECK(d.nonlinear->simulated.overshoot_pct > d.simulated.overshoot_pct);
  CHECK_FALSE(d.nonlinear->confirmed);
  CHECK(d.nonlinear->verdict.find("overshoot_max_pct") != std::string::npos);
  CHECK(d.nonlinear->verdict.find("saturates") != std::string::npos);
}

TEST_CASE("nonlinear confirmation carries the exact delay and the sampled controller", "[confirmation]") {
  // The winch drive with a 0.1 s delay: the linear loop uses the order-3 Padé approximant, the
  // nonlinear loop the exact delay; for this slow loop (ω·L ≈ 0.1) the two agree closely.
  const std::string base =
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\ndelay = 0.1\n"
      "[requirements]\novershoot_max_pct = 10.0\nsettling_time_max = 30.0\n";
  const Problem delayed = problem_from(base + "[controller]\nstructure = \"pi\"\n");
  CHECK(delayed.plant.denominator.degree() == 2 + kDelayApproximantOrder);
  const Design d = measure_and_confirm(delayed, DesignRole::optimized, make_controller(Structure::pi, {1.2, 0.6}, 10.0));
  REQUIRE(d.nonlinear);
  REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
  CHECK_THAT(d.nonlinear->simulated.itae, WithinRel(d.simulated.itae, 1e-3));
  CHECK(d.nonlinear->verdict.find("delay") != std::string::npos);
  CHECK_FALSE(d.nonlinear->difference_equation);
  // The same with a digital controller at 20 ms: its difference equation is reported and the
  // loop stays close to the continuous one.
  const Problem sampled = problem_from(base + "[controller]\nstructure = \"pi\"\nsample_time = 0.02\n");
  const Design s = measure_and_confirm(sampled, DesignRole::optimized, make_controller(Structure::pi, {1.2, 0.6}, 10.0));
  REQUIRE(s.nonlinear);
  REQUIRE(s.nonlinear->difference_equation);
  CHECK(s.nonlinear->difference_equation->sample_time_s == 0.02);
  CHECK_THAT(s.nonlinear->simulated.itae, WithinRel(d.simulated.itae, 0.05));
}

TEST_CASE("set-point weights: the linear and nonlinear loops agree, and the derivative kick goes", "[confirmation]") {
  // u = Kp·(b·r − y) + Ki∫(r − y) + Kd·D(c·r − y) (Åström–Hägglund's two-degree-of-freedom PID):
  // with b = 0.5 and the derivative on the measurement (c = 0), u(0+) = Kp·b·r, no kick.
  const Problem p = problem_from(
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[controller]\nstructure = \"pid\"\nsetpoint_weight = 0.5\n"
      "derivative_on = \"measurement\"\n[requirements]\novershoot_max_pct = 10.0\n");
  const Controller c = make_controller(Structure::pid, {1.5, 1.2, 1.1}, 10.0);
  const Design d = measure_and_confirm(p, DesignRole::optimized, c);
  REQUIRE(d.status == StepStatus::ok);
  {
    StepSimulator sim;
    StepMetrics m;
    StepTrace trace;
    REQUIRE(sim.simulate(close_loop(p.plant_realization, c.transfer, d.reference_path), 1.0, 0.02, m, &trace) ==
            StepStatus::ok);
    CHECK_THAT(trace.effort.front(), WithinRel(1.5 * 0.5, 1e-12));  // u(0+) = Kp·b·r
  }
  CHECK(d.simulated.effort_peak < 1.5 * 11.0 / 4.0);               // far below the kick Kp·(1 + N)·r
  // The reference path: C_r(0) has the same integral action, so zero steady-state error remains.
  CHECK_THAT(d.simulated.steady_state_error, WithinAbs(0.0, 1e-12));
  // Without saturation the nonlinear loop (the parallel form itself) reproduces the linear one.
  REQUIRE(d.nonlinear);
  CHECK_THAT(d.nonlinear->simulated.itae, WithinRel(d.simulated.itae, 1e-4));
  CHECK_THAT(d.nonlinear->simulated.overshoot_pct, WithinAbs(d.simulated.overshoot_pct, 1e-3));
  // Unweighted, the kick is Kp·(1 + N)·r.
  const Problem plain = problem_from(
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[controller]\nstructure = \"pid\"\n[requirements]\n"
      "overshoot_max_pct = 10.0\n");
  const Design k = measure_and_confirm(plain, DesignRole::optimized, c);
  CHECK_THAT(k.simulated.effort_peak, WithinRel(1.5 * 11.0, 1e-9));
  CHECK_THROWS_AS(parse_spec("[plant]\npoles = [-1.0]\n[controller]\nstructure = \"lag\"\nsetpoint_weight = 0.5\n",
                             "specs/unit.toml"), SpecError);
}

TEST_CASE("the search ends on the loop the spec describes when an effect acts; the verdict is read there", "[search]") {
  // An invented winch drive whose ±0.9 actuator saturates and whose PI has no anti-windup: the
  // linear optimum winds up on the real loop.
  const std::string base =
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -0.9\nmax = 0.9\n"
      "[controller]\nstructure = \"pi\"\nanti_windup = \"none\"\n"
      "[requirements]\novershoot_max_pct = 5.0\nsettling_time_max = 6.0\nsteady_state_error_max = 0.0\n";
  // search.simulate = "linear": no nonlinear stage, but the limits act, so the verdict is read on
  // the nonlinear loop, where the linear optimum fails: a linear-only pass is not "met".
  const DesignRun linear = run_design(parse_spec(base + "[search]\nsimulate = \"linear\"\n", "specs/unit.toml"));
  CHECK(linear.search.nonlinear_evaluations == 0);
  CHECK(linear.search.active_effects == std::vector<std::string>{"actuator_limits"});
  CHECK(linear.judged_on_nonlinear);
  CHECK(linear.met_on_linear);
  CHECK_FALSE(linear.met);
  REQUIRE(linear.infeasibility);
  CHECK_THAT(linear.infeasibility->nearest_text, Catch::Contains("linear-only pass"));
  const Design* l = linear.find(DesignRole::optimized);
  REQUIRE(l->nonlinear);
  CHECK_FALSE(l->nonlinear->confirmed);  // the linear optimum winds up

  // The default (auto) and "nonlinear" both end on the nonlinear loop and repair it there.
  for (const char* mode : {"", "[search]\nsimulate = \"nonlinear\"\n"}) {
    const DesignRun refined = run_design(parse_spec(base + mode, "specs/unit.toml"));
    CHECK(refined.judged_on_nonlinear);
    CHECK(refined.search.nonlinear_evaluations > 0);
    const Design* r = refined.find(DesignRole::optimized);
    REQUIRE(r->nonlinear);
    CHECK(r->nonlinear->meets_all);
    CHECK(refined.met);
  }
}

TEST_CASE("a sampled spec's reference P gain is aimed on the sampled loop it is measured on", "[reference]") {
  // An invented linear stage (two lags) with a 100 Hz digital P: the hold's lag adds overshoot, so
  // analyze's gain (continuous loop at the limit) overshoots the limit on the sampled loop.
  const Spec spec = parse_spec(
      "[plant]\npoles = [-3.0, -20.0]\ngain = 120.0\n[controller]\nstructure = \"p\"\nsample_time = 0.01\n"
      "[requirements]\novershoot_max_pct = 10.0\n[search]\nmax_evaluations = 60\n",
      "specs/unit.toml");
  const DesignRun run = run_design(spec);
  const Design* ref = run.find(DesignRole::reference);
  REQUIRE(ref);
  REQUIRE(ref->sampled);
  REQUIRE(ref->status == StepStatus::ok);
  REQUIRE(run.characterization.reference);
  CHECK_THAT(ref->simulated.overshoot_pct, WithinAbs(10.0, 0.01));
  CHECK(ref->simulated.overshoot_pct <= 10.0);
  const double k_ref = ref->controller.transfer.numerator.constant();
  CHECK(k_ref < 0.95 * run.characterization.reference->gain);  // the continuous gain overshoots here
  REQUIRE(run.problem.reference_peak_time_s);
  CHECK(*run.problem.reference_peak_time_s == *ref->simulated.peak_time_s);
}

TEST_CASE("effort_max reads the command on the nonlinear loop, not the clipped u", "[confirmation]") {
  // The winch drive with a ±0.9 actuator and effort_max at the same 0.9: the PI commands 2.06 at
  // its peak (linear loop), which the actuator clips to 0.9. Read off the applied u the limit would
  // be met by clipping; it must not be (README: effort_max reads command_peak there).
  const Problem p = problem_from(
      "[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -0.9\nmax = 0.9\n"
      "[controller]\nstructure = \"pi\"\n"
      "[requirements]\novershoot_max_pct = 10.0\neffort_max = 0.9\n");
  const Design d = measure_and_confirm(p, DesignRole::optimized, make_controller(Structure::pi, {2.0, 0.8}, 10.0));
  REQUIRE(d.nonlinear);
  REQUIRE(d.nonlinear->status == NonlinearStatus::ok);
  const StepMetrics& m = d.nonlinear->simulated;
  REQUIRE(m.command_peak);
  CHECK(m.effort_peak <= 0.9 + 1e-12);  // the actuator delivers at most its limit
  CHECK(*m.command_peak > 1.5);          // the controller asks for far more
  // the linear loop has no separate command: one signal
  CHECK_FALSE(d.simulated.command_peak);
  bool found = false;
  for (const RequirementCheck& c : d.nonlinear->checks) {
    if (c.requirement.key != "effort_max") continue;
    found = true;
    REQUIRE(c.value);
    CHECK(*c.value == *m.command_peak);
    CHECK_FALSE(c.met);
  }
  CHECK(found);
}
