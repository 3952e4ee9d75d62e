#!/usr/bin/env python3
"""`specloop fit` against an independent fit of the same records by scipy.optimize.least_squares.

Invoked by CTest as
    /usr/bin/python3 tests/check_fit_scipy.py --specloop BIN --source-dir ROOT --jobs 2
(`--probe` is accepted and ignored; `--kinds a,b` narrows the run; `--keep DIR` keeps the files.)

Records (tests/fit_reference.py, computed exactly by SciPy): each of the five model kinds (its
known plant) × one step, several steps, a 7-bit pseudo-random binary sequence × the three noise
levels, 400 samples on a logger's uneven grid, absolute values with a leading steady stretch.
`specloop fit REC.csv --model KIND` fits each with the operating point taken from the record (no
--u0/--y0). SciPy (fit_reference.ScipyFit: trust-region reflective least squares on the model's
closed-form step responses superposed, an independent simulation) fits the same model to the same
samples with the tool's u0 and y0 — and, when fit.json says the output's operating point was
estimated with the model, that offset c too — from three starts (the truth × 1.2, × 0.85, and the
tool's own optimum, so a tool stopped short of a minimum is caught); the lowest sum of squares wins.

First fit_reference.self_test: the records' two exact computations (cont2discrete stepping and the
closed-form superposition the SciPy fit uses) agree to 1e-9 of the output's span on every kind
and input, and the stepping equals scipy.signal.dlsim on an even grid with a whole-sample delay.

Checks per record (ids kind/shape/level):
  run        exit 0 (or 1 with status not_identifiable); the entry is there.
  u0         data.u0 = the leading stretch's input (the record's first value), 1e-12 relative;
             with y0 taken from the stretch, data.y0 = the stretch's mean output (its samples
             before the input first changes), within 3 standard errors of that mean.
  params     every parameter (and c): |tool − SciPy| ≤ the tool's stated 2σ (issue 16).
  std        the tool's standard errors = SciPy's σ̂·√diag((JᵀJ)⁻¹) (the contract's σ²-scaling,
             SSR/(N − p)), within 5 % relative (J: SciPy's central differences).
  rms        residual RMS: the tool's is no worse than SciPy's by more than 1 % (issue 16).
  fit_pct    the reported fit % = 100·(1 − ‖y − ŷ‖/‖y − ȳ‖) (issue 16) from the tool's own residual
             RMS, 1e-6 points.
And once per kind on the step record, all five kinds fitted together (the default set): `best` is
the ok model of least AIC, and every rank follows the AIC order (the contract).
The last line is "N passed, N failed".
"""
import argparse
import concurrent.futures
import math
import pathlib
import shutil
import sys
import tempfile

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import fit_reference as fr  # noqa: E402

SHAPES = ("step", "steps", "prbs")
SAMPLES = 400
STD_REL = 0.05
RMS_REL = 0.01


def run_one(task):
    specloop, csv, out, extra = task
    return fr.run_fit(specloop, csv, out, extra)


def check_record(tally, cid, kind, rec, proc, fit):
    entry = fr.model_entry(fit, kind) if fit else None
    ok_run = entry is not None and ((proc.returncode == 0 and entry["status"] == "ok") or
                                    (proc.returncode == 1 and entry["status"] == "not_identifiable"))
    if not tally.check(cid, "run: exit 0 / status ok (or 1 / not_identifiable)", ok_run,
                       f"exit {proc.returncode}, {entry and entry.get('status')}: {proc.stderr.strip()[-300:]}"):
        return None
    data = fit["data"]
    u0, y0 = float(data["u0"]), float(data["y0"])
    lead = int(np.argmax(rec.u != rec.u[0]))
    ok = abs(u0 - rec.u[0]) <= 1e-12 * abs(rec.u[0])
    detail = f"u0 {u0!r} vs {rec.u[0]!r}"
    if data.get("operating_point") != "given":
        mean, se = float(np.mean(rec.y[:lead])), float(np.std(rec.y[:lead], ddof=1) / math.sqrt(lead))
        ok = ok and abs(y0 - mean) <= 3.0 * se + 1e-12 * abs(mean)
        detail += f"; y0 {y0!r} vs the stretch's mean {mean!r} ± {se:.3g} ({lead} samples)"
    tally.check(cid, "u0/y0 from the leading steady stretch", ok, detail)
    # The excitation's kind (README fit.json: one step "step", a few equally held steps "steps",
    # a pseudo-random sequence "other").
    want = {"step": "step", "steps": "steps", "prbs": "other"}.get(cid.split("/")[1])
    if want:
        tally.check(cid, f"excitation: {want}", data.get("excitation") == want, f"{data.get('excitation')}")
    opp = entry.get("output_operating_point") or {}
    offset = bool(opp.get("estimated"))
    tp = fr.tool_parameters(entry, kind)
    names = fr.KINDS[kind]["names"]
    tool_start = {n: tp[n][0] for n in names}
    if offset:
        c, sc = float(opp["value"]) - y0, math.nan if opp.get("std_error") is None else float(opp["std_error"])
        tp["c"] = (c, sc, c - 2 * sc, c + 2 * sc)
        tool_start["c"] = tp["c"][0]
    truth = rec.params
    sp = fr.ScipyFit(kind, rec.t, rec.u, rec.y, u0, y0,
                     [{n: v * 1.2 for n, v in truth.items()}, {n: v * 0.85 for n, v in truth.items()}, tool_start],
                     offset=offset)
    bad, worst = [], 0.0
    for n in sp.names:
        v, s = tp[n][0], tp[n][1]
        worst = max(worst, abs(v - sp.values[n]) / s if s > 0 else math.inf)
        if not abs(v - sp.values[n]) <= 2.0 * s:
            bad.append(f"{n}: tool {v:.6g} ± {2 * s:.3g}, SciPy {sp.values[n]:.6g}")
    tally.check(cid, "params: |tool − SciPy| ≤ the tool's 2σ", not bad, "; ".join(bad) or f"largest |Δ|/σ {worst:.2e}")
    bad = [f"{n}: tool {tp[n][1]:.4g}, SciPy {sp.std[n]:.4g}" for n in sp.names
           if not abs(tp[n][1] - sp.std[n]) <= STD_REL * sp.std[n]]
    tally.check(cid, f"std: standard errors = SciPy's σ̂²(JᵀJ)⁻¹, {STD_REL:.0%}", not bad, "; ".join(bad))
    rms = float(entry["residual_rms"])
    tally.check(cid, "rms: no worse than SciPy's by more than 1 %", rms <= sp.rms * (1.0 + RMS_REL),
                f"tool {rms:.8g}, SciPy {sp.rms:.8g} (ratio {rms / sp.rms:.6f})")
    norm_dev = float(np.linalg.norm(rec.y - np.mean(rec.y)))
    pct = 100.0 * (1.0 - rms * math.sqrt(rec.t.size) / norm_dev)
    tally.check(cid, "fit_pct = 100·(1 − ‖y − ŷ‖/‖y − ȳ‖)", abs(float(entry["fit_pct"]) - pct) <= 1e-6,
                f"reported {entry['fit_pct']!r}, from its RMS {pct!r}")
    return rms / sp.rms


