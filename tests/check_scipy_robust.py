#!/usr/bin/env python3
"""Robust design ([uncertainty]) re-measured by SciPy from result.json and the spec file alone.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_robust.py --specloop BIN --source-dir ROOT [--jobs N]
(`--probe` is accepted and ignored; `--only SUBSTRING` runs the specs whose name contains it;
`--plants N` sets the number of SciPy's own random plants, 500 by default.)

Specs: every file in tests/robust/ (invented plants, each named in its header comment). For each,
`specloop design SPEC --jobs 2` and `--jobs 1` run. Then, from result.json (the optimized
controller: numerator/denominator and the reference path; the requirements as checked, with their
limits; the settling band, the step amplitude, the reference peak time, the box, the scenarios'
values, the verification plants) and the spec file (the plant as written, read with tomllib), each
plant is rebuilt — the spec's plant with every ranged key set to that plant's value by its dotted
path, e.g. plant.poles[1][1] is the imaginary part of the second pole entry as written (README,
[uncertainty]) — and its linear loop re-measured with the oracle's machinery
(tests/check_scipy_claims.py, imported: LinearLoop, linear_trace, measure, margins, pade_delay,
requirement_value): the exact step response x(t) = x∞ + e^{At}(x(0) − x∞) by scipy.linalg.expm on
a multi-scale grid, extrema and crossings refined by scipy.optimize.brentq on the exact response,
margins from L(jω) on a logarithmic grid refined by brentq, metrics by README "Metric
definitions". A delay enters as the plant times the Padé approximant of the order result.json
reports (scipy.interpolate.pade), the linear model every linear computation of the tool uses
(README "plant.delay"); a delay so short that the approximant's poles break the README's plant
rules (magnitude ≤ 1e5 rad/s, spread ≤ 1e6) is read as 0, as the tool documents for its scenarios.

Checks (each line names its id):
  run          exit 0 exactly when result.json says met; met implies the optimized design's
               robust claim holds; never an exit other than 0 and 1 on these specs.
  jobs         `--jobs 1` and `--jobs 2` write the same result.json, bit for bit, apart from wall
               times (the volatile fields of tests/tools/compare_outputs.py, imported).
  box          robust.box = the spec's ranges scaled by uncertainty.scale about the nominal values
               the file gives (README `uncertainty.scale`), keys in file order.
  set          the scenario set: the nominal first, every corner of the box (itertools.product of
               the ends) when 2^d ≤ max_corners, then `samples` Latin-hypercube points (each of the
               n equal strata of every key used exactly once: McKay, Beckman & Conover,
               Technometrics 21 (1979) 239–245); the verification plants inside the box.
  scenario     every scenario's reported requirement values agree with SciPy's re-measurement of
               that plant (agreement tolerances of the oracle, TOL_*), its stability and meets_all
               too (a disagreement only where a value is within that tolerance of its limit).
  worst        each requirement's worst plant and value: the reported value is that scenario's
               value, no stable scenario has less slack, and SciPy's worst over the set agrees.
  claim        worst-case mode, robust.holds true: every corner of the box and each of --plants
               random plants drawn uniformly in the box by SciPy's own generator
               (numpy.random.default_rng, seed 20_24_06, independent of the tool's Mersenne
               Twister) meets every requirement. Tolerance: only the re-measurement's own error
               bound (the oracle's CLAIM_LINEAR: 1e-7 percentage points, 1e-9 relative on times
               and effort, 1e-9 on the steady-state error, 1e-6 dB/deg): a plant inside the box
               that misses by more refutes "worst case met", whatever the tool sampled.
  verdicts     the tool's per-plant verdicts on its own verification plants (verify.meets_all)
               equal SciPy's, except plants with a value within the agreement tolerance of a limit
               (counted and printed).
  yield        the tool's 95 % interval of the share that meets (verify.low_pct/high_pct) is
               consistent with SciPy's count on the same fresh plants and with SciPy's count on its
               own random plants: a two-sided binomial test at the 1 % level
               (scipy.stats.binomtest) accepts some share inside the interval. And every interval
               the tool reports (verify, yield, set) equals Wilson's score interval (E. B. Wilson,
               JASA 22 (1927) 209–212) as scipy.stats.binomtest(k, n).proportion_ci(method="wilson")
               computes it, within 1e-9 percentage points.
  draws        ranges the reader accepts never end `design` on a random draw: a delay range from 0
               whose draws can fall below the shortest delay the spread rule honours, a pole range
               about 0 whose draws can fall below the smallest magnitude honoured, and a spec with
               search.objective_at = "worst" each either run (exit 0 or 1) or are refused at load
               with the file and line (exit 2, the bad-input rule); never exit 3.
No timing is asserted (benchmarks live in bench/). The last line is "N passed, N failed".
"""
import argparse
import concurrent.futures
import copy
import itertools
import json
import math
import pathlib
import re
import subprocess
import sys
import tempfile
import time
import tomllib

