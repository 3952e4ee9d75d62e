#!/usr/bin/env python3
"""End to end: recorded test → `specloop fit` → `specloop design SPEC --plant DIR/plant.toml` with
worst-case robust design → SciPy re-measures the designed controller on the TRUE plant that
generated the data: the spec's requirements are met there.

Invoked by CTest as
    /usr/bin/python3 tests/check_fit_design.py --specloop BIN --source-dir ROOT
(`--probe` is accepted and ignored; `--keep DIR` keeps the files.)

Cases (invented; the spec tests/fit_design/water_heater_pi.toml, a PI on a water heater's outlet
temperature with overshoot, settling time, zero steady-state error and a phase margin, and an
[uncertainty] section in mode "worst-case" whose ranges --plant supplies):
  heater_fopdt   the true plant 0.6·e^(−5.3 s)/(45 s + 1) K/%, a bump test of 600 samples at about
                 1 s (uneven), noise σ = 0.05 K; fitted with --model first-order-delay.
  heater_sopdt   the true plant 0.6·e^(−3.1 s)/((40 s + 1)(6 s + 1)), two steps, σ = 0.05 K;
                 fitted with the default set (the best model by AIC, whichever kind it is).
The records are computed exactly by SciPy (tests/fit_reference.py: cont2discrete ZOH stepping with
the delay exact).

Checks per case:
  fit        exit 0, a best model, plant.toml written.
  plant      plant.toml's [plant] (README zeros/poles/gain/delay notation: k·Π(s − z)/Π(s − p))
             is fit.json's best model: G(jω) of the two agree within 1e-8 relative at 7 frequencies
             over the model's corners, the delays within 1e-9.
  box        each [uncertainty] range holds the [plant] value it ranges; for first-order-delay the
             delay's range is L ∓ 2σ (clipped at 0), 1e-9 relative, and the pole's −1/(T ∓ 2σ)
             within (2σ_T/T)² relative (the exact image of T's interval and its first-order mapping
             differ by that much; either is a fair reading of "the ±2σ intervals mapped").
  design     exit 0 (met), result.json's plant is plant.toml's (the spec's placeholder replaced),
             robust.mode worst-case, robust.keys = the file's ranged keys, the optimized design's
             claim holds.
  true       SciPy (the oracle's machinery, tests/check_scipy_robust.measure_plant: the exact
             linear response by scipy.linalg.expm with extrema and crossings refined by brentq,
             margins by brentq on L(jω), metrics by README "Metric definitions") re-measures the
             optimized controller from result.json on the TRUE plant, its delay as the tool's
             linear model has it (the Padé approximant of result.json's order, README
             "plant.delay"; the nonlinear confirmation with the exact delay is the oracle's job):
             every requirement met within the oracle's CLAIM_LINEAR re-measurement bound.
The last line is "N passed, N failed".
"""
import argparse
import json
import pathlib
import shutil
import subprocess
import sys
import tempfile
import tomllib

import numpy as np

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import check_scipy_robust as robust  # noqa: E402  (measure_plant, plant_of, linear_model)
import fit_reference as fr  # noqa: E402

SPEC = "tests/fit_design/water_heater_pi.toml"
CASES = [
    dict(name="heater_fopdt", kind="first-order-delay", params={"k": 0.6, "T": 45.0, "L": 5.3}, shape="step",
         samples=600, period=1.0, sigma=0.05, seed=42, model_args=["--model", "first-order-delay"]),
    dict(name="heater_sopdt", kind="second-order-delay", params={"k": 0.6, "T1": 40.0, "T2": 6.0, "L": 3.1},
         shape="steps", samples=800, period=1.0, sigma=0.05, seed=43, model_args=[]),
]


def model_frequency_response(kind, values, w):
    """G(jω) of a fit.json model (fit_reference's realization of each kind), without the delay."""
    A, B, C = fr.KINDS[kind]["ss"](values)
    n = A.shape[0]
    return np.array([(C @ np.linalg.solve(1j * x * np.eye(n) - A, B))[0, 0] for x in w])


def plant_frequency_response(doc, w):
    num, den, delay, _ = robust.plant_of(doc)
    return np.polyval(num, 1j * w) / np.polyval(den, 1j * w), delay


