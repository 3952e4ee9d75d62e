#!/usr/bin/env python3
"""`specloop sweep` and `specloop merge` end to end, with real processes and real SQLite files:

(a) a sweep killed with SIGKILL at random moments (seeded), resumed each time, ends equal to an
    uninterrupted run (no point lost, none duplicated, the same numbers); SIGINT stops cleanly;
(b) the results do not depend on --jobs;
(c) four shards run through GNU parallel and merged equal a single-process run;
(d) stores of another grid or spec text are refused, and so are mismatched or disagreeing merges;
(e) truncated, foreign and non-SQLite store files give clear errors, exit 2, and stay untouched;
(f) bad --vary requests exit 2 naming the request and write nothing.

The store is read with Python's own sqlite3 module; the grid and the spec hash (64-bit FNV-1a,
parameters from the FNV reference by Fowler, Noll and Vo) are recomputed here independently.
"""
import argparse
import os
import pathlib
import random
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from reference_common import Tally  # noqa: E402

# Every column of sweep_results except the two wall times (which measure the machine, not the design).
COMPARED = ("idx, status, error, met, judged_on, binding, evaluations, classical_confirmed, "
            "optimized_confirmed, classical, optimized")
OVERSHOOT = [4.0, 4.0 + 16.0 / 3.0, 4.0 + 32.0 / 3.0, 20.0]   # 4:20:4, step (20 − 4)/3
EFFORT = [12.0, 18.0, 24.0]
VARY = ["--vary", "requirements.overshoot_max_pct=4:20:4", "--vary", "requirements.effort_max=12,18,24"]
POINTS = len(OVERSHOOT) * len(EFFORT)


def fnv1a64(data: bytes) -> str:
    h = 0xcbf29ce484222325
    for b in data:
        h ^= b
        h = (h * 0x100000001b3) % (1 << 64)
    return f"{h:016x}"


def tightest_ok(row):
    """Recomputes a met row's binding requirement from its stored checks on the loop the row was
    judged on (judged_on: the linear checks, or the nonlinear loop's): the least normalized room
    (limit − value)/|limit| for an upper bound, the reverse for a lower one, a zero limit met
    exactly (|value| ≤ 1e-9) not counted."""
    import json
    summary = json.loads(row[10])
    checks = summary["nonlinear"]["checks"] if row[4] == "nonlinear" else summary["checks"]
    best, name = None, None
    for c in checks:
        if not c["met"] or c["value"] is None or (c["limit"] == 0 and abs(c["value"]) <= 1e-9):
            continue
        scale = abs(c["limit"]) if c["limit"] != 0 else 0.01
        room = (c["limit"] - c["value"]) / scale if c["bound"] == "max" else (c["value"] - c["limit"]) / scale
        if best is None or room < best:
            best, name = room, c["requirement"]
    return row[4] in ("linear", "nonlinear") and row[5] == name


def rows(store):
    with sqlite3.connect(f"file:{store}?mode=ro", uri=True) as db:
        return db.execute(f"SELECT {COMPARED} FROM sweep_results ORDER BY idx").fetchall()


