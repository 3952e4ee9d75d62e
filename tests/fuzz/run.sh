#!/usr/bin/env bash
# Builds the libFuzzer harnesses (clang, -fsanitize=fuzzer,address,undefined, in their own build
# folder) and runs each for SECONDS on its seed corpus. Exits non-zero when any harness reports a
# crash, a sanitizer finding (memory error, leak, undefined behaviour), an uncaught exception, a
# broken invariant, an input slower than the hang limit or an out-of-memory; prints the inputs run
# per harness either way.
#   tests/fuzz/run.sh SECONDS [BUILD_DIR] [--no-build]
#     BUILD_DIR   default: build-fuzz (configured here on first use: clang++, SPECLOOP_SANITIZE,
#                 SPECLOOP_FUZZ, no tests or benchmarks unless the folder is already configured)
#     --no-build  run what BUILD_DIR holds (ctest -L fuzz uses this)
#   SPECLOOP_FUZZ_HARNESSES="spec vary"   run only these (default: all five)
#   SPECLOOP_FUZZ_TIMEOUT=10              seconds one input may take before it counts as a hang
#   SPECLOOP_FUZZ_OPTIONS="-jobs=2 ..."   more libFuzzer options for every harness
# What the fuzzers find that is new coverage goes to BUILD_DIR/fuzz-corpus/<harness> (kept between
# runs, so a long campaign resumes); a failing input to BUILD_DIR/fuzz-artifacts/; logs to
# BUILD_DIR/fuzz-logs/. The seed corpus tests/fuzz/corpus/<harness> (for the spec harness also
# specs/ and tests/bad_specs/) is only read.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
source_dir="$(cd "$here/../.." && pwd)"

usage() { echo "usage: tests/fuzz/run.sh SECONDS [BUILD_DIR] [--no-build]" >&2; exit 2; }
[ $# -ge 1 ] || usage
seconds="$1"; shift
[[ "$seconds" =~ ^[0-9]+$ ]] && [ "$seconds" -ge 1 ] || usage
build_dir="$source_dir/build-fuzz"
build=1
for arg in "$@"; do
  case "$arg" in
    --no-build) build=0 ;;
    -*) usage ;;
    *) build_dir="$(mkdir -p "$arg" && cd "$arg" && pwd)" ;;
  esac
done
harnesses=(${SPECLOOP_FUZZ_HARNESSES:-spec expression vary store store_sql csv})
hang_limit="${SPECLOOP_FUZZ_TIMEOUT:-10}"

if [ "$build" = 1 ]; then
  if [ ! -f "$build_dir/CMakeCache.txt" ]; then
    # -O1 with assertions on (no NDEBUG): Eigen's index checks stay active; line tables are enough
    # for the sanitizers' stack traces and compile faster than full debug information.
    launcher=()
    command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)
    cmake -S "$source_dir" -B "$build_dir" -DCMAKE_BUILD_TYPE=RelWithDebInfo -DCMAKE_CXX_FLAGS_RELWITHDEBINFO="-O1 -gline-tables-only" \
          -DCMAKE_CXX_COMPILER=clang++ "${launcher[@]}" -DSPECLOOP_SANITIZE=ON -DSPECLOOP_FUZZ=ON \
          -DSPECLOOP_BUILD_TESTS=OFF -DSPECLOOP_BUILD_BENCH=OFF >/dev/null
  else
    cmake "$build_dir" -DSPECLOOP_SANITIZE=ON -DSPECLOOP_FUZZ=ON >/dev/null
  fi
  targets=()
  for h in "${harnesses[@]}"; do targets+=(--target "fuzz_$h"); done
  cmake --build "$build_dir" -j "$(nproc 2>/dev/null || echo 2)" "${targets[@]}"
fi

mkdir -p "$build_dir/fuzz-logs" "$build_dir/fuzz-artifacts"
# Leaks are reported by libFuzzer's LeakSanitizer pass; UB stops the process (-fno-sanitize-recover).
export ASAN_OPTIONS="${ASAN_OPTIONS:-detect_leaks=1:abort_on_error=1:symbolize=1}"
export UBSAN_OPTIONS="${UBSAN_OPTIONS:-print_stacktrace=1:halt_on_error=1}"

failed=()
summary=()
for h in "${harnesses[@]}"; do
  binary="$build_dir/tests/fuzz/fuzz_$h"
  [ -x "$binary" ] || { echo "fuzz: $binary is missing (build it, or drop --no-build)" >&2; exit 2; }
  work="$build_dir/fuzz-corpus/$h"
  scratch="$build_dir/fuzz-tmp/$h"
  log="$build_dir/fuzz-logs/$h.log"
  mkdir -p "$work" "$scratch"
  # -entropic=0: libFuzzer 14's entropic scheduler spent 40 % of fuzz_expression's time in
  # UpdateFeatureFrequency (perf); without it the same corpus ran 1894 inputs/s instead of 666.
  options=(-max_total_time="$seconds" -timeout="$hang_limit" -rss_limit_mb=2048 -malloc_limit_mb=1024
           -entropic=0 -print_final_stats=1 -artifact_prefix="$build_dir/fuzz-artifacts/$h-"
           ${SPECLOOP_FUZZ_OPTIONS:-})
  [ -f "$here/dict/$h.dict" ] && options+=(-dict="$here/dict/$h.dict")
  seeds=("$here/corpus/$h")
  # The spec reader's seeds also include every demo spec and every bad spec of the test suite.
  [ "$h" = spec ] && seeds+=("$source_dir/specs" "$source_dir/tests/bad_specs")
  # The CSV reader's also include the bad-data corpus of `fit`.
  [ "$h" = csv ] && seeds+=("$source_dir/tests/bad_data")
  echo "fuzz: $h for ${seconds} s ..."
  status=0
  TMPDIR="$scratch" "$binary" "${options[@]}" "$work" "${seeds[@]}" >"$log" 2>&1 || status=$?
  rm -rf "$scratch"
  runs="$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -n 1)"
  corpus_size="$(find "$work" -type f | wc -l)"
  if [ "$status" -ne 0 ]; then
    failed+=("$h")
    summary+=("$(printf '%-10s %12s inputs  FAILED (exit %d; log %s)' "$h" "${runs:-?}" "$status" "$log")")
    echo "---- fuzz_$h failed (exit $status); the end of its log:" >&2
    grep -v -E '^#[0-9]+\s+(pulse|NEW|REDUCE|INITED)' "$log" | tail -n 60 >&2
  else
    summary+=("$(printf '%-10s %12s inputs  ok (work corpus %d files)' "$h" "${runs:-?}" "$corpus_size")")
  fi
done

echo
echo "fuzz: ${seconds} s per harness, inputs run:"
printf '  %s\n' "${summary[@]}"
if ((${#failed[@]})); then
  echo "fuzz: FAILED: ${failed[*]} (reproduce: BUILD_DIR/tests/fuzz/fuzz_NAME ARTIFACT)" >&2
  exit 1
fi
echo "fuzz: no crash, leak, undefined behaviour, hang or broken invariant"
