// The table of spec-file keys (spec.hpp, `spec_keys`): the one list that the spec reader checks
// key names against (unknown keys, did-you-mean, "valid keys in [...]") and that
// `specloop keys` prints, with unit, default and meaning. The README's spec-key table is this
// table as printed by `specloop keys --markdown` (a test compares them). The [requirements] rows
// are made from the requirement catalogue (requirement_catalogue.hpp).
#include "specloop/spec/requirement_catalogue.hpp"
#include "specloop/spec/spec.hpp"

#include <fmt/format.h>

#include <deque>
#include <iterator>
#include <string>

namespace specloop {

namespace {

// Order matters: within each section it is the order the reader lists valid keys in. The
// [requirements] rows come from the requirement catalogue, between these two lists.
constexpr SpecKey kKeysBeforeRequirements[] = {
    {"title", "—", "file name", "free text for tables and reports"},
    {"plant.zeros", "rad/s", "`[]`",
     "zeros of k·Π(s − z)/Π(s − p); a number is a real zero, `[re, im]` (im > 0) the pair re ± j·im; fewer zeros "
     "than poles; each nonzero magnitude in [1e-5, 1e5] (see \"What the numerics honour\" below)"},
    {"plant.poles", "rad/s", "required with `zeros`/`gain`",
     "poles, same notation; at least one; each nonzero magnitude in [1e-5, 1e5], the fastest at most 1e6 times the "
     "slowest; no pole with Re ≥ 0 cancelled by a zero (below)"},
    {"plant.gain", "output/input units", "1",
     "k, nonzero; negative is fine (reverse action, see `design`); the plant's gain scale |G(jω_m)| in [1e-6, 1e6] "
     "(below)"},
    {"plant.numerator", "—", "—",
     "instead of zeros/poles/gain: coefficients, highest power of s first, leading one nonzero; its roots obey "
     "`plant.zeros`' rules"},
    {"plant.denominator", "—", "—",
     "as above; degree > numerator degree (strictly proper: a biproper plant, whose output follows the input "
     "instantly, is refused — see below); its roots obey `plant.poles`' rules"},
    {"plant.delay", "s", "0",
     "transport delay, 0 or about 5.1e-5 … 4.6e5 s: an order-3 Padé approximant in every linear computation "
     "(analyze, design, search; said in the output), the exact delay in the nonlinear confirmation; the "
     "approximant's poles (≈ 3.7/delay … 5.1/delay rad/s) obey `plant.poles`' magnitude and spread rules"},
    {"plant.nonlinear.states", "—", "—",
     "instead of the two forms above: state names, in state order (at least one)"},
    {"plant.nonlinear.derivatives", "state units/s", "—",
     "one expression per state: its time derivative, from states, parameters and `u`"},
    {"plant.nonlinear.output", "output units", "—", "y as an expression of the states (at least one) and parameters"},
    {"plant.nonlinear.parameters.<name>", "as used", "none", "finite numbers, e.g. `parameters = { area = 0.25 }`"},
    {"plant.nonlinear.operating_point.<state>", "state units", "required",
     "a guess per state; the equilibrium is searched from it"},
    {"plant.nonlinear.operating_point.u", "input units", "required",
     "the actuator value held at the operating point (absolute), within the actuator limits"},
    {"actuator.min", "input units", "unlimited",
     "lower saturation limit; both min and max or neither, min ≤ 0 ≤ max, min < max (the loop starts at rest); for "
     "`[plant.nonlinear]` absolute values with min ≤ operating_point.u ≤ max"},
    {"actuator.max", "input units", "unlimited", "upper saturation limit, as `actuator.min`"},
    {"actuator.rate_max", "input units/s", "unlimited", "slew limit of the applied u, > 0"},
    {"controller.structure", "—", "`pid`", "{structures}"},  // filled from the vocabulary's table
    {"controller.derivative_filter", "—", "10",
     "N: the derivative's filter pole sits N times beyond the derivative zero; in (0, 1000] (common practice 2–20)"},
    {"controller.anti_windup", "—", "`conditional-integration`",
     "`none`, `conditional-integration` (stop integrating while saturated and the error drives further in), "
     "`back-calculation` (nonlinear confirmation)"},
    {"controller.tracking_time", "s", "√(Ti·Td), or Ti without D",
     "back-calculation tracking time Tt, ≥ 1e-4 of the plant's fastest time constant (as `sample_time`)"},
    {"controller.sample_time", "s", "continuous",
     "≥ 1e-4 of the plant's fastest time constant (1/ its largest pole or zero magnitude; any value > 0 for a plant "
     "whose poles and zeros are all at s = 0): the controller runs digitally at this period (Tustin integral, "
     "backward-difference filtered derivative, zero-order hold) — in the search and every design's measurement "
     "(the sampled loop, exactly) and in the nonlinear confirmation; its difference equation is in result.json"},
    {"controller.setpoint_weight", "—", "1",
     "b: the proportional term acts on b·r − y, in [0, 1] (PID-type structures)"},
    {"controller.derivative_on", "—", "`error`", "`error` (c = 1) or `measurement` (c = 0: no derivative kick)"},
    {"controller.notch", "—", "none",
     "a notch N(s) = (s² + 2·depth·width·ωn·s + ωn²)/(s² + 2·width·ωn·s + ωn²) in series with the controller's output "
     "(u = N·(C_r·r − C·F·y)): a table `{frequency, depth, width}` (below), or `\"search\"`: the optimizer places it "
     "(frequency within [0.5, 2]× the plant's lightly damped poles (ζ < 0.3) unless `search.bounds.notch_frequency` "
     "says otherwise; depth in [0.01, 0.5], width in [0.05, 1]; `search.bounds.notch_depth`, `notch_width`). The "
     "optimized design only (README \"Filters\")"},
    {"controller.notch.frequency", "rad/s", "—",
     "ωn, > 0; below the Nyquist frequency π/`sample_time` of a sampled controller"},
    {"controller.notch.depth", "—", "—", "the gain |N(jωn)| at ωn, in (0, 1) (0.1 is −20 dB)"},
    {"controller.notch.width", "—", "—", "the pole damping ζp, in (0, 1]: the dip is about 2·ζp·ωn wide"},
    {"controller.measurement_filter", "—", "none",
     "a low-pass F on the measured output (u = C_r·r − C·F·y): a table `{order, time_constant}`, or "
     "`\"search\"` (order 1, Tf searched in [0.01, 1]/ω over the plant's pole and zero magnitudes unless "
     "`search.bounds.filter_time_constant` says otherwise). The optimized design only"},
    {"controller.measurement_filter.order", "—", "—", "1: 1/(Tf·s + 1); 2: 1/((Tf·s)²/2 + Tf·s + 1) (damping 1/√2)"},
    {"controller.measurement_filter.time_constant", "s", "—", "Tf, > 0"},
};

constexpr SpecKey kKeysAfterRequirements[] = {
    {"reference.amplitude", "output units", "1",
     "step size, magnitude in [1e-6, 1e6], either sign (for `[plant.nonlinear]`: measured from the operating output "
     "y0)"},
    {"search.objective", "—", "`itae`",
     "minimized among feasible designs: `itae`, `iae`, `ise`, `effort`, `settling_time`, `sensitivity_peak`, `load_iae` (a regulator: README, \"Regulators\")"},
    {"search.seed", "—", "1", "NLopt's random seed: runs repeat exactly"},
    {"search.max_evaluations", "—", "6000",
     "cost evaluations of the linear stages (global + local), at least 20; the nonlinear stage adds a tenth of it (40 "
     "to 400)"},
    {"search.max_time", "s (wall clock)", "20", "wall-time cap of one search, in (0, 86400]"},
    {"search.simulate", "—", "`auto`",
     "`auto`: the search ends on the nonlinear loop when an effect the linear loop leaves out acts for the linear "
     "optimum (measured: limits the command goes beyond, a binding rate limit, sampling, delay, expression plant, "
     "noise, load step; not when only the delay and a load step act and the linear optimum meets everything on both "
     "loops), and the verdict and exit code come from that loop; `nonlinear`: that stage always; "
     "`linear`: never (the verdict is still read on the loop the spec describes). See \"Which loop judges\""},
    {"search.margin_pct", "%", "1",
     "the search's design margin, in [0, 50): in the search every limit is tightened by this percentage of itself "
     "(≤ L becomes ≤ L − m·|L|, ≥ L becomes ≥ L + m·|L|; a zero limit stays zero), the settling band is narrowed by "
     "the same percentage, and a peak counts as visible only with this much to spare (overshoot above band·(1 + m), "
     "dip below overshoot·(1 − m)); so a design it returns keeps room on every limit and still meets them all when "
     "the plant's gain and poles move by 1e-6 (checked by `tests/design/test_margin_robustness.cpp`). The checks use the "
     "spec's own limits. `0`: no margin (designs may sit exactly on a limit)"},
    {"search.objective_at", "—", "`nominal`",
     "with `[uncertainty]`: `nominal` minimizes the objective on the nominal plant, `worst` its worst value over the "
     "scenario set"},
    {"search.tune_setpoint_weight", "—", "false",
     "`true`: the set-point weight b (the proportional term acts on b·r − y) is searched with the feedback gains, "
     "in [0.01, 1] unless `search.bounds.setpoint_weight` says otherwise (log scale, like every parameter): the "
     "feedback is tuned for the loop's robustness and disturbances, b for the set-point overshoot. PI and PID only; "
     "not together with `controller.setpoint_weight`"},
    {"search.bounds.<parameter>", "parameter's unit", "from the plant",
     "`[low, high]`, 0 < low < high; parameter names per structure in the `design` section; the gain's bounds are on "
     "its magnitude (reverse action makes it negative)"},
    {"disturbance.time", "s", "0", "when a load step arrives at the plant input, ≥ 0"},
    {"disturbance.size", "input units", "0", "size of that step (0: none)"},
    {"disturbance.noise_rms", "output units", "0",
     "measurement noise (standard deviation) added to y where the controller reads it, ≥ 0; 0: none (nonlinear "
     "confirmation)"},
    {"disturbance.noise_period", "s", "`controller.sample_time`, else horizon/2000",
     "each noise value is held this long (a staircase of independent Gaussian values; bandwidth ≈ 1/(2·period) Hz), "
     "≥ 1e-4 of the plant's fastest time constant (as `sample_time`)"},
    {"disturbance.seed", "—", "1",
     "seed of the noise sequence (whole number in [0, 2^53]); the same seed gives the same noise on every machine"},
    {"sweep.vary", "—", "none",
     "`specloop sweep`'s axes: a non-empty array of strings `\"KEY=FROM:TO:COUNT\"`, `\"KEY=FROM:TO:COUNTlog\"` or "
     "`\"KEY=a,b,c\"` (syntax checked when the spec is read; keys checked by `sweep`); ignored by `analyze` and "
     "`design`, replaced by `--vary`"},
    {"uncertainty.<plant key>", "the key's unit", "none",
     "`[low, high]`, low < high, containing the value `[plant]` gives the key (the nominal); the key is a numeric "
     "plant key as in `sweep --vary`, quoted: `\"plant.gain\" = [120.0, 200.0]`, `\"plant.poles[1][1]\" = [2.5, 3.5]`, "
     "`\"plant.nonlinear.parameters.area\" = [0.2, 0.3]`; a gain's range may not contain 0, a delay's starts at ≥ 0, "
     "an imaginary part's stays > 0. See \"Robust design\""},
    {"uncertainty.samples", "—", "64", "seeded Latin-hypercube plants inside the box besides its corners, in [0, 10000]"},
    {"uncertainty.seed", "—", "1", "seed of those plants and of the verification sample (whole number in [0, 2^53])"},
    {"uncertainty.mode", "—", "`worst-case`",
     "`worst-case`: every requirement on every scenario (nominal, corners, samples); `yield`: on at least "
     "`yield_min_pct` of the random plants"},
    {"uncertainty.yield_min_pct", "%", "95", "mode `yield`: the share of plants that must meet every requirement, in (0, 100]"},
    {"uncertainty.verify_samples", "—", "1000",
     "fresh random plants the design is re-checked on after the search (the claim's plants), in [1, 1000000]"},
    {"uncertainty.scale", "—", "1",
     "every range's half-widths multiplied by this about the nominal, in [0, 10] (`sweep --vary uncertainty.scale=…` "
     "maps how much plant variation a spec tolerates)"},
    {"uncertainty.max_corners", "—", "64",
     "every corner of the box is a scenario when there are at most this many (2^ranges), else this many chosen "
     "deterministically plus the worst corners found; in [2, 4096]"},
    {"rules.simc_tau_c", "s", "the model's delay",
     "SIMC's closed-loop time constant τc, > 0 (the `simc` design column; see \"Published tuning rules\"); smaller is "
     "faster and less robust. Without it, a model with no delay leaves SIMC out"},
    {"units.output", "—", "`output units`",
     "name of the output's unit (e.g. `\"m/s\"`), shown in figure axes, tables, the terminal and result.json; a "
     "non-empty string of at most 24 characters, no control characters"},
    {"units.input", "—", "`input units`", "name of the actuator's unit (e.g. `\"V\"`), shown likewise"},
    {"units.time", "—", "`s`",
     "name of the time unit the spec's times are written in, shown likewise; a label only: nothing is converted, "
     "every key in s above is then in this unit and rad/s becomes rad/<unit> (`search.max_time` stays wall-clock "
     "seconds)"},
};

}  // namespace

const std::vector<SpecKey>& spec_keys() {
  static const std::vector<SpecKey> keys = [] {
    // The requirement rows' texts, kept for the program's lifetime (SpecKey holds views).
    static std::deque<std::string> texts;
    std::vector<SpecKey> rows(std::begin(kKeysBeforeRequirements), std::end(kKeysBeforeRequirements));
    for (const RequirementEntry& entry : requirement_catalogue()) {
      const std::string& key = texts.emplace_back(fmt::format("requirements.{}", entry.key));
      const std::string& default_value =
          texts.emplace_back(entry.is_limit() ? std::string("—") : fmt::format("{}", Requirements{}.*entry.setting));
      const std::string& meaning = texts.emplace_back(requirement_meaning_text(entry));
      rows.push_back({key, requirement_unit_key_text(entry.unit), default_value, meaning});
    }
    rows.insert(rows.end(), std::begin(kKeysAfterRequirements), std::end(kKeysAfterRequirements));
    // The structures' names as the reader accepts them (vocabulary.cpp), so a new structure is listed.
    std::string& names = texts.emplace_back();
    for (const std::string& name : structure_names()) names += fmt::format("{}`{}`", names.empty() ? "" : ", ", name);
    for (SpecKey& row : rows)
      if (row.meaning == "{structures}") row.meaning = names;
    return rows;
  }();
  return keys;
}

}  // namespace specloop
