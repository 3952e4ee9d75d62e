"""SciPy references for a PID with a notch N after it and a measurement filter F before it on a
saturating loop, with the anti-windup on the PID's integrator (used by check_scipy_nonlinear.py).

The loop, written here from its equations (independently of specloop's realization):

  plant     x' = A x + B u, y = C x                  (scipy.signal.tf2ss of the plant)
  F         y_f = F(s)·y, F = 1/(Tf s + 1) or 1/((Tf s)²/2 + Tf s + 1)   (tf2ss of F)
  PID       v = Kp (b r − y_f) + I + Kd/Td_f (c r − y_f − D),  D' = (c r − y_f − D)/Td_f
            (the filtered derivative Kd s/(Td_f s + 1) = Kd/Td_f (1 − 1/(Td_f s + 1)), formula)
  N         u_c = N(s)·v, N = (s² + 2 ζz ωn s + ωn²)/(s² + 2 ζp ωn s + ωn²)   (tf2ss: D_N = 1)
  actuator  u = clip(u_c, min, max)
  integrator (e_f = r − y_f)
            back-calculation:  I' = Ki e_f + (u − u_c)/Tt (Åström & Hägglund, Advanced PID Control,
                               2006, anti-windup; Tt = √(Ti·Td) with derivative action by default,
                               recalled from memory)
            clamping:          I' = 0 while saturated and Ki e_f drives further into the limit; on
                               the limit, when neither is consistent, the Filippov sliding motion
                               holds u_c on it: I' = −(u_c' with I' = 0)/D_N.
The hybrid system is integrated piece by piece by solve_ivp (Radau) with terminal events at every
switch, as the PI reference in check_scipy_nonlinear.py does.

The sampled loop (period Ts, zero-order hold) is a hand-written recursion at the instants: the
plant by scipy.signal.cont2discrete "zoh" (exact), F and the derivative term Kd s/(Td_f s + 1) by
cont2discrete "bilinear" (Tustin), the integral by Tustin I[k] = I[k−1] + Ki Ts/2 (e[k] + e[k−1]),
N by Tustin prewarped at ωn: the bilinear map with the period Ts' = 2 tan(ωn Ts/2)/ωn, for which
2/Ts' = ωn/tan(ωn Ts/2) (Franklin, Powell & Workman, Digital Control of Dynamic Systems,
prewarping; recalled from memory). Clamping skips the increment when the command after N with it
lies beyond a limit and the increment pushes further; back-calculation adds Ts/Tt (u[k−1] −
u_c[k−1]) to it (specloop's documented sampled rules).
"""
import math

import numpy as np
from scipy import signal

from reference_common import TerminalEvents, sample_segments, solve_piece


def filter_den(case):
    T = case["filter_time"]
    return [T * T / 2.0, T, 1.0] if case.get("filter_order", 1) == 2 else [T, 1.0]


def notch_tf(freq, depth, width):
    zp, zz = width, depth * width
    return [1.0, 2.0 * zz * freq, freq * freq], [1.0, 2.0 * zp * freq, freq * freq]


