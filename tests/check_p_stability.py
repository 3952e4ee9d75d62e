#!/usr/bin/env python3
"""`specloop analyze`'s set of stabilizing P gains, against the Routh–Hurwitz criterion and numpy.

Invoked by CTest as
    /usr/bin/python3 tests/check_p_stability.py --specloop BIN --probe PROBE --source-dir ROOT

For each plant below, `analyze --json` gives `p_stability`: the gains K (signed: the controller
gain on the plant as given) cut into ranges, each stable, undamped or unstable. Checked:

  grid       inside every range, at five gains spread geometrically, the roots (numpy.roots) of
             D(s) + K·N(s) have the range's state: all real parts < 0 (stable); none > 0 and some
             on the axis within 1e-7 of their magnitude (undamped); some > 0 (unstable). Across
             every finite cut b, the states at b·(1 ± 1e-5) are those of the two neighbours.
  Routh      where the closed loop is a quadratic or a cubic, the ranges equal the Routh–Hurwitz
             conditions worked by hand (the criterion is common practice; each case is worked in
             its comment): a quadratic s² + a s + c is stable iff a > 0 and c > 0; a cubic
             s³ + a s² + b s + c iff a > 0, c > 0 and a·b > c.
  wording    the text says what is true: "unstable for every K > 0" where no gain stabilizes
             (never "turns unstable at K ≈ …"), "undamped for every K > 0" for a double
             integrator, and the reference note repeats it.
  reverse    for a reverse-acting plant every gain in the output is negative, and the reference
             gain K_ref (negative) closes a loop whose step overshoot (scipy.signal.step, 200 001
             points to the README's horizon) equals the overshoot limit within 0.01 points.
"""
import argparse
import json
import math
import pathlib
import subprocess
import sys
import tempfile

import numpy as np
from scipy import signal

from reference_common import Tally


def number(v):
    return {"infinite": math.inf, "-infinite": -math.inf}.get(v, v) if isinstance(v, str) else v


def state_at(num, den, k):
    p = np.polyadd(den, k * np.asarray(num, dtype=float))
    roots = np.roots(p)
    if any(r.real > 1e-7 * abs(r) for r in roots):
        return "unstable"
    if any(abs(r.real) <= 1e-7 * abs(r) for r in roots):
        return "undamped"
    return "stable"


def inside(lo, hi):
    """Five gains spread geometrically inside (lo, hi), signed like the range."""
    sign = -1.0 if hi <= 0 and lo < 0 else 1.0
    a, b = sorted((abs(lo), abs(hi)))
    if a == 0.0:
        a = b * 1e-4 if math.isfinite(b) else 1e-4
    if not math.isfinite(b):
        b = a * 1e4
    return [sign * a * (b / a) ** f for f in (0.02, 0.25, 0.5, 0.75, 0.98)]


# (name, [plant] TOML, overshoot limit, expected ranges by Routh or None, expected text start)
CASES = [
    # 1 + K·6/(s³ + 6s² + 11s + 6): s³ + 6s² + 11s + 6 + 6K; a·b > c ⇔ 66 > 6 + 6K ⇔ K < 10.
    ("routh_cubic", "numerator = [6.0]\ndenominator = [1.0, 6.0, 11.0, 6.0]", 10.0,
     [(0.0, 10.0, "stable"), (10.0, math.inf, "unstable")], "stable only for K in (0, 10)"),
    # The same with a negative gain: reverse action, K·(−6): stable iff −10 < K < 0.
    ("routh_cubic_reverse", "numerator = [-6.0]\ndenominator = [1.0, 6.0, 11.0, 6.0]", 10.0,
     [(-math.inf, -10.0, "unstable"), (-10.0, 0.0, "stable")], "stable only for K in (-10, 0)"),
    # 1/(s² − s + 2): s² − s + 2 + K keeps the s¹ coefficient −1 < 0: unstable for every K > 0.
    ("negative_s1", "numerator = [1.0]\ndenominator = [1.0, -1.0, 2.0]", 10.0,
     [(0.0, math.inf, "unstable")], "unstable for every K > 0"),
    # 24/((s − 1.5)(s + 8)): s² + 6.5s − 12 + 24K: stable iff 24K > 12 ⇔ K > 0.5.
    ("unstable_real_pole", "poles = [1.5, -8.0]\ngain = 24.0", 20.0,
     [(0.0, 0.5, "unstable"), (0.5, math.inf, "stable")], "stable only for K in (0.5, ∞)"),
    # 2/s²: s² + 2K: roots ±j√(2K), on the axis for every K > 0.
    ("double_integrator", "poles = [0.0, 0.0]\ngain = 2.0", 10.0,
     [(0.0, math.inf, "undamped")], "undamped for every K > 0"),
    # 1/s³: s³ + K lacks s² and s¹: unstable for every K > 0.
    ("triple_integrator", "poles = [0.0, 0.0, 0.0]", 20.0, [(0.0, math.inf, "unstable")], "unstable for every K > 0"),
    # Reverse acting, stable: K·(−5)/((s + 1)(s + 5)): s² + 6s + 5 − 5K: stable iff K < 1, and with
    # K < 0 (the reverse action's sign) always.
    ("reverse_stable", "poles = [-1.0, -5.0]\ngain = -5.0", 10.0, None, "stable for every K < 0"),
    # A window of stability: (s + 1)²/(s (s − 1)(s + 6)(s + 0.5)) (grid only).
    ("window", "numerator = [1.0, 2.0, 1.0]\ndenominator = [1.0, 5.5, -3.5, -3.0, 0.0]", 20.0, None, None),
    # Non-minimum phase, direct action: −2(s − 1.5)/((s + 1)(s + 3)) (grid only).
    ("nmp", "zeros = [1.5]\npoles = [-1.0, -3.0]\ngain = -2.0", 15.0, None, "stable only for K in (0, 2)"),
]


