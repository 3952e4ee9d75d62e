#!/usr/bin/env python3
"""Sweep benchmark (not a test): a SIZE × SIZE sweep of a demo spec on 1 and 2 jobs — points per
second and the speed-up (target ≥ 1.8× on two free cores), the store's size per point, and the
peak memory (max RSS) of a small and the full sweep (target: flat in the number of points).
Timings are measured in this one run; compare the ratios, the machine is shared."""
import argparse
import os
import pathlib
import subprocess
import sys
import tempfile
import time


def run(cmd, cwd, store=None):
    """Runs one sweep (on a fresh store); returns (seconds, max RSS in MiB, CPU seconds) of that
    child alone (wait4)."""
    if store is not None:
        for suffix in ("", "-wal", "-shm"):
            pathlib.Path(cwd, store + suffix).unlink(missing_ok=True)
    start = time.monotonic()
    proc = subprocess.Popen(cmd, cwd=cwd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    seconds = time.monotonic() - start
    if os.waitstatus_to_exitcode(status) != 0:
        sys.exit(f"sweep failed: {' '.join(cmd)}: {proc.stderr.read().decode()}")
    return seconds, usage.ru_maxrss / 1024.0, usage.ru_utime + usage.ru_stime


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--spec", required=True)
    ap.add_argument("--size", type=int, default=20, help="points per axis (default 20: 400 points)")
    ap.add_argument("--max-evaluations", type=int, default=2000, help="search budget per point")
    ap.add_argument("--rounds", type=int, default=2, help="1-job and 2-job runs alternated this many times; the "
                    "fastest of each is compared (the least disturbed by other work on the machine)")
    args = ap.parse_args()
    exe = str(pathlib.Path(args.specloop).resolve())
    n = args.size
    with tempfile.TemporaryDirectory() as work:
        spec = pathlib.Path(work, "bench.toml")
        text = pathlib.Path(args.spec).read_text()
        if "[search]" in text:
            sys.exit("the spec already has a [search] table; give one without")
        spec.write_text(text + f"\n[search]\nmax_evaluations = {args.max_evaluations}\n")
        vary = ["--vary", f"requirements.overshoot_max_pct=2:20:{n}", "--vary", f"requirements.effort_max=8:24:{n}"]
        small = ["--vary", "requirements.overshoot_max_pct=2:20:2", "--vary", "requirements.effort_max=8:24:2"]
        t_small, rss_small, _ = run([exe, "sweep", str(spec), *small, "--jobs", "1", "--store", "s.sqlite"], work)
        size_small = pathlib.Path(work, "s.sqlite").stat().st_size
        ones, twos = [], []
        load_before = os.getloadavg()[0]
        for _ in range(max(1, args.rounds)):
            ones.append(run([exe, "sweep", str(spec), *vary, "--jobs", "1", "--store", "a.sqlite"], work, "a.sqlite"))
            twos.append(run([exe, "sweep", str(spec), *vary, "--jobs", "2", "--store", "b.sqlite"], work, "b.sqlite"))
        t1, rss1, cpu1 = min(ones)
        t2, rss2, cpu2 = min(twos)
        size = pathlib.Path(work, "a.sqlite").stat().st_size
        points = n * n
        print(f"{points} points of {pathlib.Path(args.spec).name}, max_evaluations {args.max_evaluations}, "
              f"{os.cpu_count()} cores, load average {load_before:.1f} before, {os.getloadavg()[0]:.1f} after; "
              f"fastest of {max(1, args.rounds)} alternated runs each")
        print(f"jobs 1: {points / t1:.2f} points/s ({t1:.1f} s)")
        print(f"jobs 2: {points / t2:.2f} points/s ({t2:.1f} s)")
        speedup = t1 / t2
        print(f"speed-up 2 jobs / 1 job: {speedup:.2f}x (target >= 1.8x on two free cores: "
              f"{'PASS' if speedup >= 1.8 else 'MISS'})")
        print(f"CPU time: {cpu1:.1f} s on 1 job, {cpu2:.1f} s on 2 jobs (work added by running in parallel: "
              f"{(cpu2 / cpu1 - 1) * 100:+.1f} %; the speed-up can reach {2 * cpu1 / cpu2:.2f}x when both cores are free)")
        print(f"store: {size} bytes for {points} points, {(size - size_small) / (points - 4):.0f} bytes per point "
              f"(the 4-point store: {size_small} bytes)")
        print(f"peak memory: {rss_small:.1f} MiB for 4 points, {rss1:.1f} MiB for {points} (ratio "
              f"{rss1 / rss_small:.2f}; flat means about 1), {rss2:.1f} MiB with 2 jobs")
    return 0


if __name__ == "__main__":
    sys.exit(main())
