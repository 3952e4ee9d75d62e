#!/usr/bin/env python3
"""Closed-loop step simulation and metrics of specloop checked against SciPy.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_step.py --specloop BIN --probe PROBE --source-dir ROOT

For each loop below (generic, invented test plants) the test-only `step_probe` closes the loop
u = C·(r − y), y = P·u, simulates the step and prints the sampled output/effort and the metrics.
This script then rebuilds the same loop from its polynomials with numpy/SciPy and checks:

 (a) the sampled output y(t_k) and effort u(t_k) at the probe's own times against
     scipy.signal.lsim (SciPy's zero-order-hold matrix-exponential integrator, exact for a
     constant input) on SciPy's own realization (scipy.signal.tf2ss of the closed-loop
     polynomials);
 (b) every metric, re-measured independently from a fine SciPy response (≥ 200 001 points over
     the same horizon, extrema refined by a three-point parabola, crossings by linear
     interpolation between fine samples, integrals by the trapezoid rule), plus the ISE over an
     infinite horizon from a Lyapunov equation (scipy.linalg.solve_continuous_lyapunov);
 (c) the closed-loop poles against numpy.roots of D_c·D_p + N_c·N_p; the time grid (two uniform
     segments, a fine step h₁ while fast modes are alive, then a coarse one) against its
     definition: horizon T = ln(1e4)/σ_slow (slowest mode decayed to 1e-4), h₁·|p| <= 1 for
     every pole, the coarse step only after the fast modes have decayed; an unstable loop reported
     as such, and malformed probe input rejected with exit code 2.

Metric definitions checked (the library's contract): y∞ = r·T(0) (final-value theorem);
overshoot % = (max y/y∞ − 1)·100, 0 and no peak time when y/y∞ never exceeds 1; undershoot % =
max(0, −min y/y∞)·100; settling time = last exit from |y/y∞ − 1| <= band; band entry time =
first entry into that band; rise time = first
reach of 0.9·y∞ minus first reach of 0.1·y∞; steady-state error (r − y∞)/r; effort peak =
max |u| over the horizon including u(0+) = D_u·r; IAE, ISE, ITAE of e = y∞ − y over the horizon.

Tolerances (and why):
  trace             max |Δy|/|y∞| and max |Δu|/max|u| <= 1e-6: both sides are exact ZOH
                    recursions of different realizations, so only rounding separates them.
  final value       relative 1e-9: an exact DC gain from polynomials vs. the state-space solve.
  steady-state err  absolute 1e-9, for the same reason.
  overshoot,        absolute 1e-3 percentage points: the fine grid resolves extrema to
  undershoot        ~(ω·dt)²/8 ≈ 1e-9 relative, so the margin is all the library's refinement.
  times             |Δ| <= max(1e-3·t, 1e-4·horizon): the fine grid locates crossings to far
                    better than that; a wrong definition (e.g. 5 % instead of 10 %, first exit
                    instead of last) moves a time by orders of magnitude more.
  effort peak       relative 1e-4: the library's cubic Hermite refinement between samples is
                    accurate to ~(h·ω)⁴/384 of the response; the fine grid is far tighter.
  IAE, ISE, ITAE    relative 1e-3; ISE vs. the infinite-horizon Lyapunov value also 1e-3 (the
                    tail beyond the horizon is ~1e-8 of the total).
  poles             |Δp| <= 1e-6·max(1, |p|): two eigenvalue solvers on well-separated roots.
  horizon           relative 1e-6 (roots from two solvers).
"""
import argparse
import json
import math
import subprocess
import sys

import numpy as np
from scipy import linalg, signal

from reference_common import Tally

FINE_MIN_POINTS = 200_001
FINE_MAX_POINTS = 2_000_001
DECAY_FRACTION = 1e-4

