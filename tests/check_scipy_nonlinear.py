#!/usr/bin/env python3
"""Saturated PI loops of specloop's nonlinear simulator checked against SciPy's solve_ivp.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_nonlinear.py --specloop BIN --probe PROBE \
        --nonlinear-probe NLPROBE --source-dir ROOT

For each loop below (invented plants and gains) the test-only `nonlinear_probe` runs
specloop::simulate_nonlinear and prints the sampled output y, applied control u, the fraction of
the horizon spent at a limit, and the metrics. This script rebuilds the same loop independently
from its equations and integrates it with scipy.integrate.solve_ivp (Radau, rtol 1e-10,
atol 1e-12) as a hybrid system, with solve_ivp's terminal events locating every switch:

  plant        x' = A x + B (u + d), y = C x          (A, B, C from scipy.signal.tf2ss)
  PI command   u_c = Kp (b r − y) + I,  e = r − y     (C(s) = K (s + z)/s: Kp = K, Ki = K z)
  actuator     u = clip(u_c, min, max)
  integrator   none:              I' = Ki e
               back-calculation:  I' = Ki e + (u − u_c)/Tt, Tt = Ti = Kp/Ki by default
                                  (Åström & Hägglund, Advanced PID Control, 2006, anti-windup;
                                  default recalled from memory)
               clamping:          I' = 0 while saturated and Ki e drives further into the
                                  limit; on the limit, when neither integrating nor freezing is
                                  consistent, the Filippov sliding motion holds u_c on the limit
                                  (I' = Kp y', so that u_c' = 0).

Checks per case (tolerances and why):
  output trace   max |Δy| / |r| <= 1e-4 at the probe's samples: both integrators run at
                 ~1e-8 or tighter and locate switches to ~1e-12 s, so agreement is ~1e-7; a
                 switch stepped across blindly or a wrong anti-windup law differs by 1e-3..1e-1.
  control trace  max |Δu| / max|u| <= 1e-4, for the same reason (u is y's algebraic image).
  overshoot      |Δ| <= 1e-3 percentage points, both measured as the largest sample of y/y∞ at
                 the probe's samples, y∞ = r (integral action); only integration error remains.
  saturated      |Δ fraction| <= 1e-5: time at a limit ÷ horizon from the located switch times.
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import json
import math
import subprocess
import sys

import numpy as np
from scipy import signal
from scipy.integrate import solve_ivp

from reference_common import Tally

TOL_TRACE = 1e-4
TOL_OVERSHOOT_PTS = 1e-3
TOL_SATURATED = 1e-5
RTOL, ATOL = 1e-10, 1e-12

# Invented loops: plant numerator/denominator, PI series parameters (K, z), limits, options.
CASES = [
    {"name": "PI clamping, lag plant",
     "plant": ([2.5], [1.0, 3.5, 2.5]), "pi": (3.0, 1.5), "limits": (-1.3, 1.3),
     "options": {"anti_windup": "clamping", "horizon_s": 30.0}},
    {"name": "PI back-calculation (default Tt), lag plant",
     "plant": ([2.5], [1.0, 3.5, 2.5]), "pi": (3.0, 1.5), "limits": (-1.3, 1.3),
     "options": {"anti_windup": "back-calculation", "horizon_s": 30.0}},
    {"name": "PI without anti-windup, lag plant",
     "plant": ([2.5], [1.0, 3.5, 2.5]), "pi": (3.0, 1.5), "limits": (-1.3, 1.3),
     "options": {"anti_windup": "none", "horizon_s": 30.0}},
    {"name": "PI clamping, b = 0.5, third-order plant, disturbance into the lower limit",
     "plant": ([10.0], [1.0, 8.0, 17.0, 10.0]), "pi": (2.0, 0.6), "limits": (-0.2, 1.5),
     "options": {"anti_windup": "clamping", "setpoint_weight": 0.5, "horizon_s": 40.0,
                 "disturbance_time_s": 20.0, "disturbance_size": 1.1}},
    {"name": "PI back-calculation Tt = 0.3 s, third-order plant, disturbance",
     "plant": ([10.0], [1.0, 8.0, 17.0, 10.0]), "pi": (2.0, 0.6), "limits": (-0.2, 1.5),
     "options": {"anti_windup": "back-calculation", "tracking_time_s": 0.3, "horizon_s": 40.0,
                 "disturbance_time_s": 20.0, "disturbance_size": 1.1}},
]


def reference(case, amplitude, samples):
    """Hybrid PI loop integrated with solve_ivp; returns y, u at `samples` and time at a limit."""
    num, den = case["plant"]
    A, B, C, D = signal.tf2ss(num, den)
    assert np.allclose(D, 0.0)
    B, C = B[:, 0], C[0, :]
    n = A.shape[0]
    K, z = case["pi"]
    kp, ki = K, K * z
    umin, umax = case["limits"]
    opt = case["options"]
    law = opt["anti_windup"]
    b = opt.get("setpoint_weight", 1.0)
    tt = opt.get("tracking_time_s", kp / ki)
    r = amplitude
    horizon = opt["horizon_s"]
    td, dsize = opt.get("disturbance_time_s", 0.0), opt.get("disturbance_size", 0.0)

    def command(x):
        return kp * (b * r - C @ x[:n]) + x[n]

    # Mode: (side, kind) with side in {-1, 0, +1} (below min, inside, above max) and kind
    # "int" (integrating), "frozen" (clamped) or "slide" (held on the limit).
    def applied(x, mode):
        side = mode[0]
        return umax if side > 0 else umin if side < 0 else command(x)

    def rhs(mode, d):
        def f(t, x):
            u = applied(x, mode)
            xp = x[:n]
            dxp = A @ xp + B * (u + d)
            e = r - C @ xp
            if mode[1] == "frozen":
                di = 0.0
            elif mode[1] == "slide":
                di = kp * (C @ dxp)  # u_c' = −Kp y' + I' = 0
            elif law == "back-calculation":
                di = ki * e + (u - command(x)) / tt
            else:
                di = ki * e
            return np.concatenate([dxp, [di]])
        return f

    def events(mode, d):
        side, kind = mode
        evs = []

        def ev(fun, direction):
            fun.terminal = True
            fun.direction = direction
            evs.append(fun)

        if kind == "slide":
            s = side
            ev(lambda t, x: s * kp * (C @ rhs(mode, d)(t, x)[:n]), -1)          # held I' reaches 0
            ev(lambda t, x: s * (ki * (r - C @ x[:n]) - kp * (C @ rhs(mode, d)(t, x)[:n])), -1)  # reaches full
        elif side == 0:
            ev(lambda t, x: command(x) - umax, 1)
            ev(lambda t, x: command(x) - umin, -1)
        else:
            limit = umax if side > 0 else umin
            ev(lambda t, x: side * (command(x) - limit), -1)
            if law == "clamping":
                ev(lambda t, x: r - C @ x[:n], -1 if (kind == "frozen") == (side * ki > 0) else 1)
        return evs

    def choose(x, d, fired=None):
        # After an event, the guard that fired says where the motion goes; its value is ~0 at
        # the located root, so re-deriving the mode from signs there would be ambiguous.
        if fired is not None:
            (side, kind), index = fired
            if kind == "slide":
                return x, ((side, "frozen") if index == 0 else (0, "int"))
            if side != 0 and index == 1:
                return x, (side, "int" if kind == "frozen" else "frozen")
        uc = command(x)
        for side, limit in ((1, umax), (-1, umin)):
            if abs(uc - limit) <= 1e-9 * max(1.0, abs(limit)):
                e = r - C @ x[:n]
                if law == "clamping":
                    x = x.copy()
                    x[n] += limit - uc  # exactly on the limit
                    frozen_slope = side * (-kp * (C @ rhs((side, "frozen"), d)(0.0, x)[:n]))
                    drive = side * ki * e
                    if drive > 0:
                        if frozen_slope >= 0:
                            return x, (side, "frozen")
                        if frozen_slope + drive > 0:
                            return x, (side, "slide")
                        return x, (0, "int")
                    return x, ((side, "int") if frozen_slope + drive > 0 else (0, "int"))
                slope = side * (-kp * (C @ rhs((side, "int"), d)(0.0, x)[:n]) +
                                rhs((side, "int"), d)(0.0, x)[n])
                return x, ((side, "int") if slope > 0 else (0, "int"))
        side = 1 if uc > umax else -1 if uc < umin else 0
        kind = "int"
        if law == "clamping" and side != 0 and side * ki * (r - C @ x[:n]) > 0:
            kind = "frozen"
        return x, (side, kind)

    pieces = [(td, 0.0), (horizon, dsize)] if (dsize != 0.0 and 0.0 < td < horizon) else [(horizon, dsize if td <= 0 else 0.0)]
    x = np.zeros(n + 1)
    t = 0.0
    segments = []  # (t0, t1, dense solution, mode)
    at_limit = 0.0
    fired = None
    for t_end, d in pieces:
        while t < t_end:
            x, mode = choose(x, d, fired)
            sol = solve_ivp(rhs(mode, d), (t, t_end), x, method="Radau", rtol=RTOL, atol=ATOL,
                            events=events(mode, d), dense_output=True)
            if not sol.success:
                raise RuntimeError(f"solve_ivp failed: {sol.message}")
            t1 = sol.t[-1]
            segments.append((t, t1, sol.sol, mode))
            if mode[0] != 0:
                at_limit += t1 - t
            x = sol.y[:, -1].copy()
            t = t1 if sol.status == 1 else t_end
            fired = None
            if sol.status == 1:
                index = next(i for i, te in enumerate(sol.t_events) if len(te))
                fired = (mode, index)
            if len(segments) > 1000:
                raise RuntimeError("more than 1000 switches: chattering reference")
    y = np.empty(len(samples))
    u = np.empty(len(samples))
    k = 0
    for i, ts in enumerate(samples):
        while k + 1 < len(segments) and ts > segments[k][1]:
            k += 1
        t0, t1, dense, mode = segments[k]
        xs = dense(min(max(ts, t0), t1))
        y[i] = C @ xs[:n]
        u[i] = applied(xs, mode)
    return y, u, at_limit / horizon


def probe_input(case, amplitude):
    num, den = case["plant"]
    return {"plant": {"numerator": num, "denominator": den},
            "controller": {"structure": "pi", "series": list(case["pi"])},
            "actuator": {"min": case["limits"][0], "max": case["limits"][1]},
            "options": case["options"], "amplitude": amplitude, "band_pct": 2.0}


def run_probe(probe, payload):
    proc = subprocess.run([probe], input=json.dumps(payload), capture_output=True, text=True, timeout=120)
    return proc.returncode, proc.stdout, proc.stderr


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop")
    ap.add_argument("--probe")
    ap.add_argument("--nonlinear-probe", required=True)
    ap.add_argument("--source-dir")
    args = ap.parse_args()
    tally = Tally()
    amplitude = 1.0
    for case in CASES:
        name = case["name"]
        rc, out, err = run_probe(args.nonlinear_probe, probe_input(case, amplitude))
        if rc != 0:
            tally.check(name, "probe ran", False, err.strip())
            continue
        res = json.loads(out)
        if res["status"] != "ok":
            tally.check(name, "status ok", False, res["status"] + " " + "; ".join(res["notes"]))
            continue
        t = np.array(res["time"])
        y = np.array(res["output"])
        u = np.array(res["control"])
        y_ref, u_ref, sat_ref = reference(case, amplitude, t)
        dy = np.max(np.abs(y - y_ref)) / abs(amplitude)
        du = np.max(np.abs(u - u_ref)) / max(np.max(np.abs(u_ref)), 1e-300)
        tally.check(name, "output trace", dy <= TOL_TRACE, f"max|dy|/|r| = {dy:.2e} (tol {TOL_TRACE:g})")
        tally.check(name, "control trace", du <= TOL_TRACE, f"max|du|/max|u| = {du:.2e} (tol {TOL_TRACE:g})")
        os_ref = max(0.0, (np.max(y_ref) / amplitude - 1.0) * 100.0)
        os = res["metrics"]["overshoot_pct"]
        tally.check(name, "overshoot", abs(os - os_ref) <= TOL_OVERSHOOT_PTS,
                    f"{os:.6f} vs {os_ref:.6f} % (tol {TOL_OVERSHOOT_PTS:g} points)")
        dsat = abs(res["saturated_fraction"] - sat_ref)
        tally.check(name, "saturated fraction", dsat <= TOL_SATURATED,
                    f"{res['saturated_fraction']:.8f} vs {sat_ref:.8f} (tol {TOL_SATURATED:g})")
    # Malformed input is rejected with exit code 2 and a message naming the field.
    bad = probe_input(CASES[0], amplitude)
    bad["actuator"] = {"min": 1.0, "max": -1.0}
    rc, _, err = run_probe(args.nonlinear_probe, bad)
    tally.check("malformed", "min > max rejected with exit 2", rc == 2 and "min < max" in err, err.strip())
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
