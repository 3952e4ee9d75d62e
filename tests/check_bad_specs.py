#!/usr/bin/env python3
"""Runs `specloop analyze <file> --json` on every malformed spec in tests/bad_specs/ and checks
that the CLI rejects it cleanly: exit code 2, an error on stderr that points at the right
file and line and contains the expected text, nothing on stdout, and no file written.

Each bad spec starts with two comment lines:
    # expect: <text that must appear in the error, including the dotted key>
    # line: <line number the error must point to, or "any">
"""

import argparse
import os
import pathlib
import subprocess
import sys
import tempfile

EXPECT_PREFIX = "# expect: "
LINE_PREFIX = "# line: "
TIMEOUT_S = 60


def read_expectations(spec_file):
    """Returns (expected substring, line or None for "any"); raises ValueError if malformed."""
    with open(spec_file, encoding="utf-8", errors="replace") as handle:
        first = handle.readline().rstrip("\r\n")
        second = handle.readline().rstrip("\r\n")
    if not first.startswith(EXPECT_PREFIX) or not first[len(EXPECT_PREFIX):].strip():
        raise ValueError(f"first line must be '{EXPECT_PREFIX}<text>', found {first!r}")
    if not second.startswith(LINE_PREFIX):
        raise ValueError(f"second line must be '{LINE_PREFIX}<N|any>', found {second!r}")
    expected = first[len(EXPECT_PREFIX):]
    line_text = second[len(LINE_PREFIX):].strip()
    if line_text == "any":
        return expected, None
    if not line_text.isdigit() or int(line_text) < 1:
        raise ValueError(f"line must be a positive number or 'any', found {line_text!r}")
    return expected, int(line_text)


def files_under(folder):
    return sorted(str(path.relative_to(folder)) for path in pathlib.Path(folder).rglob("*"))


def check_one(specloop, spec_file):
    """Returns a list of problems (empty when the spec was rejected as expected)."""
    try:
        expected, line = read_expectations(spec_file)
    except (OSError, ValueError) as error:
        return [f"bad corpus file: {error}"]

    spec_path = str(spec_file)
    with tempfile.TemporaryDirectory(prefix="specloop_bad_spec_") as work_dir:
        try:
            run = subprocess.run(
                [specloop, "analyze", spec_path, "--json"],
                cwd=work_dir,
                stdin=subprocess.DEVNULL,
                capture_output=True,
                timeout=TIMEOUT_S,
                check=False,
            )
        except subprocess.TimeoutExpired:
            return [f"timed out after {TIMEOUT_S} s"]
        created = files_under(work_dir)

    stdout = run.stdout.decode("utf-8", errors="replace")
    stderr = run.stderr.decode("utf-8", errors="replace")
    problems = []
    if run.returncode != 2:
        problems.append(f"exit code {run.returncode}, expected 2")
    location = f"{spec_path}:" if line is None else f"{spec_path}:{line}:"
    if location not in stderr:
        problems.append(f"stderr does not contain {location!r}")
    if expected not in stderr:
        problems.append(f"stderr does not contain {expected!r}")
    if stdout:
        problems.append(f"stdout is not empty: {stdout[:200]!r}")
    if created:
        problems.append(f"files were created: {', '.join(created)}")
    if problems:
        problems.append(f"stderr was: {stderr.strip()[:500]!r}")
    return problems


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--specloop", required=True, help="path to the specloop executable")
    parser.add_argument("--probe", help="path to the step probe (not used by this check)")
    parser.add_argument("--source-dir", required=True, help="repository root")
    args = parser.parse_args()

    specloop = os.path.abspath(args.specloop)
    if not os.access(specloop, os.X_OK):
        print(f"specloop executable not found or not executable: {specloop}")
        return 1
    corpus = pathlib.Path(args.source_dir).resolve() / "tests" / "bad_specs"
    spec_files = sorted(corpus.glob("*.toml"))
    if not spec_files:
        print(f"no bad specs found in {corpus}")
        return 1

    passed = 0
    failed = 0
    for spec_file in spec_files:
        problems = check_one(specloop, spec_file)
        if problems:
            failed += 1
            print(f"FAIL {spec_file.name}: " + "; ".join(problems))
        else:
            passed += 1
            print(f"ok   {spec_file.name}")
    print(f"{passed} passed, {failed} failed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
