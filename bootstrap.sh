#!/usr/bin/env bash
# specloop set-up on a Debian 12 machine: installs what is missing (apt-get; as root, or with
# sudo), configures and builds, then either runs the demo or the whole test suite.
#   ./bootstrap.sh demo   install, build the specloop executable only, analyze and design a demo
#                         spec (the report goes to results/conveyor_speed/, which git ignores)
#   ./bootstrap.sh test   install, build everything (tests, probes, benchmarks), run every test
#                         (what CI runs)
#   ./bootstrap.sh build  install and build everything
# With SPECLOOP_CHECK_SANITIZERS=1 (CI sets it), `test` then also builds the library and the Catch2
# suite with AddressSanitizer + UndefinedBehaviorSanitizer (clang, in build-sanitize/), runs that
# suite, and runs each libFuzzer harness for SPECLOOP_FUZZ_SECONDS (default 20) through
# tests/fuzz/run.sh.
set -euo pipefail
cd "$(dirname "$0")"
mode="${1:-demo}"
build_dir="${SPECLOOP_BUILD_DIR:-build}"

packages=(g++ cmake make pkg-config libnlopt-cxx-dev libeigen3-dev libboost-dev catch2 libtomlplusplus-dev
          libcli11-dev nlohmann-json3-dev libfmt-dev libmuparser-dev libsqlite3-dev libceres-dev gnuplot-nox python3 python3-scipy python3-numpy)
# The report test drives a real browser and reads its screenshot; the sweep test runs shards
# through GNU parallel.
if [ "$mode" = test ]; then packages+=(chromium fonts-liberation python3-pil parallel); fi
check_sanitizers="${SPECLOOP_CHECK_SANITIZERS:-0}"
if [ "$mode" = test ] && [ "$check_sanitizers" = 1 ]; then packages+=(clang libclang-rt-14-dev); fi

missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if ((${#missing[@]})); then
  echo "bootstrap: installing ${missing[*]}"
  sudo_cmd=()
  if [ "$(id -u)" -ne 0 ]; then
    command -v sudo >/dev/null || { echo "bootstrap: not root and no sudo; install: ${missing[*]}" >&2; exit 1; }
    sudo_cmd=(sudo)
  fi
  "${sudo_cmd[@]}" apt-get update -q
  DEBIAN_FRONTEND=noninteractive "${sudo_cmd[@]}" apt-get install -y -q --no-install-recommends "${missing[@]}"
fi

jobs="$(nproc 2>/dev/null || echo 2)"
cmake -S . -B "$build_dir" -DCMAKE_BUILD_TYPE=Release
# The demo needs the executable alone; tests, probes and benchmarks are built for `test`/`build`.
if [ "$mode" = demo ]; then
  cmake --build "$build_dir" -j "$jobs" --target specloop
else
  cmake --build "$build_dir" -j "$jobs"
fi

case "$mode" in
  demo)
    "$build_dir/specloop" analyze specs/conveyor_speed.toml
    echo
    "$build_dir/specloop" design specs/conveyor_speed.toml
    ;;
  test)
    ctest --test-dir "$build_dir" --output-on-failure -j "$jobs"
    if [ "$check_sanitizers" = 1 ]; then
      # One instrumented build serves both, with assertions on (Eigen's index checks); -O0 and line
      # tables only: it compiles in less than half the time of -O1 -g, and a short run needs no speed.
      sanitize_dir="${SPECLOOP_SANITIZE_BUILD_DIR:-build-sanitize}"
      cmake -S . -B "$sanitize_dir" -DCMAKE_BUILD_TYPE=RelWithDebInfo -DCMAKE_CXX_FLAGS_RELWITHDEBINFO="-O0 -gline-tables-only" \
            -DCMAKE_CXX_COMPILER=clang++ -DSPECLOOP_SANITIZE=ON -DSPECLOOP_FUZZ=ON -DSPECLOOP_BUILD_BENCH=OFF
      cmake --build "$sanitize_dir" -j "$jobs" --target specloop_tests fuzz_harnesses
      # Both are single-threaded: the fuzzers run beside the suite, one core each.
      echo "bootstrap: the Catch2 suite under ASan + UBSan, beside a short run of every fuzzer"
      tests/fuzz/run.sh "${SPECLOOP_FUZZ_SECONDS:-20}" "$sanitize_dir" --no-build &
      fuzz_pid=$!
      suite_status=0
      ASAN_OPTIONS=detect_leaks=1 UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 \
        "$sanitize_dir/tests/specloop_tests" || suite_status=$?
      fuzz_status=0
      wait "$fuzz_pid" || fuzz_status=$?
      if [ "$suite_status" -ne 0 ] || [ "$fuzz_status" -ne 0 ]; then
        echo "bootstrap: sanitizer checks failed (Catch2 suite exit $suite_status, fuzzers exit $fuzz_status)" >&2
        exit 1
      fi
    fi
    ;;
  build) ;;
  *) echo "bootstrap: unknown mode '$mode' (demo, test, build)" >&2; exit 2 ;;
esac
