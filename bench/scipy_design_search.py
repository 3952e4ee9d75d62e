#!/usr/bin/env python3
"""Design benchmark helper (a report, not a test): `specloop design` on spec files beside a
SciPy search of the same cost, timed in the same run. Called by bench/run_bench_design.sh.

Per spec:
  specloop   `specloop design SPEC --out TMP` run REPEATS times as a process; the median wall
             time (process start to exit, so it includes reading the spec, the reference and
             classical designs, the search, an infeasibility re-search when the spec cannot be
             met, and writing result.json) against the 0.5 s target; evaluations per second of
             the search from result.json (`search.evaluations / search.wall_time_s`). The 0.5 s
             target applies to specs without an active nonlinear effect (result.json
             `search.active_effects` empty); for the others the report says n/a.
  stage      the same spec with `search.simulate = "linear"` (a copy in TMP), timed the same way:
             auto ÷ linear is the cost of the automatic nonlinear stage, measured in this run.
  SciPy      the same search family on the same cost, written with SciPy only:
             scipy.optimize.direct(locally_biased=True) (DIRECT-L) on the log-scaled parameters,
             then scipy.optimize.minimize(method="Nelder-Mead") from its best point (Subplex,
             specloop's local stage, is a Nelder–Mead variant on subspaces). Same search box
             (rebuilt from result.json by the README's default-bound rules, or the spec's
             [search.bounds]), same seed point (the classical design, else the ultimate-gain
             one, else the middle of the box), same budget split (global stage: the evaluations
             specloop's global stage used; local stage: the rest), capped (see below).
             One evaluation = controller polynomials → closed loop (numpy) → stability from
             numpy.roots → scipy.signal.step of the two-output closed loop (y and u) on a
             uniform grid of 2000 samples over T = ln(1e4)/σ_slow (specloop's minimum sample
             count; it uses more when fast modes need them, so this favours SciPy) → the
             README's metrics (crossings by linear interpolation, extrema at samples, integrals
             by the trapezoid rule — lighter than specloop's refinement, again favouring SciPy)
             → requirement values → the same feasibility-first cost: feasible
             −1e4·expm1(−(J/J_seed)/1e4) ≈ J/J_seed, infeasible 1e4·(1 + Σ normalized
             violations), unstable 1e9·(1 + rightmost normalized real part).
  Cap        SciPy runs at most --cap evaluations per spec (to keep the report under a few
             minutes). Its evaluations per second are measured on the evaluations it ran and
             the time for specloop's full budget is extrapolated from that rate; the report
             says so on every line where it applies.
Both are timed on the same core when the caller pins the process (run_bench_design.sh uses
taskset -c 0 when available). Always exits 0.
"""
import argparse
import json
import math
import pathlib
import statistics
import re
import subprocess
import sys
import tempfile
import time

import numpy as np
from scipy import optimize, signal

INFEASIBLE_COST = 1e4
UNSTABLE_COST = 1e9
SAMPLES = 2000
DECAY_FRACTION = 1e-4
TARGET_S = 0.5

PARAMETERS = {
    "p": ["gain"],
    "pi": ["gain", "integral_zero"],
    "pd": ["gain", "zero"],
    "pid": ["gain", "zero_frequency", "zero_damping"],
    "lead": ["gain", "zero", "ratio"],
    "lag": ["gain", "zero", "ratio"],
    "lead-lag": ["gain", "zero", "ratio", "lag_zero", "lag_ratio"],
}


