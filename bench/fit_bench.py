#!/usr/bin/env python3
"""The Python half of bench/run_bench_fit.sh (a benchmark, not a test): `specloop fit`'s estimation
against scipy.optimize.least_squares on the same recorded test and the same models, in one run.

Record (tests/fit_reference.py, computed exactly by SciPy): an invented water heater's bump test,
first order plus delay k = 0.6 K/%, T = 45 s, L = 5.3 s, a 10 % step after a leading steady
stretch, 10,000 samples at exactly 0.1 s (an even grid: the targets' case), noise σ = 1 % of the
output's change. Then once, for information, the same test on a logger's uneven grid (±10 % jitter
on every time stamp, 3 samples dropped), first-order-delay only, through the CLI (with a time-out).

Timed, each the median of REPEATS runs:
  tool      build/bench/bench_fit --csv REC (the fitter's own benchmark executable: the estimation
            alone, first-order-delay and all five kinds), and the whole CLI `specloop fit REC
            --model first-order-delay --out DIR` / `specloop fit REC` (reading, fitting, fit.json,
            plant.toml, report, figures) as wall time;
  SciPy     fit_reference.ScipyFit (trust-region reflective least squares, the model's closed-form
            step responses superposed, covariance from central differences) from the Smith
            two-point start computed here: first-order-delay alone, and the five kinds in turn
            (their starts converted from the same two-point values).
Targets (issue 16): first-order-delay on 10,000 samples ≤ 0.5 s median, all five kinds ≤ 3 s;
printed PASS/MISS with the ratios to SciPy. Always exits 0 (a report)."""
import argparse
import pathlib
import re
import statistics
import subprocess
import sys
import tempfile
import time

import numpy as np

ROOT = pathlib.Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))
import fit_reference as fr  # noqa: E402

TRUE = {"k": 0.6, "T": 45.0, "L": 5.3}


def two_point_start(rec):
    lead = int(np.argmax(rec.u != rec.u[0]))
    ts, y0 = rec.t[lead], float(np.mean(rec.y[:lead]))
    tail = rec.y[-len(rec.y) // 20:]
    dy = float(np.mean(tail)) - y0
    yn = (rec.y - y0) / dy
    T, L = fr.smith_two_point(fr.crossing_time(rec.t, yn, 0.283) - ts, fr.crossing_time(rec.t, yn, 0.632) - ts)
    k = dy / (rec.u[-1] - rec.u[0])
    return {"first-order-delay": {"k": k, "T": T, "L": L},
            "second-order-delay": {"k": k, "T1": 0.8 * T, "T2": 0.2 * T, "L": L},
            "underdamped-delay": {"k": k, "wn": 1.0 / T, "zeta": 0.7, "L": L},
            "integrator-delay": {"k": k / T, "T": 0.2 * T, "L": L},
            "poles-zeros": {"k": k, "p1": 5.0 / T, "p2": 1.0 / T, "z1": 2.0 / T, "L": L}}


def timed(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--build", default=str(ROOT / "build"))
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--uneven-timeout", type=float, default=60.0)
    args = ap.parse_args()
    build = pathlib.Path(args.build)
    clean = fr.CleanResponse("first-order-delay", "step", samples=10_000, params=TRUE, period=0.1, jitter=0.0, dropped=0)
    rec = clean.record("medium", 1)
    starts = two_point_start(rec)
    with tempfile.TemporaryDirectory(prefix="specloop_bench_fit_") as work:
        csv = pathlib.Path(work) / "heater_10k.csv"
        rec.write_csv(csv)
        print(f"record: {rec.t.size} samples, first-order-delay k={TRUE['k']} T={TRUE['T']} L={TRUE['L']}, "
              f"noise σ = {rec.sigma:.4g}; {args.repeats} repeats, medians")
        tool_fo = tool_all = None
        bench = build / "bench" / "bench_fit"
        if bench.exists():
            out = subprocess.run([str(bench), "--csv", str(csv), "--repeats", str(args.repeats)],
                                 capture_output=True, text=True, timeout=3600).stdout
            m1 = re.search(r"fit first-order-delay .*?median_s ([0-9.]+)", out)
            m5 = re.search(r"fit all-five .*?median_s ([0-9.]+)", out)
            tool_fo = float(m1.group(1)) if m1 else None
            tool_all = float(m5.group(1)) if m5 else None
            print("bench_fit: " + out.strip().replace("\n", "\n           "))
        else:
            print(f"bench_fit not built ({bench}); the CLI's wall time stands in")
        cli_fo = timed(lambda: subprocess.run([str(build / "specloop"), "fit", str(csv), "--model", "first-order-delay",
                                               "--out", str(pathlib.Path(work) / "o1")], capture_output=True), args.repeats)
        cli_all = timed(lambda: subprocess.run([str(build / "specloop"), "fit", str(csv), "--out", str(pathlib.Path(work) / "o5")],
                                               capture_output=True), args.repeats)
    sp_fo = timed(lambda: fr.ScipyFit("first-order-delay", rec.t, rec.u, rec.y, fr.U0, fr.Y0,
                                      [starts["first-order-delay"]], offset=True), args.repeats)
    sp_all = timed(lambda: [fr.ScipyFit(k, rec.t, rec.u, rec.y, fr.U0, fr.Y0, [starts[k]], offset=True)
                            for k in fr.ORDER], args.repeats)
    tool_fo = tool_fo if tool_fo is not None else cli_fo
    tool_all = tool_all if tool_all is not None else cli_all
    print(f"{'':34}{'tool (s)':>10}{'SciPy (s)':>11}{'tool/SciPy':>12}  target")
    for label, t, s, target in (("first-order-delay, estimation", tool_fo, sp_fo, 0.5),
                                ("all five kinds, estimation", tool_all, sp_all, 3.0)):
        print(f"{label:<34}{t:>10.4f}{s:>11.4f}{t / s:>12.3f}  ≤ {target:g} s {'PASS' if t <= target else 'MISS'}")
    print(f"{'first-order-delay, whole CLI':<34}{cli_fo:>10.4f}{'':>11}{cli_fo / sp_fo:>12.3f}  (reading, fit, report, figures)")
    print(f"{'all five kinds, whole CLI':<34}{cli_all:>10.4f}{'':>11}{cli_all / sp_all:>12.3f}")
    uneven = fr.CleanResponse("first-order-delay", "step", samples=10_000, params=TRUE, period=0.1).record("medium", 1)
    sp_un = timed(lambda: fr.ScipyFit("first-order-delay", uneven.t, uneven.u, uneven.y, fr.U0, fr.Y0,
                                      [two_point_start(uneven)["first-order-delay"]], offset=True), 1)
    with tempfile.TemporaryDirectory(prefix="specloop_bench_fit_") as work:
        csv = pathlib.Path(work) / "heater_10k_uneven.csv"
        uneven.write_csv(csv)
        t0 = time.perf_counter()
        try:
            subprocess.run([str(build / "specloop"), "fit", str(csv), "--model", "first-order-delay", "--out",
                            str(pathlib.Path(work) / "o")], capture_output=True, timeout=args.uneven_timeout)
            cli_un = f"{time.perf_counter() - t0:.4f}"
        except subprocess.TimeoutExpired:
            cli_un = f"> {args.uneven_timeout:g} (stopped)"
    print(f"{'uneven grid, first-order, CLI':<34}{cli_un:>10}{sp_un:>11.4f}  (one run each; information, no target)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
