#!/usr/bin/env python3
"""Every valid but unusual plant in tests/unusual_plants/ designs cleanly, and what it claims holds.

Invoked by CTest as
    /usr/bin/python3 tests/check_unusual_plants.py --specloop BIN --probe PROBE --source-dir ROOT

Each file there is a valid spec of one class of plant (its first line says which: reverse acting,
integrating, third order with every design rule, non-minimum phase with mixed signs, open-loop
unstable, triple and double
integrators, a cancelled stable pair, the edges of the supported magnitudes, a reverse-acting
expression plant). For each, `specloop design` must exit 0 or 1 (never 2 or 3) and write
result.json, report.html, report.md and the four figures. Then, from result.json alone:

  action        the controller's action equals the sign rule of README ("Controller action"):
                sign(b_low/a_n) of the plant's numerator/denominator; every design's C(s)
                numerator coefficients, its series gain and its parallel gains carry that sign.
  loop rebuilt  for every design whose linear loop is stable: T = C·G/(1 + C·G) from
                plant.numerator/denominator and controller.numerator/denominator (unity
                feedback, no set-point weights in these specs); its poles (numpy.roots) equal
                closed_loop_poles and lie in the left half plane; its step response
                (scipy.signal.step on 400 001 points up to the README's horizon
                T = ln(1e4)/σ_slow) reproduces the reported final value, overshoot and settling
                time (tolerances below).
  wrong sign    for a reverse-acting plant the same controller with the opposite sign gives a loop
                that is unstable or does not settle on the reference (final value of the wrong
                sign): the action is not decoration.
  lower margin  where margins.lower_gain_margin_db is given (a conditionally stable loop, in
                negative dB), the controller scaled by that factor (×(1 ± 1e-4)) is stable
                just above and unstable just below (numpy.roots); likewise the upper
                gain_margin_db: stable just below, unstable just above.
  nonlinear     reverse_cooling_pi (PI, back-calculation with the default tracking time Ti, an
                actuator 0..25 that saturates): the recommended design's nonlinear trace
                (series/step_optimized_nonlinear.csv) equals scipy.integrate.solve_ivp on the
                same loop (u_c = Kp·(r − y) + I, u = clip(u_c), I' = Ki·(r − y) + (u − u_c)/Tt,
                README "Confirmation on the nonlinear loop"; Åström & Hägglund's back-calculation).
  ultimate      where result.json has `ultimate`: the P gain `ultimate.gain` (signed like the
                action) puts a pair of closed-loop poles on the axis at ±j·`ultimate.frequency`
                (numpy.roots), so the Ziegler–Nichols baseline starts from the right point.
  triple        triple_integrator_pid: exit 1, binding "stability", and the reason names the
                missing s^3 term (a PID on 1/s³ gives Tf·s⁵ + s⁴ + 0·s³ + …, which no gains make
                Hurwitz: Stodola's necessary condition, common practice).

Tolerances: final value relative 1e-9; overshoot 5e-3 percentage points (check_scipy_design.py
uses 1e-3; the simulator refines peaks with a cubic whose error is O((h·|p|)⁴) on a grid that
allows h·|p| up to 1, and the open-loop-unstable plant's optimum, a lightly damped pair at
|p| ≈ 715 rad/s, comes out 2e-3 points high: 19.99999 % against 19.99797 % here and on a
2 000 001-point scipy.signal.step grid); settling time max(1e-3·t, 1e-4·T) (check_scipy_design.py's,
where they are justified); poles relative 1e-6;
the nonlinear trace 1e-4 of |r| (output) and of max|u| (control), solve_ivp at rtol 1e-10.
"""
import argparse
import json
import math
import pathlib
import subprocess
import sys
import tempfile

import numpy as np
from scipy import integrate, linalg, optimize, signal

from reference_common import Tally

FIGURES = ("step", "effort", "splane", "frequency")
TOL_FINAL_REL = 1e-9
TOL_PCT_ABS = 5e-3  # see the docstring
TOL_TIME_REL = 1e-3
TOL_TIME_HORIZON = 1e-4
TOL_POLE_REL = 1e-6
TOL_TRACE = 1e-4


def number(v):
    if v == "infinite":
        return math.inf
    if v == "-infinite":
        return -math.inf
    return v


def action_of(num, den):
    """README's rule: the sign of the numerator's lowest-order nonzero coefficient over the
    denominator's leading coefficient."""
    low = [c for c in num if c != 0.0][-1]
    return 1.0 if low / den[0] > 0 else -1.0


def closed_loop(num_c, den_c, num_g, den_g, scale=1.0):
    n = np.polymul(np.asarray(num_c) * scale, num_g)
    d = np.polyadd(np.polymul(den_c, den_g), n)
    return n, d


