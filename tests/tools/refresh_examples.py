#!/usr/bin/env python3
"""Regenerates what the README and the committed examples show from the tool itself, after a
change to what `design`/`analyze` print or write (tests/check_readme.py, check_report.py and
check_sweep_report.py then hold them to it):

  - the README's `design` block (exactly what `build/specloop design specs/conveyor_speed.toml`
    prints) and its spec-key table (`specloop keys --markdown`);
  - results/examples/conveyor_speed/ (the design report of the demo spec);
  - with --sweep, the committed sweep store (re-run with the README's example axes) and its report.

The README's `analyze` block is an excerpt (lines with "..." between them) and is left to the
editor: check_readme.py names any line that no longer appears.

Usage: tests/tools/refresh_examples.py [--specloop build/specloop] [--sweep]
"""
import argparse
import pathlib
import shutil
import subprocess
import sys
import tempfile

ROOT = pathlib.Path(__file__).resolve().parents[2]


def replace_block(readme, first_line, new_lines):
    lines = readme.splitlines()
    start = lines.index(first_line)
    if not lines[start - 1].startswith("```"):
        raise SystemExit(f"README: the line before {first_line!r} does not open a code block")
    end = next(j for j in range(start + 1, len(lines)) if lines[j].startswith("```"))
    return "\n".join(lines[:start + 1] + new_lines + lines[end:]) + "\n"


def replace_key_table(readme, table):
    lines = readme.splitlines()
    start = lines.index("## Spec file reference")
    head = next(i for i in range(start, len(lines)) if lines[i].startswith("| key | unit |"))
    end = next(i for i in range(head, len(lines)) if not lines[i].startswith("|"))
    return "\n".join(lines[:head] + table + lines[end:]) + "\n"


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", default=str(ROOT / "build" / "specloop"))
    ap.add_argument("--sweep", action="store_true", help="also re-run the committed example sweep")
    args = ap.parse_args()
    exe = str(pathlib.Path(args.specloop).resolve())

    readme_path = ROOT / "README.md"
    readme = readme_path.read_text()
    with tempfile.TemporaryDirectory() as work:
        work = pathlib.Path(work)
        (work / "specs").mkdir()
        shutil.copy(ROOT / "specs" / "conveyor_speed.toml", work / "specs")
        run = subprocess.run([exe, "design", "specs/conveyor_speed.toml"], cwd=work, capture_output=True, text=True)
        if run.returncode not in (0, 1):
            sys.exit(f"design failed ({run.returncode}): {run.stderr}")
        readme = replace_block(readme, "$ build/specloop design specs/conveyor_speed.toml", run.stdout.splitlines())
    keys = subprocess.run([exe, "keys", "--markdown"], capture_output=True, text=True, check=True)
    readme = replace_key_table(readme, keys.stdout.splitlines())
    readme_path.write_text(readme)

    example = ROOT / "results" / "examples" / "conveyor_speed"
    shutil.rmtree(example, ignore_errors=True)
    subprocess.run([exe, "design", "specs/conveyor_speed.toml", "--out", str(example)], cwd=ROOT, check=False,
                   capture_output=True)
    if args.sweep:
        store = ROOT / "results" / "examples" / "conveyor_speed.sweep.sqlite"
        store.unlink(missing_ok=True)
        subprocess.run([exe, "sweep", "specs/conveyor_speed.toml", "--vary", "requirements.overshoot_max_pct=4:20:5",
                        "--vary", "plant.zeros[0]=-1,-2,-4,-9,-20,-60", "--store", str(store), "--jobs", "2"],
                       cwd=ROOT, check=True, capture_output=True)
    report = ROOT / "results" / "examples" / "conveyor_speed.sweep-report"
    shutil.rmtree(report, ignore_errors=True)
    # Relative paths: the committed report names the store as a clone sees it, not this machine's path.
    subprocess.run([exe, "sweep-report", "results/examples/conveyor_speed.sweep.sqlite",
                    "--out", "results/examples/conveyor_speed.sweep-report"], cwd=ROOT, check=True, capture_output=True)
    print("refreshed: README design block and key table, results/examples/" + (" (sweep re-run)" if args.sweep else ""))


if __name__ == "__main__":
    main()