import numpy as np
from scipy import stats

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE / "tools"))
import check_scipy_claims as oracle  # noqa: E402  (the re-measurement machinery and its tolerances)
from compare_outputs import diff as json_diff, strip as without_volatile  # noqa: E402
from reference_common import Tally  # noqa: E402

RNG_SEED = 20_24_06
DEFAULT_PLANTS = 500
BINOMIAL_ALPHA = 0.01         # the brief: a two-sided binomial test at 1 %
WILSON_TOL_PCT = 1e-9         # both are closed forms in double precision
PADE_ORDER = 3                # README "plant.delay": an order-3 Padé approximant
MAX_RATE, MAX_SPREAD = 1e5, 1e6  # README "What the numerics honour": pole magnitudes, their spread
MARGIN_KEYS = ("phase_margin_min_deg", "gain_margin_min_db", "sensitivity_peak_max")


# ---- the spec file: plants by dotted path ------------------------------------------------------------

def path_tokens(path):
    """"plant.poles[1][1]" → ["plant", "poles", 1, 1] (README: the sweep's key paths)."""
    tokens = []
    for part in path.split("."):
        m = re.fullmatch(r"([^\[\]]+)((?:\[\d+\])*)", part)
        if not m:
            raise ValueError(f"key path {path!r}")
        tokens.append(m.group(1))
        tokens += [int(i) for i in re.findall(r"\[(\d+)\]", m.group(2))]
    return tokens


def value_at(doc, path):
    node = doc
    for t in path_tokens(path):
        node = node[t]
    return float(node)


def with_values(doc, keys, values):
    """A copy of the TOML document with each key set to its value."""
    out = copy.deepcopy(doc)
    for key, v in zip(keys, values):
        tokens = path_tokens(key)
        node = out
        for t in tokens[:-1]:
            node = node[t]
        node[tokens[-1]] = float(v)
    return out


def roots_of(entries):
    """Spec notation (README `plant.zeros`): a number is a real root, [re, im] the pair re ± j·im."""
    out = []
    for e in entries:
        if isinstance(e, list):
            out += [complex(e[0], e[1]), complex(e[0], -e[1])]
        else:
            out.append(complex(e))
    return out


def plant_of(doc):
    """(numerator, denominator, delay, pole and zero magnitudes) of the plant the document writes."""
    p = doc["plant"]
    if "nonlinear" in p:
        raise NotImplementedError("expression plants are not rebuilt here")
    if "numerator" in p:
        num, den = oracle.strip(p["numerator"]), oracle.strip(p["denominator"])
        rts = list(np.roots(num)) + list(np.roots(den))
    else:
        zeros, poles = roots_of(p.get("zeros", [])), roots_of(p["poles"])
        gain = float(p.get("gain", 1.0))
        num = gain * np.real(np.poly(zeros)) if zeros else np.array([gain])
        den = np.real(np.poly(poles))
        rts = zeros + poles
    return num, den, float(p.get("delay", 0.0)), [abs(r) for r in rts if abs(r) > 0]


def linear_model(num, den, delay, magnitudes, order):
    """The plant times the Padé approximant of e^{−s·delay} (oracle.pade_delay). A delay whose
    approximant breaks the README's rules (a pole beyond 1e5 rad/s, or the fastest pole more than
    1e6 times the slowest) counts as 0 (the tool: "too short for the numerics ... is set to 0")."""
    if delay <= 0.0:
        return num, den, 0.0
    pn, pd = oracle.pade_delay(delay, order)
    fast = float(np.max(np.abs(np.roots(pd))))
    slow = min(magnitudes + [float(np.min(np.abs(np.roots(pd))))])
    if fast > MAX_RATE or fast > MAX_SPREAD * slow:
        return num, den, 0.0
    return np.polymul(num, pn), np.polymul(den, pd), delay


# ---- one plant's measurement (runs in the worker processes) -------------------------------------------

