#!/usr/bin/env bash
# Benchmark report: `specloop fit` against scipy.optimize.least_squares on the same 10,000-sample
# recorded test and the same models, in one run (bench/fit_bench.py says what is timed).
#
# Usage: bench/run_bench_fit.sh [BUILD_DIR] [REPEATS]
#   BUILD_DIR  the CMake build directory (default: build/); uses BUILD_DIR/bench/bench_fit when built
#   REPEATS    timed runs of each (default 5); medians are reported.
# Targets (printed as PASS/MISS; this is a report, so it always exits 0): first-order-delay ≤ 0.5 s
# median, all five kinds ≤ 3 s; the ratios to SciPy beside them.
set -u
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
build="${1:-$root/build}"
repeats="${2:-5}"
python="${SPECLOOP_PYTHON:-/usr/bin/python3}"
[[ -x "$build/specloop" ]] || { echo "ERROR: $build/specloop not found; build it first"; echo "targets: not measured"; exit 0; }
"$python" "$root/bench/fit_bench.py" --build "$build" --repeats "$repeats" || echo "fit_bench.py failed (exit $?)"
exit 0