def stored(store):
    """Finished points in a store that a sweep may be writing (0 before it exists)."""
    for _ in range(50):
        if not store.exists():
            return 0
        try:
            return len(rows(store))
        except sqlite3.OperationalError:  # busy for a moment: try again
            time.sleep(0.02)
    raise RuntimeError(f"{store}: could not be read for a second")


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    args = ap.parse_args()
    exe = str(pathlib.Path(args.specloop).resolve())
    t = Tally()
    rng = random.Random(20240607)
    work = pathlib.Path(tempfile.mkdtemp(prefix="specloop_sweep_"))
    try:
        # A demo spec with a small search budget, so that each point takes well under a second.
        spec = work / "conveyor.toml"
        spec.write_text(pathlib.Path(args.source_dir, "specs", "conveyor_speed.toml").read_text()
                        + "\n[search]\nmax_evaluations = 2000\n")

        def sweep(*extra, store=None, cwd=work):
            cmd = [exe, "sweep", str(spec), *VARY, *extra]
            if store is not None:
                cmd += ["--store", str(store)]
            return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, timeout=120)

        # --- the uninterrupted reference run, and (b) --jobs ---------------------------------
        one = work / "one.sqlite"
        start = time.monotonic()
        r = sweep("--jobs", "1", store=one)
        t1 = time.monotonic() - start
        t.check("jobs", "a 4×3 sweep with --jobs 1 exits 0", r.returncode == 0, r.stderr.strip())
        reference = rows(one)
        t.check("store", f"{POINTS} result rows, indices 0..{POINTS - 1} once each",
                [row[0] for row in reference] == list(range(POINTS)), str([row[0] for row in reference]))
        t.check("store", "every point designed without an error", all(row[1] == "ok" for row in reference))
        with sqlite3.connect(one) as db:
            header = db.execute("SELECT format, tool_version, spec_text, spec_hash, grid, shard, point_count "
                                "FROM sweep_header").fetchall()
            points = db.execute("SELECT idx, v1, v2 FROM sweep_points ORDER BY idx").fetchall()
            mode = db.execute("PRAGMA journal_mode").fetchone()[0]
        t.check("store", "one header row, format specloop-sweep-3, 12 points, shard 1/1",
                len(header) == 1 and header[0][0] == "specloop-sweep-3" and header[0][6] == POINTS
                and header[0][5] == "1/1", str(header[0][:2] + header[0][4:]) if header else "none")
        t.check("store", "the spec hash is the FNV-1a 64 of the stored spec text",
                header[0][3] == fnv1a64(header[0][2].encode()), header[0][3])
        t.check("store", "the [search] override is in the stored spec text", "max_evaluations = 2000" in header[0][2])
        expected = [(i * len(EFFORT) + j, o, e) for i, o in enumerate(OVERSHOOT) for j, e in enumerate(EFFORT)]
        t.check("grid", "points numbered with the first --vary slowest, values as computed here",
                len(points) == POINTS and all(p[0] == q[0] and abs(p[1] - q[1]) <= 1e-12 * q[1] and p[2] == q[2]
                                              for p, q in zip(points, expected)), str(points[:4]))
        t.check("store", "WAL journal mode", mode == "wal", mode)
        t.check("store", "every missed row names the requirement missed by the most",
                all(row[5] is not None for row in reference if row[3] == 0))
        t.check("store", "a met row's binding requirement has the least room among its linear checks "
                "(a zero limit met exactly not counted)", all(tightest_ok(row) for row in reference if row[3] == 1),
                str([row[5] for row in reference if row[3] == 1]))

        two = work / "two.sqlite"
        start = time.monotonic()
        r = sweep("--jobs", "2", store=two)
        t2 = time.monotonic() - start
        t.check("jobs", "--jobs 2 exits 0", r.returncode == 0, r.stderr.strip())
        t.check("jobs", "--jobs 2 gives the same rows as --jobs 1", rows(two) == reference)
        print(f"info: {POINTS} points in {t1:.2f} s with 1 job, {t2:.2f} s with 2 jobs (whole process)")
        start = time.monotonic()
        r = sweep("--jobs", "2", store=two)
        startup = time.monotonic() - start  # start-up, validation, the store opened; no design
        t.check("resume", "a rerun of a finished sweep runs nothing and exits 0",
                r.returncode == 0 and f"{POINTS} already in" in r.stdout and rows(two) == reference,
                r.stdout.strip()[-200:])

        # An expression plant (muparser) varied in one of its parameters: each worker parses its
        # own spec, so no parser is shared; the rows must not depend on --jobs either.
        grey = pathlib.Path(args.source_dir, "specs", "greywater_buffer.toml")
        grey_vary = ["--vary", "plant.nonlinear.parameters.orifice=0.005:0.007:3",
                     "--vary", "requirements.overshoot_max_pct=5,15"]
        for jobs in ("1", "2"):
            r = subprocess.run([exe, "sweep", str(grey), *grey_vary, "--jobs", jobs, "--store",
                                str(work / f"grey{jobs}.sqlite")], capture_output=True, text=True, timeout=120)
            t.check("jobs", f"expression plant, --jobs {jobs}: exit 0, 6 points without error",
                    r.returncode == 0 and [row[1] for row in rows(work / f"grey{jobs}.sqlite")] == ["ok"] * 6,
                    r.stderr.strip())
        t.check("jobs", "expression plant: --jobs 2 gives the same rows as --jobs 1",
                rows(work / "grey1.sqlite") == rows(work / "grey2.sqlite"))

        # --- (a) SIGKILL at random moments, resume -------------------------------------------
        # Each run is killed at a random moment after a random number (1–3) of further points
        # were stored: during a design, a commit, or between them (the store is polled through a
        # second SQLite connection, as WAL allows while the sweep writes).
        per_point = max(t1 - startup, 0.05) / POINTS
        killed = work / "killed.sqlite"
        kills, counts = 0, []

        for _ in range(40):
            target = stored(killed) + 1
            proc = subprocess.Popen([exe, "sweep", str(spec), *VARY, "--jobs", "2", "--store", str(killed)],
                                    cwd=work, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
            while proc.poll() is None and stored(killed) < target:
                time.sleep(0.01)
            time.sleep(rng.uniform(0.0, 0.5) * per_point)
            if proc.poll() is None:
                proc.send_signal(signal.SIGKILL)
                proc.wait()
                kills += 1
                counts.append(stored(killed))
                if kills >= 4:
                    break
            else:
                proc.wait()
                if kills >= 3:
                    break
                # The grid finished before enough kills landed (a fast machine): start over on a
                # fresh store, so the kills the check needs happen part-way.
                for f in work.glob("killed.sqlite*"):
                    f.unlink()
                kills, counts = 0, []
        t.check("kill", "the sweep was killed with SIGKILL at least 3 times", kills >= 3, f"{kills} kills")
        t.check("kill", "finished points never decrease across kills", counts == sorted(counts), str(counts))
        t.check("kill", "at least two kills landed part-way (some points stored, not all)",
                sum(0 < c < POINTS for c in counts) >= 2, str(counts))
        r = sweep("--jobs", "2", store=killed)
        t.check("kill", "the resumed sweep completes (exit 0)", r.returncode == 0, r.stderr.strip())
        t.check("kill", "after the kills and the resume the store equals the uninterrupted run's",
                rows(killed) == reference, f"{len(rows(killed))} rows")

        # SIGINT: stop after the points in flight, exit 130, resume completes it.
        stopped = work / "stopped.sqlite"
        proc = subprocess.Popen([exe, "sweep", str(spec), *VARY, "--jobs", "1", "--store", str(stopped)],
                                cwd=work, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        while proc.poll() is None and stored(stopped) < 2:  # the handler is installed by then
            time.sleep(0.01)
        time.sleep(rng.uniform(0.0, 1.5) * per_point)
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=60)
        if proc.returncode == 130:
            n = len(rows(stopped))
            t.check("sigint", "Ctrl-C: exit 130, says how to continue, points stored so far are whole",
                    "run the same command again" in out and n < POINTS and rows(stopped) == reference[:n]
                    or n == POINTS, f"{n} rows")
        else:
            t.check("sigint", "Ctrl-C arrived after the end: exit 0", proc.returncode == 0, err.strip())
        # A second sweep on a store in use is refused, and the first is not disturbed.
        busy = work / "busy.sqlite"
        proc = subprocess.Popen([exe, "sweep", str(spec), *VARY, "--jobs", "1", "--store", str(busy)],
                                cwd=work, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        while proc.poll() is None and stored(busy) < 1:
            time.sleep(0.01)
        r = sweep("--jobs", "1", store=busy)
        finished_first = proc.poll() is not None
        proc.wait(timeout=120)
        t.check("busy", "a second sweep on a store in use: exit 2, 'in use by another sweep'",
                finished_first or (r.returncode == 2 and "in use by another sweep" in r.stderr), r.stderr.strip())
        t.check("busy", "the first sweep completes undisturbed", proc.returncode == 0 and rows(busy) == reference)

        r = sweep("--jobs", "1", store=stopped)
        t.check("sigint", "resumed after Ctrl-C, the store equals the uninterrupted run's",
                r.returncode == 0 and rows(stopped) == reference, r.stderr.strip())

        # --- (c) four shards through GNU parallel, merged --------------------------------------
        parallel = shutil.which("parallel")
        t.check("shards", "GNU parallel is installed", parallel is not None)
        if parallel:
            cmd = [parallel, "--will-cite", "--halt", "now,fail=1", "-j", "4", exe, "sweep", str(spec), *VARY,
                   "--jobs", "1", "--shard", "{}/4", ":::", "1", "2", "3", "4"]
            r = subprocess.run(cmd, cwd=work, capture_output=True, text=True, timeout=300)
            t.check("shards", "four shards under GNU parallel exit 0", r.returncode == 0, r.stderr.strip()[-300:])
            shards = [work / "results" / f"conveyor.sweep.shard-{k}-of-4.sqlite" for k in range(1, 5)]
            t.check("shards", "each shard wrote its default store", all(s.exists() for s in shards),
                    str(sorted(p.name for p in (work / "results").glob("*"))) if (work / "results").exists() else "")
            if all(s.exists() for s in shards):
                t.check("shards", "shard K holds exactly the points with index % 4 == K − 1",
                        all([row[0] for row in rows(s)] == list(range(k, POINTS, 4)) for k, s in enumerate(shards)))
                merged = work / "merged.sqlite"
                r = subprocess.run([exe, "merge", str(merged), *map(str, shards)], capture_output=True, text=True)
                t.check("merge", "merging the four shards exits 0", r.returncode == 0, r.stderr.strip())
                t.check("merge", "the merged store equals the single-process run", rows(merged) == reference)
                t.check("merge", "no temporary file is left beside the output",
                        not list(work.glob("merged.sqlite.tmp-*")))
                r = sweep("--jobs", "1", store=merged)
                t.check("merge", "the merged store is a whole-grid store: the unsharded command finds it done",
                        r.returncode == 0 and f"{POINTS} already in" in r.stdout, r.stdout.strip() + r.stderr.strip())
                # An overlap that agrees is fine; one that disagrees is refused.
                r = subprocess.run([exe, "merge", str(work / "m2.sqlite"), str(one), str(shards[0])],
                                   capture_output=True, text=True)
                t.check("merge", "an agreeing overlap merges", r.returncode == 0 and rows(work / "m2.sqlite") == reference,
                        r.stderr.strip())
                bent = work / "bent.sqlite"
                shutil.copy(shards[1], bent)
                with sqlite3.connect(bent) as db:
                    db.execute("UPDATE sweep_results SET evaluations = evaluations + 1 WHERE idx = 5")
                r = subprocess.run([exe, "merge", str(work / "m3.sqlite"), str(one), str(bent)],
                                   capture_output=True, text=True)
                t.check("merge", "a disagreeing overlap is refused (exit 2, names the point and both files)",
                        r.returncode == 2 and "point 5" in r.stderr and str(bent) in r.stderr and str(one) in r.stderr
                        and not (work / "m3.sqlite").exists(), r.stderr.strip())

        # --- (d) refusals: another grid, another spec, mismatched merge --------------------------
        before = one.read_bytes()
        r = subprocess.run([exe, "sweep", str(spec), "--vary", "requirements.overshoot_max_pct=4:20:5",
                            "--store", str(one)], capture_output=True, text=True)
        t.check("refuse", "a store of another grid: exit 2, 'different grid'",
                r.returncode == 2 and "different grid" in r.stderr and str(one) in r.stderr, r.stderr.strip())
        other = work / "other.toml"
        other.write_text(spec.read_text().replace("gain  = 160.0", "gain  = 150.0"))
        r = subprocess.run([exe, "sweep", str(other), *VARY, "--store", str(one)], capture_output=True, text=True)
        t.check("refuse", "a store of another spec text: exit 2, 'different spec text'",
                r.returncode == 2 and "different spec text" in r.stderr, r.stderr.strip())
        t.check("refuse", "the refused store is unchanged", one.read_bytes() == before)
        small = work / "small.sqlite"
        subprocess.run([exe, "sweep", str(spec), "--vary", "requirements.overshoot_max_pct=10", "--store", str(small)],
                       capture_output=True, text=True)
        r = subprocess.run([exe, "merge", str(work / "m4.sqlite"), str(one), str(small)], capture_output=True, text=True)
        t.check("refuse", "merging stores of different grids: exit 2, names both files, writes nothing",
                r.returncode == 2 and str(one) in r.stderr and str(small) in r.stderr
                and not (work / "m4.sqlite").exists(), r.stderr.strip())
        r = subprocess.run([exe, "sweep", str(spec), *VARY, "--shard", "2/4", "--store", str(one)],
                           capture_output=True, text=True)
        t.check("refuse", "a store of another shard: exit 2", r.returncode == 2 and "shard" in r.stderr, r.stderr.strip())

        # [sweep] in the spec: the same grid from the file; the command line replaces it.
        tabled = work / "tabled.toml"
        tabled.write_text(spec.read_text() + '\n[sweep]\nvary = ["requirements.overshoot_max_pct=4:20:4", '
                          '"requirements.effort_max=12,18,24"]\n')
        copy = work / "copy.sqlite"
        shutil.copy(one, copy)
        r = subprocess.run([exe, "sweep", str(tabled), "--store", str(copy)], capture_output=True, text=True)
        t.check("table", "[sweep] vary in the spec gives the same spec text and grid (the store is found done)",
                r.returncode == 0 and f"{POINTS} already in" in r.stdout, r.stdout.strip() + r.stderr.strip())
        r = subprocess.run([exe, "sweep", str(tabled), "--vary", "requirements.effort_max=24", "--store",
                            str(work / "cli.sqlite")], capture_output=True, text=True)
        t.check("table", "--vary replaces the spec's [sweep] list", r.returncode == 0 and len(rows(work / "cli.sqlite")) == 1,
                r.stderr.strip())

        # --- (e) damaged, foreign and non-SQLite files ------------------------------------------
        truncated = work / "truncated.sqlite"
        truncated.write_bytes(before[: len(before) // 2])
        foreign = work / "foreign.sqlite"
        with sqlite3.connect(foreign) as db:
            db.execute("CREATE TABLE inventory(item TEXT, count INTEGER)")
            db.execute("INSERT INTO inventory VALUES ('bolts', 12)")
        text = work / "notes.txt"
        text.write_text("these are not the results you are looking for\n" * 50)
        for path, words in ((truncated, "not a usable specloop sweep store"),
                            (foreign, "not a specloop sweep store"),
                            (text, "not a database")):
            content = path.read_bytes()
            r = sweep(store=path)
            t.check("files", f"sweep into {path.name}: exit 2, '{words}', file untouched",
                    r.returncode == 2 and words in r.stderr and str(path) in r.stderr and path.read_bytes() == content,
                    r.stderr.strip())
            r = subprocess.run([exe, "merge", str(work / "m5.sqlite"), str(path)], capture_output=True, text=True)
            t.check("files", f"merge of {path.name}: exit 2, '{words}'",
                    r.returncode == 2 and words in r.stderr and not (work / "m5.sqlite").exists(), r.stderr.strip())

        # --- (f) bad --vary ----------------------------------------------------------------------
        for vary, words in (("requirements.rise_time_max=1,2", "'requirements.rise_time_max' is not in the spec file"),
                            ("controller.structure=1,2", "'controller.structure': expected a numeric spec key"),
                            ("plant.poles=1,2", "'plant.poles': expected a numeric spec key"),
                            ("plant.gain=1:2:0", "COUNT '0' must be an integer >= 1"),
                            ("plant.gain=0:2:3log", "log range needs FROM > 0 and TO > 0"),
                            ("plant.gain=-1:2:3log", "log range needs FROM > 0 and TO > 0"),
                            ("requirements.overshoot_max_pct=-5,10",
                             "requirements.overshoot_max_pct: expected a number in (0, 100), got -5")):
            fresh = work / "fresh.sqlite"
            r = subprocess.run([exe, "sweep", str(spec), "--vary", vary, "--store", str(fresh)],
                               capture_output=True, text=True)
            t.check("vary", f"--vary {vary}: exit 2 with '{words}', no store, nothing on stdout",
                    r.returncode == 2 and words in r.stderr and not fresh.exists() and r.stdout == "", r.stderr.strip())
        r = subprocess.run([exe, "sweep", str(spec), *VARY, "--shard", "5/4", "--store", str(work / "s.sqlite")],
                           capture_output=True, text=True)
        t.check("vary", "--shard 5/4: exit 2", r.returncode == 2 and "--shard '5/4'" in r.stderr, r.stderr.strip())
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print(f"{t.passed} passed, {t.failed} failed")
    return 0 if t.failed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