def plant_polynomials(toml_text):
    lines = dict(line.split(" = ", 1) for line in toml_text.splitlines())
    if "numerator" in lines:
        return json.loads(lines["numerator"]), json.loads(lines["denominator"])
    poles = json.loads(lines["poles"])
    zeros = json.loads(lines.get("zeros", "[]"))
    gain = float(lines.get("gain", "1.0"))
    return list(gain * np.poly(zeros)) if zeros else [gain], list(np.real(np.poly(poles)))


def overshoot_of(num, den, k):
    n = k * np.asarray(num, dtype=float)
    d = np.polyadd(den, n)
    sigma = min(-r.real for r in np.roots(d))
    t = np.linspace(0.0, math.log(1e4) / sigma, 200_001)
    _, y = signal.step(signal.lti(n, d), T=t)
    y_inf = n[-1] / d[-1]
    return max(0.0, (np.max(y / y_inf) - 1.0) * 100.0)


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    specloop = str(pathlib.Path(args.specloop).resolve())
    tally = Tally()
    for name, plant, limit, routh, text in CASES:
        num, den = plant_polynomials(plant)
        with tempfile.TemporaryDirectory(prefix="specloop_pstab_") as work:
            spec = pathlib.Path(work, f"{name}.toml")
            spec.write_text(f"[plant]\n{plant}\n[requirements]\novershoot_max_pct = {limit}\n")
            run = subprocess.run([specloop, "analyze", str(spec), "--json"], cwd=work, capture_output=True, text=True,
                                 timeout=300)
        if not tally.check(name, "analyze --json exits 0", run.returncode == 0, run.stderr.strip()[:300]):
            continue
        out = json.loads(run.stdout)
        ps = out["p_stability"]
        ranges = [(number(r["low"]), number(r["high"]), r["state"]) for r in ps["ranges"]]
        for lo, hi, st in ranges:
            states = [state_at(num, den, k) for k in inside(lo, hi)]
            tally.check(name, f"range ({lo:.6g}, {hi:.6g}) is {st} on the grid", all(s == st for s in states), str(states))
        for (lo1, hi1, st1), (lo2, hi2, st2) in zip(ranges, ranges[1:]):
            b = hi1
            if b == 0.0 or not math.isfinite(b):
                continue
            below, above = state_at(num, den, b * (1 - 1e-5)), state_at(num, den, b * (1 + 1e-5))
            left, right = (below, above) if b > 0 else (above, below)
            tally.check(name, f"cut at K = {b:.6g} separates {st1} from {st2}", (left, right) == (st1, st2),
                        f"{left} | {right}")
        if routh is not None:
            ok = len(ranges) == len(routh) and all(
                st == rst and (lo == rlo or math.isclose(lo, rlo, rel_tol=1e-9)) and
                (hi == rhi or math.isclose(hi, rhi, rel_tol=1e-9)) for (lo, hi, st), (rlo, rhi, rst) in zip(ranges, routh))
            tally.check(name, "ranges = Routh–Hurwitz worked by hand", ok, f"{ranges} vs {routh}")
        if text is not None:
            tally.check(name, f"text starts with {text!r}", ps["text"].startswith(text), ps["text"])
        note = out.get("reference_note", "")
        tally.check(name, "no claim that the loop 'turns unstable at' a gain", "turns unstable" not in run.stdout)
        if all(st != "stable" for _, _, st in ranges):
            tally.check(name, "the reference note says no P gain stabilizes", out["reference"] is None and
                        ps["text"] in note, note)
        if name == "reverse_stable":
            gains = [c["gain"] for c in out["crossings"]] + [out["reference"]["gain"]]
            tally.check(name, "every gain is negative (reverse action)", all(g < 0 for g in gains) and
                        out["action"] == "reverse", str(gains))
            k_ref = out["reference"]["gain"]
            os_ = overshoot_of(num, den, k_ref)
            tally.check(name, f"K_ref = {k_ref:.6g} on the plant as given overshoots by the limit", abs(os_ - limit) <= 0.01,
                        f"{os_:.6g} %")
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 0 if tally.failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
