#!/usr/bin/env python3
"""End to end: recorded test → `specloop fit` → `specloop design SPEC --plant DIR/plant.toml` with
worst-case robust design → SciPy re-measures the designed controller on the TRUE plant that
generated the data: the spec's requirements are met there.

Invoked by CTest as
    /usr/bin/python3 tests/check_fit_design.py --specloop BIN --source-dir ROOT
(`--probe` is accepted and ignored; `--keep DIR` keeps the files.)

Cases (invented; the spec tests/fit_design/water_heater_pi.toml, a PI on a water heater's outlet
temperature with overshoot, settling time, zero steady-state error and a phase margin, and an
[uncertainty] section in mode "worst-case" whose ranges --plant supplies):
  heater_fopdt   the true plant 0.6·e^(−5.3 s)/(45 s + 1) K/%, a bump test of 600 samples at about
                 1 s (uneven), noise σ = 0.05 K; fitted with --model first-order-delay.
  heater_sopdt   the true plant 0.6·e^(−3.1 s)/((40 s + 1)(6 s + 1)), two steps, σ = 0.05 K;
                 fitted with the default set (the best model by AIC, whichever kind it is).
The records are computed exactly by SciPy (tests/fit_reference.py: cont2discrete ZOH stepping with
the delay exact).

Checks per case:
  fit        exit 0, a best model, plant.toml written.
  plant      plant.toml's [plant] (README zeros/poles/gain/delay notation: k·Π(s − z)/Π(s − p))
             is fit.json's best model: G(jω) of the two agree within 1e-8 relative at 7 frequencies
             over the model's corners, the delays within 1e-9.
  box        each [uncertainty] range holds the [plant] value it ranges; for first-order-delay the
             delay's range is L ∓ 2σ (clipped at 0), 1e-9 relative, and the pole's −1/(T ∓ 2σ)
             within (2σ_T/T)² relative (the exact image of T's interval and its first-order mapping
             differ by that much; either is a fair reading of "the ±2σ intervals mapped").
  design     exit 0 (met), result.json's plant is plant.toml's (the spec's placeholder replaced),
             robust.mode worst-case, robust.keys = the file's ranged keys, the optimized design's
             claim holds.
  true       SciPy (the oracle's machinery, tests/check_scipy_robust.measure_plant: the exact
             linear response by scipy.linalg.expm with extrema and crossings refined by brentq,
             margins by brentq on L(jω), metrics by README "Metric definitions") re-measures the
             optimized controller from result.json on the TRUE plant, its delay as the tool's
             linear model has it (the Padé approximant of result.json's order, README
             "plant.delay"): every requirement met within the oracle's CLAIM_LINEAR re-measurement
             bound.
  true-exact the same controller (rebuilt from result.json as the oracle does:
             check_scipy_claims.controller_form, u = C_r·r − C·y) on the TRUE plant with its EXACT
             delay e^(−Ls), every requirement of the spec measured and checked against its limit:
               stable     the Nyquist criterion on C(jω)G(jω)e^(−jωL) (argument principle, the
                          contour indented around s = 0; common practice): no closed-loop root in
                          the right half-plane;
               time       ExactDelayLoop: the method of steps (delay-differential equations, common
                          practice) on a grid h = L/m (m ≥ 64 and h·ρ ≤ 0.01 for the fastest
                          open-loop rate and the gain crossover), the delayed command held
                          first-order between grid points and each step integrated exactly
                          (augmented matrix exponential), the response between grid points exact
                          for that model;
                          overshoot, settling time (the LAST exit from the band read from
                          result.json's spec.requirements.settling_band_pct), steady-state error
                          (y∞ exact: at rest the delay drops out) ... by README "Metric
                          definitions" with the oracle's check_scipy_claims.measure (extrema and
                          crossings refined by brentq); run at h and h/2, |v(h) − v(h/2)| is the
                          error estimate (Richardson; the method is second order, so v(h/2) errs by
                          about a third of it); the last quarter of the horizon (2 × the Padé
                          loop's ln(1e4)/σ_slow) within 1e-3 of the band;
               margins    check_scipy_claims.margins on C·G·e^(−jωL) (brentq on a logarithmic grid;
                          exact, no simulation), 2000 and 4000 points per decade for the estimate.
             A requirement is decided when its value moved by 2 × the estimate either way still
             meets (or still misses) the limit (CLAIM_LINEAR bound); while one is undecided both grids
             are halved, down to h/4 and h/8, then the check fails loudly ("the grid decides"). NOTE lines give limit,
             Padé value, exact value, the h value, Richardson's extrapolation and the estimate.
Self-test first (closed forms worked out in self_test_exact): a P controller on a first-order plant
with delay — [0, 2L] is the open-loop step response of K·G delayed by L, 1e-6 relative; [2L, 3L]
second order, the h − h/2 estimate bounding the error; the Nyquist count at 0.97 and 1.03 × the
ultimate gain of a lag and of an integrator with delay.
The last line is "N passed, N failed".
"""
import argparse
import json
import math
import pathlib
import shutil
import subprocess
import sys
import tempfile
import time
import tomllib

