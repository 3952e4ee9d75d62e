#!/usr/bin/env python3
"""Runs `specloop fit` on every malformed recorded test in tests/bad_data/ and checks that the CLI
rejects it cleanly (README "Exit codes", issue 16 "Bad data gets a clear answer"): exit code 2, an
error on stderr that names the file and line (and the column, in the expected text), nothing on
stdout, and no output left behind — neither the --out folder (nor a staging folder beside it) nor
the default results/<name>-fit/ when --out is not given.

Each file starts with these comment lines:
    # expect: <text that must appear in the error: the column and what is wrong>
    # line: <line number the error must point to, or "any" (then only "FILE:" is required)>
    # args: <extra command-line arguments>            (optional)
    # <what the file models>
Add a class of bad data by adding a file; nothing else changes. The last line is "N passed, N failed".
"""
import argparse
import os
import pathlib
import shlex
import subprocess
import sys
import tempfile

TIMEOUT_S = 60


def read_header(path):
    lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
    if not lines[0].startswith("# expect: ") or not lines[1].startswith("# line: "):
        raise ValueError("the first two lines must be '# expect: …' and '# line: N|any'")
    expected = lines[0][len("# expect: "):]
    line = lines[1][len("# line: "):].strip()
    args = shlex.split(lines[2][len("# args: "):]) if lines[2].startswith("# args: ") else []
    return expected, None if line == "any" else int(line), args


def files_under(folder):
    return sorted(str(p.relative_to(folder)) for p in pathlib.Path(folder).rglob("*"))


def check_one(specloop, path, with_out):
    try:
        expected, line, args = read_header(path)
    except (OSError, ValueError, IndexError) as error:
        return [f"bad corpus file: {error}"]
    with tempfile.TemporaryDirectory(prefix="specloop_bad_data_") as work:
        cmd = [specloop, "fit", str(path), *args] + (["--out", str(pathlib.Path(work) / "out")] if with_out else [])
        try:
            run = subprocess.run(cmd, cwd=work, stdin=subprocess.DEVNULL, capture_output=True, text=True,
                                 timeout=TIMEOUT_S, check=False)
        except subprocess.TimeoutExpired:
            return [f"timed out after {TIMEOUT_S} s"]
        created = files_under(work)
    problems = []
    if run.returncode != 2:
        problems.append(f"exit code {run.returncode}, expected 2")
    location = f"{path}:" if line is None else f"{path}:{line}:"
    if location not in run.stderr:
        problems.append(f"stderr does not contain {location!r}")
    if expected not in run.stderr:
        problems.append(f"stderr does not contain {expected!r}")
    if run.stdout:
        problems.append(f"stdout is not empty: {run.stdout[:200]!r}")
    if created:
        problems.append(f"files were created: {', '.join(created)}")
    if problems:
        problems.append(f"stderr was: {run.stderr.strip()[:400]!r}")
    return problems


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    specloop = os.path.abspath(args.specloop)
    corpus = sorted((pathlib.Path(args.source_dir).resolve() / "tests" / "bad_data").glob("*.csv"))
    if not corpus:
        print("no bad recorded tests found in tests/bad_data/")
        return 1
    passed = failed = 0
    for path in corpus:
        for with_out in (True, False):
            problems = check_one(specloop, path, with_out)
            tag = f"{path.name} ({'--out DIR' if with_out else 'default output folder'})"
            if problems:
                failed += 1
                print(f"FAIL {tag}: " + "; ".join(problems))
            else:
                passed += 1
                print(f"ok   {tag}")
    print(f"{passed} passed, {failed} failed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