def near_tolerance(key, limit, T, tref):
    """The oracle's agreement tolerances (TOL_*): how far two correct measurements may differ."""
    if key in oracle.PCT_KEYS:
        return oracle.TOL_PCT
    if key in oracle.TIME_KEYS:
        return max(oracle.TOL_TIME_REL * abs(limit), oracle.TOL_TIME_T * T)
    if key == "peak_time_ratio":
        return max(oracle.TOL_TIME_REL * abs(limit) * tref, oracle.TOL_TIME_T * T) / tref
    if key == "effort_max":
        return oracle.TOL_EFFORT * abs(limit)
    if key == "steady_state_error_max":
        return 1e-9
    if key == "sensitivity_peak_max":
        return oracle.TOL_MS * abs(limit)
    return oracle.TOL_MARGIN


def measure_plant(task):
    """task = (ln, ld, controller, r, band_pct, requirements, tref). Returns {stable, values, meets
    (strict: the limit itself), claim_meets (within the CLAIM_LINEAR bound), near (within the
    agreement tolerance of the limit), T}."""
    ln, ld, c, r, band_pct, reqs, tref = task
    loop = oracle.LinearLoop(ln, ld, c["numerator"], c["denominator"], c["reference_numerator"], c["reference_denominator"])
    if not loop.stable():
        return {"stable": False, "values": {}, "meets": {}, "claim_meets": {}, "near": {}, "T": None}
    T = loop.horizon()
    pieces, y_inf = oracle.linear_trace(loop, r, oracle.EXTEND * T)
    m = oracle.measure(pieces, y_inf, r, band_pct / 100.0, T)
    mg = None
    if any(q["key"] in MARGIN_KEYS for q in reqs):
        mg = oracle.margins(oracle.strip(c["numerator"]), oracle.strip(c["denominator"]), ln, ld)
    out = {"stable": True, "values": {}, "meets": {}, "claim_meets": {}, "near": {}, "T": T}
    for q in reqs:
        key, limit, upper = q["key"], q["limit"], q["upper"]
        v = oracle.requirement_value(key, m, mg, tref, band_pct)
        out["values"][key] = v
        out["meets"][key] = oracle.meets(key, v, limit, upper, 0.0)
        out["claim_meets"][key] = oracle.meets(key, v, limit, upper, oracle.claim_tolerance(key, limit, oracle.CLAIM_LINEAR))
        out["near"][key] = v is not None and math.isfinite(v) and abs(v - limit) <= near_tolerance(key, limit, T, tref or 1.0)
    return out


def check(tally, cid, ok, what, detail=""):
    """One check line (reference_common.Tally), argument order as in this file."""
    return tally.check(cid, what, ok, detail)


# ---- one spec ------------------------------------------------------------------------------------------

def run_design(binary, spec, out_dir, jobs):
    proc = subprocess.run([binary, "design", str(spec), "--out", str(out_dir), "--jobs", str(jobs)],
                          capture_output=True, text=True, timeout=900)
    return proc


def show(v):
    return "none" if v is None else f"{v:.10g}"


