#!/usr/bin/env python3
"""`specloop sweep-report` checked from outside: every number it shows is recomputed here from the
store alone, read with Python's own sqlite3 and json modules.

Invoked by CTest as
    /usr/bin/python3 tests/check_sweep_report.py --specloop BIN --source-dir ROOT [--chromium PATH]

A three-axis sweep of the conveyor demo spec (overshoot limit × the plant zero × effort_max, 18
points, a small search budget) is run once; then:

  points.csv   one row per grid point; the varied values, status, verdict, binding requirement and
               every metric and gain equal the store's JSON (CSV keeps 10 significant digits:
               relative 1e-9); the approximation errors are (simulated − predicted)/predicted·100
               of the classical design's stored second-order prediction (the definition in README).
  front        the non-dominated set, by a brute-force pairwise check over the met points (the
               definition: q dominates p when q ≤ p in every metric and q < p in one), equals
               front.csv, for the default two metrics on the nonlinear loop and three metrics on
               the linear loop. Peak time reads as the requirements do (README): the peak when the
               overshoot exceeds the settling band, else the first band entry.
  maps         the map cells are the grid points of the slice (row-major numbering, first axis
               slowest, recomputed here; the third axis held where --at says); the outline of the
               cells beyond the threshold equals the boundary edges recomputed here, for two
               thresholds.
  gains        the gains figure's data equal the stored optimized controllers of the slice.
  pages        report.html and report.md hold every section, the safety caution, every figure
               inline (HTML) or linked (Markdown); the front table's data-values equal front.csv.
  browser      headless Chromium (host resolution off, network log on) renders the page: the
               screenshot is not blank and the page makes no request (the detector of the design
               report's check, tests/check_report.py).
  errors       missing, truncated, non-SQLite and foreign files, a store with no finished point,
               unknown axes and metrics, a --at value off the grid: exit 2, a message naming the
               problem, and no output folder written; a part-finished store shows its missing
               points as not run; a second report replaces the first whole.
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import csv
import json
import math
import pathlib
import shutil
import sqlite3
import subprocess
import sys
import tempfile

import numpy as np
from PIL import Image

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from reference_common import Tally  # noqa: E402
from check_report import chromium_run  # noqa: E402

OVERSHOOT = [4.0, 12.0, 20.0]
ZERO = [-2.0, -4.0, -9.0]
EFFORT = [16.0, 24.0]
VARY = ["--vary", "requirements.overshoot_max_pct=4:20:3", "--vary", "plant.zeros[0]=-2,-4,-9",
        "--vary", "requirements.effort_max=16,24"]
KEYS = ["requirements.overshoot_max_pct", "plant.zeros[0]", "requirements.effort_max"]
SECTIONS = ["grid", "feasibility", "front", "approximation", "gains", "files", "spec", "safety"]
FIGURES = ["feasibility", "binding", "front", "approx_overshoot", "approx_peak_time", "gains"]
METRICS = ["overshoot_pct", "peak_time", "settling_time", "rise_time", "band_entry_time", "steady_state_error",
           "effort_peak", "iae", "ise", "itae"]


def close(a, b, rel=1e-9):
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= rel * max(abs(a), abs(b), 1e-300) or abs(a - b) <= 1e-300


def number(text):
    return None if text == "" else float(text)


def read_csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def store_rows(store):
    with sqlite3.connect(f"file:{store}?mode=ro", uri=True) as db:
        points = {r[0]: r[1:] for r in db.execute("SELECT * FROM sweep_points ORDER BY idx")}
        results = {}
        for r in db.execute("SELECT idx, status, met, judged_on, binding, optimized_confirmed, classical, optimized "
                            "FROM sweep_results"):
            results[r[0]] = {"status": r[1], "met": r[2], "judged_on": r[3], "binding": r[4], "confirmed": r[5],
                             "classical": json.loads(r[6]) if r[6] else None,
                             "optimized": json.loads(r[7]) if r[7] else None}
        band = db.execute("SELECT spec_text FROM sweep_header").fetchone()[0]
    band_pct = 2.0
    for line in band.splitlines():
        if line.strip().startswith("settling_band_pct"):
            band_pct = float(line.split("=")[1])
    return points, results, band_pct


SUMMARY_KEYS = ("status", "meets_all", "controller", "checks", "second_order", "simulated", "nonlinear")
SUMMARY_NONLINEAR_KEYS = ("status", "simulated", "checks", "meets_all", "confirmed")


def as_stored(design):
    """A result.json design object restricted to the keys the store keeps (README, "The store")."""
    out = {k: design[k] for k in SUMMARY_KEYS}
    if out["nonlinear"] is not None:
        out["nonlinear"] = {k: design["nonlinear"][k] for k in SUMMARY_NONLINEAR_KEYS}
    return out


def verdict_of(r):
    """The report's verdict categories (README, sweep-report), from the stored row."""
    if r is None:
        return 4, "not run yet"
    if r["status"] != "ok":
        return 3, "failed"
    if r["met"]:
        if r["judged_on"] == "nonlinear" or r["confirmed"] == 1:
            return 0, "met, confirmed"
        return 1, "met on the linear loop, not confirmed"
    return 2, "missed"