def continuous_reference(case, gains, r, samples, rtol=1e-10, atol=1e-12):
    """Returns y and u at `samples` and the fraction of the horizon at a limit."""
    Ap, Bp, Cp, Dp = signal.tf2ss(*case["plant"])
    assert np.allclose(Dp, 0.0)
    Bp, Cp = Bp[:, 0], Cp[0, :]
    Af, Bf, Cf, Df = signal.tf2ss([1.0], filter_den(case))
    assert np.allclose(Df, 0.0)
    Bf, Cf = Bf[:, 0], Cf[0, :]
    An, Bn, Cn, Dn = signal.tf2ss(*notch_tf(*case["notch"]))
    Bn, Cn, dn = Bn[:, 0], Cn[0, :], float(Dn[0, 0])
    kp, ki, kd, tfd = gains
    np_, nf, nn = len(Bp), len(Bf), len(Bn)
    umin, umax = case["limits"]
    law = case["law"]
    b, cw = case.get("b", 1.0), case.get("c", 1.0)
    ti, td = kp / ki, kd / kp
    tt = case.get("tracking_time", math.sqrt(ti * td))
    horizon = case["horizon"]
    # z = [xp | I | D | xf | xn]
    ii, idd, jf, jn = np_, np_ + 1, np_ + 2, np_ + 2 + nf

    def parts(z):
        xp, xf, xn = z[:np_], z[jf:jf + nf], z[jn:jn + nn]
        yf = Cf @ xf
        v = kp * (b * r - yf) + z[ii] + kd / tfd * (cw * r - yf - z[idd])
        return xp, xf, xn, yf, v

    def command(z):
        _, _, xn, _, v = parts(z)
        return Cn @ xn + dn * v

    def applied(z, mode):
        return umax if mode[0] > 0 else umin if mode[0] < 0 else command(z)

    def rates(z, mode, di):
        """z' with the integrator's rate di, and u_c' along it."""
        xp, xf, xn, yf, v = parts(z)
        u = applied(z, mode)
        dxp = Ap @ xp + Bp * u
        dxf = Af @ xf + Bf * (Cp @ xp)
        dD = (cw * r - yf - z[idd]) / tfd
        dxn = An @ xn + Bn * v
        dyf = Cf @ dxf
        dv = -kp * dyf + di + kd / tfd * (-dyf - dD)
        dz = np.concatenate([dxp, [di, dD], dxf, dxn])
        return dz, Cn @ dxn + dn * dv

    def integrator_rate(z, mode):
        kind = mode[1]
        if kind == "frozen":
            return 0.0
        if kind == "slide":
            return -rates(z, mode, 0.0)[1] / dn
        e = r - parts(z)[3]
        if law == "back-calculation":
            return ki * e + (applied(z, mode) - command(z)) / tt
        return ki * e

    def rhs(mode):
        return lambda t, z: rates(z, mode, integrator_rate(z, mode))[0]

    def events(mode):
        side, kind = mode
        evs = TerminalEvents()
        if kind == "slide":
            s = side
            evs.add(lambda t, z: s * integrator_rate(z, mode), -1)
            evs.add(lambda t, z: s * (ki * (r - parts(z)[3]) - integrator_rate(z, mode)), -1)
        elif side == 0:
            evs.add(lambda t, z: command(z) - umax, 1)
            evs.add(lambda t, z: command(z) - umin, -1)
        else:
            limit = umax if side > 0 else umin
            evs.add(lambda t, z: side * (command(z) - limit), -1)
            if law == "conditional-integration":
                evs.add(lambda t, z: r - parts(z)[3], -1 if (kind == "frozen") == (side * ki > 0) else 1)
        return evs

    def choose(z, fired):
        if fired is not None:
            (side, kind), index = fired
            if kind == "slide":
                return z, ((side, "frozen") if index == 0 else (0, "int"))
            if side != 0 and index == 1:
                return z, (side, "int" if kind == "frozen" else "frozen")
        uc = command(z)
        e = r - parts(z)[3]
        for side, limit in ((1, umax), (-1, umin)):
            if abs(uc - limit) <= 1e-9 * max(1.0, abs(limit)):
                if law == "conditional-integration":
                    z = z.copy()
                    z[ii] += (limit - uc) / dn  # exactly on the limit
                    frozen = side * rates(z, (side, "frozen"), 0.0)[1]
                    drive = side * ki * e
                    if drive > 0:
                        if frozen >= 0:
                            return z, (side, "frozen")
                        return z, ((side, "slide") if frozen + drive > 0 else (0, "int"))
                    return z, ((side, "int") if frozen + drive > 0 else (0, "int"))
                slope = side * rates(z, (side, "int"), integrator_rate(z, (side, "int")))[1]
                return z, ((side, "int") if slope > 0 else (0, "int"))
        side = 1 if uc > umax else -1 if uc < umin else 0
        kind = "frozen" if law == "conditional-integration" and side != 0 and side * ki * e > 0 else "int"
        return z, (side, kind)

    z = np.zeros(jn + nn)
    t, fired, at_limit, segments = 0.0, None, 0.0, []
    while t < horizon:
        z, mode = choose(z, fired)
        sol = solve_piece(rhs(mode), (t, horizon), z, method="Radau", rtol=rtol, atol=atol,
                          events=events(mode), dense_output=True)
        t1 = sol.t[-1]
        segments.append((t, t1, sol.sol, mode))
        if mode[0] != 0:
            at_limit += t1 - t
        z = sol.y[:, -1].copy()
        t = t1 if sol.status == 1 else horizon
        fired = None
        if sol.status == 1:
            fired = (mode, next(i for i, te in enumerate(sol.t_events) if len(te)))
        if len(segments) > 1000:
            raise RuntimeError("more than 1000 switches: chattering reference")
    y, u = sample_segments(segments, samples, lambda zs, mode: (Cp @ zs[:np_], applied(zs, mode)))
    return np.array(y), np.array(u), at_limit / horizon


