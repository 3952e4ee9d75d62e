#!/usr/bin/env python3
"""`specloop analyze SPEC --json` checked against numpy/SciPy and published formulas.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_analyze.py --specloop BIN --probe PROBE --source-dir ROOT

Writes a few spec files (generic, invented plants) to a temporary directory, runs the analysis on
each and checks, for the P-only loop K·G = K·N/D:

  damping ratio     ζ = −ln(M)/√(π² + ln²M), M = overshoot/100 (Ogata, Modern Control
                    Engineering, transient response of second-order systems).
  crossings         each reported point s satisfies the characteristic equation D(s) + K·N(s) = 0
                    (relative residual), lies on the ζ-line (−Re s/|s| = ζ, Im s > 0); its `poles`
                    equal numpy.roots(D + K·N); `stable` and `decay_ratio` agree with those roots.
  none missed       two brute-force scans, independent of the library's polynomial condition:
                    (1) a dense logarithmic scan of K (batched numpy eigenvalues of the companion
                    matrices of D + K·N) counting closed-loop poles less damped than ζ (−Re s/|s|
                    < ζ, which includes real right-half-plane roots) — the count changes by 2
                    exactly where a conjugate pair crosses the ζ-line; (2) a dense scan of r along s = r·e^{j(π − arccos ζ)} for sign changes
                    of Im(D·conj N) where Re(D·conj N) < 0 (the angle condition ∠G = 180°).
                    Every change must be bracketed by a reported crossing and vice versa.
  dominant          its gain/pair are those of the crossing it indexes; its metrics re-measured
                    by SciPy (scipy.signal.lsim on a fine grid, as in check_scipy_step.py) at
                    that gain; second-order predictions: peak time π/ω_d, settling time
                    −ln(band)/σ, ζ = σ/|p|, ω_n = |p|, overshoot 100·exp(−ζπ/√(1 − ζ²)) (same
                    text); mode shares = |residue of T(s)/s|/|y∞| from scipy.signal.residue;
                    signed contributions = −Re(residue)/y∞ (×2 for a pair), and they add up to
                    1 − y(0+)/y∞ = 1 (contribution_sum) for these strictly proper loops.
  reference         its overshoot equals the limit within 1e-3 percentage points, both as
                    reported and re-measured by SciPy at the reported gain; all its metrics
                    re-measured by SciPy; SciPy finds a smaller overshoot at a few smaller gains.
  both gains        steady-state error 1/(1 + K·G(0)) for a type-0 plant, 0 for type 1 (final-
                    value theorem); error constants Kp = K·G(0) (∞ for type 1), Kv = lim s·K·G
                    (0 for type 0), Ka = 0 for types 0 and 1 (standard static error constants).

Tolerances: metric tolerances are those of check_scipy_step.py (see there, and why); the
crossing residual |D + K·N|/(|D| + |K·N|) <= 1e-9 and the ζ-line angle within 1e-9 (the
library polishes the root with Newton steps, so only rounding should remain); poles and
decay ratios 1e-6 relative (two eigenvalue solvers); second-order predictions 1e-9 relative
(closed-form from the same pair); mode shares 1e-6 relative (simple, well-separated poles).

No scanned plant has a closed-loop root passing through s = 0 for K > 0 (that would change the
count of (1) by one and is reported as a mismatch); K is scanned over twelve decades around
the plant's gain scale |D(jω₀)/N(jω₀)| and r over eight decades around ω₀ (the largest pole or
zero magnitude), both far beyond where any of these plants' crossings lie.
"""
import argparse
import json
import math
import os
import subprocess
import sys
import tempfile

import numpy as np
from scipy import signal

sys.dont_write_bytecode = True  # leave no __pycache__ in the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import check_scipy_step as step  # noqa: E402  (shared SciPy reference measurement)

TOL_RESIDUAL = 1e-9
TOL_ZETA_LINE = 1e-9
TOL_POLE = 1e-6
TOL_RATIO = 1e-6
TOL_FORMULA = 1e-9
TOL_SHARE = 1e-6
K_SCAN_POINTS = 240_001   # 20 000 per decade over 12 decades
R_SCAN_POINTS = 200_001   # 25 000 per decade over 8 decades

