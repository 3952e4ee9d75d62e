#!/usr/bin/env bash
# Benchmark report: `specloop design` on the demo specs beside a SciPy search of the same cost,
# timed in the same run (bench/scipy_design_search.py says exactly what each side does).
#
# Usage: bench/run_bench_design.sh [BUILD_DIR] [REPEATS] [SCIPY_CAP]
#   BUILD_DIR  the CMake build directory holding the specloop executable (default: build/ at the
#              repository root); this script builds nothing.
#   REPEATS    timed `specloop design` runs per spec (default 5); the median is reported.
#   SCIPY_CAP  SciPy evaluations per spec at most (default 1500); SciPy's evaluations per second
#              are measured on those and the time of specloop's full budget is extrapolated.
# Environment: SPECLOOP_PYTHON, an interpreter with SciPy (default /usr/bin/python3, Debian's).
#
# Per spec: specloop's median wall time (the whole `design` process) against the 0.5 s target
# (PASS/MISS), specloop's search evaluations per second (from result.json), SciPy's evaluations
# per second on the same cost (DIRECT-L then Nelder-Mead, same box, seed and budget split), and
# their ratio. Both run on one core (taskset -c 0) when taskset exists. This is a report: it
# always exits 0, and no timing here is a test.
set -u

root="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
build="${1:-$root/build}"
repeats="${2:-5}"
cap="${3:-1500}"
python="${SPECLOOP_PYTHON:-/usr/bin/python3}"
bin="$build/specloop"

if [[ ! -x "$bin" ]]; then
  echo "ERROR: $bin not found; build it first: cmake --build $build"
  echo "targets: not measured"
  exit 0
fi
if ! "$python" -c "import scipy.optimize, scipy.signal" 2>/dev/null; then
  echo "ERROR: $python cannot import SciPy (install Debian's python3-scipy or set SPECLOOP_PYTHON)"
  exit 0
fi

pin=()
pinned="not pinned to a core (taskset not found)"
if command -v taskset >/dev/null 2>&1 && taskset -c 0 true 2>/dev/null; then
  pin=(taskset -c 0)
  pinned="both pinned to core 0 (taskset -c 0)"
fi

# The robust demo (an [uncertainty] section) has its own benchmark: bench/run_bench_robust.sh.
specs=()
for f in "$root"/specs/*.toml; do grep -q '^\[uncertainty\]' "$f" || specs+=("$f"); done
echo "== specloop design vs a SciPy search of the same cost; $(nproc) cores present, $pinned"
echo "   specloop: $bin; $repeats runs per spec. SciPy: $python, at most $cap evaluations per spec."
echo
# One core, one thread for NumPy's BLAS too, so neither side borrows another core.
OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1 "${pin[@]}" "$python" -B "$root/bench/scipy_design_search.py" \
  --specloop "$bin" --repeats "$repeats" --cap "$cap" --pinned "$pinned" "${specs[@]}"
[[ $? -eq 0 ]] || echo "ERROR: the benchmark helper failed"
exit 0