def controller(structure, x, n):
    """C(s) = num/den from the series parameters (README, "Controllers")."""
    if structure == "p":
        return [x[0]], [1.0]
    if structure == "pi":
        return [x[0], x[0] * x[1]], [1.0, 0.0]
    if structure == "pd":
        z = x[1]
        return [x[0] / z, x[0]], [1.0 / ((n + 1.0) * z), 1.0]
    if structure == "pid":
        # Kp·(1 + 1/(Ti s) + Td s/(Td/N s + 1)) with zeros at the roots of s² + 2ζc·ω0·s + ω0²:
        # Kc·(s² + 2ζc ω0 s + ω0²)/(s(Tf s + 1)), Tf the smaller root of
        # (N+1)ω0²Tf² − 2(N+1)ζc ω0 Tf + 1 = 0, Kc = Kp(N+1)Tf.
        kp, w0, zc = x
        a, b = (n + 1.0) * w0 * w0, 2.0 * (n + 1.0) * zc * w0
        tf = 2.0 / (b + math.sqrt(max(0.0, b * b - 4.0 * a)))
        kc = kp * (n + 1.0) * tf
        return [kc, kc * 2.0 * zc * w0, kc * w0 * w0], [tf, 1.0, 0.0]
    if structure == "lead":
        z, p = x[1], x[2] * x[1]
        return [x[0] / z, x[0]], [1.0 / p, 1.0]
    if structure == "lag":
        return [x[0], x[0] * x[1]], [1.0, x[1] / x[2]]
    if structure == "lead-lag":
        z, p, zg, pg = x[1], x[2] * x[1], x[3], x[3] / x[4]
        return ([x[0] / z, x[0] * (1.0 + zg / z), x[0] * zg], [1.0 / p, 1.0 + pg / p, pg])
    raise ValueError(structure)


def default_bounds(result):
    """The search box by the README's rules: gains 1e-3..1e3 × the reference gain, frequencies
    1e-3 × the smallest to 10 × the largest nonzero pole/zero magnitude, ratios 1.05..100,
    ζc from just above 1/√(N+1) to 20; [search.bounds] overrides."""
    spec = result["spec"]
    structure = spec["controller"]["structure"]
    n = spec["controller"]["derivative_filter"]
    mags = [abs(complex(re, im)) for re, im in spec["plant"]["poles"] + spec["plant"]["zeros"] if abs(complex(re, im)) > 0]
    w_lo, w_hi = (min(mags), max(mags)) if mags else (1.0, 1.0)
    ref = result["designs"].get("reference")
    if ref:
        k_scale = ref["controller"]["numerator"][0]
    else:  # (specloop would use the dominant crossing's gain, which result.json does not carry)
        w = 1j * math.sqrt(w_lo * w_hi)
        g = np.polyval(result["plant"]["numerator"], w) / np.polyval(result["plant"]["denominator"], w)
        k_scale = 1.0 / abs(g)
    out = []
    for name in PARAMETERS[structure]:
        if name == "gain":
            b = (k_scale * 1e-3, k_scale * 1e3)
        elif name in ("ratio", "lag_ratio"):
            b = (1.05, 100.0)
        elif name == "zero_damping":
            b = (1.0001 / math.sqrt(n + 1.0), 20.0)
        else:
            b = (w_lo * 1e-3, w_hi * 10.0)
        b = tuple(spec["search"]["bounds"].get(name, b))
        out.append(b)
    return out