def check_ranking(tally, cid, proc, fit):
    if not tally.check(cid, "default set: exit 0 and fit.json", proc.returncode in (0, 1) and fit is not None,
                       f"exit {proc.returncode}: {proc.stderr.strip()[-300:]}"):
        return
    oks = [m for m in fit["models"] if m["status"] == "ok"]
    crit = fit.get("criterion", "aic")
    kinds = {m["kind"] for m in fit["models"]}
    tally.check(cid, "default set: all five kinds tried", set(fr.ORDER) <= kinds, f"{sorted(kinds)}")
    if oks:
        # The contract (README "Uncertainty and ranking"): by the criterion, lower first; two
        # within rounding (1e-9 relative + 1e-6: the same response) in the order asked (fit.json's).
        def tied(a, b):
            return abs(a[crit] - b[crit]) <= 1e-9 * max(abs(a[crit]), abs(b[crit])) + 1e-6
        position = {id(m): i for i, m in enumerate(fit["models"])}
        ranked = sorted(oks, key=lambda m: m[crit])
        for k in range(1, len(ranked)):
            j = k
            while j > 0 and position[id(ranked[j])] < position[id(ranked[j - 1])] and tied(ranked[j], ranked[j - 1]):
                ranked[j], ranked[j - 1] = ranked[j - 1], ranked[j]
                j -= 1
        best = ranked[0]
        tally.check(cid, f"best = the ok model of least {crit} (ties: the first asked)", fit["best"] == best["kind"],
                    f"best {fit['best']}, least {best['kind']}")
        tally.check(cid, "ranks follow the criterion", [m.get("rank") for m in ranked] == list(range(1, len(oks) + 1)),
                    f"{[(m['kind'], m.get('rank'), m[crit]) for m in ranked]}")
    else:
        tally.check(cid, "no ok model: best is null", fit["best"] is None, f"best {fit['best']}")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--kinds", default=",".join(fr.ORDER))
    ap.add_argument("--keep")
    args = ap.parse_args()
    tally = fr.KnownTally("check_fit_scipy")
    work = pathlib.Path(args.keep) if args.keep else pathlib.Path(tempfile.mkdtemp(prefix="specloop_fit_scipy_"))
    work.mkdir(parents=True, exist_ok=True)
    fr.self_test(tally)   # the records' two exact computations agree (and with dlsim) before anything uses them
    ratios = []
    try:
        tasks, recs = [], []
        for kind in args.kinds.split(","):
            ki = fr.ORDER.index(kind)
            for si, shape in enumerate(SHAPES):
                clean = fr.CleanResponse(kind, shape, samples=SAMPLES, grid_seed=11 + si)
                for li, level in enumerate(fr.NOISE_LEVELS):
                    rec = clean.record(level, 2_000_000 + 1000 * ki + 100 * si + li)
                    name = f"{kind}_{shape}_{level}"
                    rec.write_csv(work / f"{name}.csv")
                    recs.append((f"{kind}/{shape}/{level}", kind, rec))
                    tasks.append((args.specloop, work / f"{name}.csv", work / name, fr.cli_model_args(kind)))
                    if shape == "step" and level == "medium":
                        recs.append((f"{kind}/default-set", None, rec))
                        tasks.append((args.specloop, work / f"{name}.csv", work / f"{name}_all", []))
        with concurrent.futures.ThreadPoolExecutor(max_workers=args.jobs) as pool:
            results = list(pool.map(run_one, tasks))
        for (cid, kind, rec), (proc, fit) in zip(recs, results):
            if kind is None:
                check_ranking(tally, cid, proc, fit)
                continue
            r = check_record(tally, cid, kind, rec, proc, fit)
            if r is not None:
                ratios.append((cid, r))
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    if ratios:
        worst = max(ratios, key=lambda x: x[1])
        print(f"NOTE  residual RMS tool/SciPy: median {np.median([r for _, r in ratios]):.6f}, "
              f"largest {worst[1]:.6f} ({worst[0]})")
    return tally.finish()


if __name__ == "__main__":
    sys.exit(main())