class RobustSpec:
    def __init__(self, spec_path, result, rc, tally, pool, plants):
        self.path = spec_path
        self.name = spec_path.stem
        self.R = result
        self.rc = rc
        self.T = tally
        self.pool = pool
        self.n_plants = plants
        self.doc = tomllib.loads(spec_path.read_text())
        self.robust = result["robust"]
        self.design = result["designs"]["optimized"]
        self.rd = self.design["robust"]
        self.keys = list(self.robust["keys"])
        self.box_low = np.array(self.robust["box"]["low"], float)
        self.box_high = np.array(self.robust["box"]["high"], float)
        self.r = float(result["spec"]["reference"]["amplitude"])
        self.band_pct = float(result["spec"]["requirements"]["settling_band_pct"])
        self.tref = oracle.num(result.get("reference_peak_time"))
        self.order = result["linear_model"].get("delay_approximant_order") or PADE_ORDER
        self.reqs = [{"key": q["requirement"], "limit": float(q["limit"]), "upper": q["bound"] == "max"}
                     for q in self.design["checks"]]
        self.mode = self.robust["mode"]
        self.unc = self.doc["uncertainty"]

    def check(self, cid, ok, what, detail=""):
        return self.T.check(f"{self.name}/{cid}", what, ok, detail)

    # -- the plants ---------------------------------------------------------------------------------------
    def model(self, values):
        num, den, delay, mags = plant_of(with_values(self.doc, self.keys, values))
        return linear_model(num, den, delay, mags, self.order)

    def measure_all(self, plants):
        tasks = []
        for values in plants:
            ln, ld, _ = self.model(values)
            tasks.append((ln, ld, self.design["controller"], self.r, self.band_pct, self.reqs, self.tref))
        return list(self.pool.map(measure_plant, tasks, chunksize=8))

    # -- checks ---------------------------------------------------------------------------------------------
    def check_run(self):
        met = bool(self.R["met"])
        self.check("run/exit", (self.rc == 0) == met and self.rc in (0, 1),
                   "exit 0 exactly when result.json says met (README, \"Exit codes\")", f"exit {self.rc}, met {met}")
        if met:
            self.check("run/met_holds", self.rd["holds"], "met implies the optimized design's robust claim holds")

    def check_box(self):
        scale = float(self.unc.get("scale", 1.0))
        keys, low, high = [], [], []
        for k, v in self.unc.items():
            if k.startswith("plant.") and isinstance(v, list):
                nominal = value_at(self.doc, k)
                keys.append(k)
                low.append(nominal - scale * (nominal - float(v[0])))
                high.append(nominal + scale * (float(v[1]) - nominal))
        ok = keys == self.keys and np.allclose(low, self.box_low, rtol=1e-15, atol=0) and \
            np.allclose(high, self.box_high, rtol=1e-15, atol=0)
        self.check("box", ok, "robust.box = the spec's ranges scaled about the nominal (README uncertainty.scale)",
                   f"{keys} [{low}, {high}] vs {self.keys} [{list(self.box_low)}, {list(self.box_high)}]")

    def check_set(self):
        sc = self.rd["scenarios"]
        d = len(self.keys)
        kinds = [s["kind"] for s in sc]
        values = [[float(s["values"][k]) for k in self.keys] for s in sc]
        nominal = [value_at(self.doc, k) for k in self.keys]
        self.check("set/nominal", kinds[0] == "nominal" and values[0] == nominal, "scenario 0 is the nominal plant",
                   f"{kinds[0]} {values[0]}")
        max_corners = int(self.unc.get("max_corners", 64))
        corners = [v for v, k in zip(values, kinds) if k == "corner"]
        if 2 ** d <= max_corners:
            every = sorted(list(c) for c in itertools.product(*zip(self.box_low, self.box_high)))
            self.check("set/corners", sorted(corners) == every, f"every one of the 2^{d} corners of the box is a scenario",
                       f"{len(corners)} corners")
        samples = [v for v, k in zip(values, kinds) if k == "sample"]
        n = int(self.unc.get("samples", 64))
        ok = len(samples) == n
        for j in range(d):
            u = [(v[j] - self.box_low[j]) / (self.box_high[j] - self.box_low[j]) * n for v in samples]
            ok = ok and sorted(int(math.floor(x)) for x in u) == list(range(n))
        self.check("set/latin_hypercube", ok, f"{n} samples, each of the n strata of every key used once "
                   "(McKay, Beckman & Conover 1979)")
        # Fresh plants that refuted a first optimum join the set as "found" (README, Robust design);
        # then the claim is verified on a second, independent sample (verification.draw = 1).
        found = [v for v, k in zip(values, kinds) if k == "found"]
        added = self.robust["search"]["refuting_plants_added"]
        self.check("set/count", len(sc) == self.robust["scenario_count"] == 1 + len(corners) + len(samples) + len(found),
                   "scenario_count = nominal + corners + samples + found", f"{len(sc)} / {self.robust['scenario_count']}")
        self.check("set/found", len(found) == added and (added == 0 or self.robust["verification"]["draw"] == 1),
                   "the found plants are the refuting ones the search log counts, verified on a second sample",
                   f"{len(found)} found, {added} added, draw {self.robust['verification']['draw']}")
        fresh = np.array(self.rd["verify"]["plants"], float)
        inside = fresh.shape == (int(self.unc.get("verify_samples", 1000)), d) and bool(
            np.all((fresh >= self.box_low) & (fresh <= self.box_high) | (fresh == 0.0)))
        self.check("set/verification", inside, "verify_samples fresh plants, inside the box (a delay may read 0)",
                   f"shape {fresh.shape}")

    def compare_scenarios(self, mine):
        """The reported values of every scenario against SciPy's."""
        bad, excused = [], 0
        for s, me in zip(self.rd["scenarios"], mine):
            if s["stable"] != me["stable"]:
                bad.append(f"#{s['index']} stable {s['stable']} vs SciPy {me['stable']}")
                continue
            if not me["stable"]:
                continue
            for q in s["checks"]:
                key = q["requirement"]
                a, b = oracle.num(q["value"]), me["values"].get(key)
                tol = near_tolerance(key, float(q["limit"]), me["T"], self.tref or 1.0)
                if key in ("gain_margin_min_db",) and a is not None and b is not None and math.isinf(a) and math.isinf(b):
                    continue
                if (a is None) != (b is None) or (a is not None and abs(a - b) > tol):
                    bad.append(f"#{s['index']} {key} {show(a)} vs SciPy {show(b)} (tol {tol:.2g})")
            mine_all = all(me["claim_meets"].values())
            if s["meets_all"] != mine_all:
                if any(me["near"].values()):
                    excused += 1
                else:
                    bad.append(f"#{s['index']} meets_all {s['meets_all']} vs SciPy {mine_all}")
        spread = {}
        for s, me in zip(self.rd["scenarios"], mine):
            for q in s["checks"] if me["stable"] else []:
                a, b = oracle.num(q["value"]), me["values"].get(q["requirement"])
                if a is not None and b is not None and math.isfinite(a) and math.isfinite(b):
                    spread[q["requirement"]] = max(spread.get(q["requirement"], 0.0), abs(a - b))
        print(f"NOTE  {self.name}: largest |tool − SciPy| over the set: " +
              ", ".join(f"{k} {v:.2e}" for k, v in spread.items()))
        self.check("scenario/values", not bad, f"the {len(mine)} scenarios' values, stability and verdicts agree with "
                   "SciPy (oracle TOL_*)", "; ".join(bad[:6]) + (f" (+{len(bad) - 6})" if len(bad) > 6 else "") +
                   (f"; {excused} verdict(s) within tolerance of a limit" if excused else ""))

    def check_worst(self, mine):
        sc = self.rd["scenarios"]
        problems = []
        for q in self.reqs:
            key = q["key"]
            w = self.rd["worst"].get(key)
            if w is None:
                problems.append(f"{key}: no worst case reported")
                continue
            i = int(w["scenario"])
            at = next((c for c in sc[i]["checks"] if c["requirement"] == key), None)
            if at is None or oracle.num(at["value"]) != oracle.num(w["value"]):
                problems.append(f"{key}: worst value {w['value']} is not scenario {i}'s ({at and at['value']})")
            least = min(c["slack"] for s in sc if s["stable"] for c in s["checks"] if c["requirement"] == key)
            if float(w["slack"]) != least:
                problems.append(f"{key}: worst slack {w['slack']} but the least in the set is {least}")
            # SciPy's worst over the set: the same value, within the agreement tolerance
            vals = [(me["values"][key], j) for j, me in enumerate(mine) if me["stable"] and me["values"].get(key) is not None]
            if vals:
                worst_mine = max(vals) if q["upper"] else min(vals)
                tol = near_tolerance(key, q["limit"], mine[worst_mine[1]]["T"], self.tref or 1.0)
                a = oracle.num(w["value"])
                if not (math.isinf(a) and math.isinf(worst_mine[0])) and abs(a - worst_mine[0]) > tol:
                    problems.append(f"{key}: worst {show(a)} (#{i}) vs SciPy {show(worst_mine[0])} (#{worst_mine[1]})")
        self.check("worst", not problems, "each requirement's worst plant and value over the set (reported, and SciPy's)",
                   "; ".join(problems))

    def note_worst_found(self, mine_box):
        """SciPy's worst value of each requirement over the corners and its random plants, beside
        the tool's worst over its scenario set (a figure for the report; no assertion)."""
        parts = []
        for q in self.reqs:
            vals = [me["values"][q["key"]] for me in mine_box if me["stable"] and me["values"].get(q["key"]) is not None]
            if vals:
                found = max(vals) if q["upper"] else min(vals)
                parts.append(f"{q['key']} {show(found)} (tool's set: {show(oracle.num(self.rd['worst'][q['key']]['value']))}, "
                             f"limit {q['limit']:g})")
        print(f"NOTE  {self.name}: worst over the corners and SciPy's random plants: " + "; ".join(parts))

    def check_claim(self, corners, random_plants, mine_corners, mine_random):
        if self.mode != "worst-case" or not self.rd["holds"]:
            print(f"NOTE  {self.name}: mode {self.mode}, holds {self.rd['holds']}: no every-plant claim to check")
            return
        for label, plants, mine in (("corners", corners, mine_corners), ("random", random_plants, mine_random)):
            misses = []
            for v, me in zip(plants, mine):
                if not me["stable"]:
                    misses.append(f"{v}: unstable")
                    continue
                for q in self.reqs:
                    if not me["claim_meets"][q["key"]]:
                        misses.append(f"{[float(f'{x:.6g}') for x in v]}: {q['key']} = {show(me['values'][q['key']])} "
                                      f"(limit {q['limit']:g})")
            self.check(f"claim/{label}", not misses,
                       f"worst case met: every requirement on all {len(plants)} {label} plants of the box (SciPy; "
                       "CLAIM_LINEAR tolerance)", f"{len(misses)} miss(es): " + "; ".join(misses[:5]) if misses else "")

    def check_verdicts(self, mine):
        tool = self.rd["verify"]["meets_all"]
        disagree, excused = [], 0
        for i, (t, me) in enumerate(zip(tool, mine)):
            m = me["stable"] and all(me["claim_meets"].values())
            if t == m:
                continue
            if me["stable"] and any(me["near"].values()):
                excused += 1
                continue
            why = "unstable" if not me["stable"] else ", ".join(
                f"{k} = {show(me['values'][k])}" for k, ok in me["claim_meets"].items() if not ok)
            disagree.append(f"plant {i} {self.rd['verify']['plants'][i]}: tool {t}, SciPy {m} ({why})")
        self.check("verdicts", not disagree and len(tool) == len(mine),
                   f"the tool's verdicts on its {len(tool)} verification plants equal SciPy's",
                   (f"{len(disagree)} disagree: " + "; ".join(disagree[:4]) if disagree else "") +
                   f"; {excused} plant(s) within the agreement tolerance of a limit excused")
        print(f"NOTE  {self.name}: {excused} verification plant(s) disagree within the agreement tolerance of a limit")
        return sum(1 for me in mine if me["stable"] and all(me["claim_meets"].values()))

    def check_yield(self, k_fresh, k_random, n_random):
        v = self.rd["verify"]
        self.check("yield/counts", v["met"] == sum(v["meets_all"]) and v["of"] == len(v["meets_all"]) and
                   abs(v["pct"] - 100.0 * v["met"] / v["of"]) <= 1e-12,
                   "verify.met/of/pct count verify.meets_all", f"{v['met']}/{v['of']} = {v['pct']}")
        for block in ("verify", "yield", "set"):
            b = self.rd[block]
            if not b["of"]:
                continue
            ci = stats.binomtest(int(b["met"]), int(b["of"])).proportion_ci(confidence_level=0.95, method="wilson")
            err = max(abs(100.0 * ci.low - b["low_pct"]), abs(100.0 * ci.high - b["high_pct"]))
            self.check(f"yield/wilson_{block}", err <= WILSON_TOL_PCT,
                       f"{block}: the 95 % interval is Wilson's (Wilson 1927; scipy.stats.binomtest(...).proportion_ci)",
                       f"{b['met']}/{b['of']}: [{b['low_pct']!r}, {b['high_pct']!r}] vs [{100 * ci.low!r}, {100 * ci.high!r}]")
        lo, hi, pct = v["low_pct"] / 100.0, v["high_pct"] / 100.0, v["pct"] / 100.0
        for label, k, n in (("own_sample", k_fresh, v["of"]), ("scipy_sample", k_random, n_random)):
            # the two-sided test's p-value as a function of the share peaks at k/n; over the
            # interval its largest value is at k/n when inside, else at the nearer end
            p = min(max(k / n, lo), hi)
            pv = max(stats.binomtest(k, n, q).pvalue for q in {p, lo, hi, pct})
            self.check(f"yield/{label}", pv >= BINOMIAL_ALPHA,
                       f"SciPy's {k} of {n} meeting is consistent with the tool's interval [{100 * lo:.4g}, {100 * hi:.4g}] % "
                       "(two-sided binomial test at 1 %, scipy.stats.binomtest)", f"largest p-value {pv:.3g}")
        if self.mode == "yield":
            target = float(self.unc.get("yield_min_pct", 95.0))
            nominal_ok = self.rd["scenarios"][0]["meets_all"]
            self.check("yield/holds", self.rd["holds"] == (nominal_ok and v["pct"] >= target),
                       "yield holds exactly when the nominal plant meets and the fresh share reaches yield_min_pct",
                       f"holds {self.rd['holds']}, nominal {nominal_ok}, {v['pct']} % vs {target} %")
        else:
            s = self.rd["set"]
            confirmed = all(c["nonlinear"]["status"] == "ok" and c["nonlinear"]["meets_all"] for c in self.rd["confirmations"])
            expect = s["met"] == s["of"] and v["met"] == v["of"] and (self.R["judged_on"] != "nonlinear" or confirmed)
            self.check("yield/holds", self.rd["holds"] == expect,
                       "worst case holds exactly when every plant of the set and of the fresh sample meets "
                       "(and the worst plants confirm when judged on the nonlinear loop)", f"holds {self.rd['holds']}")

    def verify(self):
        started = time.time()
        self.check_run()
        self.check_box()
        self.check_set()
        d = len(self.keys)
        scen = [[float(s["values"][k]) for k in self.keys] for s in self.rd["scenarios"]]
        corners = [list(c) for c in itertools.product(*zip(self.box_low, self.box_high))]
        rng = np.random.default_rng(RNG_SEED)
        random_plants = list(self.box_low + (self.box_high - self.box_low) * rng.random((self.n_plants, d)))
        fresh = [list(map(float, p)) for p in self.rd["verify"]["plants"]]
        everything = scen + corners + random_plants + fresh
        mine = self.measure_all(everything)
        a, b, c = len(scen), len(scen) + len(corners), len(scen) + len(corners) + len(random_plants)
        self.compare_scenarios(mine[:a])
        self.check_worst(mine[:a])
        self.note_worst_found(mine[a:c])
        self.check_claim(corners, random_plants, mine[a:b], mine[b:c])
        k_fresh = self.check_verdicts(mine[c:])
        k_random = sum(1 for me in mine[b:c] if me["stable"] and all(me["claim_meets"].values()))
        self.check_yield(k_fresh, k_random, len(random_plants))
        print(f"NOTE  {self.name}: {self.rd['claim']}")
        print(f"NOTE  {self.name}: SciPy: {k_fresh} of {len(fresh)} verification plants and {k_random} of "
              f"{len(random_plants)} random plants meet every requirement; {len(everything)} plants in "
              f"{time.time() - started:.1f} s")


