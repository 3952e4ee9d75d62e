#!/usr/bin/env python3
"""The controller's filters (README "Filters": controller.notch, controller.measurement_filter)
against SciPy, from the tool's result.json alone.

For one continuous spec with a given notch and a second-order measurement filter, one with a
first-order filter, and one sampled spec with both, `specloop design` runs, and for the optimized
design:
  1. the frequency responses: C·F·N written in result.json against scipy.signal.freqs of the PID
     part (rebuilt from the parallel gains, C = Kp + Ki/s + Kd·s/(Tf·s + 1)) times the notch
     N = (s² + 2·depth·width·ωn·s + ωn²)/(s² + 2·width·ωn·s + ωn²) and the filter
     (1/(Tf·s + 1), 1/((Tf·s)²/2 + Tf·s + 1)) written by their documented formulas, on 2000
     log-spaced frequencies; and the notch's gain at ωn = depth (its definition);
  2. the loop's step response: the two-input loop u = N·(C·r − C·F·y) rebuilt as the transfer
     function G·C·N/(1 + G·C·F·N) and simulated by scipy.signal.step on a fine grid; its
     overshoot against result.json's (1e-4 points) and its final value;
  3. the noise gain max |C·F·N·S(jω)| against a dense SciPy sweep (1e-3 relative);
  4. the sampled controller's difference equation against scipy.signal.cont2discrete
     (method "bilinear") of C_r and C, times scipy.signal.bilinear of F at fs = 1/Ts and of the notch
     at the prewarped fs = ωn/(2·tan(ωn·Ts/2)) (Tustin prewarped at ωn: common practice), 1e-9.
Exit 0 when every check passes.
"""
import argparse
import json
import math
import pathlib
import subprocess
import sys
import tempfile

import numpy as np
from scipy import signal

PLANT = """
[plant]
poles = [0.0, -2.0, [-0.6, 30.0]]
gain = 900.0
"""

CONTINUOUS = PLANT + """
[controller]
structure = "pid"
notch = { frequency = 29.0, depth = 0.05, width = 0.4 }
measurement_filter = { order = 2, time_constant = 0.004 }
[requirements]
overshoot_max_pct = 5.0
settling_time_max = 1.5
noise_gain_max = 500.0
[search]
max_evaluations = 1500
"""

FIRST_ORDER = CONTINUOUS.replace("order = 2, time_constant = 0.004", "order = 1, time_constant = 0.003")

SAMPLED = PLANT + """
[controller]
structure = "pid"
sample_time = 0.005
notch = { frequency = 29.0, depth = 0.05, width = 0.4 }
measurement_filter = { order = 1, time_constant = 0.004 }
[requirements]
overshoot_max_pct = 5.0
settling_time_max = 1.5
[search]
max_evaluations = 600
"""

failures = []


def check(name, ok, detail):
    print(f"{'ok  ' if ok else 'FAIL'} {name}: {detail}")
    if not ok:
        failures.append(name)


def design(specloop, text, folder, name):
    path = pathlib.Path(folder) / f"{name}.toml"
    path.write_text(text)
    out = pathlib.Path(folder) / name
    run = subprocess.run([specloop, "design", str(path), "--out", str(out)], capture_output=True, text=True)
    if run.returncode not in (0, 1):
        print(run.stderr)
        raise SystemExit(f"specloop design {name}: exit {run.returncode}")
    result = json.loads((out / "result.json").read_text())
    return result["designs"]["optimized"]


def pid_tf(par):
    kp, ki, kd, tf = (float(par[k]) for k in ("kp", "ki", "kd", "filter_time"))
    # Kp + Ki/s + Kd·s/(Tf·s + 1) over s·(Tf·s + 1)
    num = np.polyadd(np.polyadd(kp * np.polymul([1.0, 0.0], [tf, 1.0]), ki * np.array([tf, 1.0])), kd * np.array([1.0, 0.0, 0.0]))
    return num, np.polymul([1.0, 0.0], [tf, 1.0])


def filters_tf(c):
    n = c["notch"]
    w, depth, width = float(n["frequency"]), float(n["depth"]), float(n["width"])
    nn, nd = [1.0, 2.0 * depth * width * w, w * w], [1.0, 2.0 * width * w, w * w]
    f = c["measurement_filter"]
    T = float(f["time_constant"])
    fd = [T * T / 2.0, T, 1.0] if int(f["order"]) == 2 else [T, 1.0]
    return (nn, nd), ([1.0], fd)