# Generic plants. `zp`: zeros, poles ([re, im] = re ± j·im), gain; or `coeffs`: numerator,
# denominator. Each with its requirement block (and optionally a reference amplitude).
SPECS = [
    dict(name="zero_integrator_pair",
         plant="zeros = [-4.0]\npoles = [0.0, -1.5, [-3.0, 2.0]]\ngain = 2.0",
         zeros=[-4.0], poles=[0.0, -1.5, -3 + 2j, -3 - 2j], gain=2.0, overshoot=15.0),
    dict(name="third_order_coefficients",
         plant="numerator = [3.0]\ndenominator = [1.0, 9.0, 20.0, 12.0]",
         num=[3.0], den=[1.0, 9.0, 20.0, 12.0], overshoot=10.0, band_pct=5.0, amplitude=2.0),
    dict(name="circle_two_crossings",
         plant="zeros = [-3.0]\npoles = [0.0, -1.0]",
         zeros=[-3.0], poles=[0.0, -1.0], gain=1.0, overshoot=5.0),
    dict(name="light_resonance_no_crossing",
         plant="poles = [[-0.3, 2.0], -1.0, -6.0]\ngain = 4.0",
         zeros=[], poles=[-0.3 + 2j, -0.3 - 2j, -1.0, -6.0], gain=4.0, overshoot=20.0),
    dict(name="nonminimum_phase_zero",
         plant="zeros = [2.0]\npoles = [-1.0, -3.0]\ngain = -1.0",
         zeros=[2.0], poles=[-1.0, -3.0], gain=-1.0, overshoot=10.0),
    dict(name="spread_poles",
         plant="poles = [-0.2, -5.0, -200.0]\ngain = 1000.0",
         zeros=[], poles=[-0.2, -5.0, -200.0], gain=1000.0, overshoot=5.0),
    dict(name="fourth_order",
         plant="poles = [-1.0, -2.0, -3.0, -5.0]",
         zeros=[], poles=[-1.0, -2.0, -3.0, -5.0], gain=1.0, overshoot=15.0),
]


def plant_polynomials(spec):
    if "num" in spec:
        return np.asarray(spec["num"], float), np.asarray(spec["den"], float)
    n = spec["gain"] * np.real(np.poly(spec["zeros"])) if spec["zeros"] else np.array([spec["gain"]])
    return np.atleast_1d(n).astype(float), np.real(np.poly(spec["poles"])).astype(float)


def spec_text(spec):
    lines = [f'title = "{spec["name"]}"', "", "[plant]", spec["plant"], "", "[requirements]",
             f'overshoot_max_pct = {spec["overshoot"]}']
    if "band_pct" in spec:
        lines.append(f'settling_band_pct = {spec["band_pct"]}')
    if "amplitude" in spec:
        lines += ["", "[reference]", f'amplitude = {spec["amplitude"]}']
    return "\n".join(lines) + "\n"


def zeta_from_overshoot(pct):
    """Ogata, Modern Control Engineering: ζ = −ln(M)/√(π² + ln²M)."""
    lnm = math.log(pct / 100.0)
    return -lnm / math.sqrt(math.pi ** 2 + lnm ** 2)


def number(v):
    if v == "infinite":
        return math.inf
    if v == "-infinite":
        return -math.inf
    return v


def cplx(pair):
    return complex(number(pair[0]), number(pair[1]))


def match_poles(reported, expected):
    """Worst relative distance pairing each reported pole with a distinct expected root."""
    remaining = list(expected)
    if len(reported) != len(remaining):
        return math.inf
    worst = 0.0
    for p in reported:
        k = int(np.argmin([abs(p - r) for r in remaining]))
        worst = max(worst, abs(p - remaining[k]) / max(1.0, abs(p)))
        remaining.pop(k)
    return worst


def system_type(den):
    return len(den) - len(np.trim_zeros(den, "b"))


def gain_scale(num, den):
    poles = np.roots(den)
    zeros = np.roots(num) if len(num) > 1 else np.array([])
    w0 = max([1.0] + [abs(p) for p in poles] + [abs(z) for z in zeros])
    return w0, abs(np.polyval(den, 1j * w0) / np.polyval(num, 1j * w0))


def scan_gain(num, den, zeta, k_lo, k_hi):
    """Brackets [K_i, K_i+1, crossings] where the number of closed-loop poles less damped than ζ
    (−Re s/|s| < ζ: both members of a pair, and real roots in the right half plane) changes;
    batched eigenvalues of the companion matrices of D + K·N. A conjugate pair crossing the
    ζ-line changes the count by 2 (one crossing); a pair meeting the real axis, on either side,
    leaves it unchanged. An odd change (a real root through s = 0) is reported as such."""
    ks = np.geomspace(k_lo, k_hi, K_SCAN_POINTS)
    n = len(den) - 1
    nn = np.zeros(n + 1)
    nn[n + 1 - len(num):] = num
    coeffs = den[None, :] + ks[:, None] * nn[None, :]           # rows: D + K·N
    monic = coeffs[:, 1:] / coeffs[:, :1]
    comp = np.zeros((len(ks), n, n))
    comp[:, 0, :] = -monic
    if n > 1:
        comp[:, np.arange(1, n), np.arange(0, n - 1)] = 1.0
    roots = np.linalg.eigvals(comp)
    with np.errstate(invalid="ignore", divide="ignore"):
        less_damped = (np.abs(roots) > 0) & (-roots.real / np.abs(roots) < zeta)
    count = less_damped.sum(axis=1)
    changes = np.nonzero(np.diff(count))[0]
    return [(ks[i], ks[i + 1], abs(int(count[i + 1] - count[i])) / 2) for i in changes]


