#!/usr/bin/env python3
"""The starting values of `specloop fit` against the published two-point methods, on noise-free
first-order-plus-delay step records (where both methods are exact up to their rounded constants).

Invoked by CTest as
    /usr/bin/python3 tests/check_fit_two_point.py --specloop BIN --source-dir ROOT
(`--probe` is accepted and ignored.)

Formulas (implemented in tests/fit_reference.py from their published statements; the constants
recalled from memory):
  Smith (C. L. Smith, Digital Computer Process Control, Intext 1972): t28, t63 the times after the
      step at which the response reaches 28.3 % and 63.2 % of its change; T = 1.5 (t63 − t28),
      L = t63 − T.
  Sundaresan–Krishnaswamy (K. R. Sundaresan, P. R. Krishnaswamy, Can. J. Chem. Eng. 56 (1978),
      the method usually cited as 1977): t35, t85 at 35.3 % and 85.3 %; T = 0.67 (t85 − t35),
      L = 1.3 t35 − 0.29 t85.
  The gain: k = Δy∞/Δu (common practice), the record long enough (28 T after the step) for Δy∞ to be exact to 1e-12.

Records: three first-order-plus-delay plants (L/T = 0.05, 0.3, 1.5; one with a negative gain and a
step down), a step after a leading steady stretch, 2000 samples on a logger's uneven grid with
period T/60, computed exactly by SciPy (fit_reference: cont2discrete ZOH with the delay exact),
no noise. `specloop fit REC.csv --model first-order-delay --model second-order-delay` runs on each.

Checks:
  method    start_method names one of the two methods (the input is one step); the tool uses
            Smith's for first-order-delay and Sundaresan–Krishnaswamy's for second-order-delay,
            whose start it converts to T1 = 0.7 T, T2 = 0.3 T (src/fit/start.cpp): there T1 + T2 and
            L are the method's T and L, and are checked as below.
  formula   the tool's start k, T, L = the named method applied here to the same samples (crossing
            times by linear interpolation between the two samples around each level), within
            2e-3·T (the two implementations may read the crossings differently between samples:
            linear interpolation errs by about h²·|y''|/(8|y'|) ≤ (h/T)²/8·T here) and k to 1e-6.
  exact     that start against the true plant: Smith within 0.2 % of T (1.5·(1 − 0.3326) = 1.0011),
            Sundaresan–Krishnaswamy T within 1 % and L within 1 % of L + 1.2 % of T; k within 1e-6.
  fit       the fitted parameters equal the truth (no noise: within 1e-6 relative, L within 1e-6·T).
The last line is "N passed, N failed".
"""
import argparse
import math
import pathlib
import shutil
import sys
import tempfile

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import fit_reference as fr  # noqa: E402

PLANTS = [
    {"k": 1.8, "T": 40.0, "L": 2.0},
    {"k": 0.45, "T": 12.0, "L": 3.6},
    {"k": -2.5, "T": 5.0, "L": 7.5},
]
SAMPLES = 2000


