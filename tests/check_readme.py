#!/usr/bin/env python3
"""The README's printed examples and its spec-key table against what the tool prints, so that
neither can rot.

Invoked by CTest as
    /usr/bin/python3 tests/check_readme.py --specloop BIN --source-dir ROOT

  design     the README block that starts "$ build/specloop design specs/conveyor_speed.toml"
             equals, line by line, what that command prints (run in a scratch folder holding a
             copy of specs/conveyor_speed.toml, so the "Report:" paths are the same), the search's
             wall time ("in 0.142 s") excepted. This is the command `./bootstrap.sh demo` runs.
  analyze    the README block of `analyze` appears in order in what the command prints; a line
             "  ..." in the README stands for lines left out.
  keys       the README's spec-key table (under "## Spec file reference") equals
             `specloop keys --markdown`, and `specloop keys` prints every key of that table;
             `specloop --help`, `design --help` and `analyze --help` point to `specloop keys`; an
             unknown section exits 2 with a did-you-mean.
  demo       bootstrap.sh's demo builds only the `specloop` target and runs exactly the two
             commands whose output the README shows; the committed examples are not where a run
             writes by default (results/ is ignored by git, but for results/examples/).
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import pathlib
import re
import shutil
import subprocess
import sys
import tempfile

from reference_common import Tally

WALL_TIME = re.compile(r"in \d+(\.\d+)? s;")


def readme_block(readme, command):
    """The lines of the ```text block whose first line is `$ <command>` (without that line)."""
    lines = readme.splitlines()
    for i, line in enumerate(lines):
        if line == f"$ {command}" and i > 0 and lines[i - 1].startswith("```"):
            end = next(j for j in range(i + 1, len(lines)) if lines[j].startswith("```"))
            return lines[i + 1:end]
    return None


def readme_key_table(readme):
    lines = readme.splitlines()
    start = lines.index("## Spec file reference")
    head = next(i for i in range(start, len(lines)) if lines[i].startswith("| key | unit |"))
    end = next(i for i in range(head, len(lines)) if not lines[i].startswith("|"))
    return lines[head:end]


def in_order(expected, actual):
    """Whether the `expected` lines appear in `actual` in order, "  ..." standing for any lines
    left out (otherwise consecutive). Returns (ok, first line not found)."""
    pos = 0
    gap = False
    for line in expected:
        if line.strip() == "...":
            gap = True
            continue
        if gap:
            while pos < len(actual) and actual[pos] != line:
                pos += 1
        if pos >= len(actual) or actual[pos] != line:
            return False, line
        pos += 1
        gap = False
    return True, ""


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    args, _ = ap.parse_known_args()
    tally = Tally()
    root = pathlib.Path(args.source_dir)
    readme = (root / "README.md").read_text()
    exe = str(pathlib.Path(args.specloop).resolve())

    with tempfile.TemporaryDirectory() as work:
        work = pathlib.Path(work)
        (work / "specs").mkdir()
        shutil.copy(root / "specs" / "conveyor_speed.toml", work / "specs")
        for command in ("design", "analyze"):
            block = readme_block(readme, f"build/specloop {command} specs/conveyor_speed.toml")
            if not tally.check(command, "the README has the example block", block is not None):
                continue
            run = subprocess.run([exe, command, "specs/conveyor_speed.toml"], cwd=work, capture_output=True, text=True,
                                 timeout=300)
            tally.check(command, "the command runs (exit 0)", run.returncode == 0, run.stderr.strip()[:300])
            printed = run.stdout.splitlines()
            if command == "design":
                want = [WALL_TIME.sub("in <t> s;", line) for line in block]
                got = [WALL_TIME.sub("in <t> s;", line) for line in printed]
                diff = [f"README: {a!r}\n   now: {b!r}" for a, b in zip(want, got) if a != b]
                tally.check(command, "the README example equals what the command prints (wall time aside)",
                            want == got, "; ".join(diff[:3]) or f"{len(want)} vs {len(got)} lines")
            else:
                ok, missing = in_order(block, printed)
                tally.check(command, "the README example's lines appear in what the command prints, in order", ok,
                            f"not found: {missing!r}")

    # The spec-key table.
    run = subprocess.run([exe, "keys", "--markdown"], capture_output=True, text=True, timeout=60)
    table = run.stdout.splitlines()
    readme_table = readme_key_table(readme)
    diff = [f"README: {a!r}\n   keys: {b!r}" for a, b in zip(readme_table, table) if a != b]
    tally.check("keys", "the README's spec-key table equals `specloop keys --markdown` (regenerate it from there)",
                run.returncode == 0 and table == readme_table, "; ".join(diff[:2]) or f"{len(readme_table)} vs {len(table)} lines")
    keys = [re.match(r"\| `([^`]+)` \|", line).group(1) for line in table[2:]]
    tally.check("keys", "the table lists 40 keys or more, each once", len(keys) >= 40 and len(set(keys)) == len(keys), str(len(keys)))
    plain = subprocess.run([exe, "keys"], capture_output=True, text=True, timeout=60)
    listed = [line for line in plain.stdout.splitlines() if line and not line.startswith(" ")]
    tally.check("keys", "`specloop keys` prints every key of the table, in order", plain.returncode == 0 and listed[1:] == keys,
                f"{listed[1:4]} ... vs {keys[:3]} ...")
    section = subprocess.run([exe, "keys", "units"], capture_output=True, text=True, timeout=60)
    tally.check("keys", "`specloop keys units` prints the [units] keys only",
                [line for line in section.stdout.splitlines() if line and not line.startswith(" ")][1:] ==
                ["units.output", "units.input", "units.time"], section.stderr.strip())
    wrong = subprocess.run([exe, "keys", "controler"], capture_output=True, text=True, timeout=60)
    tally.check("keys", "an unknown section exits 2 with a did-you-mean",
                wrong.returncode == 2 and "did you mean 'controller'" in wrong.stderr and not wrong.stdout, wrong.stderr.strip())
    for command in ([], ["design"], ["analyze"]):
        h = subprocess.run([exe, *command, "--help"], capture_output=True, text=True, timeout=60)
        tally.check("keys", f"`specloop {' '.join(command + ['--help'])}` points to `specloop keys`",
                    h.returncode == 0 and "specloop keys" in h.stdout, h.stderr.strip())

    # First contact: what the demo builds and runs, and where outputs go.
    bootstrap = (root / "bootstrap.sh").read_text()
    demo = bootstrap[bootstrap.index("  demo)"):]
    demo = demo[:demo.index(";;")]
    tally.check("demo", "bootstrap.sh demo builds only the specloop target",
                re.search(r'if \[ "\$mode" = demo \]; then\s+cmake --build "\$build_dir" -j "\$jobs" --target specloop\s', bootstrap)
                is not None)
    tally.check("demo", "bootstrap.sh demo runs the two commands the README shows",
                '"$build_dir/specloop" analyze specs/conveyor_speed.toml' in demo
                and '"$build_dir/specloop" design specs/conveyor_speed.toml' in demo)
    ignore = (root / ".gitignore").read_text().splitlines()
    tally.check("demo", "results/ (the default output folder) is ignored by git, but for results/examples/",
                "/results/*" in ignore and "!/results/examples/" in ignore)
    tally.check("demo", "the committed examples live in results/examples/",
                (root / "results" / "examples" / "conveyor_speed" / "report.md").exists())
    listed = subprocess.run(["git", "-C", str(root), "check-ignore", "-q", "results/conveyor_speed/report.md"])
    tally.check("demo", "git ignores the demo's own output (results/conveyor_speed/)", listed.returncode == 0)
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