class Cost:
    def __init__(self, result):
        spec = result["spec"]
        self.structure = spec["controller"]["structure"]
        self.n = spec["controller"]["derivative_filter"]
        self.np_ = np.asarray(result["plant"]["numerator"], float)
        self.dp = np.asarray(result["plant"]["denominator"], float)
        self.r = spec["reference"]["amplitude"]
        self.req = {k: v for k, v in spec["requirements"].items() if v is not None and k != "settling_band_pct"}
        self.band_pct = spec["requirements"]["settling_band_pct"]
        self.ref_tp = result.get("reference_peak_time")
        self.objective = spec["search"]["objective"]
        self.scale = 1.0
        self.evaluations = 0
        self.best = (math.inf, None, None)
        # A regulator (README, "Regulators"): the load response too, a second simulation per candidate.
        self.load = self.objective == "load_iae" or any(k.startswith("load_") for k in self.req)
        self.load_size = spec["disturbance"]["size"] or 1.0
        if any(k in self.req for k in ("phase_margin_min_deg", "gain_margin_min_db", "sensitivity_peak_max",
                                       "noise_gain_max", "complementary_peak_max")) \
                or self.objective == "sensitivity_peak":
            self.needs_margins = True
        else:
            self.needs_margins = False

    def evaluate(self, x):
        """(stable, objective, Σ violations) for natural-unit parameters x."""
        nc, dc = controller(self.structure, x, self.n)
        num_y = np.polymul(nc, self.np_)
        num_u = np.polymul(nc, self.dp)
        den = np.polyadd(np.polymul(dc, self.dp), num_y)
        roots = np.roots(den)
        if np.any(roots.real >= 0.0):
            rightmost = max(0.0, float(np.max(roots.real / np.maximum(1.0, np.abs(roots)))))
            return False, UNSTABLE_COST * (1.0 + rightmost), 0.0
        horizon = math.log(1.0 / DECAY_FRACTION) / float(np.min(-roots.real))
        rows = np.zeros((2, len(den)))
        rows[0, len(den) - len(num_y):] = num_y
        rows[1, len(den) - len(num_u):] = num_u
        t = np.linspace(0.0, horizon, SAMPLES)
        _, yu = signal.step(signal.StateSpace(*signal.tf2ss(rows, den)), T=t)
        y, u = self.r * yu[:, 0], self.r * yu[:, 1]
        y_inf = self.r * np.polyval(num_y, 0.0) / np.polyval(den, 0.0)
        m = metrics(t, y, u, y_inf, self.r, self.band_pct / 100.0)
        margins = loop_margins(nc, dc, self.np_, self.dp) if self.needs_margins else {}
        if self.load:
            # y = G/(1 + C·G)·d on the same time grid, its IAE, peak and last exit from the band.
            _, yl = signal.step(signal.StateSpace(*signal.tf2ss(np.polymul(self.np_, dc) * self.load_size, den)), T=t)
            band = self.band_pct / 100.0 * abs(self.r)
            out = np.nonzero(np.abs(yl) > band)[0]
            m["load_peak"] = float(np.max(np.abs(yl)))
            m["load_iae"] = float(np.trapz(np.abs(yl), t))
            m["load_recovery_time"] = float(t[out[-1]]) if out.size else 0.0
        violation = 0.0
        for key, limit in self.req.items():
            value = requirement_value(key, m, margins, self.ref_tp, self.band_pct)
            upper = key not in ("phase_margin_min_deg", "gain_margin_min_db")
            if value is None:
                miss = 1.0
            else:
                scale = abs(limit) if limit != 0.0 else 0.01
                miss = ((value - limit) if upper else (limit - value)) / scale
                if math.isinf(miss):
                    miss = 1e3 if miss > 0 else 0.0
            if miss > 1e-9:
                violation += miss
        objective = {"itae": m["itae"], "iae": m["iae"], "ise": m["ise"], "effort": m["effort_peak"],
                     "settling_time": m["settling_time"] if m["settling_time"] is not None else 1e3 * horizon,
                     "sensitivity_peak": margins.get("sensitivity_peak"), "load_iae": m.get("load_iae")}[self.objective]
        return True, objective, violation

    def cost(self, stable, objective, violation):
        if not stable:
            return objective
        if violation > 0.0:
            return INFEASIBLE_COST * (1.0 + violation)
        return -INFEASIBLE_COST * math.expm1(-(objective / self.scale) / INFEASIBLE_COST)

    def __call__(self, logx):
        x = np.exp(np.asarray(logx, float))
        self.evaluations += 1
        stable, objective, violation = self.evaluate(x)
        c = self.cost(stable, objective, violation)
        if c < self.best[0]:
            self.best = (c, x.copy(), (stable, objective, violation))
        return c


class BudgetExhausted(Exception):
    pass


def metrics(t, y, u, y_inf, r, band):
    yn = y / y_inf
    out = {"steady_state_error": (r - y_inf) / r, "effort_peak": float(np.max(np.abs(u)))}
    i = int(np.argmax(yn))
    out["overshoot_pct"] = max(0.0, (yn[i] - 1.0) * 100.0)
    out["peak_time"] = float(t[i]) if yn[i] > 1.0 + 1e-9 else None
    out["undershoot_pct"] = max(0.0, -float(np.min(yn))) * 100.0
    outside = np.abs(yn - 1.0) > band
    idx = np.nonzero(outside)[0]
    if idx.size == 0:
        out["settling_time"] = 0.0
    elif idx[-1] == len(t) - 1:
        out["settling_time"] = None
    else:
        k = idx[-1]
        level = 1.0 + band if yn[k] > 1.0 else 1.0 - band
        out["settling_time"] = t[k] + (level - yn[k]) / (yn[k + 1] - yn[k]) * (t[k + 1] - t[k])
    inside = np.nonzero(~outside)[0]
    if inside.size == 0:
        out["band_entry_time"] = None
    elif inside[0] == 0:
        out["band_entry_time"] = 0.0
    else:
        k = inside[0]
        level = 1.0 + band if yn[k - 1] > 1.0 else 1.0 - band
        out["band_entry_time"] = t[k - 1] + (level - yn[k - 1]) / (yn[k] - yn[k - 1]) * (t[k] - t[k - 1])

    def first_reach(level):
        j = np.nonzero(yn >= level)[0]
        if j.size == 0:
            return None
        k = j[0]
        return t[0] if k == 0 else t[k - 1] + (level - yn[k - 1]) / (yn[k] - yn[k - 1]) * (t[k] - t[k - 1])
    t10, t90 = first_reach(0.1), first_reach(0.9)
    out["rise_time"] = None if t10 is None or t90 is None else t90 - t10
    e = y_inf - y
    out["iae"] = float(np.trapz(np.abs(e), t))
    out["ise"] = float(np.trapz(e * e, t))
    out["itae"] = float(np.trapz(t * np.abs(e), t))
    return out