def scan_radius(num, den, zeta, r_lo, r_hi):
    """Brackets [r_i, r_i+1] on the ζ-line where Im(D·conj N) changes sign with Re(D·conj N) < 0
    at both ends, i.e. where −D/N = K passes through the positive real axis."""
    w = complex(-zeta, math.sqrt(1.0 - zeta * zeta))
    rs = np.geomspace(r_lo, r_hi, R_SCAN_POINTS)
    s = rs * w
    q = np.polyval(den, s) * np.conj(np.polyval(num, s))
    sign = np.sign(q.imag)
    idx = np.nonzero((sign[:-1] * sign[1:] < 0) & (q.real[:-1] < 0) & (q.real[1:] < 0))[0]
    return [(rs[i], rs[i + 1]) for i in idx]


def check_brackets(tally, name, what, brackets, values, lo, hi):
    """Each bracket holds exactly one reported value and each reported value in [lo, hi] lies in
    one bracket."""
    inside = [v for v in values if lo <= v <= hi]
    unmatched = list(inside)
    ok = True
    for a, b, *rest in brackets:
        expected = rest[0] if rest else 1
        hits = [v for v in unmatched if a * (1 - 1e-9) <= v <= b * (1 + 1e-9)]
        if len(hits) != expected:
            ok = False
        for v in hits:
            unmatched.remove(v)
    ok = ok and not unmatched and len(inside) == len(values)
    tally.check(name, f"brute-force {what}: no crossing missed or invented", ok,
                f"scan found {len(brackets)} at {[f'{a:.6g}..{b:.6g}' for a, b, *_ in brackets]}, "
                f"reported {[f'{v:.6g}' for v in values]}")


def loop_polynomials(num, den, k):
    den_cl = np.polyadd(den, k * num)
    return k * num, k * den, den_cl


def scipy_metrics_at(num, den, k, amplitude, band, min_points=step.FINE_MIN_POINTS):
    num_y, num_u, den_cl = loop_polynomials(num, den, k)
    roots = np.roots(den_cl)
    horizon = math.log(1.0 / step.DECAY_FRACTION) / float(np.min(-roots.real))
    y_inf = amplitude * np.polyval(num_y, 0.0) / np.polyval(den_cl, 0.0)
    ss = step.scipy_system(num_y, num_u, den_cl)
    return step.fine_metrics(ss, roots, y_inf, amplitude, band, horizon, min_points=min_points), horizon


def check_gain_point(tally, name, label, point, num, den, amplitude, band):
    k = point["gain"]
    roots = np.roots(np.polyadd(den, k * num))
    worst = match_poles([cplx(p) for p in point["poles"]], roots)
    tally.check(name, f"{label}: poles = numpy.roots(D + K·N)", worst <= TOL_POLE, f"K = {k:.8g}, worst rel {worst:.2e}")
    ref, horizon = scipy_metrics_at(num, den, k, amplitude, band)
    step.compare_metrics(tally, name, point["simulated"], ref, horizon, label=f"{label}: ")
    # Final-value theorem and the static error constants.
    typ = system_type(den)
    g0 = np.polyval(num, 0.0) / np.polyval(den, 0.0) if typ == 0 else math.inf
    expected_sse = 1.0 / (1.0 + k * g0) if typ == 0 else 0.0
    sse = point["simulated"]["steady_state_error"]
    tally.check(name, f"{label}: steady-state error = {'1/(1 + K·G(0))' if typ == 0 else '0 (type 1)'}",
                abs(sse - expected_sse) <= step.TOL_SSE_ABS, f"{sse!r} vs {expected_sse!r}")
    c = {key: number(v) for key, v in point["error_constants"].items()}
    if typ == 0:
        exp_c = dict(position=k * g0, velocity=0.0, acceleration=0.0)
    else:  # D = s·D1: lim s·K·N/D = K·N(0)/D1(0)
        d1 = den[:-1]
        exp_c = dict(position=math.inf, velocity=k * np.polyval(num, 0.0) / np.polyval(d1, 0.0), acceleration=0.0)
    ok = all((c[key] == exp_c[key]) if math.isinf(exp_c[key]) else step.close(c[key], exp_c[key], rel=1e-9, abs_=1e-12)
             for key in exp_c)
    tally.check(name, f"{label}: error constants Kp, Kv, Ka", ok, f"{c} vs {exp_c}")
    return ref


