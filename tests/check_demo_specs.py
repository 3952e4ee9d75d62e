#!/usr/bin/env python3
"""Smoke test: every spec in specs/ runs through `specloop analyze` (tables and --json) and
`specloop design`, so the README's examples cannot rot. Checks the exit codes and the JSON
contract keys."""
import argparse
import json
import pathlib
import subprocess
import sys
import tempfile

CONTRACT = ["damping_ratio", "crossings", "dominant", "reference", "dominance"]
METRIC_KEYS = ["overshoot_pct", "peak_time", "settling_time", "rise_time", "steady_state_error",
               "effort_peak", "itae"]


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    args.specloop = str(pathlib.Path(args.specloop).resolve())
    specs = sorted(pathlib.Path(args.source_dir, "specs").resolve().glob("*.toml"))
    passed = failed = 0

    def check(ok: bool, what: str) -> None:
        nonlocal passed, failed
        print(("ok   " if ok else "FAIL ") + what)
        if ok:
            passed += 1
        else:
            failed += 1

    check(len(specs) >= 3, f"at least three demo specs ({len(specs)})")
    for spec in specs:
        with tempfile.TemporaryDirectory() as work:
            text = subprocess.run([args.specloop, "analyze", str(spec)], cwd=work, capture_output=True, text=True)
            check(text.returncode == 0 and "ζ" in text.stdout, f"{spec.name}: analyze exits 0 with a table"
                  + ("" if text.returncode == 0 else f" (rc {text.returncode}: {text.stderr.strip()})"))
            run = subprocess.run([args.specloop, "analyze", str(spec), "--json"], cwd=work, capture_output=True, text=True)
            try:
                out = json.loads(run.stdout)
            except json.JSONDecodeError as e:
                check(False, f"{spec.name}: --json parses ({e})")
                continue
            check(run.returncode == 0 and all(k in out for k in CONTRACT), f"{spec.name}: --json has the contract keys")
            for name in ("dominant", "reference"):
                block = out.get(name)
                if block is not None:
                    check(all(k in block["simulated"] for k in METRIC_KEYS), f"{spec.name}: {name}.simulated keys")
            check("NaN" not in run.stdout, f"{spec.name}: no NaN in the output")
            # design: exit 0 (met) or 1 (not met), result.json written with every design
            # confirmed (or not) on the nonlinear loop.
            out_dir = pathlib.Path(work, "out")
            run = subprocess.run([args.specloop, "design", str(spec), "--out", str(out_dir)], cwd=work,
                                 capture_output=True, text=True)
            check(run.returncode in (0, 1), f"{spec.name}: design exits 0 or 1 (rc {run.returncode}) {run.stderr.strip()}")
            result_file = out_dir / "result.json"
            check(result_file.exists(), f"{spec.name}: design writes result.json")
            if result_file.exists():
                result = json.loads(result_file.read_text())
                designs = result.get("designs", {})
                check("optimized" in designs and "reference" in designs, f"{spec.name}: reference and optimized designs")
                optimized = designs.get("optimized", {})
                judged_nonlinear = result.get("judged_on") == "nonlinear"
                met = (optimized.get("nonlinear") or {}).get("meets_all") if judged_nonlinear else optimized.get("meets_all")
                check(result.get("met") == bool(met), f"{spec.name}: 'met' agrees with the optimized design's checks")
                check((run.returncode == 0) == bool(result.get("met")), f"{spec.name}: exit code agrees with 'met'")
                for name, d in designs.items():
                    nl = d.get("nonlinear")
                    if name != "optimized" and d.get("status") == "unstable":
                        # A hand design that does not stabilize the plant (the carriage's resonance
                        # defeats the classical and Ziegler–Nichols PIDs) has no loop to confirm.
                        check(nl is None, f"{spec.name}: {name} unstable, so not confirmed")
                        continue
                    check(nl is not None and nl.get("status") == "ok" and isinstance(nl.get("confirmed"), bool)
                          and nl.get("verdict"), f"{spec.name}: {name} confirmed or not on the nonlinear loop")
                check("NaN" not in result_file.read_text(), f"{spec.name}: no NaN in result.json")
                if result["spec"]["plant"].get("given_as") == "nonlinear":
                    # An expression plant: the design ran on its linearization, which result.json
                    # and analyze must say, with the operating point and the Jacobians.
                    lin = (result.get("linear_model") or {}).get("linearization") or {}
                    n = len(result["spec"]["plant"]["nonlinear"]["states"])
                    jac = lin.get("jacobians", {})
                    check(len(jac.get("A", [])) == n and all(len(row) == n for row in jac["A"])
                          and len(jac.get("B", [])) == n and len(jac.get("C", [])) == n and "D" in jac
                          and set(lin.get("operating_point", {})) == {"states", "u", "y"} and lin.get("note"),
                          f"{spec.name}: result.json has the linearization (operating point, A, B, C, D, note)")
                    check("linearization" in text.stdout and "operating point" in text.stdout,
                          f"{spec.name}: analyze says the plant is a linearization at the operating point")
            first = spec.read_text().splitlines()[0]
            check(first.startswith("#"), f"{spec.name}: starts with a header comment saying what it models")
    print(f"{passed} passed, {failed} failed")
    return 0 if failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