def loop_margins(nc, dc, np_, dp):
    """Margins on a 2000-point log frequency grid (only for specs that ask for them)."""
    nl, dl = np.polymul(nc, np_), np.polymul(dc, dp)
    mags = [abs(z) for z in np.concatenate([np.roots(nl) if len(nl) > 1 else [], np.roots(dl)]) if abs(z) > 0]
    lo, hi = (min(mags), max(mags)) if mags else (1.0, 1.0)
    w = np.logspace(math.log10(lo) - 3, math.log10(hi) + 3, 2000)
    L = np.polyval(nl, 1j * w) / np.polyval(dl, 1j * w)
    out = {"sensitivity_peak": float(np.max(np.abs(1.0 / (1.0 + L)))),
           "complementary_peak": float(np.max(np.abs(L / (1.0 + L)))),
           "noise_gain": float(np.max(np.abs(np.polyval(nc, 1j * w) / np.polyval(dc, 1j * w) / (1.0 + L))))}
    mag = np.abs(L)
    k = np.nonzero(np.diff(np.sign(mag - 1.0)) != 0)[0]
    out["phase_margin_deg"] = min(((math.degrees(np.angle(L[i])) + 360.0) % 360.0) for i in k) if k.size else math.inf
    k = np.nonzero((np.diff(np.sign(L.imag)) != 0) & (L.real[:-1] < 0))[0]
    out["gain_margin_db"] = min(-20.0 * math.log10(mag[i]) for i in k) if k.size else math.inf
    return out


def requirement_value(key, m, mg, ref_tp, band_pct):
    tp = m["peak_time"] if (m["peak_time"] is not None and m["overshoot_pct"] > band_pct) else m["band_entry_time"]
    return {
        "overshoot_max_pct": lambda: m["overshoot_pct"],
        "undershoot_max_pct": lambda: m["undershoot_pct"],
        "peak_time_ratio": lambda: None if tp is None or not ref_tp else tp / ref_tp,
        "peak_time_max": lambda: tp,
        "settling_time_max": lambda: m["settling_time"],
        "rise_time_max": lambda: m["rise_time"],
        "steady_state_error_max": lambda: abs(m["steady_state_error"]),
        "effort_max": lambda: m["effort_peak"],
        "phase_margin_min_deg": lambda: mg.get("phase_margin_deg"),
        "gain_margin_min_db": lambda: mg.get("gain_margin_db"),
        "sensitivity_peak_max": lambda: mg.get("sensitivity_peak"),
        "load_iae_max": lambda: m.get("load_iae"),
        "load_peak_max": lambda: m.get("load_peak"),
        "load_recovery_time_max": lambda: m.get("load_recovery_time"),
        "noise_gain_max": lambda: mg.get("noise_gain"),
        "complementary_peak_max": lambda: mg.get("complementary_peak"),
    }[key]()