def stable(d):
    return all(r.real < -1e-9 * max(1.0, abs(r)) for r in np.roots(d))


def step_metrics(n, d, r, band):
    """Final value, overshoot and settling time of the step r·T(s), T = n/d, exactly: in time scaled
    by w0 (the geometric mean of the pole magnitudes, so that any plant scale is well conditioned),
    x(t) = x∞ + e^{At}(x(0) − x∞) on the balanced realization of scipy.signal.tf2ss, sampled on
    400 001 points up to the horizon; the peak refined by minimize_scalar and the last band exit
    by brentq, both on the exact solution between samples."""
    poles = np.roots(d)
    w0 = math.exp(float(np.mean([math.log(abs(p)) for p in poles if abs(p) > 0])))
    scale = lambda c: np.array([ck * w0 ** k for k, ck in zip(range(len(c) - 1, -1, -1), c)])  # noqa: E731
    ns, ds = scale(n), scale(d)
    ns, ds = ns / ds[0], ds / ds[0]
    a, b, c, dd = signal.tf2ss(ns, ds)
    _, (scaling, _) = linalg.matrix_balance(a, permute=False, separate=True)
    tb = np.diag(scaling)
    a, b, c = np.linalg.solve(tb, a @ tb), np.linalg.solve(tb, b), c @ tb
    x_inf = -np.linalg.solve(a, b[:, 0]) * r
    y_inf = float(c @ x_inf + dd[0, 0] * r)
    sigma = min(-p.real for p in np.roots(ds))
    horizon = math.log(1e4) / sigma
    count = 400_001
    h = horizon / (count - 1)
    phi = linalg.expm(a * h)
    xs = np.empty((count, a.shape[0]))
    x = -x_inf
    for k in range(count):
        xs[k] = x
        x = phi @ x
    y = (xs @ c[0]) + y_inf  # x − x∞ stored: y = C(x − x∞) + y∞
    t = np.arange(count) * h

    def exact(tt, k):
        return float(c[0] @ (linalg.expm(a * (tt - t[k])) @ xs[k])) + y_inf

    yn = y / y_inf
    k = int(np.argmax(yn))
    lo, hi = max(k - 1, 0), min(k + 1, count - 1)
    best = optimize.minimize_scalar(lambda tt: -exact(tt, lo) / y_inf, bounds=(t[lo], t[hi]), method="bounded",
                                    options={"xatol": 1e-12 * horizon})
    peak = max(yn[k], -best.fun)
    overshoot = max(0.0, (peak - 1.0) * 100.0)
    outside = np.nonzero(np.abs(yn - 1.0) > band)[0]
    settling = None
    if len(outside):
        k = int(outside[-1])
        if k + 1 < count:
            f = lambda tt: abs(exact(tt, k) / y_inf - 1.0) - band  # noqa: E731
            settling = optimize.brentq(f, t[k], t[k + 1], xtol=1e-14 * horizon) if f(t[k]) * f(t[k + 1]) < 0 else t[k + 1]
        else:
            settling = t[k]
    return {"final_value": y_inf, "overshoot_pct": overshoot,
            "settling_time": None if settling is None else settling / w0, "horizon": horizon / w0}


def close(a, b, rel=0.0, abs_=0.0):
    return abs(a - b) <= max(rel * abs(b), abs_)


def check_nonlinear_trace(tally, case, result, out_dir):
    """The back-calculation PI loop with saturation, re-simulated by solve_ivp."""
    spec = result["spec"]
    d = result["designs"]["optimized"]
    g_num, g_den = result["plant"]["numerator"], result["plant"]["denominator"]
    par = d["controller"]["parallel"]
    kp, ki = par["kp"], par["ki"]
    tt = kp / ki  # README: default tracking time Ti without derivative action (both gains negative here)
    tally.check(case, "nonlinear: the default tracking time Ti = Kp/Ki is positive with both gains negative",
                kp < 0 and ki < 0 and tt > 0, f"Kp {kp}, Ki {ki}")
    umin, umax = spec["actuator"]["min"], spec["actuator"]["max"]
    r = spec["reference"]["amplitude"]
    a, b, c, dd = signal.tf2ss(g_num, g_den)
    n = a.shape[0]

    def rhs(_t, z):
        x, i = z[:n], z[n]
        y = float(c @ x + dd[0, 0] * 0.0)
        uc = kp * (r - y) + i
        u = min(max(uc, umin), umax)
        return np.concatenate([a @ x + b[:, 0] * u, [ki * (r - y) + (u - uc) / tt]])

    rows = np.loadtxt(out_dir / "series" / "step_optimized_nonlinear.csv", delimiter=",", skiprows=1)
    t = rows[:, 0]
    sol = integrate.solve_ivp(rhs, (0.0, t[-1]), np.zeros(n + 1), method="LSODA", rtol=1e-10, atol=1e-12,
                              dense_output=True, max_step=t[-1] / 20000)
    tally.check(case, "nonlinear: solve_ivp succeeded", sol.success, sol.message)
    z = sol.sol(t)
    y = (c @ z[:n, :])[0]
    uc = kp * (r - y) + z[n, :]
    u = np.clip(uc, umin, umax)
    err_y = float(np.max(np.abs(y - rows[:, 1])))
    err_u = float(np.max(np.abs(u - rows[:, 2])))
    u_scale = float(np.max(np.abs(u)))
    tally.check(case, "nonlinear: output trace = solve_ivp", err_y <= TOL_TRACE * abs(r), f"max |Δy| {err_y:.2e}")
    tally.check(case, "nonlinear: applied control = solve_ivp", err_u <= TOL_TRACE * u_scale, f"max |Δu| {err_u:.2e}")
    tally.check(case, "nonlinear: the actuator saturates (the test exercises the limits)",
                np.any(uc > umax) or np.any(uc < umin))
    tally.check(case, "nonlinear: the applied control stays within [min, max] and uses one side only",
                float(np.min(u)) >= umin - 1e-9 and float(np.max(u)) <= umax + 1e-9 and np.any(u > 0.0))


