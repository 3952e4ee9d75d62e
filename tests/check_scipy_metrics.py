#!/usr/bin/env python3
"""Strict step metrics, the search's margin, the tracking objective and the reference gain,
checked against SciPy (issue 11, §2–§4).

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_metrics.py --specloop BIN --probe PROBE \
        --nonlinear-probe NLPROBE --source-dir ROOT

Every reference value here is computed with NumPy/SciPy from the loop's polynomials alone:
the exact step response x(t) = x∞ + e^{At}(x(0) − x∞) of scipy.signal.tf2ss's realization
(balanced by scipy.linalg.matrix_balance), as check_scipy_design.Loop builds it (a fine grid of
≥ 300 000 points, extrema refined by scipy.optimize.minimize_scalar and crossings by
scipy.optimize.brentq on the exact solution between samples).

(a) Band-edge humps between samples. The loop 8/(s(s + 4)) under PI Kp + Ki/s has a slow
    hump after its overshoot; Ki is set (by brentq on SciPy's hump height) so that the hump
    peaks at (1 + 0.02 + δ)·y∞ for δ from −1e-5 to +1e-5, and at the issue's controller
    (peak 1.0200031·y∞ at t = 3.74 s). The settling time (last exit from the 2 % band) must
    be the hump's exit when δ > 0 and the earlier one when δ < 0, within 1e-6 relative: a
    metric read from samples, or from a tolerance, lands on the wrong side.
(b) Peaks between samples. Lightly damped loops whose oscillation the grid samples at
    h·ω ≈ 0.2–1 (a lag with a resonance, closed-loop ζ down to 0.0005, peaks nearly equal): the
    overshoot must equal the exact maximum over every oscillation within 1e-6 points, the peak
    time within 1e-6 relative.
(c) The same hump on the nonlinear loop (nonlinear_probe, no limits: the loop is linear): its
    settling time must be the hump's exit too (within 2e-4 relative: the confirmation's 20 000
    samples and a local parabola).
(d) The reference gain: on 50 random stable plants (seeded; 2–4 poles, real or lightly to well
    damped pairs, sometimes a zero) with random overshoot limits of 5–40 %, `analyze --json`'s
    reference gain has a SciPy overshoot equal to the limit within 0.01 points — or the
    analysis says why not (`reference_note`: a jump of the overshoot across the limit, or no
    gain reaching it).
(e) Tracking: on type-0 plants with no steady-state-error requirement (`search.margin_pct = 0`,
    so the P reference sits inside the search's feasible set), wherever the reference design
    meets every requirement, the optimized design's tracking ITAE — ∫t·|y∞ − y|dt over its
    horizon plus |r − y∞|·W²/2 (README, "Objectives"), each part re-measured by SciPy — is at
    most the reference design's (×1.001), and its final value is at least as close to r. The
    issue's case (PD on 1/((s + 0.5)(s + 2)), which drove Kp to 0.0035) is among them.
(f) Slack: in every result.json of tests/metric_plants/, `slack` is the README's normalized room
    ((limit − value)/|limit|, reversed for a lower bound); and where the optimized design is met,
    every requirement with a nonzero limit keeps at least the search's margin (1 % by default).
(g) The classical design never silently disappears: for every spec in tests/metric_plants/,
    when result.json has a target_pole, either designs.classical exists or classical_outcome
    names the failed step and the reason, and report.md says the same; a final value outside
    the band around r with no steady-state requirement is a warning in result.json and the
    report.
Each check prints its line; the last line is `N passed, N failed`.
"""
import argparse
import json
import math
import os
import pathlib
import random
import subprocess
import sys
import tempfile

import numpy as np
from scipy import optimize

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import check_scipy_design as design  # noqa: E402  (the exact SciPy loop, shared)
from reference_common import Tally  # noqa: E402

BAND = 0.02
HUMP_DELTAS = (-1e-5, -1e-7, 1e-7, 1e-5)
ISSUE_PI = (1.232124040310276, 0.07018520217476377)  # Kp, Ki of the issue's "MET" design


