#!/usr/bin/env python3
"""The verdict of `specloop design`, end to end: judged on the loop the spec describes, exit code
included, checked against SciPy and closed-form bounds.

Invoked by CTest as
    /usr/bin/python3 tests/check_verdict.py --specloop SPECLOOP --source-dir DIR [other args ignored]

Test plants (tests/plants/, invented):
  quiet_servo             nothing the linear loop leaves out acts: no nonlinear stage, judged on
                          the linear loop, exit 0 exactly when it meets every requirement.
  heater_delay_reachable  limits that bind and an exact delay: the search ends on the nonlinear
                          loop and finds a design there (exit 0, judged_on "nonlinear"); that
                          design re-simulated here independently (fixed-step RK4 with the delay
                          as an exact shift, the PI's conditional integration decided per step;
                          common practice) meets the requirements within the integration's
                          resolution; with search.simulate = "linear" the same spec is a
                          linear-only pass: exit 1, said so.
  heater_delay_unreachable  the bang-bang bound: with u(t) ∈ [0, 5] and a plant whose impulse
                          response is non-negative (two real poles, positive gain), y(t) is at
                          most the response to u ≡ 5 (from scipy.signal.lsim), which is still below
                          the 2 % band at the settling limit, so no controller can meet the spec:
                          exit 1 is right, and the linear loop's pass is called a linear-only pass.
  sat_horizon             the reference P design saturates longer than the linear loop's horizon;
                          SciPy's solve_ivp (saturation switch located by an event, rtol 1e-11)
                          gives the end of saturation and the settling time, which the
                          confirmation (its horizon extended) must match within 1e-3 relative.
  stiff_lag               time scales from microseconds to seconds: the nonlinear confirmation's
                          final value (1, final-value theorem with integral action), peak effort
                          (SciPy: u = C/(1 + CG) by expm, at least the kick Kp·r at 0+) and overshoot (SciPy: e^{At} by
                          scipy.linalg.expm on a grid around the microsecond peak, refined with
                          minimize_scalar) within 1e-3 percentage points; the design's delay margin
                          and command amplification are said in its warnings.
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
from scipy import integrate, linalg, optimize, signal

from reference_common import TerminalEvents, Tally


def run_design(exe, spec_path, out_dir):
    proc = subprocess.run([exe, "design", str(spec_path), "--out", str(out_dir)], capture_output=True, text=True,
                          timeout=600)
    path = pathlib.Path(out_dir, "result.json")
    result = json.loads(path.read_text()) if path.exists() else None
    return proc.returncode, proc.stdout, proc.stderr, result


def judged_met(result):
    opt = result["designs"]["optimized"]
    if result["judged_on"] == "nonlinear":
        return bool((opt.get("nonlinear") or {}).get("meets_all"))
    return bool(opt["meets_all"])


def common(tally, case, rc, out, err, res):
    if not tally.check(case, "design ran, result.json written", rc in (0, 1) and res is not None, err.strip()[:300]):
        return False
    tally.check(case, "exit 0 exactly when the design meets every requirement on the judged loop",
                (rc == 0) == judged_met(res) == res["met"], f"exit {rc}, judged_on {res['judged_on']}, met {res['met']}")
    tally.check(case, "the terminal summary names the active effects and the nonlinear evaluations",
                "active for the linear optimum:" in out and f"{res['search']['nonlinear_evaluations']} evaluations on the "
                                                            "nonlinear loop" in out)
    return True


# ---- heater: an independent re-simulation of the judged loop ---------------------------------------

def heater_loop(result, h=0.002):
    """Fixed-step RK4 of the PI loop with conditional integration, saturation and an exact delay."""
    spec = result["spec"]
    opt = result["designs"]["optimized"]
    kp, ki = opt["controller"]["parallel"]["kp"], opt["controller"]["parallel"]["ki"]
    umin, umax = spec["actuator"]["min"], spec["actuator"]["max"]
    L = spec["plant"]["delay"]
    r = spec["reference"]["amplitude"]
    num = [c for c in spec["plant"]["numerator"]]
    den = [c for c in spec["plant"]["denominator"]]
    A, B, C, _ = signal.tf2ss(num, den)
    A = A.tolist()
    B = B[:, 0].tolist()
    C = C[0, :].tolist()
    horizon = opt["nonlinear"]["horizon"]
    steps = int(round(horizon / h))
    lag = int(round(L / h))
    assert abs(lag * h - L) < 1e-12
    applied = [0.0] * (steps + 1)
    x = [0.0, 0.0]
    integ = 0.0
    ys = [0.0]

    def plant_rate(xv, u):
        return [A[0][0] * xv[0] + A[0][1] * xv[1] + B[0] * u, A[1][0] * xv[0] + A[1][1] * xv[1] + B[1] * u]

    def delayed(k_float):  # applied u at step index k_float (fractional: linear interpolation)
        if k_float < 0:
            return 0.0
        k0 = int(math.floor(k_float))
        frac = k_float - k0
        return applied[k0] if frac == 0.0 else applied[k0] * (1 - frac) + applied[k0 + 1] * frac

    for k in range(steps):
        y = C[0] * x[0] + C[1] * x[1]
        e = r - y
        uc = kp * e + integ
        us = min(max(uc, umin), umax)
        applied[k] = us
        frozen = (uc > umax and e > 0) or (uc < umin and e < 0)
        # The plant sees u delayed by L: at stage times k, k + 1/2, k + 1 (in steps) minus the lag.
        u0, u1, u2 = delayed(k - lag), delayed(k - lag + 0.5), delayed(k - lag + 1)
        k1 = plant_rate(x, u0)
        k2 = plant_rate([x[0] + h / 2 * k1[0], x[1] + h / 2 * k1[1]], u1)
        k3 = plant_rate([x[0] + h / 2 * k2[0], x[1] + h / 2 * k2[1]], u1)
        k4 = plant_rate([x[0] + h * k3[0], x[1] + h * k3[1]], u2)
        x = [x[i] + h / 6 * (k1[i] + 2 * k2[i] + 2 * k3[i] + k4[i]) for i in range(2)]
        if not frozen:
            y_next = C[0] * x[0] + C[1] * x[1]
            integ += ki * h / 2 * (e + (r - y_next))
        ys.append(C[0] * x[0] + C[1] * x[1])
        applied[k + 1] = applied[k]
    t = np.arange(steps + 1) * h
    return t, np.array(ys)


def settling(t, y, y_inf, band):
    out = np.nonzero(np.abs(y / y_inf - 1.0) > band)[0]
    if len(out) == 0:
        return 0.0
    j = out[-1]
    if j == len(y) - 1:
        return None
    edge = 1.0 + band if y[j] / y_inf > 1.0 else 1.0 - band
    f0, f1 = y[j] / y_inf - edge, y[j + 1] / y_inf - edge
    return t[j] + f0 / (f0 - f1) * (t[j + 1] - t[j])


def check_heaters(tally, exe, plants, tmp):
    case = "heater_delay_reachable"
    rc, out, err, res = run_design(exe, plants / f"{case}.toml", tmp / case)
    if common(tally, case, rc, out, err, res):
        s = res["search"]
        tally.check(case, "limits and the exact delay active; the search ended on the nonlinear loop",
                    set(s["active_effects"]) == {"actuator_limits", "delay"} and s["nonlinear_evaluations"] > 0
                    and res["judged_on"] == "nonlinear", f"{s['active_effects']}, {s['nonlinear_evaluations']}")
        tally.check(case, "a design meeting every requirement there was found: exit 0", rc == 0 and res["met"])
        if res["met"]:
            t, y = heater_loop(res)
            reqs = res["spec"]["requirements"]
            y_inf = res["spec"]["reference"]["amplitude"]
            os_ref = max(0.0, (np.max(y) / y_inf - 1.0) * 100.0)
            st_ref = settling(t, y, y_inf, reqs["settling_band_pct"] / 100.0)
            nl = res["designs"]["optimized"]["nonlinear"]["simulated"]
            tally.check(case, "independent re-simulation: settling time as claimed (±0.05 s) and within the limit",
                        st_ref is not None and abs(st_ref - nl["settling_time"]) <= 0.05
                        and st_ref <= reqs["settling_time_max"] + 0.05,
                        f"RK4 {st_ref} s, specloop {nl['settling_time']} s, limit {reqs['settling_time_max']} s")
            tally.check(case, "independent re-simulation: overshoot as claimed (±0.05 pp) and within the limit",
                        abs(os_ref - nl["overshoot_pct"]) <= 0.05 and os_ref <= reqs["overshoot_max_pct"] + 0.05,
                        f"RK4 {os_ref:.4f} %, specloop {nl['overshoot_pct']:.4f} %")
        # The same spec with the search kept on the linear loop: a linear-only pass, exit 1.
        linear_spec = tmp / "heater_linear.toml"
        linear_spec.write_text((plants / f"{case}.toml").read_text() + "[search]\nsimulate = \"linear\"\n")
        rc2, out2, err2, res2 = run_design(exe, linear_spec, tmp / "heater_linear")
        lcase = case + " (search.simulate = linear)"
        if common(tally, lcase, rc2, out2, err2, res2):
            tally.check(lcase, "no nonlinear stage, still judged on the nonlinear loop",
                        res2["search"]["nonlinear_evaluations"] == 0 and res2["judged_on"] == "nonlinear")
            tally.check(lcase, "a linear-only pass: exit 1, said so",
                        rc2 == 1 and res2["met_on_linear"] and not res2["met"] and "linear-only pass" in out2,
                        f"exit {rc2}, met_on_linear {res2['met_on_linear']}")

    case = "heater_delay_unreachable"
    text = (plants / f"{case}.toml").read_text()
    rc, out, err, res = run_design(exe, plants / f"{case}.toml", tmp / case)
    if common(tally, case, rc, out, err, res):
        spec = res["spec"]
        T = spec["requirements"]["settling_time_max"]
        r = spec["reference"]["amplitude"]
        band = spec["requirements"]["settling_band_pct"] / 100.0
        umax = spec["actuator"]["max"]
        L = spec["plant"]["delay"]
        plant = signal.lti(spec["plant"]["numerator"], spec["plant"]["denominator"])
        tt = np.linspace(0.0, T - L, 200001)
        _, yb, _ = signal.lsim(plant, np.full_like(tt, umax), tt)
        bound = yb[-1]  # the output at T under u ≡ umax from t = 0, delayed by L
        tally.check(case, "bang-bang bound: full power from t = 0 is still below the band at the settling limit",
                    bound < (1.0 - band) * r, f"y({T}) <= {bound:.4f} < {(1 - band) * r:.4f}")
        tally.check(case, "exit 1: no design meets it on the loop the spec describes", rc == 1 and not res["met"])
        tally.check(case, "the linear loop's pass is reported as a linear-only pass",
                    res["met_on_linear"] and "linear-only pass" in out)


def check_quiet(tally, exe, plants, tmp):
    case = "quiet_servo"
    rc, out, err, res = run_design(exe, plants / f"{case}.toml", tmp / case)
    if common(tally, case, rc, out, err, res):
        tally.check(case, "nothing active: no nonlinear stage, judged on the linear loop",
                    res["search"]["active_effects"] == [] and res["search"]["nonlinear_evaluations"] == 0
                    and res["judged_on"] == "linear" and res["search"]["simulate"] == "auto")
        tally.check(case, "exit 0, met", rc == 0 and res["met"])


def check_sat_horizon(tally, exe, plants, tmp):
    case = "sat_horizon"
    rc, out, err, res = run_design(exe, plants / f"{case}.toml", tmp / case)
    if not common(tally, case, rc, out, err, res):
        return
    spec = res["spec"]
    ref = res["designs"]["reference"]
    k = ref["controller"]["parallel"]["kp"]
    r = spec["reference"]["amplitude"]
    umin, umax = spec["actuator"]["min"], spec["actuator"]["max"]
    A, B, C, _ = signal.tf2ss(res["plant"]["numerator"], res["plant"]["denominator"])
    B, C = B[:, 0], C[0, :]

    def rhs(_, x, mode):
        u = umax if mode == 1 else (umin if mode == -1 else k * (r - C @ x))
        return A @ x + B * u

    events = TerminalEvents()
    events.add(lambda t, x, mode: k * (r - C @ x) - umax, -1)  # leaves the upper limit
    x0 = np.zeros(A.shape[0])
    first = integrate.solve_ivp(rhs, (0.0, 5.0), x0, args=(1,), events=events, rtol=1e-11, atol=1e-13,
                                dense_output=True)
    t_sat = first.t_events[0][0]
    second = integrate.solve_ivp(rhs, (t_sat, 5.0), first.y[:, -1], args=(0,), rtol=1e-11, atol=1e-13,
                                 dense_output=True)
    y_inf = ref["simulated"]["final_value"]
    band = spec["requirements"]["settling_band_pct"] / 100.0
    tt = np.linspace(t_sat, 5.0, 500001)
    yy = C @ second.sol(tt)
    out_idx = np.nonzero(np.abs(yy / y_inf - 1.0) > band)[0]
    j = out_idx[-1]
    edge = 1.0 + band if yy[j] / y_inf > 1.0 else 1.0 - band
    t_settle = optimize.brentq(lambda s: C @ second.sol(s) / y_inf - edge, tt[j], tt[j + 1], xtol=1e-14)
    nl = ref["nonlinear"]
    tally.check(case, "SciPy: saturated until 0.326 s and settled at 0.333 s (about)",
                abs(t_sat - 0.326) < 2e-3 and abs(t_settle - 0.333) < 2e-3, f"{t_sat:.6f} s, {t_settle:.6f} s")
    tally.check(case, "the confirmation ran past the linear loop's horizon", nl["horizon"] > 0.3 and not nl["horizon_bound_hit"],
                f"horizon {nl['horizon']} s")
    st = nl["simulated"]["settling_time"]
    tally.check(case, "confirmation's settling time = SciPy's (1e-3 relative)", st is not None and abs(st - t_settle) <= 1e-3 * t_settle,
                f"specloop {st}, SciPy {t_settle}")
    sat_time = nl["saturated_fraction"] * nl["horizon"]
    tally.check(case, "time saturated = SciPy's (1e-3 relative)", abs(sat_time - t_sat) <= 1e-3 * t_sat,
                f"specloop {sat_time}, SciPy {t_sat}")
    tally.check(case, "reference design confirmed and meets every requirement there", nl["confirmed"] and nl["meets_all"])


def check_stiff(tally, exe, plants, tmp):
    case = "stiff_lag"
    rc, out, err, res = run_design(exe, plants / f"{case}.toml", tmp / case)
    if not common(tally, case, rc, out, err, res):
        return
    num, den = res["plant"]["numerator"], res["plant"]["denominator"]
    for name in ("reference", "optimized"):
        d = res["designs"][name]
        label = f"{case}/{name}"
        cn, cd = d["controller"]["numerator"], d["controller"]["denominator"]
        A, B, C, D = signal.tf2ss(np.polymul(cn, num), np.polyadd(np.polymul(cd, den), np.polymul(cn, num)))
        Ainv_B = np.linalg.solve(A, B)

        def y_at(t):
            return float(C @ (linalg.expm(A * t) @ Ainv_B - Ainv_B)) + float(D[0, 0])

        grid = np.geomspace(1e-8, 1e-2, 6001)
        ys = np.array([y_at(t) for t in grid])
        i = int(np.argmax(ys))
        best = optimize.minimize_scalar(lambda t: -y_at(t), bounds=(grid[max(i - 1, 0)], grid[i + 1]), method="bounded",
                                        options={"xatol": 1e-15})
        # Final-value theorem: y∞ = T(0) from the closed loop's polynomials (1 with integral action).
        cl_num, cl_den = np.polymul(cn, num), np.polyadd(np.polymul(cd, den), np.polymul(cn, num))
        y_inf = cl_num[-1] / cl_den[-1]
        os_ref = max(0.0, (max(-best.fun, ys[i]) / y_inf - 1.0) * 100.0)
        nl = d["nonlinear"]["simulated"]
        kp = d["controller"]["parallel"]["kp"]
        tally.check(label, "nonlinear final value = T(0) (final-value theorem)", abs(nl["final_value"] - y_inf) <= 1e-9,
                    f"{nl['final_value']}, T(0) = {y_inf}")
        # The command u = C/(1 + C·G)·r: its kick Kp·r at 0+, then the integral adds while y rises.
        Au, Bu, Cu, Du = signal.tf2ss(np.polymul(cn, den), cl_den)
        Au_inv_B = np.linalg.solve(Au, Bu)

        def u_at(t):
            return float(Cu @ (linalg.expm(Au * t) @ Au_inv_B - Au_inv_B)) + float(Du[0, 0])

        us = np.array([abs(u_at(t)) for t in grid])
        k = int(np.argmax(us))
        peak = optimize.minimize_scalar(lambda t: -abs(u_at(t)), bounds=(grid[max(k - 1, 0)], grid[min(k + 1, len(grid) - 1)]),
                                        method="bounded", options={"xatol": 1e-15})
        u_peak = max(-peak.fun, us[k], abs(kp))
        tally.check(label, "nonlinear peak effort = SciPy's peak |u| (at least the kick Kp·r at 0+), 1e-6 relative",
                    abs(nl["effort_peak"] - u_peak) <= 1e-6 * u_peak, f"{nl['effort_peak']} vs {u_peak}")
        tally.check(label, "nonlinear overshoot = SciPy's (1e-3 pp)", abs(nl["overshoot_pct"] - os_ref) <= 1e-3,
                    f"specloop {nl['overshoot_pct']:.6f}, SciPy {os_ref:.6f} %")
    warnings = " ".join(res["designs"]["optimized"]["warnings"])
    tally.check(case, "the optimized design's warnings name its delay margin and its command amplification",
                "delay margin" in warnings and "its final value" in warnings, warnings[:200])
    tally.check(case, "the warnings are printed", "Warning: delay margin" in out)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    args, _ = ap.parse_known_args()
    tally = Tally()
    plants = pathlib.Path(args.source_dir, "tests", "plants")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        check_quiet(tally, args.specloop, plants, tmp)
        check_heaters(tally, args.specloop, plants, tmp)
        check_sat_horizon(tally, args.specloop, plants, tmp)
        check_stiff(tally, args.specloop, plants, tmp)
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