# ---- ranges whose random draws the reader refuses -----------------------------------------------------------

DRAW_SPECS = {
    # an invented dryer: lags of 50 s and 4 s; a delay range from 0 (allowed: README "a delay's
    # starts at ≥ 0"); draws between ~5e-5 s (magnitude rule) and ~2.5e-4 s (spread rule) fail
    "delay_window": """[plant]
poles = [-0.02, -0.25]
gain = 0.04
delay = 0.003
[requirements]
overshoot_max_pct = 10.0
[search]
max_evaluations = 300
[uncertainty]
"plant.delay" = [0.0, 0.006]
samples = 0
verify_samples = 2000
""",
    # an invented valve with an integrator that may leak either way: poles about 0 are allowed, a
    # nonzero magnitude below 1e-5 is not
    "pole_window": """[plant]
poles = [0.0, -5.0]
gain = 20.0
[requirements]
overshoot_max_pct = 10.0
[search]
max_evaluations = 300
[uncertainty]
"plant.poles[0]" = [-1e-4, 1e-4]
samples = 0
verify_samples = 50
""",
    # search.objective_at = "worst" (README key table) with an [uncertainty] section
    "objective_at_worst": """[plant]
poles = [-1.0, -5.0]
gain = 5.0
[requirements]
overshoot_max_pct = 10.0
[search]
objective_at = "worst"
max_evaluations = 300
[uncertainty]
"plant.gain" = [4.0, 6.0]
samples = 0
verify_samples = 5
""",
}


