#!/usr/bin/env bash
# Benchmark (not a test): the nonlinear confirmation of one demo design, specloop (Boost.Odeint
# dopri5, hybrid modes) against SciPy's solve_ivp (RK45, events) on the same loop, measured in
# the same run. Target: confirmation of one demo design <= 5 ms median (PASS/MISS per spec).
# Usage: bench/run_bench_confirm.sh [BUILD_DIR]   (default: build). Always exits 0.
here="$(cd "$(dirname "$0")" && pwd)"
root="$(dirname "$here")"
build="${1:-build}"
case "$build" in /*) ;; *) build="$root/$build" ;; esac
bench="$build/bench/specloop_bench_confirm"
py=/usr/bin/python3  # Debian's python3-scipy
target_ms=5
if [ ! -x "$bench" ]; then
  echo "no $bench: build it with cmake --build $build --target specloop_bench_confirm"; exit 0
fi
tmp="$(mktemp -d)"; trap 'rm -rf "$tmp"' EXIT
echo "confirmation of one demo design: specloop vs SciPy solve_ivp (rtol 1e-8, atol 1e-10), one run, $(date -u +%FT%TZ)"
for spec in conveyor_speed oven_heater valve_positioner pump_pressure; do
  f="$root/specs/$spec.toml"; [ -f "$f" ] || continue
  line="$(cd "$root" && "$bench" "$f" --repeats 200 --dump "$tmp/$spec.json" 2>&1)" || { echo "$spec: bench failed: $line"; continue; }
  echo "$line"
  sline="$("$py" "$here/scipy_confirm.py" "$tmp/$spec.json" --repeats 5 2>&1 | tail -1)"
  echo "$sline"
  ours="$(sed -n 's/.* median_ms \([0-9.]*\).*/\1/p' <<<"$line")"
  theirs="$(sed -n 's/.* median_ms \([0-9.]*\).*/\1/p' <<<"$sline")"
  dy="$(sed -n 's/.*max_abs_dy_over_r \([^ ]*\).*/\1/p' <<<"$sline")"
  [ -n "$ours" ] || continue
  verdict="$(awk -v a="$ours" -v t="$target_ms" 'BEGIN{print (a <= t) ? "PASS" : "MISS"}')"
  ratio="$(awk -v a="$ours" -v b="$theirs" 'BEGIN{if (b > 0 && a > 0) printf "%.1f", b / a; else print "n/a"}')"
  agree="$(awk -v d="$dy" 'BEGIN{if (d == "" || d == "nan") print "n/a"; else print (d + 0 <= 1e-6) ? "agree" : "DISAGREE"}')"
  printf '%-18s specloop median %s ms, scipy median %s ms, scipy/specloop %sx, max|dy|/|r| %s (%s); target <= %s ms: %s\n' \
    "$spec" "$ours" "${theirs:-n/a}" "$ratio" "${dy:-n/a}" "$agree" "$target_ms" "$verdict"
done
echo "stepper choice: dopri5 against the implicit Rosenbrock method on 1/((s + 1)(s/p + 1)) under a saturated PI loop"
(cd "$root" && "$bench" --stepper-sweep --repeats 10)
exit 0