import numpy as np
from scipy import linalg

HERE = pathlib.Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
import check_scipy_robust as robust  # noqa: E402  (measure_plant, plant_of, linear_model)
import fit_reference as fr  # noqa: E402

oracle = robust.oracle  # check_scipy_claims: controller_form, Piece, measure, margins, requirement_value

SPEC = "tests/fit_design/water_heater_pi.toml"
CASES = [
    dict(name="heater_fopdt", kind="first-order-delay", params={"k": 0.6, "T": 45.0, "L": 5.3}, shape="step",
         samples=600, period=1.0, sigma=0.05, seed=42, model_args=["--model", "first-order-delay"]),
    dict(name="heater_sopdt", kind="second-order-delay", params={"k": 0.6, "T1": 40.0, "T2": 6.0, "L": 3.1},
         shape="steps", samples=800, period=1.0, sigma=0.05, seed=43, model_args=[]),
]


def model_frequency_response(kind, values, w):
    """G(jω) of a fit.json model (fit_reference's realization of each kind), without the delay."""
    A, B, C = fr.KINDS[kind]["ss"](values)
    n = A.shape[0]
    return np.array([(C @ np.linalg.solve(1j * x * np.eye(n) - A, B))[0, 0] for x in w])


def plant_frequency_response(doc, w):
    num, den, delay, _ = robust.plant_of(doc)
    return np.polyval(num, 1j * w) / np.polyval(den, 1j * w), delay


# ---- the loop with the exact delay (true-exact) --------------------------------------------------------

H_RHO = 0.01          # coarse grid: h·ρ ≤ H_RHO for the fastest open-loop rate and the gain crossover
MIN_STEPS = 64        # and at least this many steps per delay
DECIDE = 2.0          # a requirement is decided when the value moved by DECIDE × its error estimate
                      # (either way) still meets, or still misses, the limit
TAIL_FRACTION = 1e-3  # the response's last quarter stays within this fraction of the band (settled)
MAX_HALVINGS = 3      # an undecided requirement halves h again, up to 2^MAX_HALVINGS·MIN_STEPS per delay