class Section:
    """A discrete transfer function b(z)/a(z) (cont2discrete's, a[0] = 1) in direct form I."""

    def __init__(self, num, den):
        self.b = np.atleast_1d(np.squeeze(num)) / den[0]
        self.a = np.asarray(den, dtype=float) / den[0]
        self.x = [0.0] * (len(self.b) - 1)
        self.y = [0.0] * (len(self.a) - 1)

    def peek(self, u):
        return self.b[0] * u + sum(bj * xj for bj, xj in zip(self.b[1:], self.x)) - sum(
            aj * yj for aj, yj in zip(self.a[1:], self.y))

    def commit(self, u, out):
        if self.x:
            self.x = [u] + self.x[:-1]
        if self.y:
            self.y = [out] + self.y[:-1]


def bilinear(num, den, dt):
    n, d, _ = signal.cont2discrete((num, den), dt, method="bilinear")
    return Section(n, d)


def sampled_reference(case, gains, r, ts, steps):
    """The commands u_c[k] and outputs y[k] at the instants, and the number of clamped samples."""
    A, B, C, D = signal.tf2ss(*case["plant"])
    Ad, Bd, _, _, _ = signal.cont2discrete((A, B, C, D), ts, method="zoh")
    Bd, C = Bd[:, 0], C[0, :]
    kp, ki, kd, tfd = gains
    umin, umax = case["limits"]
    law = case["law"]
    b, cw = case.get("b", 1.0), case.get("c", 1.0)
    tt = case.get("tracking_time", math.sqrt((kp / ki) * (kd / kp)))
    filt = bilinear([1.0], filter_den(case), ts)
    deriv = bilinear([kd, 0.0], [tfd, 1.0], ts)
    freq = case["notch"][0]
    notch = bilinear(*notch_tf(*case["notch"]), 2.0 * math.tan(freq * ts / 2.0) / freq)
    x = np.zeros(A.shape[0])
    integral = e_prev = uc_prev = ua_prev = 0.0
    ys, ucs, clamped = [], [], 0
    for _ in range(steps):
        y = C @ x
        yf = filt.peek(y)
        filt.commit(y, yf)
        e, v = r - yf, cw * r - yf
        dn = deriv.peek(v)
        deriv.commit(v, dn)
        di = ki * ts / 2.0 * (e + e_prev)
        if law == "back-calculation":
            di += ts / tt * (ua_prev - uc_prev)
        pid = kp * (b * r - yf) + integral + di + dn
        uc = notch.peek(pid)
        if law == "conditional-integration" and ((uc > umax and di > 0) or (uc < umin and di < 0)):
            di = 0.0
            pid = kp * (b * r - yf) + integral + dn
            uc = notch.peek(pid)
            clamped += 1
        notch.commit(pid, uc)
        integral += di
        e_prev = e
        ua = min(max(uc, umin), umax)
        uc_prev, ua_prev = uc, ua
        ys.append(y)
        ucs.append(uc)
        x = Ad @ x + Bd * ua
    return np.array(ys), np.array(ucs), clamped


# Invented loop: a lag with a lightly damped resonance at 12 rad/s, a PID (Kp 2, zeros at
# ω0 1.2 rad/s with ζc 0.9, N 10), a notch on the resonance, a first-order measurement filter.
RESONANT = ([360.0], list(np.polymul([1.0, 3.5, 2.5], [1.0, 1.2, 144.0])))
FILTERED_CASES = [
    {"name": "filtered PID (notch + F), back-calculation", "law": "back-calculation"},
    {"name": "filtered PID (notch + F), clamping, b 0.6 c 0", "law": "conditional-integration", "b": 0.6, "c": 0.0},
    {"name": "filtered PID (notch + second-order F), clamping", "law": "conditional-integration", "filter_order": 2},
]
TOL_TRACE = 1e-4      # as the PI cases (check_scipy_nonlinear.py): ~1e-7 expected, a wrong law 1e-3..1e-1
TOL_SATURATED = 1e-5
TOL_SAMPLED = 1e-8    # as the sampled PI cases: exact ZOH, only the probe's integration error