def scipy_search(result, cap):
    cost = Cost(result)
    bounds = default_bounds(result)
    log_bounds = [(math.log(lo), math.log(hi)) for lo, hi in bounds]
    designs = result["designs"]
    names = PARAMETERS[cost.structure]
    seed_design = designs.get("classical") or designs.get("ultimate_gain")
    if seed_design and seed_design["controller"]["structure"] == cost.structure:
        seed = [seed_design["controller"]["series"][k] for k in names]
    else:
        seed = [math.sqrt(lo * hi) for lo, hi in bounds]
    x0 = np.clip(np.log(seed), [b[0] for b in log_bounds], [b[1] for b in log_bounds])
    stable, objective, _ = cost.evaluate(np.exp(x0))
    cost.scale = objective if stable and objective > 0 else 1.0

    s = result["search"]
    budget = s["evaluations"]
    global_budget = min(s["global_evaluations"], int(round(cap * s["global_evaluations"] / max(1, budget))))
    local_budget = min(budget, cap) - global_budget

    def limited(limit):
        def f(x):
            if cost.evaluations >= limit:
                raise BudgetExhausted
            return cost(x)
        return f

    t0 = time.perf_counter()
    # DIRECT's C core cannot take an exception from the callback; its maxfun bounds the stage
    # (approximately: it finishes the current sweep), and the counts below are the real ones.
    optimize.direct(cost, log_bounds, maxfun=global_budget, locally_biased=True, vol_tol=0.0, len_tol=1e-12,
                    maxiter=100000)
    global_done = cost.evaluations
    start = np.log(cost.best[1]) if cost.best[1] is not None else x0
    try:
        optimize.minimize(limited(global_done + local_budget), start, method="Nelder-Mead", bounds=log_bounds,
                          options={"maxfev": local_budget, "xatol": 1e-10, "fatol": 1e-10 * max(1.0, cost.best[0])})
    except BudgetExhausted:
        pass
    elapsed = time.perf_counter() - t0
    return {"evaluations": cost.evaluations, "global": global_done, "seconds": elapsed, "budget": budget,
            "best": cost.best}


def linear_only_copy(spec, work):
    """A copy of SPEC with `search.simulate = "linear"`: the same design without the nonlinear stage."""
    lines = pathlib.Path(spec).read_text().splitlines()
    section, out, placed = "", [], False
    for line in lines:
        stripped = line.strip()
        if stripped.startswith("[") and not stripped.startswith("[["):
            section = stripped.strip("[]").strip()
        if section == "search" and re.match(r"simulate\s*=", stripped):
            continue  # replaced below
        out.append(line)
        if stripped == "[search]":
            out.append('simulate = "linear"')
            placed = True
    if not placed:
        out += ["", "[search]", 'simulate = "linear"']
    path = pathlib.Path(work, pathlib.Path(spec).stem + ".linear-only.toml")
    path.write_text("\n".join(out) + "\n")
    return path