class ExactDelayLoop:
    """The loop u = C_r·r − C·y around a strictly proper plant ẋp = Ap·xp + Bp·w, y = Cp·xp whose
    input is the command delayed exactly, w(t) = u(t − L) (everything at rest before the step of r at
    t = 0, so w = 0 on [0, L)). The controller is result.json's, in the oracle's observable form
    (check_scipy_claims.controller_form: ẋc = Ao·xc + Br·r − By·y, u = Co·xc + Dr·r − Dy·y). With
    z = [xp | xc]:  ż = M·z + Nw·w + Nr·r,  y = Cy·z,  u = Ku·z + Dr·r.

    Method of steps (delay-differential equations, common practice) on a fixed grid t_k = k·h with
    L = m·h: on [t_k, t_k+1) the input w is u on [t_k−m, t_k−m+1), already computed, held here by
    its first-order hold (the straight line through u(t_k−m⁺) and u(t_k−m+1)); each step is then
    integrated exactly by the exponential of the augmented matrix [[M, Nw, 0, Nr·r], [0, 0, 1, 0], 0, 0]
    (the first-order-hold discretization, common practice), so the hold of u over h is the only
    error: O(h²), as u is smooth between the grid points (its kinks sit at multiples of L, which are
    grid points). Between grid points the
    model's response is evaluated exactly (ev), so extrema and crossings are refined by brentq on
    it (check_scipy_claims.measure)."""

    def __init__(self, Ap, Bp, Cp, controller, r):
        c = controller
        Ao, Co, By, Br, Dy, Dr = oracle.controller_form(c["numerator"], c["denominator"],
                                                        c["reference_numerator"], c["reference_denominator"])
        Bp, Cp = np.ravel(Bp), np.ravel(Cp)
        npl, nc = len(Bp), len(Co)
        n = npl + nc
        self.M = np.zeros((n, n))
        self.M[:npl, :npl] = Ap
        self.M[npl:, :npl] = -np.outer(By, Cp)
        self.M[npl:, npl:] = Ao
        self.Nw = np.concatenate([Bp, np.zeros(nc)])
        self.Nr = np.concatenate([np.zeros(npl), Br]) * r
        self.Cy = np.concatenate([Cp, np.zeros(nc)])
        self.Ku = np.concatenate([-Dy * Cp, Co])
        self.u_r = Dr * r
        self.n, self.r = n, r
        self.aug = np.zeros((n + 3, n + 3))
        self.aug[:n, :n], self.aug[:n, n], self.aug[n, n + 1], self.aug[:n, n + 2] = self.M, self.Nw, 1.0, self.Nr

    def final_value(self):
        """y∞ (README: the closed loop's DC gain, exact): at rest w = u, the delay drops out."""
        z = np.linalg.solve(self.M + np.outer(self.Nw, self.Ku), -(self.Nw * self.u_r + self.Nr))
        return float(self.Cy @ z)

    def step_at(self, tau):
        E = linalg.expm(self.aug * tau)
        n = self.n
        return E[:n, :n], E[:n, n], E[:n, n + 1], E[:n, n + 2]

    def simulate(self, L, m, t_end):
        """The response on [0, ≥ t_end], h = L/m: two pieces (check_scipy_claims.Piece), [0, L] and
        [L, end], split where w jumps by the command's kick u(0⁺)."""
        h = L / m
        K = int(math.ceil(t_end / h * (1.0 - 1e-12)))
        F, g0, g1, gr = self.step_at(h)
        Z, U = np.zeros((K + 1, self.n)), np.zeros(K + 1)
        W0, S = np.zeros(K), np.zeros(K)
        z = np.zeros(self.n)
        Ku, u_r = self.Ku, self.u_r
        for k in range(K):
            U[k] = Ku @ z + u_r                    # u(t_k⁺): the kick at t = 0 included
            if k >= m:                             # U[k − m + 1] is known: k − m + 1 ≤ k
                W0[k], S[k] = U[k - m], (U[k - m + 1] - U[k - m]) / h
            z = F @ z + g0 * W0[k] + g1 * S[k] + gr
            Z[k + 1] = z
        U[K] = Ku @ z + u_r
        t = h * np.arange(K + 1)
        w_left = np.concatenate([[0.0], W0 + S * h])          # w(t_k⁻)
        w_right = np.concatenate([W0, [W0[-1] + S[-1] * h]])  # w(t_k⁺)

        def piece(ka, kb, w_at):
            zd = Z[ka:kb + 1] @ self.M.T + np.outer(w_at[ka:kb + 1], self.Nw) + self.Nr

            def ev(tq, ka=ka, kb=kb):
                k = min(max(int(tq / h), ka), kb - 1)
                tau = tq - k * h
                Fq, q0, q1, qr = self.step_at(tau)
                zq = Fq @ Z[k] + q0 * W0[k] + q1 * S[k] + qr
                zdq = self.M @ zq + self.Nw * (W0[k] + S[k] * tau) + self.Nr
                return float(self.Cy @ zq), float(self.Cy @ zdq), float(Ku @ zq + u_r), float(Ku @ zdq)
            return oracle.Piece(t[ka:kb + 1], Z[ka:kb + 1] @ self.Cy, zd @ self.Cy, U[ka:kb + 1], zd @ Ku, ev)
        # [0, L]: the left limits at t = L (w still 0); [L, end]: the right limits
        w_a = w_left.copy()
        w_a[:m] = w_right[:m]
        return [piece(0, m, w_a), piece(m, K, w_right)], t[-1]