TOL_TRACE = 1e-6
TOL_FINAL_REL = 1e-9
TOL_SSE_ABS = 1e-9
TOL_PCT_ABS = 1e-3
TOL_TIME_REL = 1e-3
TOL_TIME_HORIZON = 1e-4
TOL_EFFORT_REL = 1e-4
TOL_INTEGRAL_REL = 1e-3
TOL_POLE = 1e-6
TOL_HORIZON_REL = 1e-6


# Generic loops: plant P = Np/Dp and controller C = Nc/Dc (highest power first). Invented test
# cases covering a LHP zero, a type-1 plant, a light resonance, fourth order, widely spread poles,
# a non-minimum-phase zero, a biproper lead, a PI controller, a negative-DC-gain plant with a
# non-unit step, a negative step, and an overdamped loop with no overshoot.
def poly(roots, gain=1.0):
    return list(gain * np.real(np.poly(roots)))


CASES = [
    dict(name="lhp_zero", plant=([1.0, 2.0], poly([-1, -4, -8])), controller=([20.0], [1.0])),
    dict(name="type1_integrator", plant=([5.0], poly([0, -2, -6])), controller=([3.0], [1.0]), amplitude=3.0),
    dict(name="light_resonance", plant=([1.0], [1.0, 0.2, 1.0]), controller=([0.5], [1.0]), band_pct=5.0),
    dict(name="fourth_order", plant=([1.0], poly([-1, -2, -3, -5])), controller=([30.0], [1.0]), amplitude=-0.5),
    dict(name="spread_poles", plant=([1.0], poly([-0.2, -200])), controller=([100.0], [1.0])),
    dict(name="spread_poles_third", plant=([1.0], poly([-0.2, -5, -200])), controller=([2000.0], [1.0])),
    # Closed-loop poles ≈ 0.1 and 2000 rad/s: one uniform step resolving both would need ~370 000
    # samples; the fast mode must be resolved early and the slow one followed for 92 s.
    dict(name="spread_poles_extreme", plant=([1.0], poly([-0.05, -2000])), controller=([100.0], [1.0])),
    dict(name="nonminimum_phase", plant=([-1.0, 2.0], poly([-1, -3])), controller=([1.0], [1.0])),
    dict(name="lead_on_type1", plant=([1.0], poly([0, -2])), controller=([8.0, 8.0], [1.0, 6.0])),
    dict(name="pi_on_second_order", plant=([1.0], poly([-1, -4])), controller=([3.0, 4.5], [1.0, 0.0])),
    dict(name="negative_dc_gain", plant=([-1.0], poly([-1, -2])), controller=([1.0], [1.0]), amplitude=2.5),
    dict(name="overdamped", plant=([1.0], poly([-1, -10])), controller=([2.0], [1.0]), band_pct=1.0),
]


def run_probe(probe, payload):
    proc = subprocess.run([probe], input=json.dumps(payload), capture_output=True, text=True, timeout=60)
    return proc.returncode, proc.stdout, proc.stderr


def closed_loop(case):
    np_, dp = (np.asarray(c, float) for c in case["plant"])
    nc, dc = (np.asarray(c, float) for c in case["controller"])
    den = np.polyadd(np.polymul(dc, dp), np.polymul(nc, np_))
    num_y = np.polymul(nc, np_)
    num_u = np.polymul(nc, dp)
    return num_y, num_u, den


def scipy_system(num_y, num_u, den):
    """One two-output state-space system (rows: y, u) from SciPy's own tf2ss."""
    n = len(den)
    rows = np.zeros((2, n))
    rows[0, n - len(num_y):] = num_y
    rows[1, n - len(num_u):] = num_u
    return signal.StateSpace(*signal.tf2ss(rows, den))


def parabola_extremum(t, f, i):
    """Vertex of the parabola through samples i−1, i, i+1 (uniform grid); the sample at the ends."""
    if i == 0 or i == len(f) - 1:
        return f[i], t[i]
    a, b, c = f[i - 1], f[i], f[i + 1]
    curvature = a - 2.0 * b + c
    if curvature == 0.0:
        return b, t[i]
    d = 0.5 * (a - c) / curvature
    d = max(-1.0, min(1.0, d))
    return b - 0.25 * (a - c) * d, t[i] + d * (t[1] - t[0])


