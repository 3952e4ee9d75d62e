#!/usr/bin/env python3
"""A sampled controller is part of the design problem: specloop's sampled loop checked against SciPy.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_sampled.py --specloop SPECLOOP --source-dir DIR [other args ignored]

The reference, written here independently of specloop:
  plant       continuous (A, B, C) from scipy.signal.tf2ss of result.json's plant; discretized
              with a zero-order hold by scipy.signal.cont2discrete(method="zoh") (SciPy).
  controller  its difference equation derived here from the documented rule (README, nonlinear
              confirmation; common practice): u[k] = Kp (b r − y[k]) + I[k] + D[k],
              I[k] = I[k−1] + Ki Ts/2 (e[k] + e[k−1]) (Tustin), D[k] = Tf/(Tf + Ts) D[k−1] +
              Kd/(Tf + Ts) (v[k] − v[k−1]), v = c r − y (backward difference on Kd s/(Tf s + 1));
              lead/lag structures: scipy.signal.cont2discrete(method="bilinear") of C(s) on e.
              As z⁻¹ polynomials over one denominator, turned into a state space by
              scipy.signal.tf2ss for the reference and the measurement inputs.
  loop        the closed discrete loop assembled from both and stepped with scipy.signal.dlsim.
  between     y(kTs + τ) = C (e^{Aτ} x[k] + ∫₀^τ e^{As} ds B u[k]) from scipy.linalg.expm of the
  samples     augmented matrix, on 64 points per period; the peak refined with
              scipy.optimize.minimize_scalar and the band exit with scipy.optimize.brentq on that
              exact expression.

Cases (tests/plants/sampled_servo.toml, sampled_pid.toml and sampled_lead.toml, invented):
  1. the continuous design of the servo (the same spec without sample_time) meets its
     requirements on the continuous loop (scipy.signal.step) but its gains sampled at 0.08 s do
     not: a continuous search would ship a loop that fails;
  2. the sampled spec's design: every design's metrics in result.json are the sampled loop's
     (SciPy above), the search ran on the sampled loop, the verdict is judged on the loop the spec
     describes, and a "met" claim holds on SciPy's sampled loop;
  3. the difference equation in result.json equals the one derived here.
Tolerances: overshoot 1e-4 percentage points, times 1e-4 relative (both located exactly on each
side), peak effort 1e-9 relative (u is piecewise constant: exact), difference-equation
coefficients 1e-12 relative.
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import json
import math
import pathlib
import subprocess
import sys
import tempfile

import numpy as np
from scipy import linalg, optimize, signal

from reference_common import Tally

TOL_PCT = 1e-4
TOL_TIME_REL = 1e-4
TOL_EFFORT_REL = 1e-9
TOL_COEF_REL = 1e-12
POINTS_PER_PERIOD = 64


def run_design(exe, spec_path, out_dir):
    proc = subprocess.run([exe, "design", str(spec_path), "--out", str(out_dir)], capture_output=True, text=True,
                          timeout=600)
    result_path = pathlib.Path(out_dir, "result.json")
    result = json.loads(result_path.read_text()) if result_path.exists() else None
    return proc.returncode, proc.stdout, proc.stderr, result


def controller_z(design, structure, ts, b, c):
    """(reference numerator, measurement numerator, denominator) in powers of z⁻¹, derived here."""
    ctl = design["controller"]
    if structure in ("p", "pi", "pd", "pid"):
        par = ctl["parallel"]
        kp, ki, kd, tf = par["kp"], par["ki"], par["kd"], par["filter_time"]
        den_i = np.array([1.0, -1.0]) if ki else np.array([1.0])
        a_d = tf / (tf + ts) if kd else 0.0
        den_d = np.array([1.0, -a_d]) if kd else np.array([1.0])
        den = np.polymul(den_i, den_d)

        def numerator(pw, dw):
            n = kp * pw * den
            if ki:
                n = _add(n, ki * ts / 2.0 * np.convolve([1.0, 1.0], den_d))
            if kd:
                n = _add(n, kd / (tf + ts) * dw * np.convolve([1.0, -1.0], den_i))
            return n

        return numerator(b, c), numerator(1.0, 1.0), den
    num, den = ctl["numerator"], ctl["denominator"]
    nz, dz, _ = signal.cont2discrete((num, den), ts, method="bilinear")
    nz = np.atleast_1d(np.squeeze(nz))
    nz = np.concatenate([np.zeros(len(dz) - len(nz)), nz]) if len(nz) < len(dz) else nz
    return nz / dz[0], nz / dz[0], np.asarray(dz) / dz[0]


def _add(a, b):
    """Sum of two z⁻¹ polynomials, lowest power first."""
    n = max(len(a), len(b))
    out = np.zeros(n)
    out[:len(a)] += a
    out[:len(b)] += b
    return out


class SampledLoop:
    """The sampled loop of one design, rebuilt from result.json with SciPy."""

    def __init__(self, result, design, ts):
        spec = result["spec"]
        ctl = spec["controller"]
        self.ts = ts
        self.r = spec["reference"]["amplitude"]
        structure = design["controller"]["structure"]  # the reference design is a P controller
        b = ctl.get("setpoint_weight", 1.0)
        c = 0.0 if ctl.get("derivative_on") == "measurement" else 1.0
        self.rn, self.mn, self.den = controller_z(design, structure, ts, b, c)
        A, B, C, D = signal.tf2ss(result["plant"]["numerator"], result["plant"]["denominator"])
        self.A, self.B, self.C = A, B[:, 0], C[0, :]
        Ad, Bd, _, _, _ = signal.cont2discrete((A, B, C, D), ts, method="zoh")
        Bd = Bd[:, 0]
        # Controller: U = (Nr R − Nm Y)/Den, as a state space with inputs (r, y).
        L = max(len(self.rn), len(self.mn), len(self.den))
        pad = lambda p: np.concatenate([p, np.zeros(L - len(p))])
        rn, mn, den = pad(self.rn), pad(self.mn), pad(self.den)
        if L > 1:
            # Both inputs share the denominator: the observable form (the transpose of tf2ss's
            # controllable form) has one A and one C, the numerators going into B.
            Ac_t, Bc_t, Cr_t, Dr = signal.tf2ss(rn, den)
            _, _, Cm_t, Dm = signal.tf2ss(mn, den)
            Ac, Br, Bm, Cc = Ac_t.T, Cr_t[0, :], Cm_t[0, :], Bc_t[:, 0]
            Dr, Dm = Dr[0, 0], Dm[0, 0]
        else:
            Ac, Br, Bm, Cc, Dr, Dm = np.zeros((0, 0)), np.zeros(0), np.zeros(0), np.zeros(0), rn[0], mn[0]
        n, m = Ad.shape[0], Ac.shape[0]
        # u = Cc w + Dr r − Dm y, y = C x: z = [x; w].
        Acl = np.zeros((n + m, n + m))
        Acl[:n, :n] = Ad - np.outer(Bd, Dm * self.C)
        Acl[:n, n:] = np.outer(Bd, Cc)
        Acl[n:, :n] = -np.outer(Bm, self.C)
        Acl[n:, n:] = Ac
        Bcl = np.concatenate([Bd * Dr, Br])
        Ccl = np.zeros((2, n + m))
        Ccl[0, :n] = self.C
        Ccl[1, :n] = -Dm * self.C
        Ccl[1, n:] = Cc
        Dcl = np.array([0.0, Dr])
        self.sys = (Acl, Bcl[:, None], Ccl, Dcl[:, None], ts)
        self.n = n
        lam = np.linalg.eigvals(Acl)
        self.stable = bool(np.all(np.abs(lam) < 1.0))
        if self.stable:
            slowest = min(-math.log(abs(v)) / ts for v in lam if abs(v) > 0)
            self.periods = int(min(40000, math.ceil(math.log(1e6) / slowest / ts)))
            zinf = np.linalg.solve(np.eye(n + m) - Acl, Bcl * self.r)
            self.y_inf = float(Ccl[0] @ zinf)

    def simulate(self):
        k = np.arange(self.periods + 1)
        _, yout, xout = signal.dlsim(self.sys, np.full(len(k), self.r), t=k * self.ts)
        self.y_k, self.u_k, self.x_k = yout[:, 0], yout[:, 1], xout[:, :self.n]
        # Exact inter-sample maps for τ on a grid of the period.
        taus = np.linspace(0.0, self.ts, POINTS_PER_PERIOD + 1)[1:]
        self.maps = [self.hold(tau) for tau in taus]
        rows = []
        for j in range(self.periods):
            for tau, (P, G) in zip(taus, self.maps):
                rows.append((j * self.ts + tau, self.C @ (P @ self.x_k[j] + G * self.u_k[j])))
        self.t = np.concatenate([[0.0], [r[0] for r in rows]])
        self.y = np.concatenate([[self.y_k[0]], [r[1] for r in rows]])

    def hold(self, tau):
        n = self.n
        M = np.zeros((n + 1, n + 1))
        M[:n, :n] = self.A * tau
        M[:n, n] = self.B * tau
        E = linalg.expm(M)
        return E[:n, :n], E[:n, n]

    def y_at(self, time):
        j = min(int(math.floor(time / self.ts)), self.periods - 1)
        P, G = self.hold(time - j * self.ts)
        return float(self.C @ (P @ self.x_k[j] + G * self.u_k[j]))

    def metrics(self, band):
        yn = self.y / self.y_inf
        i = int(np.argmax(yn))
        lo, hi = self.t[max(i - 1, 0)], self.t[min(i + 1, len(self.t) - 1)]
        res = optimize.minimize_scalar(lambda s: -self.y_at(s) / self.y_inf, bounds=(lo, hi), method="bounded",
                                       options={"xatol": 1e-13})
        peak, t_peak = -res.fun, res.x
        if yn[i] > peak:
            peak, t_peak = yn[i], self.t[i]
        overshoot = max(0.0, (peak - 1.0) * 100.0)
        outside = np.nonzero(np.abs(yn - 1.0) > band)[0]
        settling = None
        if len(outside) == 0:
            settling = 0.0
        elif outside[-1] < len(yn) - 1:
            j = outside[-1]
            edge = 1.0 + band if yn[j] > 1.0 else 1.0 - band
            settling = optimize.brentq(lambda s: self.y_at(s) / self.y_inf - edge, self.t[j], self.t[j + 1], xtol=1e-14)
        return {"overshoot_pct": overshoot, "peak_time": t_peak if overshoot > 0 else None, "settling_time": settling,
                "effort_peak": float(np.max(np.abs(self.u_k))), "final_value": self.y_inf}


def requirement_value(key, m, ref_tp):
    return {"overshoot_max_pct": m["overshoot_pct"], "settling_time_max": m["settling_time"],
            "effort_max": m["effort_peak"], "steady_state_error_max": 0.0}.get(key)


def close_rel(a, b, rel):
    if a is None or b is None:
        return a is None and b is None
    return abs(a - b) <= rel * max(abs(a), abs(b), 1e-300)


def check_design(tally, case, result, name, ts):
    design = result["designs"][name]
    label = f"{case}/{name}"
    loop = SampledLoop(result, design, ts)
    if not tally.check(label, "sampled loop stable in SciPy as in specloop", loop.stable == (design["status"] == "ok")):
        return None
    if not loop.stable:
        return None
    loop.simulate()
    band = result["spec"]["requirements"]["settling_band_pct"] / 100.0
    m = loop.metrics(band)
    sim = design["simulated"]
    tally.check(label, "simulated_loop is the sampled one", design.get("simulated_loop") == "sampled")
    tally.check(label, "final value vs SciPy", close_rel(sim["final_value"], m["final_value"], 1e-9),
                f"{sim['final_value']} vs {m['final_value']}")
    tally.check(label, "overshoot vs SciPy (between samples included)",
                abs(sim["overshoot_pct"] - m["overshoot_pct"]) <= TOL_PCT,
                f"specloop {sim['overshoot_pct']:.8f}, SciPy {m['overshoot_pct']:.8f} %")
    tally.check(label, "settling time vs SciPy", close_rel(sim["settling_time"], m["settling_time"], TOL_TIME_REL),
                f"specloop {sim['settling_time']}, SciPy {m['settling_time']} s")
    tally.check(label, "peak effort vs SciPy", close_rel(sim["effort_peak"], m["effort_peak"], TOL_EFFORT_REL),
                f"specloop {sim['effort_peak']}, SciPy {m['effort_peak']}")
    eq = (design.get("nonlinear") or {}).get("difference_equation")
    if eq is not None:
        ok = all(np.allclose(np.asarray(eq[key]), want, rtol=TOL_COEF_REL, atol=TOL_COEF_REL * max(1.0, np.max(np.abs(want))))
                 for key, want in (("reference_numerator", loop.rn), ("measurement_numerator", loop.mn),
                                   ("denominator", loop.den)) if len(eq[key]) == len(want))
        ok = ok and len(eq["denominator"]) == len(loop.den)
        tally.check(label, "difference equation = the documented rule", ok,
                    f"{eq['reference_numerator']} / {eq['denominator']} vs {list(loop.rn)} / {list(loop.den)}")
    return m


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--probe")
    args, _ = ap.parse_known_args()
    tally = Tally()
    plants = pathlib.Path(args.source_dir, "tests", "plants")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        # 1. The continuous design passes continuous and fails sampled.
        servo = (plants / "sampled_servo.toml").read_text()
        ts = 0.08
        continuous = tmp / "servo_continuous.toml"
        continuous.write_text("\n".join(l for l in servo.splitlines() if not l.startswith("sample_time")) + "\n")
        rc, out, err, res = run_design(args.specloop, continuous, tmp / "cont")
        case = "sampled_servo (continuous design)"
        if tally.check(case, "continuous design ran, exit 0", rc == 0 and res is not None, err.strip()[:300]):
            opt = res["designs"]["optimized"]
            reqs = {c["requirement"]: c["limit"] for c in opt["checks"]}
            num, den = res["plant"]["numerator"], res["plant"]["denominator"]
            cl = signal.lti(np.polymul(opt["controller"]["numerator"], num),
                            np.polyadd(np.polymul(opt["controller"]["denominator"], den),
                                       np.polymul(opt["controller"]["numerator"], num)))
            t = np.linspace(0.0, 20.0, 400001)
            _, y = signal.step(cl, T=t)
            os_cont = max(0.0, (np.max(y) - 1.0) * 100.0)
            tally.check(case, "SciPy: the continuous loop meets the overshoot limit",
                        os_cont <= reqs["overshoot_max_pct"] + 1e-3, f"{os_cont:.5f} % <= {reqs['overshoot_max_pct']} %")
            sampled_res = dict(res)
            sampled_res["spec"] = json.loads(json.dumps(res["spec"]))
            loop = SampledLoop(sampled_res, opt, ts)
            loop.simulate()
            m = loop.metrics(res["spec"]["requirements"]["settling_band_pct"] / 100.0)
            tally.check(case, "SciPy: the same gains sampled at 0.08 s exceed the overshoot limit",
                        m["overshoot_pct"] > reqs["overshoot_max_pct"] + 0.1,
                        f"{m['overshoot_pct']:.4f} % > {reqs['overshoot_max_pct']} %")
        # 2./3. Sampled specs designed on the sampled loop.
        for spec_name in ("sampled_servo", "sampled_pid", "sampled_lead"):
            case = spec_name
            spec_text = (plants / f"{spec_name}.toml").read_text()
            ts = float(next(l.split("=")[1] for l in spec_text.splitlines() if l.startswith("sample_time")))
            rc, out, err, res = run_design(args.specloop, plants / f"{spec_name}.toml", tmp / spec_name)
            if not tally.check(case, "design ran (exit 0 or 1), result.json written", rc in (0, 1) and res is not None,
                               err.strip()[:300]):
                continue
            tally.check(case, "the search's linear stages ran on the sampled loop", res["search"]["linear_loop"] == "sampled")
            tally.check(case, "sampling is an active effect; judged on the loop the spec describes",
                        "sampling" in res["search"]["active_effects"] and res["judged_on"] == "nonlinear")
            opt = res["designs"]["optimized"]
            met = bool((opt.get("nonlinear") or {}).get("meets_all"))
            tally.check(case, "exit code from the judged loop", (rc == 0) == met and res["met"] == met,
                        f"exit {rc}, met {res['met']}")
            measured = {}
            for name in res["designs"]:
                m = check_design(tally, case, res, name, ts)
                if m:
                    measured[name] = m
            if res["met"] and "optimized" in measured:
                m = measured["optimized"]
                for c in opt["checks"]:
                    v = requirement_value(c["requirement"], m, None)
                    if v is None:
                        continue
                    tally.check(case, f"claimed met holds on SciPy's sampled loop: {c['requirement']}",
                                v <= c["limit"] * (1 + 1e-6) + 1e-4 if c["requirement"] != "steady_state_error_max" else True,
                                f"SciPy {v} vs limit {c['limit']}")
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