def rhp_closed_loop_poles(cn, cd, gn, gd, delay, per_decade=2000):
    """How many roots 1 + C(s)·G(s)·e^(−s·delay) has in the closed right half-plane, by the argument
    principle (the Nyquist criterion, common practice): 1 + L(s) along the contour up the jω axis,
    indented to the right around the open-loop poles at s = 0 (the half circle ε·e^(jθ), θ from −π/2
    to π/2) and closed through the right half-plane at infinity, where L → 0 (strictly proper; |e^(−sL)|
    ≤ 1 there). With no other open-loop pole in the closed right half-plane, the count is minus the
    counter-clockwise turns: −(2·Δarg over ω ∈ [ε, ∞) + Δarg over the half circle)/2π (the negative
    frequencies mirror the positive ones). Raises when the grid cannot follow the phase."""
    num, den = np.polymul(oracle.strip(cn), oracle.strip(gn)), np.polymul(oracle.strip(cd), oracle.strip(gd))
    inner = np.trim_zeros(den, "b")
    others = np.roots(inner)
    if len(others) and np.max(others.real) >= 0.0:
        raise NotImplementedError("an open-loop pole in the right half-plane off s = 0")
    scales = [abs(z) for p in (np.trim_zeros(num, "b"), inner) for z in np.roots(p) if abs(z) > 0] + [1.0 / delay]
    eps, hi = min(scales) * 1e-6, max(scales) * 1e4

    def f(s):
        return 1.0 + np.polyval(num, s) / np.polyval(den, s) * np.exp(-s * delay)
    semi = np.unwrap(np.angle(f(eps * np.exp(1j * np.linspace(-math.pi / 2, math.pi / 2, 4001)))))
    w = np.geomspace(eps, hi, int(math.ceil(math.log10(hi / eps) * per_decade)))
    fw = f(1j * w)
    arg = np.unwrap(np.angle(fw))
    beyond = np.abs(f(1j * np.geomspace(hi, 1e3 * hi, 3000)) - 1.0)
    jumps = max(float(np.max(np.abs(np.diff(arg)))), float(np.max(np.abs(np.diff(semi)))))
    if jumps > 0.3 or np.max(beyond) >= 0.5:
        raise RuntimeError(f"Nyquist grid too coarse (largest phase step {jumps:.3g} rad) or |L| ≥ 0.5 "
                           f"beyond {hi:.3g} rad/s")
    turns = (2.0 * (arg[-1] - arg[0] - np.angle(fw[-1])) + (semi[-1] - semi[0])) / (2.0 * math.pi)
    return -turns


def measure_exact(ss, delay, controller, r, band_pct, reqs, tref, horizon, gn, gd):
    """Every requirement on the loop with the exact delay, at the grids h and h/2: {rhp, stable,
    values (h/2), coarse (h), errors (|v(h) − v(h/2)|: Richardson's estimate — the method is second
    order, so v(h/2) errs by about a third of it), verdicts (decide), steps (per delay), tail}. While
    a requirement is undecided the grid is halved again, at most MAX_HALVINGS times."""
    loop = ExactDelayLoop(*ss, controller, r)
    cn, cd = oracle.strip(controller["numerator"]), oracle.strip(controller["denominator"])
    rhp = rhp_closed_loop_poles(cn, cd, gn, gd, delay)
    out = {"rhp": rhp, "stable": abs(rhp) < 1e-6}
    if not out["stable"]:
        return out
    y_inf = loop.final_value()
    margin_sets = [oracle.margins(cn, cd, gn, gd, delay, per_decade=pd) for pd in (2000, 4000)]
    rho = max([float(np.max(np.abs(np.linalg.eigvals(loop.M))))] +
              [mg["gain_crossover"] for mg in margin_sets if mg["gain_crossover"]])
    band = band_pct / 100.0 * abs(y_inf)

    def run(m):
        pieces, t_end = loop.simulate(delay, m, horizon)
        last = pieces[-1]
        out["tail"].append(float(np.max(np.abs(last.y[last.t >= 0.75 * t_end] - y_inf))) / band)
        return oracle.measure(pieces, y_inf, r, band_pct / 100.0, t_end)

    def values(me, mg):
        return {q["key"]: oracle.requirement_value(q["key"], me, mg, tref, band_pct) for q in reqs}
    m, out["tail"] = max(MIN_STEPS, int(math.ceil(delay * rho / H_RHO))), []
    me_coarse = run(m)
    for _ in range(MAX_HALVINGS):
        me_fine = run(2 * m)
        coarse, fine = values(me_coarse, margin_sets[0]), values(me_fine, margin_sets[1])
        out.update(values=fine, coarse=coarse, steps=(m, 2 * m), errors={}, verdicts={})
        for q in reqs:
            k, a, b = q["key"], coarse[q["key"]], fine[q["key"]]
            out["errors"][k] = abs(a - b) if a is not None and b is not None else math.inf
            out["verdicts"][k] = decide(k, b, out["errors"][k], q["limit"], q["upper"])
        if "undecided" not in out["verdicts"].values():
            break
        me_coarse, m = me_fine, 2 * m
    out["settled"] = max(out["tail"]) <= TAIL_FRACTION
    return out