def first_reach(t, yn, level):
    idx = np.nonzero(yn >= level)[0]
    if idx.size == 0:
        return None
    i = idx[0]
    if i == 0:
        return t[0]
    return t[i - 1] + (level - yn[i - 1]) / (yn[i] - yn[i - 1]) * (t[i] - t[i - 1])


def reference_metrics(t, y, u, y_inf, amplitude, band):
    """Metrics by the definitions above from a fine sampled response (t uniform, t[0] = 0)."""
    yn = y / y_inf
    out = {"final_value": y_inf, "steady_state_error": (amplitude - y_inf) / amplitude}
    i_max = int(np.argmax(yn))
    peak, t_peak = parabola_extremum(t, yn, i_max)
    if peak > 1.0 + 1e-9:
        out["overshoot_pct"], out["peak_time"] = (peak - 1.0) * 100.0, t_peak
    else:
        out["overshoot_pct"], out["peak_time"] = 0.0, None
    i_min = int(np.argmin(yn))
    low, _ = parabola_extremum(t, yn, i_min)
    out["undershoot_pct"] = max(0.0, -low) * 100.0
    outside = np.nonzero(np.abs(yn - 1.0) > band)[0]
    if outside.size == 0:
        out["settling_time"] = 0.0
    elif outside[-1] == len(t) - 1:
        out["settling_time"] = None
    else:
        j = outside[-1]
        level = 1.0 + band if yn[j] > 1.0 else 1.0 - band
        out["settling_time"] = t[j] + (level - yn[j]) / (yn[j + 1] - yn[j]) * (t[j + 1] - t[j])
    inside = np.nonzero(np.abs(yn - 1.0) <= band)[0]
    if inside.size == 0:
        out["band_entry_time"] = None
    elif inside[0] == 0:
        out["band_entry_time"] = 0.0
    else:
        j = inside[0]
        level = 1.0 + band if yn[j - 1] > 1.0 else 1.0 - band
        out["band_entry_time"] = t[j - 1] + (level - yn[j - 1]) / (yn[j] - yn[j - 1]) * (t[j] - t[j - 1])
    t10, t90 = first_reach(t, yn, 0.1), first_reach(t, yn, 0.9)
    out["rise_time"] = None if t10 is None or t90 is None else t90 - t10
    i_u = int(np.argmax(np.abs(u)))
    out["effort_peak"] = abs(parabola_extremum(t, u if u[i_u] >= 0 else -u, i_u)[0])
    e = y_inf - y
    out["iae"] = np.trapz(np.abs(e), t)
    out["ise"] = np.trapz(e * e, t)
    out["itae"] = np.trapz(t * np.abs(e), t)
    return out


def fine_metrics(sys_ss, roots, y_inf, amplitude, band, horizon, min_points=FINE_MIN_POINTS):
    """Metrics from scipy.signal.lsim on a fine uniform grid over [0, horizon]: at least
    `min_points` samples and at least 20 per time constant of the fastest pole. y∞ is passed in
    (from the final-value theorem on the closed-loop polynomials)."""
    fastest = float(np.max(np.abs(roots)))
    points = int(min(FINE_MAX_POINTS, max(min_points, math.ceil(horizon * fastest * 20.0) + 1)))
    tf = np.linspace(0.0, horizon, points)
    _, yu_f, _ = signal.lsim(sys_ss, U=np.full(points, amplitude), T=tf)
    return reference_metrics(tf, yu_f[:, 0], yu_f[:, 1], y_inf, amplitude, band)