def check_spec(tally, specloop, tmpdir, spec):
    name = spec["name"]
    path = os.path.join(tmpdir, f"{name}.toml")
    with open(path, "w") as f:
        f.write(spec_text(spec))
    proc = subprocess.run([specloop, "analyze", path, "--json"], capture_output=True, text=True, timeout=120)
    if not tally.check(name, "analyze --json exits 0", proc.returncode == 0, f"exit {proc.returncode}: {proc.stderr.strip()}"):
        return
    out = json.loads(proc.stdout)
    num, den = plant_polynomials(spec)
    limit = spec["overshoot"]
    band = spec.get("band_pct", 2.0) / 100.0
    amplitude = spec.get("amplitude", 1.0)

    zeta = zeta_from_overshoot(limit)
    tally.check(name, "damping_ratio = −ln M/√(π² + ln²M) (Ogata)", abs(out["damping_ratio"] - zeta) <= 1e-12,
                f"{out['damping_ratio']!r} vs {zeta!r}")
    tally.check(name, "settling_band_pct echoes the spec", out["settling_band_pct"] == spec.get("band_pct", 2.0))

    # Crossings.
    crossings = out["crossings"]
    gains = [c["gain"] for c in crossings]
    tally.check(name, "crossings in increasing gain", gains == sorted(gains), f"{gains}")
    for i, c in enumerate(crossings):
        k, s = c["gain"], cplx(c["pair"])
        dv, nv = np.polyval(den, s), np.polyval(num, s)
        residual = abs(dv + k * nv) / (abs(dv) + abs(k * nv))
        tally.check(name, f"crossing {i}: D(s) + K·N(s) = 0", k > 0 and residual <= TOL_RESIDUAL,
                    f"K = {k:.10g}, s = {s:.10g}, relative residual {residual:.2e}")
        tally.check(name, f"crossing {i}: on the ζ-line", s.imag > 0 and abs(-s.real / abs(s) - zeta) <= TOL_ZETA_LINE,
                    f"−Re/|s| = {-s.real / abs(s):.12f}, ζ = {zeta:.12f}")
        roots = np.roots(np.polyadd(den, k * num))
        worst = match_poles([cplx(p) for p in c["poles"]], roots)
        tally.check(name, f"crossing {i}: poles = numpy.roots(D + K·N)", worst <= TOL_POLE, f"worst rel {worst:.2e}")
        stable = bool(np.all(roots.real < 0))
        tally.check(name, f"crossing {i}: stable flag", c["stable"] == stable, f"{c['stable']} vs numpy {stable}")
        others = list(roots)
        for target in (s, s.conjugate()):
            others.pop(int(np.argmin([abs(r - target) for r in others])))
        ratio = min((r.real / s.real for r in others), default=math.inf)
        got = number(c["decay_ratio"])
        ok = (got == ratio) if math.isinf(ratio) else step.close(got, ratio, rel=TOL_RATIO)
        tally.check(name, f"crossing {i}: decay ratio", ok, f"{got!r} vs {ratio!r}")

    # No crossing missed: brute-force scans in K and along the ζ-line.
    w0, k_scale = gain_scale(num, den)
    k_lo, k_hi = k_scale * 1e-6, k_scale * 1e6
    check_brackets(tally, name, "scan of K (count of poles less damped than ζ)",
                   scan_gain(num, den, zeta, k_lo, k_hi), gains, k_lo, k_hi)
    r_lo, r_hi = w0 * 1e-4, w0 * 1e4
    check_brackets(tally, name, "scan of r along the ζ-line (angle condition)",
                   scan_radius(num, den, zeta, r_lo, r_hi), [abs(cplx(c["pair"])) for c in crossings], r_lo, r_hi)

    # Dominant crossing.
    dom = out["dominant"]
    if crossings and any(c["stable"] for c in crossings):
        if not tally.check(name, "a dominant crossing is chosen", dom is not None, out.get("dominant_note", "")):
            dom = None
    else:
        tally.check(name, "no dominant crossing (none stable or none at all)", dom is None, out.get("dominant_note", ""))
    if dom is not None:
        c = crossings[dom["index"]]
        pair = cplx(dom["pair"])
        tally.check(name, "dominant: gain and pair of its crossing, stable",
                    dom["gain"] == c["gain"] and pair == cplx(c["pair"]) and c["stable"])
        so = dom["second_order"]
        sigma, wd = -pair.real, pair.imag
        z = sigma / abs(pair)
        expected = dict(peak_time=math.pi / wd, settling_time=-math.log(band) / sigma, damping_ratio=z,
                        natural_frequency=abs(pair),
                        overshoot_pct=100.0 * math.exp(-z * math.pi / math.sqrt(1.0 - z * z)))
        for key, want in expected.items():
            tally.check(name, f"dominant: second-order {key}", step.close(so[key], want, rel=TOL_FORMULA),
                        f"{so[key]!r} vs {want!r}")
        tally.check(name, "dominant: predicted overshoot = the limit (pair on the ζ-line)",
                    abs(so["overshoot_pct"] - limit) <= 1e-6, f"{so['overshoot_pct']!r} vs {limit}")
        check_gain_point(tally, name, "dominant", dom, num, den, amplitude, band)
        # Mode shares: |residue of T(s)/s at the pole| (a pair counted twice) ÷ |y∞|.
        num_y, _, den_cl = loop_polynomials(num, den, dom["gain"])
        res, poles, _ = signal.residue(num_y, np.polymul(den_cl, [1.0, 0.0]))
        y_inf = abs(np.polyval(num_y, 0.0) / np.polyval(den_cl, 0.0))
        worst, ok = 0.0, True
        worst_c = 0.0
        y_inf_signed = np.polyval(num_y, 0.0) / np.polyval(den_cl, 0.0)
        for mode in out["dominance"]["modes"]:
            p = cplx(mode["pole"])
            if mode["share"] is None:
                continue
            j = int(np.argmin(np.abs(poles - p)))
            want = abs(res[j]) * (2.0 if p.imag > 0 else 1.0) / y_inf
            ok = ok and abs(poles[j] - p) <= TOL_POLE * max(1.0, abs(p))
            worst = max(worst, abs(mode["share"] - want) / want)
            want_c = -res[j].real * (2.0 if p.imag > 0 else 1.0) / y_inf_signed
            worst_c = max(worst_c, abs(mode["contribution"] - want_c) / max(abs(want_c), 1e-3))
        total = sum(m["contribution"] for m in out["dominance"]["modes"] if m["contribution"] is not None)
        tally.check(name, "dominance: mode shares vs scipy.signal.residue", ok and worst <= TOL_SHARE,
                    f"worst rel {worst:.2e}")
        tally.check(name, "dominance: signed mode contributions vs scipy.signal.residue", ok and worst_c <= TOL_SHARE,
                    f"worst rel {worst_c:.2e}")
        tally.check(name, "dominance: the contributions add up to 100 % of the final value",
                    abs(total - 1.0) <= 1e-6 and abs(out["dominance"]["contribution_sum"] - 1.0) <= 1e-12,
                    f"{total!r}, contribution_sum {out['dominance']['contribution_sum']!r}")

    # Reference gain.
    ref_point = out["reference"]
    if not tally.check(name, "a reference gain is found", ref_point is not None, out.get("reference_note", "")):
        return
    k_ref = ref_point["gain"]
    tally.check(name, "reference: reported overshoot = the limit",
                abs(ref_point["simulated"]["overshoot_pct"] - limit) <= step.TOL_PCT_ABS,
                f"{ref_point['simulated']['overshoot_pct']!r} vs {limit}")
    ref = check_gain_point(tally, name, "reference", ref_point, num, den, amplitude, band)
    tally.check(name, "reference: SciPy overshoot at K_ref = the limit",
                abs(ref["overshoot_pct"] - limit) <= step.TOL_PCT_ABS, f"{ref['overshoot_pct']:.8f} vs {limit}")
    below = []
    for factor in (0.25, 0.5, 0.75, 0.9, 0.99):
        m, _ = scipy_metrics_at(num, den, k_ref * factor, amplitude, band, min_points=50_001)
        below.append((factor, m["overshoot_pct"]))
    tally.check(name, "reference: SciPy overshoot below the limit at smaller gains",
                all(os_ < limit for _, os_ in below), ", ".join(f"{f}·K: {o:.4f} %" for f, o in below))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe", required=True)
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    tally = step.Tally()
    with tempfile.TemporaryDirectory(prefix="specloop_analyze_") as tmpdir:
        for spec in SPECS:
            try:
                check_spec(tally, args.specloop, tmpdir, spec)
            except Exception as exc:  # a crash in one spec is a failure, not an abort
                tally.check(spec["name"], "check ran", False, repr(exc))
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