def decide(key, value, err, limit, upper):
    """'met', 'missed' or 'undecided': the value moved by DECIDE × its error estimate against the
    limit still meets it (within the oracle's CLAIM_LINEAR re-measurement bound), or moved in its
    favour still misses it."""
    if value is None or not math.isfinite(err):
        return "undecided" if value is not None else "missed"
    tol = oracle.claim_tolerance(key, limit, oracle.CLAIM_LINEAR)
    worse, better = (value + DECIDE * err, value - DECIDE * err) if upper else (value - DECIDE * err, value + DECIDE * err)
    if oracle.meets(key, worse, limit, upper, tol):
        return "met"
    return "missed" if not oracle.meets(key, better, limit, upper, tol) else "undecided"


def self_test_exact(tally):
    """The simulator and the stability count against closed forms (worked out for this file).
    A P controller K on g/(T s + 1)·e^(−Ls), r a step at 0, a = 1/T: y = 0 on [0, L]; u = K·r there,
    so y = g·K·r·(1 − e^(−a(t − L))) on [L, 2L] (the open-loop step response of K·G delayed by L);
    then w(t) = K·r·(1 − g·K) + g·K²·r·e^(−aσ), σ = t − 2L, and on [2L, 3L]
    y = g·K·r·(1 − g·K) + (y(2L) − g·K·r·(1 − g·K))·e^(−aσ) + a·g²·K²·r·σ·e^(−aσ) (the forcing at
    the plant's own rate gives the σ·e^(−aσ) term). On [0, 2L] the hold is exact (u is constant on
    [0, L)): 1e-6 relative, on and between the grid points. On [2L, 3L] the hold errs by O(h²):
    the observed order between h and h/2 is 2 (±0.2), the difference of the two runs bounds the
    finer run's error (the Richardson estimate used in true-exact), and the extrapolation
    (4·y(h/2) − y(h))/3 is within 1e-6 relative. The Nyquist count: P control of g·e^(−Ls)/(T s + 1)
    is stable up to K_u = √(1 + (ω_u·T)²)/g, atan(ω_u·T) + ω_u·L = π, and of e^(−Ls)/s up to
    K_u = π/(2L) (common practice): 0 roots at 0.97·K_u, 2 at 1.03·K_u."""
    g, T, L, K, r = 0.8, 2.5, 1.3, 1.7, 2.0
    a, top = 1.0 / T, g * K * r
    loop = ExactDelayLoop(np.array([[-a]]), np.array([[a]]), np.array([[g]]),
                          {"numerator": [K], "denominator": [1.0], "reference_numerator": [K],
                           "reference_denominator": [1.0]}, r)
    y2L, c0 = top * -math.expm1(-a * L), top * (1.0 - g * K)

    def exact(t):
        t = np.asarray(t, float)
        s = np.clip(t - 2.0 * L, 0.0, None)
        return np.where(t <= L, 0.0, np.where(t <= 2.0 * L, top * -np.expm1(-a * (t - L)),
                                              c0 + (y2L - c0) * np.exp(-a * s) + a * g * g * K * K * r * s * np.exp(-a * s)))
    runs = {}
    for m in (16, 32):
        pieces, _ = loop.simulate(L, m, 3.0 * L)
        t = np.concatenate([p.t for p in pieces])
        y = np.concatenate([p.y for p in pieces])
        runs[m] = (pieces, t, y)
    pieces, t, y = runs[16]
    early = t <= 2.0 * L * (1.0 + 1e-12)
    off = [(x, pieces[0 if x < L else 1].ev(x)[0]) for x in L * np.array([0.37, 0.81, 1.23, 1.77, 1.999])]
    err_early = max(float(np.max(np.abs(y[early] - exact(t[early])))), max(abs(v - float(exact(x))) for x, v in off)) / top
    tally.check("self-test", "exact-delay simulator: P on a first-order plant, [0, 2L] = the delayed open-loop "
                "step response (closed form), 1e-6 relative", err_early <= 1e-6, f"largest error {err_early:.2e} of g·K·r")
    coarse, fine = runs[16][0][1], runs[32][0][1]              # [L, 3L] at h and at h/2
    tc, yc, yf = coarse.t[-17:], coarse.y[-17:], fine.y[-33::2]  # [2L, 3L] on the coarse grid
    ec, ef, ex = yc - exact(tc), yf - exact(tc), (4.0 * yf - yc) / 3.0 - exact(tc)
    order = math.log2(float(np.max(np.abs(ec))) / float(np.max(np.abs(ef))))
    bounded = bool(np.all(np.abs(ef) <= np.abs(yc - yf) + 1e-12 * top))
    tally.check("self-test", "exact-delay simulator on [2L, 3L] (closed form): second order (1.8–2.2), the h − h/2 "
                "difference bounds the h/2 error, Richardson's extrapolation within 1e-6 relative",
                1.8 <= order <= 2.2 and bounded and float(np.max(np.abs(ex))) <= 1e-6 * top,
                f"order {order:.3f}, largest errors h {np.max(np.abs(ec)) / top:.2e}, h/2 {np.max(np.abs(ef)) / top:.2e}, "
                f"extrapolated {np.max(np.abs(ex)) / top:.2e} of g·K·r; bounded {bounded}")
    from scipy import optimize
    wu = optimize.brentq(lambda w: math.atan(w * T) + w * L - math.pi, 1e-9, math.pi / L)
    ku = math.hypot(1.0, wu * T) / g
    counts = [rhp_closed_loop_poles([f * ku], [1.0], [g], [T, 1.0], L) for f in (0.97, 1.03)]
    counts += [rhp_closed_loop_poles([f * math.pi / (2.0 * L)], [1.0], [1.0], [1.0, 0.0], L) for f in (0.97, 1.03)]
    tally.check("self-test", "Nyquist count on the exact delay: 0 right-half-plane roots at 0.97·K_u, 2 at 1.03·K_u "
                "(first-order lag, integrator)", np.allclose(counts, [0, 2, 0, 2], atol=1e-6),
                ", ".join(f"{c:.6f}" for c in counts))