def run_probe(probe, payload):
    proc = subprocess.run([probe], input=json.dumps(payload), capture_output=True, text=True, timeout=120)
    if proc.returncode != 0:
        raise RuntimeError(proc.stderr.strip())
    return json.loads(proc.stdout)


def exact_loop(plant, ctrl, amplitude=1.0):
    loop = design.Loop(plant[0], plant[1], ctrl[0], ctrl[1], amplitude)
    loop.simulate()
    return loop


def exact_extrema(loop, first=0, keep=lambda f_i: True):
    """The local extrema of y/y∞ − 1 from sample `first` on whose sample value passes `keep`,
    refined on the exact solution: list of (time, value of y/y∞ − 1). On this grid (≥ 300 000
    points, h·|p| ≤ 0.02) an extremum exceeds its largest sample by under 1e-4·|f|, so filters
    with that much room lose nothing."""
    f = loop.y / loop.y_inf - 1.0
    out = []
    d = np.diff(f[first:])
    turns = np.nonzero(np.sign(d[1:]) != np.sign(d[:-1]))[0] + first + 1
    for i in turns:
        if not keep(f[i]):
            continue
        sign = 1.0 if f[i] >= f[i - 1] else -1.0
        v, t = loop.refine_max(lambda s: sign * (loop.y_at(s) / loop.y_inf - 1.0), sign * f, int(i))
        out.append((float(t), sign * v))
    return out


def exact_settling(loop, band=BAND):
    """Last exit from |y/y∞ − 1| ≤ band on the exact response: the last sample outside, then
    every extremum after it that pokes out between samples."""
    f = loop.y / loop.y_inf - 1.0
    outside = np.nonzero(np.abs(f) > band)[0]
    last = 0.0
    first = 0
    if outside.size:
        k = int(outside[-1])
        if k == len(f) - 1:
            return None
        last = loop.crossing(k + 1, 1.0 + band if f[k] > 0 else 1.0 - band)
        first = k + 1
    g = lambda s, edge: loop.y_at(s) / loop.y_inf - 1.0 - edge  # noqa: E731
    for t, v in exact_extrema(loop, first, keep=lambda fi: abs(fi) > band * (1.0 - 1e-3)):
        if abs(v) > band:
            edge = band if v > 0 else -band
            k = int(np.searchsorted(loop.t, t))
            end = loop.t[min(k + 1, len(loop.t) - 1)]
            last = max(last, optimize.brentq(lambda s: g(s, edge), t, end, xtol=1e-14 * loop.horizon))
    return last


def exact_overshoot(loop):
    """(overshoot %, peak time) over every oscillation, on the exact response."""
    f = loop.y / loop.y_inf - 1.0
    top = float(np.max(f))
    best = (top, float(loop.t[int(np.argmax(f))]))
    for t, v in exact_extrema(loop, keep=lambda fi: fi >= top - 1e-4 * abs(top)):
        if v > best[0]:
            best = (v, t)
    return best[0] * 100.0, best[1]


# ---- (a) and (c): humps at the band edge ---------------------------------------------------------

HUMP_PLANT = ([8.0], [1.0, 4.0, 0.0])


def pi(kp, ki):
    return ([kp, ki], [1.0, 0.0])


def hump_height(kp, ki):
    """The largest |y/y∞ − 1| after the overshoot's peak and its first return (the hump), exact."""
    loop = exact_loop(HUMP_PLANT, pi(kp, ki))
    f = loop.y / loop.y_inf - 1.0
    d = np.diff(f)
    turns = np.nonzero(np.sign(d[1:]) != np.sign(d[:-1]))[0] + 1
    if len(turns) < 3:
        return 0.0
    ext = exact_extrema(loop, int(turns[2]) - 1, keep=lambda fi: abs(fi) > 0.5 * BAND)
    return max([abs(v) for t, v in ext] or [0.0])