def check_draws(binary, tmp, tally):
    for name, text in DRAW_SPECS.items():
        spec = pathlib.Path(tmp) / f"{name}.toml"
        spec.write_text(text)
        proc = run_design(binary, spec, pathlib.Path(tmp) / f"out_{name}", 2)
        located = re.search(re.escape(str(spec)) + r":\d+:\d+: ", proc.stderr) is not None
        ok = proc.returncode in (0, 1) or (proc.returncode == 2 and located)
        check(tally, f"draws/{name}", ok, "an accepted [uncertainty] either runs (exit 0/1) or is refused at load "
                    "with file:line (exit 2)", f"exit {proc.returncode}: {proc.stderr.strip()[-300:]}")


def check_scale_sweep(binary, source_dir, tmp, tally):
    """`sweep --vary uncertainty.scale=…` (README, Robust design): each point's store row carries the
    robust claim of the design run at that scale, the same as `design` of that point's spec writes."""
    spec = pathlib.Path(source_dir) / "tests" / "robust" / "winder_lag_gain.toml"
    store = pathlib.Path(tmp) / "scale.sqlite"
    proc = subprocess.run([binary, "sweep", str(spec), "--vary", "uncertainty.scale=0.4,1.6", "--store", str(store),
                           "--jobs", "2"], capture_output=True, text=True, timeout=600)
    if not check(tally, "sweep/scale/run", proc.returncode == 0, "a sweep of uncertainty.scale runs",
                 f"exit {proc.returncode}: {proc.stderr.strip()[-300:]}"):
        return
    import sqlite3
    with sqlite3.connect(store) as db:
        rows = db.execute("SELECT v1, met, binding, optimized FROM sweep_points JOIN sweep_results USING (idx) "
                          "ORDER BY idx").fetchall()
    for scale, met, binding, optimized in rows:
        summary = json.loads(optimized)
        robust = summary.get("robust") or {}
        text = spec.read_text().replace("scale = 0.8", f"scale = {scale}")
        point = pathlib.Path(tmp) / f"scale_{scale}.toml"
        point.write_text(text)
        out = pathlib.Path(tmp) / f"scale_{scale}"
        run_design(binary, point, out, 2)
        design = json.loads((out / "result.json").read_text())["designs"]["optimized"]["robust"]
        same = robust.get("holds") == design["holds"] and robust.get("claim") == design["claim"] and \
            robust.get("set") == design["set"] and "plants" not in robust.get("verify", {"plants": 1})
        check(tally, f"sweep/scale/{scale}", same and bool(met) == (design["holds"] and summary["meets_all"]),
              "the store's robust summary (no per-plant lists) is the claim `design` makes at that scale, and `met` "
              "needs it", f"store {robust.get('claim')!r} met {met} | design {design['claim']!r}")


