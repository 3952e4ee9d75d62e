#!/usr/bin/env python3
"""PID loops with back-calculation, a rate-limited actuator and measurement noise: specloop's
nonlinear simulator checked against SciPy's solve_ivp.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_actuator.py --nonlinear-probe NLPROBE [other args ignored]

For each invented loop below the test-only `nonlinear_probe` runs specloop::simulate_nonlinear;
this script rebuilds the loop from its equations, written here independently, and integrates it
with scipy.integrate.solve_ivp (Radau, rtol 1e-10, atol 1e-12), locating every switch with
solve_ivp's terminal events:

  plant        x' = A x + B (u_a + d), y = C x                   (A, B, C from scipy.signal.tf2ss)
  measurement  y_m = y + n, n held constant over each noise period (the probe prints the values)
  PID command  u_c = Kp (b r − y_m) + I + (Kd/Tf) (c r − y_m − x_d)
               x_d' = (c r − y_m − x_d)/Tf                       (filtered derivative
               Kd s/(Tf s + 1); Åström & Hägglund, Advanced PID Control, 2006, ch. 3)
  back-calc.   I' = Ki (r − y_m) + (u_a − u_c)/Tt               (same source, anti-windup)
  actuator     target u_s = clip(u_c, min, max); the applied u_a tracks u_s while |u_s'| <= R,
               else slews at ±R toward it (starting from rest, u_a(0) = 0); a new noise value
               steps u_c, and a tracking actuator slews from where it was.

Checks per loop (tolerances and why):
  output trace   max |Δy| / |r| <= 1e-4 at the probe's samples: both integrators run at 1e-8 or
                 tighter and locate switches to ~1e-12 s, so agreement is ~1e-7; a switch
                 stepped across, a jump through the rate limit or a wrong law differs by 1e-3+.
  control trace  max |Δu_a| / max|u_a| <= 1e-4, same reason.
  slew bound     the probe's applied u never changes faster than R (1e-6 relative).
  fractions      time beyond a limit and time slewing, ÷ horizon: |Δ| <= 1e-5.
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import json
import sys

import numpy as np
from scipy import signal
from scipy.integrate import solve_ivp

from check_scipy_nonlinear import pid_gains, probe_case
from reference_common import TerminalEvents, Tally, sample_segments, solve_piece

TOL_TRACE = 1e-4
TOL_FRACTION = 1e-5
RTOL, ATOL = 1e-10, 1e-12

# Invented loops. PID series parameters (Kp, ω0, ζc) with filter N (see pid_gains).
CASES = [
    {"name": "PID back-calculation, rate limit, lag plant",
     "plant": ([2.5], [1.0, 3.5, 2.5]), "pid": (2.0, 1.3, 0.9), "n": 8.0,
     "actuator": {"min": -1.6, "max": 1.6, "rate_max": 0.9},
     "options": {"anti_windup": "back-calculation", "horizon_s": 25.0}},
    {"name": "PID back-calculation Tt = 0.5 s, derivative on measurement, third-order plant, load step",
     "plant": ([10.0], [1.0, 8.0, 17.0, 10.0]), "pid": (1.8, 0.9, 1.1), "n": 10.0,
     "actuator": {"min": -0.3, "max": 1.4, "rate_max": 2.0},
     "options": {"anti_windup": "back-calculation", "tracking_time_s": 0.5, "derivative_weight": 0.0,
                 "setpoint_weight": 0.7, "horizon_s": 40.0, "disturbance_time_s": 20.0,
                 "disturbance_size": 0.8}},
    {"name": "PID back-calculation, rate limit, measurement noise, lag plant",
     "plant": ([2.5], [1.0, 3.5, 2.5]), "pid": (2.0, 1.3, 0.9), "n": 8.0,
     "actuator": {"min": -1.6, "max": 1.6, "rate_max": 3.0},
     "options": {"anti_windup": "back-calculation", "horizon_s": 12.0, "noise_rms": 0.01,
                 "noise_period_s": 0.25, "noise_seed": 5}},
]


def reference(case, amplitude, samples, noise):
    """Hybrid loop integrated with solve_ivp; returns y, u_a at `samples`, and the fractions of
    the horizon with the command beyond a limit and with the actuator slewing."""
    A, B, C, D = signal.tf2ss(*case["plant"])
    assert np.allclose(D, 0.0)
    B, C = B[:, 0], C[0, :]
    n = A.shape[0]
    kp, ki, kd, tf = pid_gains(*case["pid"], case["n"])
    act, opt = case["actuator"], case["options"]
    umin, umax, rate = act["min"], act["max"], act["rate_max"]
    b = opt.get("setpoint_weight", 1.0)
    c = opt.get("derivative_weight", 1.0)
    tt = opt.get("tracking_time_s", np.sqrt((kp / ki) * (kd / kp)))  # √(Ti·Td): the documented default
    r = amplitude
    horizon = opt["horizon_s"]
    td, dsize = opt.get("disturbance_time_s", 0.0), opt.get("disturbance_size", 0.0)
    tn = opt.get("noise_period_s", 0.0)
    I, XD, UA = n, n + 1, n + 2  # state layout: plant, integral, derivative filter, applied u

    def command(x, nz):
        ym = C @ x[:n] + nz
        return kp * (b * r - ym) + x[I] + kd / tf * (c * r - ym - x[XD])

    def applied(x, mode, nz):
        side, slew = mode
        if slew != 0:
            return x[UA]
        return umax if side > 0 else umin if side < 0 else command(x, nz)

    def rhs(mode, d, nz):
        def f(t, x):
            ua = applied(x, mode, nz)
            dx = np.empty_like(x)
            dx[:n] = A @ x[:n] + B * (ua + d)
            ym = C @ x[:n] + nz
            dx[I] = ki * (r - ym) + (ua - command(x, nz)) / tt
            dx[XD] = (c * r - ym - x[XD]) / tf
            dx[UA] = mode[1] * rate
            return dx
        return f

    def command_slope(x, mode, d, nz):
        dx = rhs(mode, d, nz)(0.0, x)
        dy = C @ dx[:n]
        return -kp * dy + dx[I] + kd / tf * (-dy - dx[XD])

    def events(mode, d, nz):
        side, slew = mode
        evs = TerminalEvents()
        ev = evs.add
        if side == 0:
            ev(lambda t, x: command(x, nz) - umax, 1)
            ev(lambda t, x: command(x, nz) - umin, -1)
        else:
            limit = umax if side > 0 else umin
            ev(lambda t, x: side * (command(x, nz) - limit), -1)
        if slew != 0:  # reaches the target
            ev(lambda t, x: slew * (x[UA] - np.clip(command(x, nz), umin, umax)), 1)
        elif side == 0:  # the target moves faster than the rate limit
            ev(lambda t, x: command_slope(x, mode, d, nz) - rate, 1)
            ev(lambda t, x: command_slope(x, mode, d, nz) + rate, -1)
        return evs

    def choose(x, mode, d, nz, fired):
        side, slew = mode
        uc = command(x, nz)
        side = 1 if uc > umax else -1 if uc < umin else 0
        if fired is not None and fired[0] == "limit":  # on the limit: the guard's direction decides
            side = 0 if mode[0] != 0 else (1 if abs(uc - umax) < abs(uc - umin) else -1)
        target = float(np.clip(uc, umin, umax))
        if slew != 0 and slew * (x[UA] - target) >= -1e-12 * max(1.0, abs(target)):
            slew = 0
        if slew == 0 and side == 0:
            if fired is not None and fired[0] == "slope":
                slew = fired[1]
            else:  # e.g. leaving a limit with the command moving faster than R
                slope = command_slope(x, (0, 0), d, nz)
                slew = 1 if slope > rate * (1 + 1e-9) else -1 if slope < -rate * (1 + 1e-9) else 0
            if slew != 0:
                x = x.copy()
                x[UA] = target
        if slew == 0:
            x = x.copy()
            x[UA] = umax if side > 0 else umin if side < 0 else target
        return x, (side, slew)

    breaks = {horizon}
    if dsize != 0.0 and 0.0 < td < horizon:
        breaks.add(td)
    if tn > 0:
        breaks.update(k * tn for k in range(1, int(np.floor(horizon / tn)) + 1) if k * tn < horizon)
    breaks = sorted(breaks)
    x = np.zeros(n + 3)
    t = 0.0
    nz_prev = 0.0
    mode = None
    segments = []
    beyond = slewing = 0.0
    for t_end in breaks:
        d = dsize if (dsize != 0.0 and t >= td) else 0.0
        nz = noise[min(int(np.floor(t / tn + 1e-9)), len(noise) - 1)] if tn > 0 else 0.0
        if mode is None:  # t = 0: at rest, the step arrives; the actuator slews from 0
            target = float(np.clip(command(x, nz), umin, umax))
            uc = command(x, nz)
            mode = (1 if uc > umax else -1 if uc < umin else 0, int(np.sign(target)))
        elif nz != nz_prev and mode[1] == 0:  # a noise step: slew from where the actuator was
            before = applied(x, mode, nz_prev)
            target = float(np.clip(command(x, nz), umin, umax))
            if target != before:
                x = x.copy()
                x[UA] = before
                mode = (mode[0], 1 if target > before else -1)
        nz_prev = nz
        fired = None
        stuck, stuck_index = False, -1
        while t < t_end:
            if not stuck:
                x, mode = choose(x, mode, d, nz, fired)
            fired = None
            evs = events(mode, d, nz)
            if stuck:  # a guard grazing zero at the start: step off it without that guard
                evs = [e for i, e in enumerate(evs) if i != stuck_index]
            t_stop = min(t_end, t + 1e-7 * horizon) if stuck else t_end
            sol = solve_piece(rhs(mode, d, nz), (t, t_stop), x, method="Radau", rtol=RTOL, atol=ATOL,
                              events=evs, dense_output=True)
            t1 = sol.t[-1]
            segments.append((t, t1, sol.sol, mode, nz))
            if mode[0] != 0:
                beyond += t1 - t
            if mode[1] != 0:
                slewing += t1 - t
            x = sol.y[:, -1].copy()
            if stuck:
                stuck = False
                t = t1
                continue
            if sol.status == 1 and t1 == t:  # fired where it started (a grazing touch)
                stuck, stuck_index = True, next(i for i, te in enumerate(sol.t_events) if len(te))
                segments.pop()
                continue
            if sol.status == 1:
                index = next(i for i, te in enumerate(sol.t_events) if len(te))
                kinds = (["limit", "limit"] if mode[0] == 0 else ["limit"]) + \
                        (["target"] if mode[1] != 0 else (["slope", "slope"] if mode[0] == 0 else []))
                kind = kinds[index]
                fired = (kind, 1 if index == (2 if mode[0] == 0 else 1) else -1) if kind == "slope" else (kind, 0)
                t = t1
            else:
                t = t_end
            if len(segments) > 2000:
                raise RuntimeError("more than 2000 switches: chattering reference")
    y, u = sample_segments(segments, samples, lambda xs, mode, nz: (C @ xs[:n], applied(xs, mode, nz)))
    return np.array(y), np.array(u), beyond / horizon, slewing / horizon


def probe_input(case, amplitude):
    num, den = case["plant"]
    return {"plant": {"numerator": num, "denominator": den},
            "controller": {"structure": "pid", "series": list(case["pid"]), "derivative_filter": case["n"]},
            "actuator": case["actuator"], "options": case["options"], "amplitude": amplitude, "band_pct": 2.0}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--nonlinear-probe", required=True)
    args, _ = ap.parse_known_args()
    tally = Tally()
    amplitude = 1.0
    for case in CASES:
        name = case["name"]
        run = probe_case(tally, args.nonlinear_probe, name, probe_input(case, amplitude))
        if run is None:
            continue
        res, t, y, u = run
        y_ref, u_ref, beyond, slewing = reference(case, amplitude, t, res["noise"])
        dy = np.max(np.abs(y - y_ref)) / abs(amplitude)
        du = np.max(np.abs(u - u_ref)) / max(np.max(np.abs(u_ref)), 1e-300)
        tally.check(name, "output trace", dy <= TOL_TRACE, f"max|dy|/|r| = {dy:.2e} (tol {TOL_TRACE:g})")
        tally.check(name, "control trace", du <= TOL_TRACE, f"max|du|/max|u| = {du:.2e} (tol {TOL_TRACE:g})")
        steepest = np.max(np.abs(np.diff(u)) / np.diff(t))
        rate = case["actuator"]["rate_max"]
        tally.check(name, "slew bound", steepest <= rate * (1 + 1e-6), f"max|du/dt| = {steepest:.6g} (R = {rate:g})")
        tally.check(name, "saturated fraction", abs(res["saturated_fraction"] - beyond) <= TOL_FRACTION,
                    f"{res['saturated_fraction']:.8f} vs {beyond:.8f}")
        tally.check(name, "rate-limited fraction", abs(res["rate_limited_fraction"] - slewing) <= TOL_FRACTION,
                    f"{res['rate_limited_fraction']:.8f} vs {slewing:.8f}")
        if case["options"].get("noise_rms"):
            tally.check(name, "noise values supplied", len(res["noise"]) > 1, f"{len(res['noise'])} values")
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