def check_humps(tally, probe, nl_probe):
    kp, ki0 = ISSUE_PI
    cases = [("issue's PI", ki0)]
    base = hump_height(kp, ki0) - BAND
    tally.check("hump", "SciPy: the issue's design has a hump beyond the band (1.0200031·y∞)",
                abs(base - 3.1e-6) <= 2e-7, f"hump − band = {base:.3e}")
    for delta in HUMP_DELTAS:
        ki = optimize.brentq(lambda k: hump_height(kp, k) - BAND - delta, ki0 * 0.97, ki0 * 1.03, xtol=1e-15)
        cases.append((f"hump δ = {delta:+.0e}", ki))
    for name, ki in cases:
        loop = exact_loop(HUMP_PLANT, pi(kp, ki))
        ref = exact_settling(loop)
        out = run_probe(probe, {"plant": {"numerator": HUMP_PLANT[0], "denominator": HUMP_PLANT[1]},
                                "controller": {"numerator": [kp, ki], "denominator": [1.0, 0.0]}})
        got = out["metrics"]["settling_time"]
        tally.check(name, "linear settling time = SciPy's last exit (between samples)",
                    got is not None and abs(got - ref) <= 1e-6 * ref, f"specloop {got}, SciPy {ref:.9g}")
        if name == "issue's PI":
            tally.check(name, "settles at 3.769 s, not 2.294 s", got is not None and abs(got - 3.7694) < 1e-3, f"{got}")
            nl = run_probe(nl_probe, {"plant": {"numerator": HUMP_PLANT[0], "denominator": HUMP_PLANT[1]},
                                      "controller": {"structure": "pi", "series": [kp, ki / kp]},
                                      "options": {"output_step_s": loop.horizon / 20000.0, "horizon_s": loop.horizon}})
            got_nl = nl["metrics"]["settling_time"] if nl["metrics"] else None
            tally.check(name, "nonlinear settling time = SciPy's last exit (local parabola between samples)",
                        got_nl is not None and abs(got_nl - ref) <= 2e-4 * ref, f"nonlinear {got_nl}, SciPy {ref:.9g}")


# ---- (b) peaks between samples -------------------------------------------------------------------

def check_peaks(tally, probe):
    # (lag, ω, ζ, K): a real pole and a lightly damped pair, P control; closed-loop damping from
    # 0.02 down to 0.0005 (peaks a few tenths of a percent apart, the last one sampled at the
    # 20 000-sample cap with h·ω ≈ 0.97, where the largest sample need not sit in the highest
    # oscillation).
    cases = [(1.0, 5.0, 0.08, 0.59919), (2.0, 20.0, 0.03, 0.5), (50.0, 40.0, 0.02, 0.05), (400.0, 300.0, 0.005, 0.005),
             (300.0, 300.0, 0.0006, 0.0005)]
    for lag, w, z, k in cases:
        den = list(np.polymul([1.0, lag], [1.0, 2 * z * w, w * w]))
        num = [lag * w * w]
        name = f"peak lag {lag} ω {w} ζ {z}"
        loop = exact_loop((num, den), ([k], [1.0]))
        os_ref, tp_ref = exact_overshoot(loop)
        out = run_probe(probe, {"plant": {"numerator": num, "denominator": den},
                                "controller": {"numerator": [k], "denominator": [1.0]}})
        m = out["metrics"]
        samples = np.asarray(out["output"]) / loop.y_inf
        k_top = int(np.argmax(samples))
        other = abs(out["time"][k_top] - tp_ref) > math.pi / w  # the largest sample is in another oscillation
        name += " (largest sample in another oscillation)" if other else ""
        tally.check(name, "overshoot = exact maximum over every oscillation (1e-6 points)",
                    abs(m["overshoot_pct"] - os_ref) <= 1e-6, f"specloop {m['overshoot_pct']:.10f}, SciPy {os_ref:.10f}, "
                    f"h·ω = {out['step'] * w:.2f}")
        tally.check(name, "peak time = the exact maximum's", m["peak_time"] is not None and
                    abs(m["peak_time"] - tp_ref) <= 1e-6 * tp_ref, f"specloop {m['peak_time']}, SciPy {tp_ref:.10g}")


# ---- (d) the reference gain ----------------------------------------------------------------------

def random_plant(rng):
    poles, zeros = [], []
    for _ in range(rng.randint(1, 3)):
        if rng.random() < 0.5:
            poles.append(-rng.uniform(0.2, 10.0))
        else:
            w = rng.uniform(0.5, 10.0)
            z = rng.uniform(0.05, 0.9)
            poles.append([-z * w, w * math.sqrt(1 - z * z)])
    if len(poles) == 1 and not isinstance(poles[0], list):
        poles.append(-rng.uniform(0.2, 10.0))
    if rng.random() < 0.3:
        zeros.append(-rng.uniform(0.5, 20.0))
    return poles, zeros