def compare_metrics(tally, name, m, ref, horizon, label=""):
    """Every metric of `m` (specloop's metrics_json) against `ref` (reference_metrics)."""

    def cmp_number(key, rel=0.0, abs_=0.0, unit=""):
        a, b = m[key], ref[key]
        ok = isinstance(a, (int, float)) and close(a, b, rel=rel, abs_=abs_)
        tally.check(name, f"{label}{key} vs SciPy", ok, f"specloop {a!r}, SciPy {b:.10g}{unit}")

    def cmp_time(key):
        a, b = m[key], ref[key]
        if b is None or a is None:
            tally.check(name, f"{label}{key} vs SciPy", a is None and b is None, f"specloop {a!r}, SciPy {b!r}")
            return
        tol = max(TOL_TIME_REL * abs(b), TOL_TIME_HORIZON * horizon)
        tally.check(name, f"{label}{key} vs SciPy", abs(a - b) <= tol,
                    f"specloop {a:.10g}, SciPy {b:.10g} s, |Δ| {abs(a - b):.2e} <= {tol:.2e}")

    cmp_number("final_value", rel=TOL_FINAL_REL)
    cmp_number("steady_state_error", abs_=TOL_SSE_ABS)
    cmp_number("overshoot_pct", abs_=TOL_PCT_ABS, unit=" %")
    cmp_time("peak_time")
    cmp_number("undershoot_pct", abs_=TOL_PCT_ABS, unit=" %")
    cmp_time("settling_time")
    cmp_time("rise_time")
    if "band_entry_time" in m:  # added to the metrics after the others; checked when present
        cmp_time("band_entry_time")
    cmp_number("effort_peak", rel=TOL_EFFORT_REL)
    cmp_number("iae", rel=TOL_INTEGRAL_REL)
    cmp_number("ise", rel=TOL_INTEGRAL_REL)
    cmp_number("itae", rel=TOL_INTEGRAL_REL)


def lyapunov_ise(sys_ss, amplitude):
    """∫₀^∞ e² dt with e = y∞ − y: x̃ = x − x∞ obeys x̃' = A x̃, x̃(0) = −x∞ = A⁻¹B·r, e = −C_y x̃,
    so ISE = x̃(0)ᵀ W x̃(0) with AᵀW + W A = −C_yᵀC_y (observability Gramian)."""
    A, B, C = sys_ss.A, sys_ss.B, sys_ss.C[:1, :]
    x0 = np.linalg.solve(A, B[:, 0] * amplitude)
    W = linalg.solve_continuous_lyapunov(A.T, -C.T @ C)
    return float(x0 @ W @ x0)


def close(a, b, rel=0.0, abs_=0.0):
    return abs(a - b) <= max(abs_, rel * abs(b))


