#!/usr/bin/env bash
# Benchmark (not a test): a 20 × 20 sweep of a demo spec on 1 and 2 jobs (points per second and
# the speed-up, target >= 1.8x), the store's size per point, peak memory against the number of
# points. Usage: bench/run_bench_sweep.sh [BUILD_DIR] [SIZE]   (defaults: build, 20). Exits 0.
here="$(cd "$(dirname "$0")" && pwd)"
root="$(dirname "$here")"
build="${1:-build}"
case "$build" in /*) ;; *) build="$root/$build" ;; esac
size="${2:-20}"
if [ ! -x "$build/specloop" ]; then echo "no $build/specloop: build it first"; exit 0; fi
/usr/bin/python3 "$here/sweep_bench.py" --specloop "$build/specloop" --spec "$root/specs/conveyor_speed.toml" \
  --size "$size" || echo "sweep benchmark failed"
exit 0