# ---- main ----------------------------------------------------------------------------------------------------

def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--only", default="")
    ap.add_argument("--plants", type=int, default=DEFAULT_PLANTS)
    args = ap.parse_args()
    specs = [s for s in sorted((pathlib.Path(args.source_dir) / "tests" / "robust").glob("*.toml")) if args.only in s.name]
    tally = Tally()
    with tempfile.TemporaryDirectory() as tmp, \
            concurrent.futures.ProcessPoolExecutor(max_workers=max(1, args.jobs)) as pool:
        for spec in specs:
            started = time.time()
            out2, out1 = pathlib.Path(tmp) / f"{spec.stem}_j2", pathlib.Path(tmp) / f"{spec.stem}_j1"
            p2 = run_design(args.specloop, spec, out2, 2)
            p1 = run_design(args.specloop, spec, out1, 1)
            print(f"---- {spec.stem} (design --jobs 2 and --jobs 1: {time.time() - started:.1f} s)", flush=True)
            if not check(tally, f"{spec.stem}/run/result", p2.returncode in (0, 1) and (out2 / "result.json").exists(),
                               "specloop design exits 0 or 1 and writes result.json",
                               f"exit {p2.returncode}: {p2.stderr.strip()[-400:]}"):
                continue
            r2 = json.loads((out2 / "result.json").read_text())
            if (out1 / "result.json").exists():
                r1 = json.loads((out1 / "result.json").read_text())
                diffs = json_diff(without_volatile(r1), without_volatile(r2))
                check(tally, f"{spec.stem}/jobs", not diffs and p1.returncode == p2.returncode,
                            "--jobs 1 and --jobs 2 write the same result.json apart from wall times", "; ".join(diffs[:5]))
            else:
                check(tally, f"{spec.stem}/jobs", False, "--jobs 1 writes result.json", p1.stderr.strip()[-300:])
            try:
                RobustSpec(spec, r2, p2.returncode, tally, pool, args.plants).verify()
            except Exception as exc:  # the check itself must not hide a failure
                import traceback
                check(tally, f"{spec.stem}/oracle", False, "the check ran to the end",
                            f"{type(exc).__name__}: {exc} | {traceback.format_exc().strip().splitlines()[-3].strip()}")
        check_draws(args.specloop, tmp, tally)
        check_scale_sweep(args.specloop, args.source_dir, tmp, tally)
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