def check_case(tally, probe, case):
    name = case["name"]
    amplitude = case.get("amplitude", 1.0)
    band_pct = case.get("band_pct", 2.0)
    payload = {
        "plant": {"numerator": case["plant"][0], "denominator": case["plant"][1]},
        "controller": {"numerator": case["controller"][0], "denominator": case["controller"][1]},
        "amplitude": amplitude,
        "band_pct": band_pct,
    }
    rc, stdout, stderr = run_probe(probe, payload)
    if not tally.check(name, "probe ran", rc == 0, f"exit {rc}: {stderr.strip()}" if rc else ""):
        return
    res = json.loads(stdout)
    if not tally.check(name, "status ok", res["status"] == "ok", res["status"]):
        return

    num_y, num_u, den = closed_loop(case)
    roots = np.roots(den)
    sigma_slow = float(np.min(-roots.real))
    y_inf = amplitude * np.polyval(num_y, 0.0) / np.polyval(den, 0.0)   # final-value theorem
    sys_ss = scipy_system(num_y, num_u, den)

    # (c) poles: every probe pole matches a distinct numpy root.
    probe_poles = np.array([complex(re, im) for re, im in res["poles"]])
    remaining = list(roots)
    worst = 0.0
    ok = len(probe_poles) == len(roots)
    for p in probe_poles:
        k = int(np.argmin([abs(p - r) for r in remaining])) if remaining else None
        if k is None:
            ok = False
            break
        worst = max(worst, abs(p - remaining[k]) / max(1.0, abs(p)))
        remaining.pop(k)
    tally.check(name, "closed-loop poles = numpy.roots(Dc·Dp + Nc·Np)", ok and worst <= TOL_POLE,
                f"{len(probe_poles)} vs {len(roots)} poles, worst rel {worst:.2e}")

    # (c) grid: two uniform segments, t = k·h₁ up to T₁ = n₁·h₁, then T₁ + j·h₂ up to the horizon
    # T = ln(1/1e-4)/σ_slow (the slowest mode decayed to 1e-4).
    t = np.asarray(res["time"])
    h1, n1, h2, n2 = res["step"], res["fine_intervals"], res["coarse_step"], res["coarse_intervals"]
    n = res["samples"]
    horizon = res["horizon"]
    t1 = h1 * n1
    expected_t = np.concatenate([h1 * np.arange(n1 + 1), t1 + h2 * np.arange(1, n2 + 1)])
    tally.check(name, "time grid: k·h₁ then T₁ + j·h₂, ending at the horizon",
                n == n1 + n2 + 1 and len(t) == n and np.max(np.abs(t - expected_t)) <= 1e-12 * horizon
                and abs(t[-1] - horizon) <= 1e-12 * horizon,
                f"{n1} × {h1:.6g} s + {n2} × {h2:.6g} s")
    expected_horizon = math.log(1.0 / DECAY_FRACTION) / sigma_slow
    tally.check(name, "horizon = ln(1e4)/σ_slow", close(horizon, expected_horizon, rel=TOL_HORIZON_REL),
                f"{horizon:.9g} vs {expected_horizon:.9g}")
    # Each pole is resolved by the step used while it is alive: h₁·|p| <= 1 for every pole (within
    # the 20 000-sample cap), and the coarse step only once poles with h₂·|p| > 1 have decayed as
    # much as the slowest does by the horizon (ln(1e4)/|Re p| <= T₁).
    coarse_ok = all(h2 * abs(r) <= 1.0 + 1e-9 or math.log(1.0 / DECAY_FRACTION) / -r.real <= t1 * (1 + 1e-9)
                    for r in roots) if n2 > 0 else True
    fine_ok = n >= 20000 or all(h1 * abs(r) <= 1.0 + 1e-9 for r in roots)
    tally.check(name, "every pole resolved by the step in force while it is alive", coarse_ok and fine_ok,
                f"h₁·max|p| = {h1 * np.max(np.abs(roots)):.3g}" + (f", fast modes decayed by T₁ = {t1:.4g} s" if n2 else ""))

    # (a) sampled output and effort vs scipy.signal.lsim at the same times: one uniform run per
    # segment, the second started from the state the first reached at T₁ (time-invariant loop,
    # constant input, so restarting the clock at T₁ is exact).
    _, yu, x = signal.lsim(sys_ss, U=np.full(n1 + 1, amplitude), T=h1 * np.arange(n1 + 1))
    if n2 > 0:
        _, yu2, _ = signal.lsim(sys_ss, U=np.full(n2 + 1, amplitude), T=h2 * np.arange(n2 + 1), X0=x[-1])
        yu = np.vstack([yu, yu2[1:]])
    y_ref, u_ref = yu[:, 0], yu[:, 1]
    y_probe, u_probe = np.asarray(res["output"]), np.asarray(res["effort"])
    err_y = np.max(np.abs(y_probe - y_ref)) / abs(y_inf)
    err_u = np.max(np.abs(u_probe - u_ref)) / np.max(np.abs(u_ref))
    tally.check(name, "sampled output vs scipy.signal.lsim", err_y <= TOL_TRACE, f"max |Δy|/|y∞| = {err_y:.2e}")
    tally.check(name, "sampled effort vs scipy.signal.lsim", err_u <= TOL_TRACE, f"max |Δu|/max|u| = {err_u:.2e}")

    # (b) metrics from a fine SciPy response over the same horizon.
    ref = fine_metrics(sys_ss, roots, y_inf, amplitude, band_pct / 100.0, horizon)
    m = res["metrics"]
    compare_metrics(tally, name, m, ref, horizon)
    ise_inf = lyapunov_ise(sys_ss, amplitude)
    tally.check(name, "ise vs Lyapunov (infinite horizon)", close(m["ise"], ise_inf, rel=TOL_INTEGRAL_REL),
                f"specloop {m['ise']:.10g}, Lyapunov {ise_inf:.10g}")
    return m, ref


