#!/usr/bin/env python3
"""The bad-data corpus of `specloop fit` and `specloop design --plant` (tests/bad_data/): each
file must be refused cleanly — exit code 2, an error on stderr naming the file and the line (when
the corpus says one) and containing the expected text, nothing on stdout, and no output folder.
Each CSV runs twice: with --out DIR, and without it (the default results/<name>-fit/ must not
appear either); after both, nothing at all may be left in the scratch folder the run started in.

  *.csv    run as `specloop fit FILE [ARGS] --out DIR`
  *.toml   run as `specloop design specs/conveyor_speed.toml --plant FILE --out DIR`

Each file starts with comment lines (the CSV reader and TOML both skip '#' lines):
    # expect: <text that must appear in the error>
    # line: <line number the error must point to as FILE:LINE:, or "any">
    # args: <extra command-line arguments>      (optional, CSV only)
"""

import argparse
import pathlib
import shlex
import subprocess
import sys
import tempfile


def header(path):
    lines = path.read_text(encoding="utf-8").splitlines()
    expect = lines[0].removeprefix("# expect: ")
    line = lines[1].removeprefix("# line: ").strip()
    args = shlex.split(lines[2].removeprefix("# args: ")) if lines[2].startswith("# args: ") else []
    if expect == lines[0] or line == lines[1]:
        raise ValueError(f"{path}: the first lines must be '# expect: …' and '# line: …'")
    return expect, (None if line == "any" else int(line)), args


def check(specloop, source_dir, path, with_out=True):
    expect, line, args = header(path)
    with tempfile.TemporaryDirectory(prefix="specloop_bad_data_") as work:
        out = pathlib.Path(work) / "out"
        if path.suffix == ".csv":
            command = [specloop, "fit", str(path), *args] + (["--out", str(out)] if with_out else [])
        else:
            command = [specloop, "design", str(source_dir / "specs" / "conveyor_speed.toml"), "--plant", str(path), "--out", str(out)]
        run = subprocess.run(command, cwd=work, capture_output=True, text=True, timeout=120, stdin=subprocess.DEVNULL)
        problems = []
        if run.returncode != 2:
            problems.append(f"exit code {run.returncode}, expected 2")
        if expect not in run.stderr:
            problems.append(f"stderr lacks {expect!r}")
        if line is not None and f"{path}:{line}:" not in run.stderr:
            problems.append(f"stderr does not point at {path}:{line}:")
        if run.stdout.strip():
            problems.append(f"stdout not empty: {run.stdout[:200]!r}")
        if out.exists() or any(p.name.startswith(".out.partial") for p in pathlib.Path(work).iterdir()):
            problems.append("an output folder was written")
        left = sorted(str(p.relative_to(work)) for p in pathlib.Path(work).rglob("*"))
        if left:
            problems.append(f"files left behind: {', '.join(left[:5])}")
        return problems, run.stderr.strip()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--specloop", required=True)
    parser.add_argument("--probe")
    parser.add_argument("--source-dir", required=True)
    args = parser.parse_args()
    source_dir = pathlib.Path(args.source_dir)
    files = sorted((source_dir / "tests" / "bad_data").glob("*.csv")) + sorted((source_dir / "tests" / "bad_data").glob("*.toml"))
    if len(files) < 10:
        print(f"FAIL: only {len(files)} corpus files found")
        return 1
    failed = runs = 0
    for path in files:
        for with_out in ((True, False) if path.suffix == ".csv" else (True,)):
            runs += 1
            problems, stderr = check(args.specloop, source_dir, path, with_out)
            tag = path.name + ("" if with_out else " (no --out)")
            if problems:
                failed += 1
                print(f"FAIL {tag}: {'; '.join(problems)}\n     stderr: {stderr}")
            else:
                print(f"ok   {tag}: {stderr}")
    print(f"{runs - failed} of {runs} runs on {len(files)} bad-data files refused as expected")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
