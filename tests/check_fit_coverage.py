#!/usr/bin/env python3
"""The covariance of `specloop fit` checked statistically: do the reported ±2σ intervals hold the
true parameters as often as they should?

Invoked by CTest as
    /usr/bin/python3 tests/check_fit_coverage.py --specloop BIN --source-dir ROOT --jobs 2
(`--probe` is accepted and ignored; `--reps N` (default 50), `--kinds a,b`, `--levels low,high`
narrow the run; `--keep DIR` keeps the CSVs and outputs.)

For each model kind (tests/fit_reference.py: first-order-delay, second-order-delay,
underdamped-delay, integrator-delay, poles-zeros with 2 poles and 1 zero), each input (one step —
the integrator a pulse — and a test of several steps; issue 16: "step and multi-step inputs") and
each noise level (σ = 0.2 %, 1 %, 4 % of the output's span), 50 records of the same known plant,
400 samples on a logger's uneven grid, differ only in their seeded Gaussian noise (cells of the
several-steps input are named kind/steps/level). SciPy computes each record exactly (fit_reference: cont2discrete ZOH stepping over the
sample instants and the delayed input breaks). `specloop fit REC.csv --model KIND --u0 U0 --y0 Y0`
fits each (the operating point given, so that only the model's parameters are estimated — the
covariance of those is what is checked).

Checks:
  run        exit 0, or exit 1 when the tool calls the one model not identifiable from the record
             (README: ±2σ interval wider than the value); fit.json has the kind with status "ok"
             or "not_identifiable" and its intervals (the count of the latter is printed: at the
             high noise level the smaller time constants are poorly determined by 400 samples,
             which is what that status says — the intervals must still cover).
  interval   low/high = value ∓ 2·std_error (the contract), 1e-9 relative.
  coverage   per kind, level and parameter: the truth lies in [low, high] in ≥ 90 % of the 50
             records (issue 16). The same 50 records are fitted independently by
             scipy.optimize.least_squares (fit_reference.ScipyFit, covariance σ̂²(JᵀJ)⁻¹) as a
             control: a correct ±2σ interval covers ~95 % for these linear-in-noise models, so 50
             draws fall below 45 hits with a probability of a few per cent (binomial) — and the
             delay, whose response has a kink at τ = 0, covers ~92 % even in SciPy (measured: 300
             records, 91.7–93.7 % for first-order-delay's L). Where the control itself covers
             < 90 % on these very records, the tool's cell passes when it covers at least as
             often as the control minus 2 records; such cells are marked "ctl" in the table.
  agreement  (printed, asserted in check_fit_scipy.py) the median |tool − SciPy|/σ per cell.
The table of coverages is printed (tool / control per parameter). Runtime: 1350 fits of 400
samples and as many SciPy fits: 139 s with --jobs 2 on a quiet machine (the single-step half alone
took 161 s at load 6–8, 394 s at load 12), so CTest labels it slow. Failures to fix are listed in
fit_reference.KNOWN_FAILING (empty). The last line is "N passed, N failed".
"""
import argparse
import concurrent.futures
import pathlib
import shutil
import sys
import tempfile
import time

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import fit_reference as fr  # noqa: E402

REPS = 50
SAMPLES = 400
MIN_COVERAGE = 0.90
CONTROL_SLACK = 2           # records the tool may trail the SciPy control by, where the control < 90 %


def shapes_of(kind, spec):
    """The inputs of a kind's records: its default one (one step; the integrator a pulse, which is
    already several steps) and, with 'steps', the multi-step test (issue 16: step and multi-step)."""
    out = []
    for name in spec.split(","):
        shape = fr.default_excitation(kind) if name == "default" else name
        if shape not in out:
            out.append(shape)
    return out


def seed_of(ki, li, rep):
    return 1_000_000 + 10_000 * ki + 1_000 * li + rep