def check_expectations(tally, measured):
    """The features each loop was chosen for, confirmed on SciPy's fine response (so a loop that
    stopped exercising its feature is noticed) and on the probe's metrics."""
    facts = [
        ("nonminimum_phase", lambda m: m["undershoot_pct"] > 1.0, "undershoot from the RHP zero"),
        ("overdamped", lambda m: m["overshoot_pct"] == 0.0 and m["peak_time"] is None, "no overshoot, no peak time"),
        ("light_resonance", lambda m: m["overshoot_pct"] > 50.0, "large overshoot from the light resonance"),
        ("type1_integrator", lambda m: abs(m["steady_state_error"]) <= TOL_SSE_ABS, "zero steady-state error (type 1)"),
        ("pi_on_second_order", lambda m: abs(m["steady_state_error"]) <= TOL_SSE_ABS, "zero steady-state error (PI)"),
        ("lead_on_type1", lambda m: abs(m["effort_peak"] - 8.0) <= 1e-9 * 8.0,
         "effort peak is u(0+) = C(∞)·r = 8 (the biproper lead)"),
        ("negative_dc_gain", lambda m: abs(m["final_value"] + 2.5) <= TOL_FINAL_REL * 2.5, "y∞ = T(0)·r = −1·2.5"),
    ]
    for name, pred, what in facts:
        if name not in measured:
            tally.check(name, f"expected: {what}", False, "case did not run")
            continue
        probe_m, ref_m = measured[name]
        tally.check(name, f"expected: {what}", pred(ref_m) and pred(probe_m))


def check_unstable(tally, probe):
    # 1/(s+1)³ with K = 10: s³ + 3s² + 3s + 11 violates the Routh condition 3·3 > 11.
    plant = ([1.0], poly([-1, -1, -1]))
    rc, stdout, stderr = run_probe(probe, {"plant": {"numerator": plant[0], "denominator": plant[1]},
                                           "controller": {"numerator": [10.0], "denominator": [1.0]}})
    roots = np.roots(np.polyadd(plant[1], np.polymul([10.0], plant[0])))
    ok = rc == 0 and json.loads(stdout)["status"] == "unstable" and np.max(roots.real) > 0
    tally.check("unstable_third_order", "status unstable, confirmed by numpy.roots", ok,
                f"max Re = {np.max(roots.real):.4f}")


def check_malformed(tally, probe):
    good_plant = {"numerator": [1.0], "denominator": [1.0, 1.0]}
    bad_inputs = {
        "not JSON": "{plant:",
        "missing plant": json.dumps({"amplitude": 1.0}),
        "improper plant": json.dumps({"plant": {"numerator": [1.0, 0.0, 0.0], "denominator": [1.0, 1.0]}}),
        "zero amplitude": json.dumps({"plant": good_plant, "amplitude": 0.0}),
        "string coefficient": json.dumps({"plant": {"numerator": ["1"], "denominator": [1.0, 1.0]}}),
    }
    for what, text in bad_inputs.items():
        proc = subprocess.run([probe], input=text, capture_output=True, text=True, timeout=60)
        tally.check("malformed_input", f"{what} → exit 2 with a message",
                    proc.returncode == 2 and proc.stderr.strip() != "", f"exit {proc.returncode}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe", required=True)
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    tally = Tally()
    measured = {}
    for case in CASES:
        try:
            result = check_case(tally, args.probe, case)
            if result:
                measured[case["name"]] = result
        except Exception as exc:  # a crash in one case is a failure, not an abort
            tally.check(case["name"], "check ran", False, repr(exc))
    check_expectations(tally, measured)
    check_unstable(tally, args.probe)
    check_malformed(tally, args.probe)
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
