#!/usr/bin/env python3
"""Behaviour-unchanged check for a refactoring: runs two specloop binaries on the same inputs and
compares what they write, field by field, apart from the fields that are allowed to differ (the tool
version and wall-clock figures).

Inputs: every spec in specs/, tests/claims/ and tests/unusual_plants/ (`design`, result.json), the
committed example sweep (re-run with the axes of tests/tools/refresh_examples.py; every point's
stored design summaries and checks — a format-2 store's mapped into format 3's dialect, see
summary_v2_to_v3), and `sweep-report`'s points.csv and front.csv of both stores.

The search's wall-time cap (`search.max_time`, 20 s by default) binds on a loaded machine and then
ends two runs of the same binary at different evaluation counts; so each spec is run from a copy with
`search.max_time = 86400` (both binaries read the same copy). --keep-time-limit runs the files as
they are.

Usage: tests/tools/compare_outputs.py --before OLD/specloop --after build/specloop [--jobs 2]
Exit 0 when everything matches; 1 with the differences listed.
"""
import argparse
import concurrent.futures
import csv
import json
import pathlib
import sqlite3
import subprocess
import sys
import tempfile

ROOT = pathlib.Path(__file__).resolve().parents[2]
# Fields that may differ between two runs of the same binary (wall clock) or two versions.
# Any key ending in one of these suffixes (every wall time and rate), and the version fields.
VOLATILE_SUFFIXES = ("wall_time_s", "_per_s")
VOLATILE = {"version", "tool_version"}


def strip(value):
    if isinstance(value, dict):
        return {k: strip(v) for k, v in value.items() if k not in VOLATILE and not k.endswith(VOLATILE_SUFFIXES)}
    if isinstance(value, list):
        return [strip(v) for v in value]
    return value


def diff(a, b, path="", out=None, limit=20):
    out = [] if out is None else out
    if len(out) >= limit:
        return out
    if isinstance(a, dict) and isinstance(b, dict):
        for k in sorted(set(a) | set(b)):
            if k not in a or k not in b:
                out.append(f"{path}.{k}: only in {'after' if k in b else 'before'}")
            else:
                diff(a[k], b[k], f"{path}.{k}", out, limit)
    elif isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            out.append(f"{path}: {len(a)} vs {len(b)} entries")
        for i, (x, y) in enumerate(zip(a, b)):
            diff(x, y, f"{path}[{i}]", out, limit)
    elif a != b:
        out.append(f"{path}: {a!r} vs {b!r}")
    return out


def without_time_limit(spec, folder):
    """A copy of `spec` in `folder` whose search has no practical wall-time cap."""
    import re
    import tomllib
    text = spec.read_text()
    search = tomllib.loads(text).get("search", {})
    line = "max_time = 86400.0"
    if "max_time" in search:
        text = re.sub(r"(?m)^\s*max_time\s*=.*$", line, text, count=1)
    elif re.search(r"(?m)^\[search\]\s*(#.*)?$", text):
        text = re.sub(r"(?m)^\[search\]\s*(#.*)?$", lambda m: m.group(0) + "\n" + line, text, count=1)
    else:
        text += f"\n[search]\n{line}\n"
    copy = folder / spec.name
    copy.write_text(text)
    return copy


def design(exe, spec, out):
    run = subprocess.run([exe, "design", str(spec), "--out", str(out)], capture_output=True, text=True,
                         cwd=ROOT)
    result = out / "result.json"
    return run.returncode, run.stdout, (json.loads(result.read_text()) if result.exists() else None)


def compare_spec(before, after, spec, work):
    rb, ob, jb = design(before, spec, work / "before")
    ra, oa, ja = design(after, spec, work / "after")
    problems = []
    if rb != ra:
        problems.append(f"exit code {rb} vs {ra}")
    if (jb is None) != (ja is None):
        problems.append("result.json written by only one of them")
    elif jb is not None:
        problems += diff(strip(jb), strip(ja))
    return problems


# Store format 3 writes each design summary with result.json's encoder (design_summary). A format-2
# summary (an older binary's) is mapped into that dialect before the comparison, and the keys that
# format 3 added are left out of the format-3 side, so that every stored value of the old store is
# still compared with its counterpart. The added keys come from the code that writes result.json,
# which the spec comparisons above cover field by field.
ADDED_IN_FORMAT_3 = {
    "check": {"on_magnitude", "unit", "violation"},
    "controller": {"action", "numerator", "denominator", "derivative_filter", "reference_numerator",
                   "reference_denominator"},
    "second_order": {"settling_time", "damping_ratio", "natural_frequency"},
}


def checks_v2_to_v3(checks):
    """Format 2's check {requirement, limit, upper, value, met, slack} → format 3's `bound`."""
    out = []
    for c in checks:
        c = dict(c)
        c["bound"] = "max" if c.pop("upper") else "min"
        out.append(c)
    return out


def summary_v2_to_v3(d):
    """A format-2 design summary in format 3's dialect: `linear` → `simulated` and
    `nonlinear.metrics` → `nonlinear.simulated`, each null unless its loop's status is "ok" (as
    result.json writes them; format 2 kept the metrics of a failed loop); `upper` → `bound`."""
    d = dict(d)
    linear = d.pop("linear")
    d["simulated"] = linear if d["status"] == "ok" else None
    d["checks"] = checks_v2_to_v3(d["checks"])
    if d.get("nonlinear"):
        nl = dict(d["nonlinear"])
        metrics = nl.pop("metrics")
        nl["simulated"] = metrics if nl["status"] == "ok" else None
        nl["checks"] = checks_v2_to_v3(nl["checks"])
        d["nonlinear"] = nl
    return d