def one_fit(task):
    """Runs the tool on one record; returns (key, exit code, stderr, entry or None)."""
    specloop, csv, out, kind = task
    proc, fit = fr.run_fit(specloop, csv, out, [*fr.cli_model_args(kind), "--u0", repr(fr.U0), "--y0", repr(fr.Y0)])
    entry = fr.model_entry(fit, kind) if fit else None
    return proc.returncode, proc.stderr.strip()[-400:], entry


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--reps", type=int, default=REPS)
    ap.add_argument("--kinds", default=",".join(fr.ORDER))
    ap.add_argument("--levels", default=",".join(fr.NOISE_LEVELS))
    ap.add_argument("--shapes", default="default,steps",
                    help="inputs: 'default' (fit_reference.default_excitation), 'steps' (several steps)")
    ap.add_argument("--keep")
    args = ap.parse_args()
    tally = fr.KnownTally("check_fit_coverage")
    kinds = args.kinds.split(",")
    levels = args.levels.split(",")
    work = pathlib.Path(args.keep) if args.keep else pathlib.Path(tempfile.mkdtemp(prefix="specloop_fit_cov_"))
    work.mkdir(parents=True, exist_ok=True)
    started = time.monotonic()
    rows = []
    fits = 0
    try:
        with concurrent.futures.ThreadPoolExecutor(max_workers=args.jobs) as pool:
            for kind, shape in [(k, sh) for k in kinds for sh in shapes_of(k, args.shapes)]:
                ki = fr.ORDER.index(kind)
                si = 0 if shape == fr.default_excitation(kind) else 1
                tag = "" if si == 0 else f"{shape}/"   # the default input's cells keep their names
                clean = fr.CleanResponse(kind, shape, samples=SAMPLES)
                names = fr.KINDS[kind]["names"]
                truth = clean.params
                for level in levels:
                    li = list(fr.NOISE_LEVELS).index(level)
                    recs, tasks = [], []
                    for rep in range(args.reps):
                        rec = clean.record(level, seed_of(ki, li, rep) + 100_000 * si)
                        csv = work / f"{kind}_{shape}_{level}_{rep:02d}.csv"
                        rec.write_csv(csv)
                        recs.append(rec)
                        tasks.append((args.specloop, csv, work / f"{kind}_{shape}_{level}_{rep:02d}", kind))
                    results = list(pool.map(one_fit, tasks))
                    cell = f"{kind}/{tag}{level}"
                    fits += len(tasks)
                    def usable(rc, e):
                        return e is not None and ((rc == 0 and e.get("status") == "ok") or
                                                  (rc == 1 and e.get("status") == "not_identifiable"))
                    bad_runs = [f"rep {i}: exit {rc}, {'no entry' if e is None else e.get('status')}: {err[-160:]}"
                                for i, (rc, err, e) in enumerate(results) if not usable(rc, e)]
                    n_unid = sum(1 for rc, err, e in results if e is not None and e.get("status") == "not_identifiable")
                    tally.check(cell, "run: exit 0 with status ok, or exit 1 with not_identifiable, on every record",
                                not bad_runs, "; ".join(bad_runs[:3]))
                    if n_unid:
                        print(f"NOTE  {cell}: {n_unid} of {args.reps} records not identifiable (status)")
                    tool_hits = {n: 0 for n in names}
                    ctl_hits = {n: 0 for n in names}
                    used = 0
                    interval_bad, dev = [], {n: [] for n in names}
                    for rec, (rc, err, entry) in zip(recs, results):
                        sp = fr.ScipyFit(kind, rec.t, rec.u, rec.y, fr.U0, fr.Y0,
                                         [{n: v * 1.2 for n, v in truth.items()}, {n: v * 0.85 for n, v in truth.items()}])
                        for n in names:
                            ctl_hits[n] += abs(sp.values[n] - truth[n]) <= 2.0 * sp.std[n]
                        if not usable(rc, entry):
                            continue
                        used += 1
                        tp = fr.tool_parameters(entry, kind)
                        for n in names:
                            v, s, lo, hi = tp[n]
                            if abs(lo - (v - 2 * s)) > 1e-9 * max(abs(v), s) or abs(hi - (v + 2 * s)) > 1e-9 * max(abs(v), s):
                                interval_bad.append(f"{n}: {lo}, {hi} vs {v} ∓ 2·{s}")
                            tool_hits[n] += lo <= truth[n] <= hi
                            dev[n].append(abs(v - sp.values[n]) / max(sp.std[n], 1e-300))
                    tally.check(cell, "interval: low/high = value ∓ 2·std_error", not interval_bad, "; ".join(interval_bad[:3]))
                    for n in names:
                        tool_c = tool_hits[n] / args.reps
                        ctl_c = ctl_hits[n] / args.reps
                        if ctl_c >= MIN_COVERAGE:
                            ok, how = tool_c >= MIN_COVERAGE, ""
                        else:
                            ok, how = tool_hits[n] >= ctl_hits[n] - CONTROL_SLACK, "ctl"
                        tally.check(f"{cell}/{n}", f"coverage of ±2σ ≥ {MIN_COVERAGE:.0%} "
                                    + ("(control < 90 %: ≥ control − 2 records)" if how else ""), ok,
                                    f"tool {tool_hits[n]}/{args.reps}, SciPy {ctl_hits[n]}/{args.reps}")
                        rows.append((kind + ("" if si == 0 else f" ({shape})"), level, n, tool_c, ctl_c, how,
                                     float(np.median(dev[n])) if dev[n] else float("nan")))
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    print()
    print(f"{'kind':<28}{'noise':<8}{'param':<6}{'tool':>7}{'SciPy':>7}  {'':3} median |tool−SciPy|/σ")
    for kind, level, n, tc, cc, how, md in rows:
        print(f"{kind:<28}{level:<8}{n:<6}{tc:>7.0%}{cc:>7.0%}  {how:3} {md:.3g}")
    print(f"NOTE  {fits} fits in {time.monotonic() - started:.0f} s "
          f"({args.jobs} jobs)")
    return tally.finish()


if __name__ == "__main__":
    sys.exit(main())
