#!/usr/bin/python3
"""Benchmark companion (not a test): solves the loop dumped by specloop_bench_confirm --dump with
SciPy's solve_ivp (RK45, the same rtol/atol), written independently from specloop's solver, and
compares outputs and wall times in the same run.

Loop: plant from num/den by scipy.signal.tf2ss, x' = A x + B (u + d), y = C x.
Controller, parallel form: u_c = Kp (b r - y) + I + Kd (v - z)/Tf, z' = (v - z)/Tf, v = c r - y
(the filtered derivative Kd s/(Tf s + 1) on v); without parallel gains, C(s) by tf2ss on e = r - y.
Actuator: u = clip(u_c, umin, umax). Clamping anti-windup as conditional integration:
I' = Ki e, except I' = 0 while saturated with Ki e pushing further beyond the limit; where
neither is consistent (frozen u_c leaves the limit, integrating u_c re-enters it) I moves just
enough to hold u_c on the limit. Modes are held within a piece; solve_ivp `events` (terminal)
locate every switch and the integration restarts there.

Usage: scipy_confirm.py DUMP.json [--repeats N]
Prints one line: scipy median/p10/p90 ms, pieces (switches), steps, max |dy|/|r|.
"""
import json
import sys
import time

import numpy as np
from scipy.integrate import solve_ivp
from scipy.signal import tf2ss