def without_added_keys(d):
    """A format-3 summary without the keys format 3 added (compared against a mapped format-2 one)."""
    d = dict(d)
    drop = lambda obj, kind: {k: v for k, v in obj.items() if k not in ADDED_IN_FORMAT_3[kind]}
    d["controller"] = drop(d["controller"], "controller")
    if d.get("second_order"):
        d["second_order"] = drop(d["second_order"], "second_order")
    d["checks"] = [drop(c, "check") for c in d["checks"]]
    if d.get("nonlinear"):
        d["nonlinear"] = dict(d["nonlinear"], checks=[drop(c, "check") for c in d["nonlinear"]["checks"]])
    return d


def store_rows(path):
    """The store's format and its result rows by index (wall times dropped, summaries parsed)."""
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    con.row_factory = sqlite3.Row
    store_format = con.execute("SELECT format FROM sweep_header").fetchone()[0]
    rows = {}
    for r in con.execute("SELECT * FROM sweep_results ORDER BY idx"):
        d = {k: r[k] for k in r.keys() if not k.endswith(VOLATILE_SUFFIXES)}
        for k in ("classical", "optimized"):
            if d.get(k):
                d[k] = strip(json.loads(d[k]))
        rows[d["idx"]] = d
    con.close()
    return store_format, rows


def comparable_rows(before, after):
    """Both stores' rows in one dialect: a format-2 store mapped to format 3, the format-3 side then
    without the keys format 3 added; two stores of one format as they are."""
    (format_b, rows_b), (format_a, rows_a) = before, after
    if format_b == format_a:
        return rows_b, rows_a
    if (format_b, format_a) != ("specloop-sweep-2", "specloop-sweep-3"):
        raise SystemExit(f"compare_outputs: no mapping from store format {format_b} to {format_a}")
    for row in rows_b.values():
        for k in ("classical", "optimized"):
            if row.get(k):
                row[k] = summary_v2_to_v3(row[k])
    for row in rows_a.values():
        for k in ("classical", "optimized"):
            if row.get(k):
                row[k] = without_added_keys(row[k])
    return rows_b, rows_a


def read_csv(path):
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    return [{k: v for k, v in r.items() if not k.endswith(VOLATILE_SUFFIXES)} for r in rows]


def compare_sweep(before, after, work):
    axes = ["--vary", "requirements.overshoot_max_pct=4:20:5", "--vary", "plant.zeros[0]=-1,-2,-4,-9,-20,-60"]
    problems = []
    data = {}
    for name, exe in (("before", before), ("after", after)):
        store = work / f"{name}.sqlite"
        subprocess.run([exe, "sweep", "specs/conveyor_speed.toml", *axes, "--store", str(store), "--jobs", "2"],
                       cwd=ROOT, check=True, capture_output=True)
        report = work / f"{name}-report"
        subprocess.run([exe, "sweep-report", str(store), "--out", str(report)], cwd=ROOT, check=True,
                       capture_output=True)
        data[name] = (store_rows(store), read_csv(report / "points.csv"), read_csv(report / "front.csv"))
    data["before"] = list(data["before"])
    data["after"] = list(data["after"])
    data["before"][0], data["after"][0] = comparable_rows(data["before"][0], data["after"][0])
    for part, a, b in zip(("store", "points.csv", "front.csv"), data["before"], data["after"]):
        problems += [f"{part}{p}" for p in diff(a, b, limit=10)]
    return problems


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--before", required=True)
    ap.add_argument("--after", default=str(ROOT / "build" / "specloop"))
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--no-sweep", action="store_true")
    ap.add_argument("--keep-time-limit", action="store_true", help="run the spec files as they are")
    args = ap.parse_args()
    before = str(pathlib.Path(args.before).resolve())
    after = str(pathlib.Path(args.after).resolve())
    specs = sorted((ROOT / "specs").glob("*.toml")) + sorted((ROOT / "tests" / "claims").glob("*.toml")) + \
        sorted((ROOT / "tests" / "unusual_plants").glob("*.toml"))
    failures = 0
    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)

        def one(i_spec):
            i, spec = i_spec
            work = tmp / f"s{i}"
            work.mkdir()
            run = spec if args.keep_time_limit else without_time_limit(spec, work)
            return spec, compare_spec(before, after, run, work)

        with concurrent.futures.ThreadPoolExecutor(args.jobs) as pool:
            for spec, problems in pool.map(one, enumerate(specs)):
                name = spec.relative_to(ROOT)
                print(f"{'same' if not problems else 'DIFFERS'}  {name}")
                for p in problems:
                    print(f"    {p}")
                failures += bool(problems)
        if not args.no_sweep:
            (tmp / "sweep").mkdir()
            problems = compare_sweep(before, after, tmp / "sweep")
            print(f"{'same' if not problems else 'DIFFERS'}  example sweep (store, points.csv, front.csv)")
            for p in problems:
                print(f"    {p}")
            failures += bool(problems)
    print(f"{len(specs) + (0 if args.no_sweep else 1) - failures} same, {failures} differ")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
