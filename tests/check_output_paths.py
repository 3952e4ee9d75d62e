#!/usr/bin/env python3
"""Output locations that cannot be written are bad input: exit 2, the path named, nothing written.

Invoked by CTest as
    /usr/bin/python3 tests/check_output_paths.py --specloop BIN --probe PROBE --source-dir ROOT

Cases (each in a fresh temporary folder holding one plain file, `taken`):
  design --out taken              an existing file where the output folder should go
  design --out taken/sub          a folder that cannot be created (its parent is a file)
  sweep --store taken/x.sqlite    a store whose folder cannot be created
  sweep --store <a folder>        a store path that is a folder
  sweep --point-reports taken     a file where the per-point reports' folder should go
  sweep-report STORE --out taken  an existing file where the report folder should go
  merge taken/m.sqlite IN         an output store whose folder cannot be created
Each must exit 2 (README: bad input), name the path on stderr, print nothing on stdout and
leave the folder as it was (only `taken` in it, unchanged). Before this, `design --out taken`
ran the whole design and then failed with exit 3 ("filesystem error").
A writable --out still works (exit 0 or 1, result.json written): the check is not a refusal of
everything. (Permission denial is not tested: the suite may run as root, which bypasses it.)
"""
import argparse
import pathlib
import subprocess
import sys
import tempfile

from reference_common import Tally

SPEC = """title = "output path check"
[plant]
poles = [-1.0, -4.0]
gain = 4.0
[controller]
structure = "pi"
[requirements]
overshoot_max_pct = 10.0
[search]
max_evaluations = 200
"""


def snapshot(folder):
    return sorted((str(p.relative_to(folder)), p.read_bytes() if p.is_file() else b"")
                  for p in pathlib.Path(folder).rglob("*"))


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    specloop = str(pathlib.Path(args.specloop).resolve())
    tally = Tally()
    with tempfile.TemporaryDirectory(prefix="specloop_paths_spec_") as spec_dir:
        spec = pathlib.Path(spec_dir, "pi_loop.toml")
        spec.write_text(SPEC)
        # A finished store for sweep-report and merge.
        store = pathlib.Path(spec_dir, "pi_loop.sqlite")
        made = subprocess.run([specloop, "sweep", str(spec), "--vary", "plant.gain=3,4", "--store", str(store),
                               "--jobs", "1"], capture_output=True, text=True, timeout=300)
        tally.check("setup", "a small sweep store", made.returncode == 0 and store.exists(), made.stderr.strip()[:200])
        cases = [
            ("design --out <file>", ["design", str(spec), "--out", "taken"], "taken"),
            ("design --out <file>/sub", ["design", str(spec), "--out", "taken/sub"], "taken/sub"),
            ("sweep --store <file>/x.sqlite", ["sweep", str(spec), "--vary", "plant.gain=3,4", "--store", "taken/x.sqlite"],
             "taken/x.sqlite"),
            ("sweep --store <folder>", ["sweep", str(spec), "--vary", "plant.gain=3,4", "--store", "."], "."),
            ("sweep --point-reports <file>", ["sweep", str(spec), "--vary", "plant.gain=3,4", "--store", "s.sqlite",
                                              "--point-reports", "taken"], "taken"),
            ("sweep-report --out <file>", ["sweep-report", str(store), "--out", "taken"], "taken"),
            ("merge <file>/m.sqlite", ["merge", "taken/m.sqlite", str(store)], "taken/m.sqlite"),
        ]
        for case, argv, path in cases:
            with tempfile.TemporaryDirectory(prefix="specloop_paths_") as work:
                pathlib.Path(work, "taken").write_text("not a folder\n")
                before = snapshot(work)
                run = subprocess.run([specloop, *argv], cwd=work, capture_output=True, text=True, timeout=300)
                tally.check(case, "exit 2", run.returncode == 2, f"rc {run.returncode}: {run.stderr.strip()[:200]}")
                tally.check(case, f"stderr names {path!r}", path in run.stderr, run.stderr.strip()[:200])
                tally.check(case, "no internal error", "internal error" not in run.stderr)
                tally.check(case, "stdout empty", run.stdout == "", run.stdout[:200])
                tally.check(case, "nothing written", snapshot(work) == before)
        with tempfile.TemporaryDirectory(prefix="specloop_paths_") as work:
            run = subprocess.run([specloop, "design", str(spec), "--out", "fresh/out"], cwd=work, capture_output=True,
                                 text=True, timeout=300)
            tally.check("design --out fresh/out", "a writable new folder still works",
                        run.returncode in (0, 1) and pathlib.Path(work, "fresh/out/result.json").exists(),
                        run.stderr.strip()[:200])
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 0 if tally.failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