def check_plant(tally, specloop, spec_file):
    case = spec_file.stem
    first = spec_file.read_text().splitlines()[0]
    tally.check(case, "the file starts with a '# Class:' header", first.startswith("# Class:"), first)
    with tempfile.TemporaryDirectory(prefix="specloop_unusual_") as work:
        out_dir = pathlib.Path(work, "out")
        run = subprocess.run([specloop, "design", str(spec_file), "--out", str(out_dir)], cwd=work,
                             capture_output=True, text=True, timeout=600)
        tally.check(case, "design exits 0 or 1", run.returncode in (0, 1),
                    f"rc {run.returncode}: {run.stderr.strip()[:300]}")
        tally.check(case, "no internal error", "internal error" not in run.stderr, run.stderr.strip()[:300])
        for name in ("result.json", "report.html", "report.md"):
            tally.check(case, f"{name} written", (out_dir / name).exists())
        for fig in FIGURES:
            tally.check(case, f"figure {fig} drawn", (out_dir / "plots" / f"{fig}.svg").exists())
        if not (out_dir / "result.json").exists():
            return
        text = (out_dir / "result.json").read_text()
        tally.check(case, "no NaN in result.json", "NaN" not in text)
        result = json.loads(text)
        tally.check(case, "exit code agrees with 'met'", (run.returncode == 0) == bool(result["met"]))
        g_num, g_den = result["plant"]["numerator"], result["plant"]["denominator"]
        action = action_of(g_num, g_den)
        tally.check(case, "action = the sign rule of the plant",
                    result["action"]["sign"] == action and result["action"]["name"] == ("reverse" if action < 0 else "direct"),
                    f"{result['action']} vs {action}")
        if result.get("ultimate"):
            # The ultimate gain (signed like the action) puts a closed-loop pair on the axis at ±jω_u.
            ku, wu = result["ultimate"]["gain"], result["ultimate"]["frequency"]
            roots = np.roots(np.polyadd(g_den, ku * np.asarray(g_num)))
            on_axis = min(abs(r - 1j * wu) for r in roots) <= 1e-6 * wu
            tally.check(case, f"ultimate gain {ku:.6g} (sign of the action) puts poles at ±j{wu:.6g}",
                        on_axis and ku * action > 0, str(roots))
        band = result["spec"]["requirements"]["settling_band_pct"] / 100.0
        r = result["spec"]["reference"]["amplitude"]
        for name, d in result["designs"].items():
            label = f"{case}/{name}"
            ctl = d["controller"]
            tally.check(label, "controller action = the plant's", ctl["action"] == result["action"]["name"])
            tally.check(label, "C(s) numerator carries the action's sign",
                        all(cf * action > 0 for cf in ctl["numerator"] if cf != 0.0), f"{ctl['numerator']}")
            tally.check(label, "series gain carries the action's sign", ctl["series"]["gain"] * action > 0)
            if ctl["parallel"]:
                tally.check(label, "parallel gains carry the action's sign",
                            all(ctl["parallel"][k] * action > 0 for k in ("kp", "ki", "kd") if ctl["parallel"][k] != 0.0),
                            f"{ctl['parallel']}")
            if d["status"] != "ok":
                continue
            n, dd = closed_loop(ctl["numerator"], ctl["denominator"], g_num, g_den)
            poles = sorted(np.roots(dd), key=lambda p: (p.real, p.imag))
            reported = sorted((complex(p[0], p[1]) for p in d["closed_loop_poles"]), key=lambda p: (p.real, p.imag))
            tally.check(label, "rebuilt loop is stable", stable(dd))
            tally.check(label, "rebuilt poles = closed_loop_poles",
                        len(poles) == len(reported) and all(abs(p - q) <= TOL_POLE_REL * max(1.0, abs(q))
                                                            for p, q in zip(poles, reported)))
            m = step_metrics(n, dd, r, band)
            sim = d["simulated"]
            tally.check(label, "final value = rebuilt", close(sim["final_value"], m["final_value"], rel=TOL_FINAL_REL),
                        f"{sim['final_value']} vs {m['final_value']}")
            tally.check(label, "overshoot = rebuilt", close(sim["overshoot_pct"], m["overshoot_pct"], abs_=TOL_PCT_ABS),
                        f"{sim['overshoot_pct']} vs {m['overshoot_pct']}")
            if sim["settling_time"] is not None and m["settling_time"] is not None:
                tol = max(TOL_TIME_REL * m["settling_time"], TOL_TIME_HORIZON * m["horizon"])
                tally.check(label, "settling time = rebuilt", close(sim["settling_time"], m["settling_time"], abs_=tol),
                            f"{sim['settling_time']} vs {m['settling_time']}")
            if action < 0:
                n_w, d_w = closed_loop(ctl["numerator"], ctl["denominator"], g_num, g_den, scale=-1.0)
                wrong_final = np.polyval(n_w, 0) / np.polyval(d_w, 0) if np.polyval(d_w, 0) != 0 else math.nan
                tally.check(label, "the opposite sign is unstable or settles the wrong way",
                            not stable(d_w) or not wrong_final > 0, f"final {wrong_final}")
            lower = (d.get("margins") or {}).get("lower_gain_margin_db")
            if lower is not None:
                k = 10 ** (lower / 20.0)  # README "Margins": negative dB, the factor K < 1
                _, above = closed_loop(ctl["numerator"], ctl["denominator"], g_num, g_den, scale=k * (1 + 1e-4))
                _, below = closed_loop(ctl["numerator"], ctl["denominator"], g_num, g_den, scale=k * (1 - 1e-4))
                tally.check(label, f"lower gain margin {lower:.4g} dB: stable just above, unstable just below",
                            lower < 0 and stable(above) and not stable(below))
            upper = number((d.get("margins") or {}).get("gain_margin_db"))
            if upper is not None and math.isfinite(upper):
                k = 10 ** (upper / 20.0)
                _, above = closed_loop(ctl["numerator"], ctl["denominator"], g_num, g_den, scale=k * (1 + 1e-4))
                _, below = closed_loop(ctl["numerator"], ctl["denominator"], g_num, g_den, scale=k * (1 - 1e-4))
                tally.check(label, f"gain margin {upper:.4g} dB: stable just below, unstable just above",
                            upper > 0 and stable(below) and not stable(above))
        if case == "reverse_cooling_pi":
            check_nonlinear_trace(tally, case, result, out_dir)
        if case == "unstable_open_loop":
            tally.check(case, "a conditionally stable loop reports its lower gain margin",
                        any((d.get("margins") or {}).get("lower_gain_margin_db") is not None
                            for d in result["designs"].values()))
            tally.check(case, "terminal shows the lower gain margin", "lower gain margin (dB)" in run.stdout)
        if case == "triple_integrator_pid":
            info = result.get("infeasibility") or {}
            tally.check(case, "exit 1, binding 'stability', the missing s^3 term named",
                        run.returncode == 1 and info.get("binding") == "stability" and "s^3" in info.get("nearest", ""),
                        json.dumps(info)[:300])
        if case == "reverse_third_order_pid":
            tally.check(case, "every design rule ran (reference, classical, ultimate gain, SIMC, AMIGO, optimized)",
                        sorted(result["designs"]) == ["amigo", "classical", "optimized", "reference", "simc", "ultimate_gain"]
                        and result["ultimate"]["gain"] < 0, f"{sorted(result['designs'])}, {result.get('ultimate')}")
            tally.check(case, "the published rules carry the reverse action (negative Kp)",
                        all(result["designs"][r]["controller"]["standard"]["kp"] < 0 for r in ("simc", "amigo")
                            if r in result["designs"]))
        if action < 0:
            tally.check(case, "terminal states the reverse action", "reverse action" in run.stdout)
            html = (out_dir / "report.html").read_text()
            tally.check(case, "report states the reverse action", "reverse" in html)


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    specloop = str(pathlib.Path(args.specloop).resolve())
    files = sorted(pathlib.Path(args.source_dir, "tests", "unusual_plants").resolve().glob("*.toml"))
    tally = Tally()
    tally.check("corpus", "at least ten unusual plants", len(files) >= 10, str(len(files)))
    for f in files:
        check_plant(tally, specloop, f)
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 0 if tally.failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