def methods_on_samples(t, y, ts, y0, yinf):
    """Both methods applied to the samples (t from the step at ts; normalized response)."""
    yn = (y - y0) / (yinf - y0)
    at = {f: fr.crossing_time(t, yn, f) - ts for f in (0.283, 0.632, 0.353, 0.853)}
    return {"smith-two-point": fr.smith_two_point(at[0.283], at[0.632]),
            "sundaresan-krishnaswamy": fr.sundaresan_krishnaswamy(at[0.353], at[0.853])}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir")
    args = ap.parse_args()
    tally = fr.KnownTally("check_fit_two_point")
    work = pathlib.Path(tempfile.mkdtemp(prefix="specloop_fit_2pt_"))
    try:
        for i, p in enumerate(PLANTS):
            cid = f"fopdt{i}(k={p['k']:g},T={p['T']:g},L={p['L']:g})"
            # 2000 samples at T/60 cover 33 T, the step at 15 %: 28 T after it (e^−28 ≈ 7e-13)
            clean = fr.CleanResponse("first-order-delay", "step", samples=SAMPLES, params=p, period=p["T"] / 60.0)
            if p["k"] < 0:           # a step down on a reverse-acting plant
                clean.u_dev = -clean.u_dev
                A, B, C = fr.KINDS["first-order-delay"]["ss"](p)
                clean.y_dev = fr.exact_zoh_response(A, B, C, p["L"], clean.t, clean.u_dev)
            rec = clean.record(0.0, 0)
            csv = work / f"fopdt{i}.csv"
            rec.write_csv(csv)
            proc, fit = fr.run_fit(args.specloop, csv, work / f"out{i}",
                                   ["--model", "first-order-delay", "--model", "second-order-delay"])
            entry = fr.model_entry(fit, "first-order-delay") if fit else None
            if not tally.check(cid, "exit 0 and a first-order-delay entry", proc.returncode == 0 and entry is not None,
                               f"exit {proc.returncode}: {proc.stderr.strip()[-300:]}"):
                continue
            method = entry.get("start_method")
            start = entry.get("start") or {}
            if not tally.check(cid, "method: a two-point method on a single step",
                               method in ("smith-two-point", "sundaresan-krishnaswamy"), f"start_method {method!r}"):
                continue
            ts = rec.t[int(np.argmax(rec.u != rec.u[0]))]
            y0, yinf = fr.Y0, rec.y[-1]
            mine = methods_on_samples(rec.t, rec.y, ts, y0, yinf)[method]
            k_mine = (yinf - y0) / (rec.u[-1] - rec.u[0])
            T_true, L_true, k_true = p["T"], p["L"], p["k"]
            tol = 2e-3 * T_true
            ok = (abs(start["T"] - mine[0]) <= tol and abs(start["L"] - mine[1]) <= tol
                  and abs(start["k"] - k_mine) <= 1e-6 * abs(k_mine))
            tally.check(cid, f"formula: the tool's start = {method} on the same samples", ok,
                        f"tool k={start['k']:.8g} T={start['T']:.8g} L={start['L']:.8g}; "
                        f"here k={k_mine:.8g} T={mine[0]:.8g} L={mine[1]:.8g}")
            if method == "smith-two-point":
                ok = abs(start["T"] - T_true) <= 2e-3 * T_true and abs(start["L"] - L_true) <= 2e-3 * T_true
            else:
                ok = abs(start["T"] - T_true) <= 0.01 * T_true and \
                    abs(start["L"] - L_true) <= 0.01 * L_true + 0.012 * T_true
            ok = ok and abs(start["k"] - k_true) <= 1e-6 * abs(k_true)
            tally.check(cid, f"exact: {method}'s start against the true plant", ok,
                        f"start k={start['k']:.6g} T={start['T']:.6g} L={start['L']:.6g}, "
                        f"true k={k_true:g} T={T_true:g} L={L_true:g}")
            # Sundaresan–Krishnaswamy through second-order-delay's start: the tool converts its (k, T, L)
            # to T1 = 0.7 T, T2 = 0.3 T (src/fit/start.cpp), so T1 + T2 and L are the method's.
            so = fr.model_entry(fit, "second-order-delay") or {}
            s2 = so.get("start") or {}
            if tally.check(cid, "method: second-order-delay starts from Sundaresan–Krishnaswamy",
                           so.get("start_method") == "sundaresan-krishnaswamy", f"start_method {so.get('start_method')!r}"):
                sk = methods_on_samples(rec.t, rec.y, ts, y0, yinf)["sundaresan-krishnaswamy"]
                ok = (abs(s2["T1"] + s2["T2"] - sk[0]) <= tol and abs(s2["L"] - sk[1]) <= tol
                      and abs(s2["k"] - k_mine) <= 1e-6 * abs(k_mine))
                tally.check(cid, "formula: second-order-delay's start (T1 + T2, L, k) = Sundaresan–Krishnaswamy here", ok,
                            f"tool T1+T2={s2.get('T1', 0) + s2.get('T2', 0):.8g} L={s2.get('L')!r} k={s2.get('k')!r}; "
                            f"here T={sk[0]:.8g} L={sk[1]:.8g}")
                ok = abs(s2["T1"] + s2["T2"] - T_true) <= 0.01 * T_true and \
                    abs(s2["L"] - L_true) <= 0.01 * L_true + 0.012 * T_true
                tally.check(cid, "exact: Sundaresan–Krishnaswamy's T within 1 %, L within 1 % + 1.2 % of T", ok,
                            f"T1+T2 {s2['T1'] + s2['T2']:.6g}, L {s2['L']:.6g}; true T={T_true:g} L={L_true:g}")
            tp = fr.tool_parameters(entry, "first-order-delay")
            bad = [f"{n} {tp[n][0]!r} vs {p[n]!r}" for n in ("k", "T")
                   if not abs(tp[n][0] - p[n]) <= 1e-6 * abs(p[n])]
            if not abs(tp["L"][0] - p["L"]) <= 1e-6 * T_true:
                bad.append(f"L {tp['L'][0]!r} vs {p['L']!r}")
            tally.check(cid, "fit: the noise-free record's parameters recovered", not bad, "; ".join(bad))
            print(f"NOTE  {cid}: {method} start T {start['T']:.6g} L {start['L']:.6g}; exact-time "
                  f"Smith {fr.smith_two_point(*(T_true * -math.log(1 - f) + L_true for f in (0.283, 0.632)))}, "
                  f"S–K {fr.sundaresan_krishnaswamy(*(T_true * -math.log(1 - f) + L_true for f in (0.353, 0.853)))}")
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return tally.finish()


if __name__ == "__main__":
    sys.exit(main())