class Loop:
    def __init__(self, j):
        num = np.array(j["plant"]["numerator"], float)
        den = np.array(j["plant"]["denominator"], float)
        A, B, C, D = tf2ss(num, den)
        if np.any(np.abs(D) > 0):
            raise ValueError("plant must be strictly proper")
        self.A, self.B, self.C = A, B[:, 0], C[0, :]
        self.n = A.shape[0]
        self.r = float(j["amplitude"])
        act = j["actuator"]
        self.umin = -np.inf if act["min"] is None else float(act["min"])
        self.umax = np.inf if act["max"] is None else float(act["max"])
        if act.get("rate_max") is not None:
            raise NotImplementedError("rate limit")
        o = j["options"]
        if j["plant"].get("delay_s", 0.0) or o.get("sample_time_s", 0.0):
            raise NotImplementedError("delay / sampled controller")
        self.rtol, self.atol = o["relative_tolerance"], o["absolute_tolerance"]
        self.horizon = o["horizon_s"]
        self.dist_t, self.dist = o["disturbance_time_s"], o["disturbance_size"]
        self.b, self.c = o["setpoint_weight"], o["derivative_weight"]
        ctl = j["controller"]
        self.parallel = "parallel" in ctl
        if self.parallel:
            g = ctl["parallel"]
            self.kp, self.ki, self.kd, self.tf = g["kp"], g["ki"], g["kd"], g["filter_time"]
            self.has_d = self.kd != 0.0
            self.clamp = o["anti_windup"] == "conditional-integration" and self.ki != 0.0
            if o["anti_windup"] == "back-calculation" and self.ki != 0.0:
                raise NotImplementedError("back-calculation")
            self.size = self.n + 1 + (1 if self.has_d else 0)  # [x | I | z]
        else:
            Ac, Bc, Cc, Dc = tf2ss(np.array(ctl["numerator"], float), np.array(ctl["denominator"], float))
            self.Ac, self.Bc, self.Cc, self.Dc = Ac, Bc[:, 0], Cc[0, :], float(Dc[0, 0])
            self.clamp = False
            self.size = self.n + Ac.shape[0]

    # ---- algebra ----
    def y(self, x):
        return self.C @ x[: self.n]

    def uc(self, x):
        y = self.y(x)
        if self.parallel:
            u = self.kp * (self.b * self.r - y) + x[self.n]
            if self.has_d:
                u += self.kd * (self.c * self.r - y - x[self.n + 1]) / self.tf
            return u
        return self.Cc @ x[self.n:] + self.Dc * (self.r - y)

    def rhs(self, t, x, mode, d):
        sat, integ, slide = mode
        n = self.n
        y = self.C @ x[:n]
        uc = self.uc(x)
        u = self.umax if sat > 0 else (self.umin if sat < 0 else uc)
        dx = np.empty(self.size)
        dx[:n] = self.A @ x[:n] + self.B * (u + d)
        e = self.r - y
        if self.parallel:
            if self.has_d:
                dx[n + 1] = (self.c * self.r - y - x[n + 1]) / self.tf
            if slide:
                dx[n] = -self.frozen_slope(x, dx)
            else:
                dx[n] = self.ki * e if integ else 0.0
        else:
            dx[n:] = self.Ac @ x[n:] + self.Bc * e
        return dx

    def frozen_slope(self, x, dx):
        """u_c' with I' = 0, given the plant and filter derivatives in dx."""
        yd = self.C @ dx[: self.n]
        s = -self.kp * yd
        if self.has_d:
            s += self.kd * (-yd - dx[self.n + 1]) / self.tf
        return s

    def slopes(self, x, side, d):
        """(frozen, integrating) slopes of u_c with the actuator on the limit `side`."""
        dx = self.rhs(0.0, x, (side, False, False), d)
        fs = self.frozen_slope(x, dx)
        return fs, fs + self.ki * (self.r - self.y(x))

    def choose(self, x, d):
        uc = self.uc(x)
        tol = 1e-9 * max(1.0, abs(self.umax) if np.isfinite(self.umax) else 1.0, abs(self.umin) if np.isfinite(self.umin) else 1.0)
        e = self.r - self.y(x)
        for side, lim in ((1, self.umax), (-1, self.umin)):
            if np.isfinite(lim) and abs(uc - lim) <= tol:
                fs, ints = self.slopes(x, side, d)
                if not self.clamp:
                    return (side, True, False) if side * (ints if self.parallel else fs) > 0 else (0, True, False)
                pushes = side * self.ki * e > 0
                sat_slope = side * (fs if pushes else ints)
                if sat_slope > 0:
                    return (side, not pushes, False)
                if side * ints < 0:
                    return (0, True, False)
                return (side, False, True)  # sliding on the limit
        sat = 1 if uc > self.umax else (-1 if uc < self.umin else 0)
        integ = not (self.clamp and sat != 0 and sat * self.ki * e > 0)
        return (sat, integ, False)

    def guards(self, mode, d):
        sat, integ, slide = mode
        g = []
        if slide:
            def leave_frozen(t, x):
                return sat * self.slopes(x, sat, d)[0]
            def leave_inward(t, x):
                return sat * self.slopes(x, sat, d)[1]
            g += [leave_frozen, leave_inward]
        else:
            if sat == 0:
                if np.isfinite(self.umax):
                    g.append(lambda t, x: self.uc(x) - self.umax)
                if np.isfinite(self.umin):
                    g.append(lambda t, x: self.uc(x) - self.umin)
            else:
                lim = self.umax if sat > 0 else self.umin
                g.append(lambda t, x: self.uc(x) - lim)
                if self.clamp:
                    g.append(lambda t, x: self.r - self.y(x))
        return g

    def simulate(self, t_eval):
        x = np.zeros(self.size)
        t0, T = 0.0, self.horizon
        breaks = [self.dist_t] if self.dist != 0.0 and 0.0 < self.dist_t < T else []
        ys = np.empty(len(t_eval))
        filled = 0
        pieces = steps = 0
        while True:
            d = self.dist if (self.dist != 0.0 and t0 >= self.dist_t) else 0.0
            mode = self.choose(x, d)
            t1 = min([b for b in breaks if b > t0] + [T])
            # Each guard starts strictly on the side it is moving toward (offset by its value at
            # t0 and a tiny margin), so the switch just located does not fire again at t0.
            events = []
            f0 = self.rhs(t0, x, mode, d)
            h = 1e-9 * max(T, 1.0)
            for g in self.guards(mode, d):
                g0 = g(t0, x)
                slope = g(t0 + h, x + h * f0) - g0
                off = g0 - np.copysign(1e-12 * max(1.0, abs(g0)), slope) if abs(g0) < 1e-7 else 0.0
                ev = (lambda gg, oo: (lambda t, y, *args: gg(t, y) - oo))(g, off)
                ev.terminal = True
                events.append(ev)
            hi = int(np.searchsorted(t_eval, t1, side="right"))
            seg = t_eval[filled:hi]
            extra = seg.size == 0 or seg[-1] != t1  # t1 is evaluated too, for the state there
            if extra:
                seg = np.append(seg, t1)
            sol = solve_ivp(self.rhs, (t0, t1), x, method="RK45", rtol=self.rtol, atol=self.atol,
                            t_eval=seg, events=events or None, args=(mode, d))
            pieces += 1
            steps += sol.nfev  # right-hand-side evaluations (solve_ivp does not report accepted steps)
            k = sol.t.size
            if sol.status == 1:  # a guard fired: restart at the earliest located switch
                i = min((e[0], n) for n, e in enumerate(sol.t_events) if e.size)[1]
                ys[filled: filled + k] = self.C @ sol.y[: self.n, :k]
                filled += k
                t0, x = sol.t_events[i][0], np.array(sol.y_events[i][0])
                continue
            if sol.status != 0:
                raise RuntimeError(sol.message)
            keep = k - 1 if extra else k
            ys[filled: filled + keep] = self.C @ sol.y[: self.n, :keep]
            filled += keep
            t0, x = t1, sol.y[:, -1].copy()
            if t1 >= T:
                break
        return ys[:filled], pieces - 1, steps


def main():
    path = sys.argv[1]
    repeats = int(sys.argv[sys.argv.index("--repeats") + 1]) if "--repeats" in sys.argv else 5
    j = json.load(open(path))
    t_eval = np.array(j["result"]["time_s"])
    y_cpp = np.array(j["result"]["output"])
    try:
        loop = Loop(j)
    except NotImplementedError as e:
        print(f"scipy {j['spec']} skipped: {e} not modelled here")
        return
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        y, switches, nfev = loop.simulate(t_eval)
        times.append((time.perf_counter() - t) * 1e3)
    times.sort()
    q = lambda p: float(np.percentile(times, p))
    if y.size != y_cpp.size:
        dy = float("nan")
    else:
        dy = float(np.max(np.abs(y - y_cpp)) / abs(loop.r))
    print(f"scipy {j['spec']} median_ms {q(50):.3f} p10_ms {q(10):.3f} p90_ms {q(90):.3f} repeats {repeats} "
          f"switches {switches} rhs_evals {nfev} samples {y.size} max_abs_dy_over_r {dy:.3e}")


if __name__ == "__main__":
    main()