def check_true_exact(tally, name, case, R, opt, reqs, pade, tn, td):
    """true-exact: every requirement on the true plant with its exact delay (ExactDelayLoop)."""
    started = time.time()
    L = float(case["params"]["L"])
    band_pct = float(R["spec"]["requirements"]["settling_band_pct"])
    if not pade["stable"]:
        tally.check(name, "true-exact: a horizon (the true plant's Padé loop is stable)", False, "unstable")
        return
    ex = measure_exact(fr.KINDS[case["kind"]]["ss"](case["params"]), L, opt["controller"],
                       float(R["spec"]["reference"]["amplitude"]), band_pct, reqs,
                       oracle.num(R.get("reference_peak_time")), oracle.EXTEND * pade["T"], tn, td)
    if not tally.check(name, "true-exact: the loop with the exact delay is stable (Nyquist count of right-half-plane "
                       "roots 0)", ex["stable"], f"count {ex['rhp']:.6f}"):
        return
    verdicts, rows = list(ex["verdicts"].items()), []
    for q in reqs:
        k = q["key"]
        v, vh, err, p = ex["values"][k], ex["coarse"][k], ex["errors"][k], pade["values"].get(k)
        both = v is not None and vh is not None
        rows.append(f"{k}: limit {q['limit']:g}, Padé {oracle.show(p)}, exact {oracle.show(v)} (h: {oracle.show(vh)}; "
                    f"Richardson {oracle.show((4.0 * v - vh) / 3.0 if both else None)}), error estimate {err:.2g}, "
                    f"exact − Padé {(v - p) if v is not None and p is not None else math.nan:.4g} → {ex['verdicts'][k]}")
    for row in rows:
        print(f"NOTE  {name}: true-exact {row}")
    nl = opt.get("nonlinear") or {}
    print(f"NOTE  {name}: true-exact: {ex['steps'][0]} and {ex['steps'][1]} steps per delay, tail |y − y∞| "
          f"{max(ex['tail']):.2g} of the band, {time.time() - started:.1f} s; the tool's nonlinear confirmation "
          f"(fitted nominal plant, exact delay): {nl.get('verdict')!r}, "
          + ", ".join(f"{c['requirement']} {oracle.show(oracle.num(c['value']))}" for c in nl.get("checks", [])))
    tally.check(name, "true-exact: the response settles within the horizon (last quarter within "
                f"{TAIL_FRACTION:g} of the band)", ex["settled"], f"{max(ex['tail']):.2g}")
    undecided = [k for k, d in verdicts if d == "undecided"]
    tally.check(name, f"true-exact: the grid decides every requirement ({DECIDE:g}× the h − h/2 estimate clear of "
                "its limit)", not undecided, "undecided: " + ", ".join(undecided) if undecided else "")
    misses = [k for k, d in verdicts if d == "missed"]
    tally.check(name, "true-exact: every requirement met on the true plant with its EXACT delay (method of steps, "
                "margins on C·G·e^(−jωL))", not misses,
                "; ".join(r for r in rows if r.split(":")[0] in misses) or "")