def front_metric(r, metric, nonlinear, band_pct):
    d = r["optimized"]
    if d is None:
        return None
    if nonlinear:
        if not d["nonlinear"] or d["nonlinear"]["status"] != "ok":
            return None
        m = d["nonlinear"]["simulated"]
    else:
        m = d["simulated"]
    if metric == "peak_time":  # README, "Metric definitions": the visible peak, else the final band entry
        visible = (m["peak_time"] is not None and m["overshoot_pct"] > band_pct
                   and m.get("post_peak_dip_pct", 0.0) <= m["overshoot_pct"])
        return m["peak_time"] if visible else m["settling_time"]
    return m[metric]


def brute_front(points):
    """Indices (into `points`) of the non-dominated rows, by the pairwise definition."""
    keep = []
    for i, p in enumerate(points):
        dominated = any(all(q[k] <= p[k] for k in range(len(p))) and any(q[k] < p[k] for k in range(len(p)))
                        for j, q in enumerate(points) if j != i)
        if not dominated:
            keep.append(i)
    return keep


def boundary(flagged, nx, ny):
    """Unit edges between flagged cells and unflagged or outside ones, as rounded 4-tuples."""
    def on(i, j):
        return 0 <= i < nx and 0 <= j < ny and flagged[(i, j)]
    edges = set()
    for (i, j), f in flagged.items():
        if not f:
            continue
        if not on(i - 1, j):
            edges.add((i - 0.5, j - 0.5, i - 0.5, j + 0.5))
        if not on(i + 1, j):
            edges.add((i + 0.5, j - 0.5, i + 0.5, j + 0.5))
        if not on(i, j - 1):
            edges.add((i - 0.5, j - 0.5, i + 0.5, j - 0.5))
        if not on(i, j + 1):
            edges.add((i - 0.5, j + 0.5, i + 0.5, j + 0.5))
    return edges


def grid_index(digits, sizes):
    idx = 0
    for d, n in zip(digits, sizes):
        idx = idx * n + d
    return idx


def errors_of(r):
    """(overshoot error %, peak-time error %, peak predicted but none simulated) of the classical design."""
    c = r["classical"] if r else None
    if c is None or c["second_order"] is None:
        return None, None, False
    so, lin = c["second_order"], c["simulated"]

    def rel(pred, sim):
        return None if pred is None or sim is None or pred == 0 else (sim - pred) / pred * 100.0
    return (rel(so["overshoot_pct"], lin["overshoot_pct"]), rel(so["peak_time"], lin["peak_time"]),
            so["peak_time"] is not None and lin["peak_time"] is None)


def check_points_csv(t, out, points, results):
    rows = read_csv(out / "points.csv")
    t.check("points.csv", "one row per grid point", len(rows) == len(points), f"{len(rows)} rows")
    bad = []
    for row in rows:
        idx = int(row["idx"])
        r = results.get(idx)
        if [float(row[k]) for k in KEYS] != list(points[idx]):
            bad.append((idx, "values"))
        if row["verdict"] != verdict_of(r)[1]:
            bad.append((idx, "verdict"))
        if r is None:
            continue
        if row["status"] != r["status"] or row["binding"] != (r["binding"] or ""):
            bad.append((idx, "status/binding"))
        eo, et, _ = errors_of(r)
        if not (close(number(row["overshoot_error_pct"]), eo) and close(number(row["peak_time_error_pct"]), et)):
            bad.append((idx, "approximation errors", row["overshoot_error_pct"], eo))
        for prefix, design, path in (("classical_", r["classical"], ("simulated",)),
                                     ("optimized_", r["optimized"], ("simulated",)),
                                     ("optimized_nonlinear_", r["optimized"], ("nonlinear", "simulated"))):
            for m in METRICS:
                want = None
                if design is not None:
                    node = design
                    for p in path:
                        node = node[p] if node else None
                    want = node[m] if node else None
                if not close(number(row[prefix + m]), want):
                    bad.append((idx, prefix + m, row[prefix + m], want))
        if r["optimized"] is not None:
            par = r["optimized"]["controller"]["parallel"]
            for g in ("kp", "ki", "kd", "filter_time"):
                if par and not close(number(row[f"optimized_parallel_{g}"]), par[g]):
                    bad.append((idx, g))
    t.check("points.csv", "values, verdicts, bindings, approximation errors, metrics and gains equal the store",
            not bad, str(bad[:4]))
    return rows