def filtered_payload(case, options):
    return {"plant": {"numerator": case["plant"][0], "denominator": case["plant"][1]},
            "controller": {"structure": "pid", "series": case["series"],
                           "notch": dict(zip(("frequency", "depth", "width"), case["notch"])),
                           "measurement_filter": {"order": case.get("filter_order", 1), "time_constant": case["filter_time"]}},
            "actuator": {"min": case["limits"][0], "max": case["limits"][1]},
            "options": dict(options, anti_windup=case["law"], setpoint_weight=case.get("b", 1.0),
                            derivative_weight=case.get("c", 1.0)),
            "amplitude": 1.0, "band_pct": 2.0}


def check_filtered(tally, nlprobe, pid_gains, run_probe):
    """The continuous and sampled filtered PID cases; `pid_gains` maps the series parameters to
    (Kp, Ki, Kd, Tf), `run_probe` runs the probe on a payload."""
    import json
    base = {"plant": RESONANT, "series": [2.0, 1.2, 0.9], "notch": (12.0, 0.1, 0.4), "filter_time": 0.02,
            "limits": (-1.2, 1.2), "horizon": 20.0}
    for extra in FILTERED_CASES:
        case = dict(base, **extra)
        name = case["name"]
        rc, out, err = run_probe(nlprobe, filtered_payload(case, {"horizon_s": case["horizon"], "output_step_s": 0.01}))
        if not tally.check(name, "probe ran", rc == 0, err.strip()):
            continue
        res = json.loads(out)
        if not tally.check(name, "status ok", res["status"] == "ok", res["status"]):
            continue
        tally.check(name, "no 'anti-windup not applied' note", not any("not applied" in n for n in res["notes"]),
                    "; ".join(res["notes"]))
        t, y, u = np.array(res["time"]), np.array(res["output"]), np.array(res["control"])
        y_ref, u_ref, sat_ref = continuous_reference(case, pid_gains(*case["series"], 10.0), 1.0, t)
        dy = np.max(np.abs(y - y_ref))
        du = np.max(np.abs(u - u_ref)) / np.max(np.abs(u_ref))
        tally.check(name, "output trace", dy <= TOL_TRACE, f"max|dy|/|r| = {dy:.2e} (tol {TOL_TRACE:g})")
        tally.check(name, "control trace", du <= TOL_TRACE, f"max|du|/max|u| = {du:.2e} (tol {TOL_TRACE:g})")
        tally.check(name, "saturated fraction", abs(res["saturated_fraction"] - sat_ref) <= TOL_SATURATED and sat_ref > 0.002,
                    f"{res['saturated_fraction']:.8f} vs {sat_ref:.8f} (tol {TOL_SATURATED:g})")
        if case["law"] == "conditional-integration":
            tally.check(name, "the integrator is held", res["integrator_held_fraction"] > 0.0,
                        f"held fraction {res['integrator_held_fraction']:.6f}")
    for law, order in (("conditional-integration", 1), ("back-calculation", 1), ("conditional-integration", 2)):
        case = dict(base, law=law, b=0.6, filter_order=order)
        name = f"sampled filtered PID (notch + F of order {order}), Ts 0.02, {law}"
        ts, steps = 0.02, 501
        opts = {"relative_tolerance": 1e-11, "absolute_tolerance": 1e-13, "sample_time_s": ts,
                "horizon_s": (steps - 1) * ts, "sample_times_s": [k * ts for k in range(steps)]}
        rc, out, err = run_probe(nlprobe, filtered_payload(case, opts))
        if not tally.check(name, "probe ran", rc == 0, err.strip()):
            continue
        res = json.loads(out)
        if not tally.check(name, "status ok", res["status"] == "ok", res["status"]):
            continue
        y_ref, uc_ref, clamped = sampled_reference(case, pid_gains(*case["series"], 10.0), 1.0, ts, steps)
        dy = np.max(np.abs(np.array(res["output"]) - y_ref))
        du = np.max(np.abs(np.array(res["command"]) - uc_ref)) / np.max(np.abs(uc_ref))
        tally.check(name, "output at the instants vs the hand-written recursion", dy <= TOL_SAMPLED,
                    f"max|dy| = {dy:.2e} (tol {TOL_SAMPLED:g})")
        tally.check(name, "commands at the instants", du <= TOL_SAMPLED, f"max|du|/max|u| = {du:.2e} (tol {TOL_SAMPLED:g})")
        active = np.max(uc_ref) > case["limits"][1] and (clamped > 0 or law != "conditional-integration")
        tally.check(name, "the command goes beyond the limit (and clamping acts)", active,
                    f"max u_c {np.max(uc_ref):.4f}, {clamped} clamped samples")