def run_specloop(binary, spec, repeats, work, suffix=""):
    times, rc, result = [], None, None
    out = pathlib.Path(work, pathlib.Path(spec).stem + suffix)
    for _ in range(repeats):
        t0 = time.perf_counter()
        proc = subprocess.run([binary, "design", str(spec), "--out", str(out)], capture_output=True, text=True)
        times.append(time.perf_counter() - t0)
        rc = proc.returncode
    path = out / "result.json"
    if path.exists():
        result = json.loads(path.read_text())
    return statistics.median(times), times, rc, result


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--cap", type=int, default=1500, help="SciPy evaluations per spec at most")
    ap.add_argument("--pinned", default="", help="what the caller pinned the process to (for the report)")
    ap.add_argument("specs", nargs="+")
    args = ap.parse_args()
    rows = []
    with tempfile.TemporaryDirectory(prefix="specloop_bench_design_") as work:
        for spec in args.specs:
            name = pathlib.Path(spec).stem
            median, times, rc, result = run_specloop(args.specloop, spec, args.repeats, work)
            if result is None:
                print(f"== {name}: specloop exited {rc} without result.json; skipped")
                continue
            s = result["search"]
            sl_rate = s["evaluations"] / s["wall_time_s"] if s["wall_time_s"] > 0 else math.nan
            print(f"== {name} ({result['spec']['controller']['structure']}, objective {result['spec']['search']['objective']})")
            print(f"specloop  exit {rc}; wall {', '.join(f'{x:.3f}' for x in times)} s → median {median:.3f} s; "
                  f"search {s['evaluations']} evaluations ({s['global_evaluations']} global + {s['local_evaluations']} "
                  f"local) in {s['wall_time_s']:.3f} s (last run) = {sl_rate:,.0f} evals/s; best objective {s['best_objective']:.6g}, "
                  f"feasible {s['feasible']}"
                  + ("; the run includes the infeasibility re-search" if "infeasibility" in result else ""))
            sp = scipy_search(result, args.cap)
            sp_rate = sp["evaluations"] / sp["seconds"]
            capped = sp["evaluations"] < sp["budget"]
            c, x, (stable, objective, violation) = sp["best"]
            print(f"SciPy     {sp['evaluations']} of specloop's {sp['budget']} evaluations ({sp['global']} DIRECT-L + "
                  f"{sp['evaluations'] - sp['global']} Nelder-Mead) in {sp['seconds']:.2f} s = {sp_rate:,.1f} evals/s"
                  + (f"; capped at {args.cap}: the full budget would take ≈ {sp['budget'] / sp_rate:.1f} s "
                     f"(extrapolated from the measured rate)" if capped else "")
                  + f"; best objective {objective:.6g}, feasible {stable and violation == 0.0}"
                  + (" (after fewer evaluations than specloop: not comparable)" if capped else ""))
            ratio = sl_rate / sp_rate
            # The automatic nonlinear stage's cost: the same spec with search.simulate = "linear",
            # timed in this run.
            lin_median, lin_times, _, _ = run_specloop(args.specloop, linear_only_copy(spec, work), args.repeats, work,
                                                       ".linear-only")
            active = s.get("active_effects") or []
            nl_evals = s.get("nonlinear_evaluations", 0)
            spec_json = result["spec"]
            regulator = spec_json["search"]["objective"] == "load_iae" or any(
                v is not None for k, v in spec_json["requirements"].items() if k.startswith("load_"))
            rows.append((name, median, sl_rate, sp_rate, ratio, capped, lin_median, active, regulator))
            print(f"ratio     specloop evals/s ÷ SciPy evals/s = {ratio:,.0f}×")
            print(f"stage     search.simulate = linear: median {lin_median:.3f} s; auto ÷ linear = {median / lin_median:.2f}× "
                  f"(active effects: {', '.join(active) or 'none'}; {nl_evals} nonlinear evaluations)")
            if active:
                print(f"TARGET    {name}: an active nonlinear effect: the 0.5 s target does not apply")
            else:
                print(f"{'PASS' if median <= TARGET_S else 'MISS'}      {name}: median wall {median:.3f} s ≤ {TARGET_S} s")
            print()
    print(f"== report (one run, same machine, {args.pinned or 'not pinned to a core'})")
    print(f"{'spec':<20} {'specloop median s':>17} {'linear-only s':>13} {'auto÷lin':>8} {'specloop evals/s':>16} "
          f"{'SciPy evals/s':>14} {'ratio':>9}  target")
    for name, median, sl_rate, sp_rate, ratio, capped, lin_median, active, _ in rows:
        target = ("n/a (active: " + ", ".join(active) + ")") if active else \
            f"{'PASS' if median <= TARGET_S else 'MISS'} (≤ {TARGET_S} s)"
        print(f"{name:<20} {median:>17.3f} {lin_median:>13.3f} {median / lin_median:>7.2f}× {sl_rate:>16,.0f} "
              f"{sp_rate:>14,.1f}{'*' if capped else ' '}{ratio:>8,.0f}×  {target}")
    if any(r[5] for r in rows):
        print("* SciPy capped: evals/s measured on the evaluations it ran (see above), full-budget time extrapolated.")
    # Regulators (a load requirement or the load_iae objective) against the set-point designs of
    # this run: the median design time and the linear-only one (target: within 1.5×).
    setpoint = [r for r in rows if not r[8]]
    for r in rows:
        if not r[8] or not setpoint:
            continue
        sp_med = statistics.median(x[1] for x in setpoint)
        sp_lin = statistics.median(x[6] for x in setpoint)
        print(f"regulator {r[0]}: median {r[1]:.3f} s ÷ the set-point specs' median {sp_med:.3f} s = {r[1] / sp_med:.2f}× "
              f"({'PASS' if r[1] / sp_med <= 1.5 else 'MISS'} ≤ 1.5×); linear-only {r[6]:.3f} s ÷ {sp_lin:.3f} s = "
              f"{r[6] / sp_lin:.2f}×")
    return 0


if __name__ == "__main__":
    try:
        main()
    except Exception as exc:  # a report: say what failed, never fail the caller
        print(f"ERROR: {exc!r}")
    sys.exit(0)