def run_case(tally, args, case, work):
    name = case["name"]
    clean = fr.CleanResponse(case["kind"], case["shape"], samples=case["samples"], params=case["params"],
                             period=case["period"])
    rec = clean.record(case["sigma"], case["seed"])
    csv = work / f"{name}.csv"
    rec.write_csv(csv)
    fit_dir = work / f"{name}-fit"
    proc, fit = fr.run_fit(args.specloop, csv, fit_dir, case["model_args"])
    plant_path = fit_dir / "plant.toml"
    if not tally.check(name, "fit: exit 0, a best model, plant.toml", proc.returncode == 0 and fit and fit.get("best")
                       and plant_path.exists(), f"exit {proc.returncode}: {proc.stderr.strip()[-300:]}"):
        return
    best = fr.model_entry(fit, fit["best"])
    kind = best["kind"]
    values = {n: float(best["parameters"][n]["value"]) for n in best["parameter_names"]}
    doc = tomllib.loads(plant_path.read_text())
    print(f"NOTE  {name}: best {kind} " + ", ".join(f"{n}={v:.6g}" for n, v in values.items())
          + f" (truth {case['kind']} " + ", ".join(f"{n}={v:g}" for n, v in case["params"].items()) + ")")

    # plant: the [plant] section is the fitted model
    corners = [1.0 / v for n, v in values.items() if n.startswith("T") and v > 0] + \
              [v for n, v in values.items() if n in ("wn", "p1", "p2", "p3", "p4", "z1", "z2", "z3")]
    w = np.geomspace(min(corners) / 30.0, max(corners) * 30.0, 7)
    g_fit = model_frequency_response(kind, values, w)
    g_file, delay = plant_frequency_response(doc, w)
    err = float(np.max(np.abs(g_file - g_fit) / np.abs(g_fit)))
    tally.check(name, "plant: plant.toml's [plant] = fit.json's best model (G(jω), delay)",
                err <= 1e-8 and abs(delay - values["L"]) <= 1e-9 * max(values["L"], 1.0),
                f"largest relative |ΔG| {err:.2e}; delay {delay!r} vs L {values['L']!r}")

    # box: ranges hold their nominal; first order: exact mapping of L ∓ 2σ and −1/(T ∓ 2σ)
    unc = doc.get("uncertainty", {})
    ranged = {k: v for k, v in unc.items() if k.startswith("plant.")}
    bad = [f"{k} = {robust.value_at(doc, k)!r} outside {v}" for k, v in ranged.items()
           if not v[0] <= robust.value_at(doc, k) <= v[1]]
    if kind == "first-order-delay":
        P = best["parameters"]
        want = {"plant.delay": [max(P["L"]["low"], 0.0), P["L"]["high"]],
                "plant.poles[0]": sorted([-1.0 / P["T"]["low"], -1.0 / P["T"]["high"]])}
        # The pole's range may be the exact image of T's interval or its first-order (delta-method)
        # mapping: they differ by O((2σ_T/T)²) relative, which is the tolerance.
        rel = (2.0 * P["T"]["std_error"] / P["T"]["value"]) ** 2
        tols = {"plant.delay": 1e-9, "plant.poles[0]": rel + 1e-9}
        for k, (lo, hi) in want.items():
            got = ranged.get(k)
            if got is None or abs(got[0] - lo) > tols[k] * abs(lo) + 1e-12 or abs(got[1] - hi) > tols[k] * abs(hi):
                bad.append(f"{k}: {got} vs ±2σ mapped {[lo, hi]}")
    tally.check(name, "box: [uncertainty] ranges from the ±2σ intervals, each holding its nominal", not bad and ranged,
                "; ".join(bad) or f"{list(ranged)}")

    # design with --plant
    out = work / f"{name}-design"
    spec = pathlib.Path(args.source_dir) / SPEC
    run = subprocess.run([args.specloop, "design", str(spec), "--plant", str(plant_path), "--out", str(out), "--jobs", "2"],
                         capture_output=True, text=True, timeout=600)
    result_path = out / "result.json"
    if not tally.check(name, "design --plant: exit 0 (met) and result.json", run.returncode == 0 and result_path.exists(),
                       f"exit {run.returncode}: {run.stderr.strip()[-300:]}"):
        return
    R = json.loads(result_path.read_text())
    num, den, dl, _ = robust.plant_of(doc)
    same = np.allclose(np.array(R["plant"]["numerator"]) / R["plant"]["denominator"][0], num / den[0], rtol=1e-9) and \
        np.allclose(np.array(R["plant"]["denominator"]) / R["plant"]["denominator"][0], den / den[0], rtol=1e-9) and \
        abs(float(R["plant"]["delay"]) - dl) <= 1e-12 * max(dl, 1.0)
    tally.check(name, "design: result.json's plant is plant.toml's", same, f"{R['plant']} vs {num}, {den}, {dl}")
    rob = R.get("robust") or {}
    opt = R["designs"]["optimized"]
    tally.check(name, "design: worst-case over the file's ranged keys, claim holds",
                rob.get("mode") == "worst-case" and list(rob.get("keys", [])) == list(ranged)
                and bool((opt.get("robust") or {}).get("holds")),
                f"mode {rob.get('mode')}, keys {rob.get('keys')}, holds {(opt.get('robust') or {}).get('holds')}")

    # the true plant, re-measured by SciPy
    info = fr.KINDS[case["kind"]]
    A, B, C = info["ss"](case["params"])
    from scipy import signal
    tn, td = signal.ss2tf(A, B, C, np.zeros((1, 1)))
    tn = np.trim_zeros(np.real(tn[0]), "f")
    order = R["linear_model"].get("delay_approximant_order") or robust.PADE_ORDER
    ln, ld, _ = robust.linear_model(tn, np.real(td), case["params"]["L"], [1.0], order)
    reqs = [{"key": q["requirement"], "limit": float(q["limit"]), "upper": q["bound"] == "max"} for q in opt["checks"]]
    m = robust.measure_plant((ln, ld, opt["controller"], float(R["spec"]["reference"]["amplitude"]),
                              float(R["spec"]["requirements"]["settling_band_pct"]), reqs,
                              robust.oracle.num(R.get("reference_peak_time"))))
    misses = [f"{q['key']} = {m['values'].get(q['key'])} (limit {q['limit']:g})" for q in reqs
              if not m["stable"] or not m["claim_meets"][q["key"]]]
    tally.check(name, "true: every requirement met on the true plant (SciPy)", m["stable"] and not misses,
                "; ".join(misses) or ", ".join(f"{k} {v:.6g}" for k, v in m["values"].items()))
    check_true_exact(tally, name, case, R, opt, reqs, m, tn, np.real(td))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--keep")
    args = ap.parse_args()
    tally = fr.KnownTally("check_fit_design")
    work = pathlib.Path(args.keep) if args.keep else pathlib.Path(tempfile.mkdtemp(prefix="specloop_fit_design_"))
    work.mkdir(parents=True, exist_ok=True)
    self_test_exact(tally)
    try:
        for case in CASES:
            run_case(tally, args, case, work)
    finally:
        if not args.keep:
            shutil.rmtree(work, ignore_errors=True)
    return tally.finish()


if __name__ == "__main__":
    sys.exit(main())