def check_front(t, out, results, metrics, nonlinear, band_pct, label):
    cand = []
    for idx, r in sorted(results.items()):
        if r["status"] != "ok" or not r["met"]:
            continue
        vals = [front_metric(r, m, nonlinear, band_pct) for m in metrics]
        if all(v is not None for v in vals):
            cand.append((idx, vals))
    want = {cand[k][0] for k in brute_front([v for _, v in cand])}
    rows = read_csv(out / "front.csv")
    got = {int(r["idx"]) for r in rows}
    t.check(label, f"front.csv = the brute-force non-dominated set ({len(want)} of {len(cand)} feasible)",
            got == want and len(rows) == len(want), f"{sorted(got)} vs {sorted(want)}")
    values = dict(cand)
    t.check(label, "front.csv metric values equal the store's",
            all(close(float(r[m]), values[int(r["idx"])][k]) for r in rows for k, m in enumerate(metrics)
                if int(r["idx"]) in values))
    t.check(label, "the front is not trivial (at least two feasible designs)", len(cand) >= 2, str(len(cand)))
    return rows


def check_maps(t, out, results, at_digit, threshold, label):
    sizes = [len(OVERSHOOT), len(ZERO), len(EFFORT)]
    cells = read_csv(out / "series" / "map.csv")
    want_idx = {(i, j): grid_index((i, j, at_digit), sizes) for i in range(sizes[0]) for j in range(sizes[1])}
    got_idx = {(int(c["ix"]), int(c["iy"])): int(c["idx"]) for c in cells}
    t.check(label, "map cells are the slice's grid points (row-major, first axis slowest)", got_idx == want_idx,
            f"{sorted(got_idx.items())[:4]}")
    t.check(label, "map verdict codes equal the store's",
            all(int(c["verdict"]) == verdict_of(results.get(int(c["idx"])))[0] for c in cells))
    for which in ("overshoot", "peak_time"):
        flagged = {}
        for (i, j), idx in want_idx.items():
            eo, et, missing = errors_of(results.get(idx))
            e = eo if which == "overshoot" else et
            flagged[(i, j)] = (e is not None and abs(e) > threshold) or (which == "peak_time" and missing)
        want = boundary(flagged, sizes[0], sizes[1])
        got = {tuple(float(x) for x in (r["x0"], r["y0"], r["x1"], r["y1"]))
               for r in read_csv(out / "series" / f"approx_{which}_outline.csv")}
        t.check(label, f"{which}: the outline of the cells beyond {threshold:g} % equals the recomputed boundary "
                f"({sum(flagged.values())} cell(s), {len(want)} edge(s))", got == want,
                f"{len(got)} vs {len(want)} edges")
    gains = [r for r in read_csv(out / "series" / "gains.csv")]
    ok = True
    for g in gains:
        i = OVERSHOOT.index(float(g["x"]))
        j = int(g["iy"])
        r = results[grid_index((i, j, at_digit), sizes)]
        par = r["optimized"]["controller"]["parallel"]
        ok = ok and all(close(float(g[k]), par[k]) for k in ("kp", "ki", "kd") if k in g)
    t.check(label, f"gains figure data equal the stored controllers ({len(gains)} rows)", ok and len(gains) > 0)