def check_continuous(name, d):
    c = d["controller"]
    cn, cd = pid_tf(c["parallel"])
    (nn, nd), (fn, fd) = filters_tf(c)
    w = np.logspace(-2, 4, 2000)
    _, h_ref = signal.freqs(np.polymul(np.polymul(cn, nn), fn), np.polymul(np.polymul(cd, nd), fd), w)
    _, h_tool = signal.freqs(c["numerator"], c["denominator"], w)
    err = float(np.max(np.abs(h_tool - h_ref) / np.abs(h_ref)))
    check(f"{name}/C·F·N frequency response", err < 1e-9, f"max relative difference {err:.2e} over 2000 frequencies")
    wn = float(c["notch"]["frequency"])
    _, hn = signal.freqs(nn, nd, [wn])
    check(f"{name}/notch depth", abs(abs(hn[0]) - float(c["notch"]["depth"])) < 1e-12,
          f"|N(jωn)| = {abs(hn[0]):.12g}, depth {c['notch']['depth']}")

    # The loop: y/r = G·C·N/(1 + G·C·F·N) (C_r = C: b = c = 1); G = 900/(s(s+2)(s² + 1.2s + 900.36)).
    gn = [900.0]
    gd = np.polymul(np.polymul([1.0, 0.0], [1.0, 2.0]), [1.0, 1.2, 0.36 + 900.0])
    # Over the common denominator: num = Gn·Cn·Nn·Fd, den = Gd·Cd·Nd·Fd + Gn·Cn·Nn·Fn.
    num = np.polymul(np.polymul(np.polymul(gn, cn), nn), fd)
    den = np.polyadd(np.polymul(np.polymul(np.polymul(gd, cd), nd), fd), np.polymul(np.polymul(np.polymul(gn, cn), nn), fn))
    poles = np.roots(den)
    check(f"{name}/stable", bool(np.all(poles.real < 0)), f"rightmost pole {max(poles.real):.4g}")
    horizon = 12.0 / min(-poles.real)
    t = np.linspace(0.0, min(horizon, 60.0), 400001)
    _, y = signal.step(signal.lti(num, den), T=t)
    y_inf = float(np.polyval(num, 0.0) / np.polyval(den, 0.0))
    overshoot = max(0.0, (float(np.max(y)) / y_inf - 1.0) * 100.0)
    tool = float(d["simulated"]["overshoot_pct"])
    check(f"{name}/overshoot", abs(overshoot - tool) < 1e-4, f"SciPy {overshoot:.6f} %, specloop {tool:.6f} %")
    check(f"{name}/final value", abs(y_inf - 1.0) < 1e-12, f"y∞ = {y_inf:.15g} (integral action)")

    # Noise gain max |C·F·N·S|, S = 1/(1 + G·C·F·N): dense sweep.
    wd = np.logspace(-3, 5, 400001)
    _, ctot = signal.freqs(np.polymul(np.polymul(cn, nn), fn), np.polymul(np.polymul(cd, nd), fd), wd)
    _, g = signal.freqs(gn, gd, wd)
    noise = float(np.max(np.abs(ctot / (1.0 + ctot * g))))
    tool_noise = float(d["margins"]["noise_gain"])
    check(f"{name}/noise gain", abs(noise - tool_noise) <= 1e-3 * tool_noise,
          f"SciPy sweep {noise:.6g}, specloop {tool_noise:.6g}")


def check_sampled(name, d, ts):
    c = d["controller"]
    de = d["nonlinear"]["difference_equation"]
    cn, cd = pid_tf(c["parallel"])
    (nn, nd), (fn, fd) = filters_tf(c)
    # C (= C_r: b = c = 1) by Tustin; scipy's bilinear transform in z⁻¹ (lowest power first).
    bc, ac, _ = signal.cont2discrete((cn, cd), ts, method="bilinear")
    bc = np.atleast_1d(np.squeeze(bc))
    bf, af = signal.bilinear(fn, fd, fs=1.0 / ts)
    wn = float(c["notch"]["frequency"])
    fs_warp = wn / (2.0 * math.tan(wn * ts / 2.0))
    bn, an = signal.bilinear(nn, nd, fs=fs_warp)
    meas = np.polymul(np.polymul(bc, bf), bn)
    ref = np.polymul(np.polymul(bc, af), bn)
    den = np.polymul(np.polymul(ac, af), an)
    scale = den[0]
    for label, ours, theirs in (("measurement", de["measurement_numerator"], meas / scale),
                                ("reference", de["reference_numerator"], ref / scale),
                                ("denominator", de["denominator"], den / scale)):
        ours = np.array(ours, dtype=float)
        n = max(len(ours), len(theirs))
        a = np.pad(ours, (0, n - len(ours)))
        b = np.pad(theirs, (0, n - len(theirs)))
        err = float(np.max(np.abs(a - b)) / np.max(np.abs(b)))
        check(f"{name}/difference equation {label}", err < 1e-9, f"max difference {err:.2e} of the largest coefficient")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--probe")  # passed to every Python check by CMake; not used here
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        check_continuous("notch+F2", design(args.specloop, CONTINUOUS, folder, "continuous"))
        check_continuous("notch+F1", design(args.specloop, FIRST_ORDER, folder, "first_order"))
        check_sampled("sampled notch+F1", design(args.specloop, SAMPLED, folder, "sampled"), 0.005)
    print(f"{len(failures)} failed" if failures else "all filter checks passed")
    return 1 if failures else 0


if __name__ == "__main__":
    sys.exit(main())