def as_roots(items):
    out = []
    for p in items:
        if isinstance(p, list):
            out += [complex(p[0], p[1]), complex(p[0], -p[1])]
        else:
            out.append(complex(p))
    return out


def check_reference_gains(tally, specloop, work):
    rng = random.Random(20240611)
    for i in range(50):
        poles, zeros = random_plant(rng)
        limit = round(rng.uniform(5.0, 40.0), 3)
        spec = pathlib.Path(work, f"ref_{i}.toml")
        spec.write_text(f'title = "random plant {i}"\n[plant]\npoles = {json.dumps(poles)}\nzeros = {json.dumps(zeros)}\n'
                        f'gain = 1.0\n[controller]\nstructure = "p"\n[requirements]\novershoot_max_pct = {limit}\n')
        proc = subprocess.run([specloop, "analyze", str(spec), "--json"], capture_output=True, text=True, timeout=120)
        name = f"random plant {i}"
        if not tally.check(name, "analyze --json runs", proc.returncode == 0, proc.stderr.strip()):
            continue
        out = json.loads(proc.stdout)
        ref = out["reference"]
        note = out.get("reference_note", "")
        if ref is None:
            tally.check(name, "no reference gain, and the analysis says why", bool(note), note)
            continue
        num = list(np.real(np.poly(as_roots(zeros)))) if zeros else [1.0]
        den = list(np.real(np.poly(as_roots(poles))))
        loop = exact_loop((num, den), ([ref["gain"]], [1.0]))
        os_ref, _ = exact_overshoot(loop)
        ok = abs(os_ref - limit) <= 0.01 or ("jumps" in note)
        tally.check(name, f"reference gain {ref['gain']:.6g}: SciPy overshoot = the {limit} % limit within 0.01 points "
                          "(or a jump named)", ok, f"SciPy {os_ref:.6f} %{'; ' + note if note else ''}")


# ---- (e) tracking -------------------------------------------------------------------------------

TRACKING_SPECS = {
    "type0_pd": ("[-0.5, -2.0]", 1.0, "pd", "overshoot_max_pct = 10.0\nsettling_time_max = 10.0"),
    "type0_p": ("[-1.0, -3.0, -8.0]", 24.0, "p", "overshoot_max_pct = 15.0"),
    "type0_lead": ("[-0.7, -4.0]", 3.0, "lead", "overshoot_max_pct = 12.0\nsettling_time_max = 6.0"),
    "type0_lag": ("[-1.0, -2.0, -6.0]", 12.0, "lag", "overshoot_max_pct = 10.0"),
}


def run_design(specloop, spec, out):
    proc = subprocess.run([specloop, "design", str(spec), "--out", str(out)], capture_output=True, text=True, timeout=300)
    result = json.loads(pathlib.Path(out, "result.json").read_text()) if pathlib.Path(out, "result.json").exists() else None
    return proc, result


def tracking_itae(result, d):
    loop = design.loop_of(result, d)
    loop.simulate()
    itae = float(np.trapz(loop.t * np.abs(loop.y_inf - loop.y), loop.t))
    w = result["objective"]["tracking_window"]
    r = result["spec"]["reference"]["amplitude"]
    return itae + abs(r - loop.y_inf) * w * w / 2.0, loop.y_inf