def run_case(tally, args, case, work):
    name = case["name"]
    clean = fr.CleanResponse(case["kind"], case["shape"], samples=case["samples"], params=case["params"],
                             period=case["period"])
    rec = clean.record(case["sigma"], case["seed"])
    csv = work / f"{name}.csv"
    rec.write_csv(csv)
    fit_dir = work / f"{name}-fit"
    proc, fit = fr.run_fit(args.specloop, csv, fit_dir, case["model_args"])
    plant_path = fit_dir / "plant.toml"
    if not tally.check(name, "fit: exit 0, a best model, plant.toml", proc.returncode == 0 and fit and fit.get("best")
                       and plant_path.exists(), f"exit {proc.returncode}: {proc.stderr.strip()[-300:]}"):
        return
    best = fr.model_entry(fit, fit["best"])
    kind = best["kind"]
    values = {n: float(best["parameters"][n]["value"]) for n in best["parameter_names"]}
    doc = tomllib.loads(plant_path.read_text())
    print(f"NOTE  {name}: best {kind} " + ", ".join(f"{n}={v:.6g}" for n, v in values.items())
          + f" (truth {case['kind']} " + ", ".join(f"{n}={v:g}" for n, v in case["params"].items()) + ")")

    # plant: the [plant] section is the fitted model
    corners = [1.0 / v for n, v in values.items() if n.startswith("T") and v > 0] + \
              [v for n, v in values.items() if n in ("wn", "p1", "p2", "p3", "p4", "z1", "z2", "z3")]
    w = np.geomspace(min(corners) / 30.0, max(corners) * 30.0, 7)
    g_fit = model_frequency_response(kind, values, w)
    g_file, delay = plant_frequency_response(doc, w)
    err = float(np.max(np.abs(g_file - g_fit) / np.abs(g_fit)))
    tally.check(name, "plant: plant.toml's [plant] = fit.json's best model (G(jω), delay)",
                err <= 1e-8 and abs(delay - values["L"]) <= 1e-9 * max(values["L"], 1.0),
                f"largest relative |ΔG| {err:.2e}; delay {delay!r} vs L {values['L']!r}")

    # box: ranges hold their nominal; first order: exact mapping of L ∓ 2σ and −1/(T ∓ 2σ)
    unc = doc.get("uncertainty", {})
    ranged = {k: v for k, v in unc.items() if k.startswith("plant.")}
    bad = [f"{k} = {robust.value_at(doc, k)!r} outside {v}" for k, v in ranged.items()
           if not v[0] <= robust.value_at(doc, k) <= v[1]]
    if kind == "first-order-delay":
        P = best["parameters"]
        want = {"plant.delay": [max(P["L"]["low"], 0.0), P["L"]["high"]],
                "plant.poles[0]": sorted([-1.0 / P["T"]["low"], -1.0 / P["T"]["high"]])}
        # The pole's range may be the exact image of T's interval or its first-order (delta-method)
        # mapping: they differ by O((2σ_T/T)²) relative, which is the tolerance.
        rel = (2.0 * P["T"]["std_error"] / P["T"]["value"]) ** 2
        tols = {"plant.delay": 1e-9, "plant.poles[0]": rel + 1e-9}
        for k, (lo, hi) in want.items():
            got = ranged.get(k)
            if got is None or abs(got[0] - lo) > tols[k] * abs(lo) + 1e-12 or abs(got[1] - hi) > tols[k] * abs(hi):
                bad.append(f"{k}: {got} vs ±2σ mapped {[lo, hi]}")
    tally.check(name, "box: [uncertainty] ranges from the ±2σ intervals, each holding its nominal", not bad and ranged,
                "; ".join(bad) or f"{list(ranged)}")

    # design with --plant
    out = work / f"{name}-design"
    spec = pathlib.Path(args.source_dir) / SPEC
    run = subprocess.run([args.specloop, "design", str(spec), "--plant", str(plant_path), "--out", str(out), "--jobs", "2"],
                         capture_output=True, text=True, timeout=600)
    result_path = out / "result.json"
    if not tally.check(name, "design --plant: exit 0 (met) and result.json", run.returncode == 0 and result_path.exists(),
                       f"exit {run.returncode}: {run.stderr.strip()[-300:]}"):
        return
    R = json.loads(result_path.read_text())
    num, den, dl, _ = robust.plant_of(doc)
    same = np.allclose(np.array(R["plant"]["numerator"]) / R["plant"]["denominator"][0], num / den[0], rtol=1e-9) and \
        np.allclose(np.array(R["plant"]["denominator"]) / R["plant"]["denominator"][0], den / den[0], rtol=1e-9) and \
        abs(float(R["plant"]["delay"]) - dl) <= 1e-12 * max(dl, 1.0)
    tally.check(name, "design: result.json's plant is plant.toml's", same, f"{R['plant']} vs {num}, {den}, {dl}")
    rob = R.get("robust") or {}
    opt = R["designs"]["optimized"]
    tally.check(name, "design: worst-case over the file's ranged keys, claim holds",
                rob.get("mode") == "worst-case" and list(rob.get("keys", [])) == list(ranged)
                and bool((opt.get("robust") or {}).get("holds")),
                f"mode {rob.get('mode')}, keys {rob.get('keys')}, holds {(opt.get('robust') or {}).get('holds')}")

    # the true plant, re-measured by SciPy
    info = fr.KINDS[case["kind"]]
    A, B, C = info["ss"](case["params"])
    from scipy import signal
    tn, td = signal.ss2tf(A, B, C, np.zeros((1, 1)))
    tn = np.trim_zeros(np.real(tn[0]), "f")
    order = R["linear_model"].get("delay_approximant_order") or robust.PADE_ORDER
    ln, ld, _ = robust.linear_model(tn, np.real(td), case["params"]["L"], [1.0], order)
    reqs = [{"key": q["requirement"], "limit": float(q["limit"]), "upper": q["bound"] == "max"} for q in opt["checks"]]
    m = robust.measure_plant((ln, ld, opt["controller"], float(R["spec"]["reference"]["amplitude"]),
                              float(R["spec"]["requirements"]["settling_band_pct"]), reqs,
                              robust.oracle.num(R.get("reference_peak_time"))))
    misses = [f"{q['key']} = {m['values'].get(q['key'])} (limit {q['limit']:g})" for q in reqs
              if not m["stable"] or not m["claim_meets"][q["key"]]]
    tally.check(name, "true: every requirement met on the true plant (SciPy)", m["stable"] and not misses,
                "; ".join(misses) or ", ".join(f"{k} {v:.6g}" for k, v in m["values"].items()))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--keep")
    args = ap.parse_args()
    tally = fr.KnownTally("check_fit_design")
    work = pathlib.Path(args.keep) if args.keep else pathlib.Path(tempfile.mkdtemp(prefix="specloop_fit_design_"))
    work.mkdir(parents=True, exist_ok=True)
    try:
        for case in CASES:
            run_case(tally, args, case, work)
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    return tally.finish()


if __name__ == "__main__":
    sys.exit(main())