def check_pages(t, out, front_rows, metrics, label):
    page = (out / "report.html").read_text()
    md = (out / "report.md").read_text()
    t.check(label, "every section present", all(f'<section id="{s}">' in page for s in SECTIONS),
            str([s for s in SECTIONS if f'<section id="{s}">' not in page]))
    t.check(label, "every figure inline", all(f'<figure id="fig-{f}">\n<svg' in page for f in FIGURES),
            str([f for f in FIGURES if f'<figure id="fig-{f}">\n<svg' not in page]))
    t.check(label, "markdown links every figure", all(f"plots/{f}.svg" in md for f in FIGURES))
    t.check(label, "safety caution on both pages", "not a verified machine" in page and "not a verified machine" in md)
    t.check(label, "no external reference in the page", "http://" not in page.replace("http://www.w3.org", "")
            and "https://" not in page)
    # The front table: each row's metric cells carry front.csv's values (17 significant digits).
    table = page[page.index('<table id="front-points">'):]
    table = table[:table.index("</table>")]
    body_rows = table.split("<tr>")[2:]
    ok = len(body_rows) == len(front_rows)
    for tr, fr in zip(body_rows, front_rows):
        values = [c.split('"')[1] for c in tr.split("data-value=")[1:]]
        cols = len(KEYS)
        ok = ok and all(close(float(values[cols + k]), float(fr[m]), 1e-9) for k, m in enumerate(metrics))
    t.check(label, "front table rows carry front.csv's values", ok)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--chromium", default=shutil.which("chromium") or "/usr/bin/chromium")
    args, _ = ap.parse_known_args()
    exe = str(pathlib.Path(args.specloop).resolve())
    t = Tally()
    work = pathlib.Path(tempfile.mkdtemp(prefix="specloop_sweep_report_"))
    try:
        spec = work / "conveyor.toml"
        spec.write_text(pathlib.Path(args.source_dir, "specs", "conveyor_speed.toml").read_text()
                        + "\n[search]\nmax_evaluations = 2000\n")
        store = work / "s.sqlite"
        r = subprocess.run([exe, "sweep", str(spec), *VARY, "--store", str(store), "--jobs", "2"],
                           capture_output=True, text=True, timeout=600)
        if not t.check("setup", "the sweep exits 0", r.returncode == 0, r.stderr.strip()):
            print(f"{t.passed} passed, {t.failed} failed")
            return 1
        points, results, band_pct = store_rows(store)

        def report(*extra, out=None):
            cmd = [exe, "sweep-report", str(store), *extra]
            if out is not None:
                cmd += ["--out", str(out)]
            return subprocess.run(cmd, capture_output=True, text=True, timeout=300, cwd=work)

        # Default: maps over the first two axes, the third at its first value; front on the nonlinear loop.
        r = report()
        out = work / "s-report"
        t.check("default", "exits 0 and writes beside the store (s-report)", r.returncode == 0 and out.is_dir(),
                r.stderr.strip())
        t.check("default", "the terminal names the page", str(pathlib.Path("s-report", "report.html")) in r.stdout, r.stdout)
        t.check("default", "no staging folder left", not list(work.glob(".s-report.partial-*")))
        check_points_csv(t, out, points, results)
        front = check_front(t, out, results, ["peak_time", "effort_peak"], True, band_pct, "front 2-D nonlinear")
        check_maps(t, out, results, 0, 10.0, "maps at effort_max=16")
        check_pages(t, out, front, ["peak_time", "effort_peak"], "pages")

        # Three metrics on the linear loop, another slice and threshold.
        out3 = work / "three"
        r = report("--front", "peak_time,effort_peak,overshoot_pct", "--front-loop", "linear",
                   "--at", "requirements.effort_max=24", "--threshold", "60", out=out3)
        t.check("three", "exits 0", r.returncode == 0, r.stderr.strip())
        if r.returncode == 0:
            check_front(t, out3, results, ["peak_time", "effort_peak", "overshoot_pct"], False, band_pct,
                        "front 3-D linear")
            check_maps(t, out3, results, 1, 60.0, "maps at effort_max=24, threshold 60")

        # A second report into the same folder replaces the first whole.
        (out / "series" / "stale.csv").write_text("old\n")
        r = report()
        t.check("replace", "a rerun replaces the folders whole", r.returncode == 0 and not (out / "series" / "stale.csv").exists())

        # Browser.
        if pathlib.Path(args.chromium).exists():
            shot = work / "shot.png"
            _, urls = chromium_run(args.chromium, out / "report.html", work, screenshot=shot)
            pixels = np.asarray(Image.open(shot).convert("RGB")).reshape(-1, 3)
            non_white = float(np.mean(np.any(pixels < 245, axis=1)))
            colours = len(np.unique(pixels[::7], axis=0))
            t.check("browser", "screenshot not blank", non_white > 0.02 and colours >= 16,
                    f"{non_white:.1%} non-white, {colours} colours")
            t.check("browser", "no request made by the page", not urls, str(urls))
        else:
            t.check("browser", "chromium found (Debian package chromium)", False, args.chromium)

        # --point-reports: a full design report per point designed in this run, for that point's spec.
        small = work / "small.sqlite"
        reports = work / "points"
        r = subprocess.run([exe, "sweep", str(spec), "--vary", "requirements.overshoot_max_pct=6,14", "--store", str(small),
                            "--jobs", "2", "--point-reports", str(reports)], capture_output=True, text=True, timeout=300)
        ok = r.returncode == 0 and sorted(p.name for p in reports.iterdir()) == ["point-0", "point-1"]
        if ok:
            _, small_results, _ = store_rows(small)
            for i, limit in enumerate((6.0, 14.0)):
                res = json.loads((reports / f"point-{i}" / "result.json").read_text())
                page = (reports / f"point-{i}" / "report.md").read_text()
                ok = ok and res["spec"]["requirements"]["overshoot_max_pct"] == limit
                ok = ok and f"overshoot_max_pct = {limit}" in page and f"sweep point {i}" in page
                # One dialect (README, "The store"): each stored summary is result.json's design
                # object restricted to the summary's keys, value for value.
                for name in ("classical", "optimized"):
                    ok = ok and small_results[i][name] == as_stored(res["designs"][name])
        t.check("point reports", "one design report per point, for that point's spec; each stored design summary "
                "equals its result.json design object restricted to the summary's keys", ok, r.stderr.strip()[-300:])

        # A part-finished store: the missing points show as not run.
        part = work / "part.sqlite"
        shutil.copy(store, part)
        with sqlite3.connect(part) as db:
            db.execute("DELETE FROM sweep_results WHERE idx IN (0, 4)")
        r = subprocess.run([exe, "sweep-report", str(part), "--out", str(work / "part")], capture_output=True, text=True,
                           timeout=300)
        ok = r.returncode == 0
        if ok:
            cells = {int(c["idx"]): int(c["verdict"]) for c in read_csv(work / "part" / "series" / "map.csv")}
            rows = {int(x["idx"]): x for x in read_csv(work / "part" / "points.csv")}
            ok = cells.get(0) == 4 and cells.get(4) == 4 and rows[4]["finished"] == "0" and rows[4]["verdict"] == "not run yet"
            ok = ok and "not run yet" in (work / "part" / "report.html").read_text()
        t.check("partial", "missing points are shown as not run", ok, r.stderr.strip())

        # Bad stores and options: exit 2, a clear message, nothing written.
        truncated = work / "truncated.sqlite"
        data = store.read_bytes()
        truncated.write_bytes(data[: len(data) // 2])
        text_file = work / "notes.sqlite"
        text_file.write_text("not a database\n" * 100)
        foreign = work / "foreign.sqlite"
        with sqlite3.connect(foreign) as db:
            db.execute("CREATE TABLE inventory(part TEXT, count INTEGER)")
        empty = work / "empty.sqlite"
        shutil.copy(store, empty)
        with sqlite3.connect(empty) as db:
            db.execute("DELETE FROM sweep_results")
        garbled = work / "garbled.sqlite"
        shutil.copy(store, garbled)
        with sqlite3.connect(garbled) as db:
            db.execute("UPDATE sweep_results SET optimized = '{oops' WHERE idx = (SELECT min(idx) FROM sweep_results "
                       "WHERE optimized IS NOT NULL)")
        misshapen = work / "misshapen.sqlite"
        shutil.copy(store, misshapen)
        with sqlite3.connect(misshapen) as db:
            db.execute("""UPDATE sweep_results SET optimized = '{"nonlinear": {"status": 7}, "simulated": {}}' """
                       "WHERE idx = (SELECT min(idx) FROM sweep_results WHERE met = 1)")
        # Damage the fuzzer (tests/fuzz/fuzz_store_sql.cpp) reached: a damaged axis was reported as if
        # the user had typed a bad --vary; a point stored twice or off its grid value, or an infinite
        # wall time, read as if sound (the last ended the report in an internal error); an axis
        # claiming a million values made a grid size that wrapped around.
        def damaged(name, *statements):
            path = work / f"{name}.sqlite"
            shutil.copy(store, path)
            db = sqlite3.connect(path)
            for statement in statements:
                db.execute(statement)
            db.commit()
            db.close()
            return path
        bad_axis = damaged("bad-axis", "UPDATE sweep_axes SET definition = 'banana' WHERE axis = 1")
        twice = damaged("twice", "CREATE TABLE copy AS SELECT * FROM sweep_points", "DROP TABLE sweep_points",
                        "ALTER TABLE copy RENAME TO sweep_points", "DELETE FROM sweep_points WHERE idx = 1",
                        "INSERT INTO sweep_points SELECT * FROM sweep_points WHERE idx = 0")
        off_grid = damaged("off-grid", "UPDATE sweep_points SET v1 = v1 + 1 WHERE idx = 0")
        endless = damaged("endless-time", "UPDATE sweep_results SET point_wall_time_s = -2e308 "
                                          "WHERE idx = (SELECT min(idx) FROM sweep_results)")
        huge = damaged("huge-grid", "UPDATE sweep_axes SET definition = '1:2:1000000'")
        # Format 2 wrote the design summaries in a dialect of their own; it is refused, not read.
        older = damaged("format-2", "UPDATE sweep_header SET format = 'specloop-sweep-2'")
        cases = [
            ("damaged axis", [str(bad_axis)], "axis 1 of the store ('requirements.overshoot_max_pct=banana') is damaged"),
            ("point stored twice", [str(twice)], "point 0 is stored twice (damaged)"),
            ("point off the grid", [str(off_grid)], "point 0's values differ from the grid's (damaged)"),
            ("infinite wall time", [str(endless)], "are not finite times >= 0 (damaged)"),
            ("grid too large", [str(huge)], "has more than 10000000 points"),
            ("store of format 2", [str(older)], "store format 'specloop-sweep-2', this specloop reads 'specloop-sweep-3'"),
            ("design summary not JSON", [str(garbled)], "not valid JSON"),
            ("design summary of another form", [str(misshapen)], "does not have the expected form"),
            ("missing file", [str(work / "nowhere.sqlite")], "no such file"),
            ("truncated", [str(truncated)], "not a usable specloop sweep store"),
            ("not SQLite", [str(text_file)], "not a usable specloop sweep store"),
            ("foreign SQLite", [str(foreign)], "not a specloop sweep store"),
            ("no finished point", [str(empty)], "no point is finished"),
            ("one front metric", [str(store), "--front", "peak_time"], "two or three metrics"),
            ("unknown metric", [str(store), "--front", "peak_time,speediness"], "speediness"),
            ("unknown map axis", [str(store), "--map", "plant.delay,plant.gain"], "not an axis of this sweep"),
            ("--at off the grid", [str(store), "--at", "requirements.effort_max=20"], "not a value of that axis"),
            ("--at on the map", [str(store), "--at", "plant.zeros[0]=-4"], "on the map"),
            ("bad loop", [str(store), "--front-loop", "both"], "linear or nonlinear"),
        ]
        for name, argv, words in cases:
            dest = work / ("bad-" + name.replace(" ", "-"))
            r = subprocess.run([exe, "sweep-report", *argv, "--out", str(dest)], capture_output=True, text=True, timeout=120)
            t.check("errors", f"{name}: exit 2, says '{words}', writes nothing",
                    r.returncode == 2 and words in r.stderr and "--vary" not in r.stderr and not dest.exists()
                    and not list(work.glob(f".{dest.name}.partial-*")),
                    f"rc {r.returncode}: {r.stderr.strip()[:200]}")
        t.check("errors", "the truncated store is left untouched", truncated.read_bytes() == data[: len(data) // 2])
        t.check("store", "reading the store leaves no -wal/-shm files beside it",
                not list(work.glob("s.sqlite-*")), str(list(work.glob("s.sqlite-*"))))

        # The committed example (README) is a store of the current format, and its report holds the
        # files a fresh report of that store writes, so neither can rot.
        example_store = pathlib.Path(args.source_dir, "results", "examples", "conveyor_speed.sweep.sqlite")
        example = pathlib.Path(args.source_dir, "results", "examples", "conveyor_speed.sweep-report")
        copy = work / "example.sqlite"
        shutil.copy(example_store, copy)
        r = subprocess.run([exe, "sweep-report", str(copy), "--out", str(work / "example")], capture_output=True,
                           text=True, timeout=300)
        if t.check("example", "the committed store reads (current format)", r.returncode == 0, r.stderr.strip()):
            def listing(root):
                return sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_file())
            t.check("example", "results/examples/conveyor_speed.sweep-report holds the files a fresh report writes",
                    listing(example) == listing(work / "example"), f"{listing(example)} vs {listing(work / 'example')}")
            t.check("example", "its points.csv equals a fresh one",
                    (example / "points.csv").read_text() == (work / "example" / "points.csv").read_text())
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print(f"{t.passed} passed, {t.failed} failed")
    return 1 if t.failed else 0


if __name__ == "__main__":
    sys.exit(main())
