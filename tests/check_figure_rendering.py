#!/usr/bin/env python3
"""The report's figures: rendered by gnuplot processes that each run several scripts in turn,
byte for byte as one gnuplot per script renders them, and a script that fails is named.

Invoked by CTest as
    /usr/bin/python3 tests/check_figure_rendering.py --specloop BIN --probe PROBE --source-dir ROOT

Cases (a small invented spec, four figures):
  same       `design` with the tool pinned to one core (all four scripts in one gnuplot) and
             unpinned: every plots/*.svg and *.png equals what a fresh `gnuplot NAME.gp` per
             script writes from the same folder (the scripts are run again here, one process each).
  failure    with a `gnuplot` first on PATH that fails on one script (frequency.gp) and runs the
             real one otherwise: `design` stops with the message "gnuplot failed on
             plots/frequency.gp" and writes no output folder (the staging folder is dropped).
The last line is "N passed, N failed".
"""
import argparse
import os
import pathlib
import shutil
import subprocess
import sys
import tempfile

from reference_common import Tally

from check_output_paths import SPEC  # a small invented PI spec (four figures)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir")
    args = ap.parse_args()
    tally = Tally()
    gnuplot = shutil.which("gnuplot")
    if not tally.check("setup", "gnuplot on PATH", gnuplot is not None):
        print(f"{tally.passed} passed, {tally.failed} failed")
        return 1
    with tempfile.TemporaryDirectory(prefix="specloop_figures_") as tmp:
        tmp = pathlib.Path(tmp)
        spec = tmp / "figures.toml"
        spec.write_text(SPEC)
        taskset = shutil.which("taskset")
        for label, prefix in (("one core", [taskset, "-c", "0"] if taskset else []), ("unpinned", [])):
            out = tmp / f"out_{label.replace(' ', '_')}"
            run = subprocess.run([*prefix, args.specloop, "design", str(spec), "--out", str(out)],
                                 capture_output=True, text=True, timeout=300)
            if not tally.check(f"same/{label}", "design exits 0 or 1 with plots/", run.returncode in (0, 1)
                               and (out / "plots").is_dir(), f"exit {run.returncode}: {run.stderr[-300:]}"):
                continue
            fresh = tmp / f"fresh_{label.replace(' ', '_')}"
            shutil.copytree(out, fresh)
            scripts = sorted(p.name for p in (fresh / "plots").glob("*.gp"))
            for p in (fresh / "plots").glob("*.svg"):
                p.unlink()
            for p in (fresh / "plots").glob("*.png"):
                p.unlink()
            for name in scripts:
                subprocess.run([gnuplot, name], cwd=fresh / "plots", capture_output=True, timeout=120)
            differ = [f"{n[:-3]}.{ext}" for n in scripts for ext in ("svg", "png")
                      if (out / "plots" / f"{n[:-3]}.{ext}").read_bytes() != (fresh / "plots" / f"{n[:-3]}.{ext}").read_bytes()]
            tally.check(f"same/{label}", f"{len(scripts)} figures byte-identical to one gnuplot per script",
                        len(scripts) >= 3 and not differ, f"differ: {differ}; scripts {scripts}")
        # A gnuplot that fails on frequency.gp (in whatever group it runs).
        fake_dir = tmp / "fakebin"
        fake_dir.mkdir()
        fake = fake_dir / "gnuplot"
        fake.write_text("#!/bin/sh\nfor a in \"$@\"; do\n  if [ \"$a\" = frequency.gp ]; then\n"
                        "    echo 'frequency.gp: planted failure' >&2; exit 1\n  fi\ndone\n"
                        f"exec {gnuplot} \"$@\"\n")
        fake.chmod(0o755)
        env = dict(os.environ, PATH=f"{fake_dir}:{os.environ.get('PATH', '')}")
        out = tmp / "out_failure"
        run = subprocess.run([args.specloop, "design", str(spec), "--out", str(out)], capture_output=True, text=True,
                             timeout=300, env=env)
        tally.check("failure", "design stops, naming plots/frequency.gp and gnuplot's message",
                    run.returncode not in (0, 1) and "gnuplot failed on plots/frequency.gp" in run.stderr
                    and "planted failure" in run.stderr, f"exit {run.returncode}: {run.stderr[-400:]}")
        tally.check("failure", "no output folder written", not out.exists(), f"{sorted(p.name for p in out.iterdir()) if out.exists() else ''}")
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