def check_tracking(tally, specloop, work):
    for name, (poles, gain, structure, reqs) in TRACKING_SPECS.items():
        spec = pathlib.Path(work, f"{name}.toml")
        spec.write_text(f'title = "{name}"\n[plant]\npoles = {poles}\ngain = {gain}\n[controller]\nstructure = "{structure}"\n'
                        f'[requirements]\n{reqs}\n[search]\nmargin_pct = 0\n')
        proc, result = run_design(specloop, spec, pathlib.Path(work, f"out_{name}"))
        if not tally.check(name, "design runs", result is not None, proc.stderr.strip()):
            continue
        ref, opt = result["designs"].get("reference"), result["designs"]["optimized"]
        if ref is None or not ref["meets_all"]:
            tally.check(name, "the reference design meets every requirement (the property applies)", False,
                        "choose a spec where it does")
            continue
        j_ref, y_ref = tracking_itae(result, ref)
        j_opt, y_opt = tracking_itae(result, opt)
        r = result["spec"]["reference"]["amplitude"]
        tally.check(name, "optimized tracking ITAE ≤ the P reference's (SciPy)", j_opt <= j_ref * 1.001,
                    f"optimized {j_opt:.6g}, reference {j_ref:.6g}")
        tally.check(name, "optimized final value at least as close to r as the reference's", abs(r - y_opt) <=
                    abs(r - y_ref) * 1.001 + 1e-12, f"optimized y∞ {y_opt:.6g}, reference {y_ref:.6g}")


# ---- (f) and (g): slack, classical outcome, warnings ---------------------------------------------

def normalized_room(check):
    v, limit = check["value"], check["limit"]
    if v is None:
        return -1.0
    if v == "infinite":
        v = math.inf
    scale = abs(limit) if limit != 0 else 0.01
    room = (limit - v) / scale if check["bound"] == "max" else (v - limit) / scale
    return max(-1e3, min(1e3, room))


def check_results(tally, specloop, source, work):
    for spec in sorted(pathlib.Path(source, "tests", "metric_plants").glob("*.toml")):
        out = pathlib.Path(work, "mp_" + spec.stem)
        proc, result = run_design(specloop, spec, out)
        name = spec.stem
        if not tally.check(name, "design runs and writes result.json", result is not None, proc.stderr.strip()):
            continue
        report = pathlib.Path(out, "report.md").read_text()
        bad = []
        for dname, d in result["designs"].items():
            for c in d["checks"]:
                if not math.isclose(c["slack"], normalized_room(c), rel_tol=1e-9, abs_tol=1e-12):
                    bad.append(f"{dname}.{c['requirement']}: {c['slack']} vs {normalized_room(c)}")
        tally.check(name, "every check's slack is the normalized room", not bad, "; ".join(bad[:3]))
        opt = result["designs"]["optimized"]
        margin = result["spec"]["search"]["margin_pct"] / 100.0
        if opt["meets_all"]:
            thin = [f"{c['requirement']} {c['slack']:.4g}" for c in opt["checks"]
                    if c["limit"] != 0 and c["slack"] < margin * (1 - 1e-6)]
            tally.check(name, f"the optimized design keeps the search's {margin:.0%} margin on every limit", not thin,
                        ", ".join(thin))
        outcome = result["classical_outcome"]
        if "target_pole" in result:
            has = "classical" in result["designs"]
            tally.check(name, "a target pole: a classical design, or the failed step and why",
                        has == outcome["designed"] and (has or (outcome["failed_step"] and outcome["reason"])),
                        f"designed {outcome['designed']}, step {outcome['failed_step']!r}")
            tally.check(name, "the report never says there is no target pole when there is one",
                        "no target pole to design for" not in report)
            if not has:
                tally.check(name, "the report names the failed step", outcome["failed_step"] in report)
        sse_required = result["spec"]["requirements"].get("steady_state_error_max") is not None
        far = abs(opt["simulated"]["steady_state_error"]) > result["spec"]["requirements"]["settling_band_pct"] / 100.0
        if not sse_required and far:
            tally.check(name, "a final value far from r without a requirement is a warning (result.json, report)",
                        result["warnings"] and "Warning" in report, str(result["warnings"]))
        else:
            tally.check(name, "no offset warning where the final value is close to r or required", not result["warnings"],
                        str(result["warnings"]))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe", required=True)
    ap.add_argument("--nonlinear-probe", required=True)
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    tally = Tally()
    with tempfile.TemporaryDirectory() as work:
        check_humps(tally, args.probe, args.nonlinear_probe)
        check_peaks(tally, args.probe)
        check_reference_gains(tally, args.specloop, work)
        check_tracking(tally, args.specloop, work)
        check_results(tally, args.specloop, args.source_dir, work)
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 0 if tally.failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
