#!/usr/bin/env python3
"""The oracle: every claim of `specloop design` re-measured by SciPy from result.json alone.

Invoked by CTest as
    /usr/bin/python3 tests/check_scipy_claims.py --specloop BIN --source-dir ROOT [--long] [--jobs N]
(`--probe` is accepted and ignored; `--only SUBSTRING` runs the specs whose name contains it;
`--strict-known` makes a KNOWN FAILING check that now passes a failure.)

Specs: every file in specs/, in tests/unusual_plants/ (when the folder exists) and in tests/claims/
(invented plants, one class each, named in each file's header comment). For each, `specloop design
SPEC --out DIR` runs, and every design of result.json is rebuilt FROM result.json ALONE — the plant
as specified (`plant`: numerator, denominator, delay; `spec.plant.nonlinear` for an expression
plant), the controller (`numerator/denominator`, `reference_numerator/denominator`, the parallel
gains), the spec as normalized (`spec`: set-point weight, derivative_on, sample time, actuator
limits, rate limit, anti-windup, tracking time, disturbance, noise) and the difference equation
and horizon of each design's `nonlinear` block — and re-measured independently:

  linear loop      u = C_r·r − C·y, y = G·u (README, "Two degrees of freedom"), G the linear model:
                   the plant times the (n, n) Padé approximant of e^{−sL} with n = the reported
                   `delay_approximant_order`, rebuilt here with scipy.interpolate.pade from the
                   Taylor series of e^{−x}. Plant by scipy.signal.tf2ss, controller in observable
                   form (A, C from the shared denominator, one B column per input — the standard
                   transposition of the controllable form), closed loop balanced by
                   scipy.linalg.matrix_balance. Exact response x(t) = x∞ + e^{At}(x(0) − x∞)
                   (e^{Ah} by scipy.linalg.expm, powers applied in blocks) on a multi-scale grid:
                   geometric segments from ~0.1/ρ_max to 2·T, T = ln(1e4)/σ_slow (README horizon),
                   h·ρ ≤ H_RHO for every mode ρ still alive in a segment. Every sign change of ẏ
                   (exact: C·(Ax + Br)) that could decide a metric (global extremes, the band
                   edges, the 10 %/90 % levels) is located by scipy.optimize.brentq on the exact
                   ẏ between samples, so an excursion between samples cannot hide; band and level
                   crossings by brentq on the exact y. Metrics by the README's definitions
                   ("Metric definitions"); settling time is the LAST exit from the band over 2·T
                   (beyond the tool's horizon: a re-exit after it is still a re-exit).
  margins          L(jω) = C(jω)·G(jω) on a logarithmic grid, crossings by brentq, the
                   sensitivity peak by scipy.optimize.minimize_scalar around the grid maximum:
                   the gain multipliers K at which a closed-loop pole of K·L reaches the
                   imaginary axis, read off the Nyquist plot's crossings of the negative real
                   axis (K = 1/|L(jω)| at each phase crossover, K = −1/L(0) when L(0) < 0), the
                   upper gain margin the smallest K > 1 and the lower one the largest K < 1, in
                   dB (README "Margins"); phase margin and delay margin PM/ω at the gain
                   crossovers (the usual Bode margins, e.g. Franklin, Powell & Emami-Naeini,
                   Feedback Control of Dynamic Systems, §6.4); on the described loop with the
                   exact e^{−jωL}.
  sampled loop     the documented digital controller (README/nonlinear.hpp: Tustin integral,
                   backward-difference filtered derivative, Tustin of C(s) for lead/lag,
                   zero-order hold, clamping or back-calculation at the samples) written here; its
                   difference equation is derived independently (P + Ki·Ts/2·(1 + z⁻¹)/(1 − z⁻¹)
                   + Kd/(Tf + Ts)·(1 − z⁻¹)/(1 − Tf/(Tf + Ts)·z⁻¹), Franklin, Powell & Workman,
                   Digital Control of Dynamic Systems, bilinear and backward-difference rules;
                   scipy.signal.cont2discrete(method="bilinear") for lead/lag) and compared with
                   the reported one. The plant between samples is integrated exactly (augmented
                   matrix exponential for a held or ramping input), so the output between samples
                   is known; where nothing saturates and the delay is a whole number of periods
                   the samples are checked against scipy.signal.cont2discrete(method="zoh") of
                   the plant closed with the REPORTED difference equation through
                   scipy.signal.dlsim.
  described loop   the loop the spec describes: saturation, rate limit, anti-windup (none,
                   conditional integration with its Filippov sliding motion, back-calculation),
                   exact transport delay (method of steps: each solve_ivp window is at most L long
                   and starts at every earlier switch + L), load step, measurement noise (the
                   documented generator: 64-bit Mersenne Twister — Matsumoto & Nishimura 2000,
                   checked against the C++ standard's fixed 10000th output — and Box–Muller),
                   expression plants (muparser text translated to numpy; equilibrium by
                   scipy.optimize.root, deviation variables), integrated by
                   scipy.integrate.solve_ivp (DOP853, or Radau for stiff loops; rtol 1e-10) with
                   terminal events at every switch; the same metrics, refined between samples.
                   When this loop provably equals the linear one (linear plant, continuous
                   controller, no delay, disturbance or noise, u within the limits everywhere, no
                   rate limit) the exact linear response is used.

Claims checked (each line names its id; an id in KNOWN_FAILING prints "KNOWN FAILING"):
  run        exit code 0 exactly when result.json says met (README, "Exit codes").
  rebuild    the keys a rebuild needs exist; linear_model = plant × Padé; the linearization of an
             expression plant (equilibrium, transfer function) against our own.
  metric     every reported linear metric agrees with the re-measurement (TOL_* below); every
             nonlinear metric agrees with the same loop measured the way the README says the
             tool reads it (extrema where the integration puts them: our converged pieces
             refined between samples; crossings and integrals off 20000 samples, linear
             interpolation), margins agree.
  claim      every requirement a design says it meets (`met: true`) on the linear loop is met
             by the exact re-measurement, and on the nonlinear loop by the solve_ivp one
             (strict: peak-time requirements without a visible peak read the FINAL entry into
             the band, issue 11 §2: a response that leaves the band after the time it is
             credited with earns nothing; settling is the last exit, excursions between
             samples included). Tolerance: only the re-measurement's own error bound (CLAIM_*).
  confirmed  a design called confirmed loses at most the tool's stated 0.2 % resolution on the
             described loop for each requirement it met on the linear loop.
  described  when the run says met (exit 0), the optimized design meets every requirement on the
             loop the spec describes (issue 11 §1).
  reference  the reference P gain's overshoot equals the limit within 0.01 points (issue 11 §4),
             and reference_peak_time is its re-measured peak time.
  perturb    each claimed met design still meets every requirement on the loop it was judged on
             when the plant's gain and every pole move by ±1e-6 relative (PERTURB_COMBOS seeded
             sign patterns; a conjugate pair moves together; zeros stay).

Tolerances (and why):
  re-measurement error bounds (CLAIM_*, never more in a design's favour): linear loop exact to
  rounding: 1e-7 percentage points, times 1e-9 relative (brentq to 1e-14), effort 1e-9
  relative, steady-state error 1e-9, margins 1e-6 dB/deg; solve_ivp loops (rtol 1e-10): 1e-5
  points, 1e-6 relative on times and effort.
  agreement of reported values (TOL_*): linear metrics as tests/check_scipy_design.py — 1e-3
  points, times max(1e-3·t, 1e-4·T), effort 1e-4, integrals 1e-3 relative (our trapezoid with
  Hermite end corrections is ~1e-6); nonlinear metrics: extrema (overshoot, undershoot, peak
  time, effort, command) against the converged pieces refined between samples, 1e-5 points and
  1e-6 relative (README); crossings and integrals against the 20000 samples read as the README
  says, times max(2e-5·T, 1e-4·t), integrals 1e-3; margins 1e-3 dB/deg, frequencies 1e-4, Ms 1e-3.
No timing is asserted (benchmarks live in bench/). The last line is "N passed, N failed".
"""
import argparse
import bisect
import concurrent.futures
import heapq
import fnmatch
import json
import math
import pathlib
import re
import subprocess
import sys
import tempfile
import time

import numpy as np
from scipy import integrate, interpolate, linalg, optimize, signal

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
import check_scipy_load as load_reference  # noqa: E402  (the exact load response and peaks, SciPy)
from reference_common import solve_piece  # noqa: E402  (one solve_ivp piece, the end-rounding refusal handled)

# ---- tolerances and resolution ------------------------------------------------------------------

H_RHO = 0.05            # grid: h·|p| for every live mode (long mode: 0.01)
MAX_SEGMENT_POINTS = 60_000
HORIZON_DECAY = 1e-4    # README: T = ln(1/1e-4)/σ_slow
EXTEND = 2.0            # extrema and settling over EXTEND·T
RTOL, ATOL = 1e-10, 1e-12
CLAIM_LINEAR = {"pct": 1e-7, "time_rel": 1e-9, "effort_rel": 1e-9, "sse": 1e-9, "margin": 1e-6, "ms_rel": 1e-9}
CLAIM_HYBRID = {"pct": 1e-5, "time_rel": 1e-6, "effort_rel": 1e-6, "sse": 1e-9, "margin": 1e-6, "ms_rel": 1e-9}
CONFIRM_RESOLUTION = 2e-3    # README: "a miss within 0.2 % of a limit is within that resolution"
TOL_PCT, TOL_TIME_REL, TOL_TIME_T = 1e-3, 1e-3, 1e-4
TOL_EFFORT, TOL_INTEGRAL, TOL_FINAL = 1e-4, 1e-3, 1e-9
TOL_NL_PCT, TOL_NL_TIME_T, TOL_NL_TIME_REL = 1e-5, 2e-5, 1e-4
TOL_NL_EFFORT = 1e-6       # README: the nonlinear loop's extrema within 1e-5 points, effort 1e-6 relative
TOL_MARGIN, TOL_FREQ, TOL_MS = 1e-3, 1e-4, 1e-3
PEAK_TIE = 1e-4              # README "Metric definitions": humps within this × |y∞| of the highest are one peak
FLAT_PEAK = 1e-6             # a peak time agrees when y there is this close to the peak (× |y∞|)
REFERENCE_PP = 0.01          # issue 11 §4
PERTURB = 1e-6
PERTURB_COMBOS = 4
NONLINEAR_SAMPLES = 20000    # README: the nonlinear metrics are read off 20000 samples
DESIGNS = ("reference", "classical", "ultimate_gain", "simc", "amigo", "optimized")

# Known failures of the tool on this branch, each the target of another branch (issues 11 and 12).
# A failing check whose id matches a pattern (fnmatch) prints "KNOWN FAILING" and does not fail the
# run; an entry that matches no failure any more is printed as such (remove it; --strict-known
# fails the run on it). The lead removes entries as the merges that fix them land.
KNOWN_FAILING = {
}


# ---- small helpers --------------------------------------------------------------------------------

def num(v):
    """A JSON number, "infinite"/"-infinite" or null → float/None."""
    if v is None:
        return None
    if isinstance(v, str):
        return math.inf if v == "infinite" else -math.inf if v == "-infinite" else float(v)
    return float(v)


def strip(p):
    p = np.atleast_1d(np.asarray(p, dtype=float))
    nz = np.flatnonzero(p != 0.0)
    return p[nz[0]:] if len(nz) else np.zeros(1)


def expand_roots(pairs):
    """[[re, im], ...] as written by the tool (conjugates listed) → complex array."""
    return np.array([complex(re_, im_) for re_, im_ in pairs], dtype=complex)


def pade_delay(L, n):
    """(n, n) Padé approximant of e^{−sL}: scipy.interpolate.pade on the Taylor series of e^{−x},
    x = sL. Returns (num, den) in s, highest power first, den normalized to a unit constant."""
    p, q = interpolate.pade([(-1.0) ** k / math.factorial(k) for k in range(2 * n + 1)], n)
    pc, qc = np.asarray(p.coeffs, float), np.asarray(q.coeffs, float)
    pn = pc * np.array([L ** (len(pc) - 1 - i) for i in range(len(pc))])
    qn = qc * np.array([L ** (len(qc) - 1 - i) for i in range(len(qc))])
    return pn / qn[-1], qn / qn[-1]


def strip_small(p, rel=1e-9):
    """Leading coefficients below rel × the largest dropped (computed polynomials)."""
    p = np.atleast_1d(np.asarray(p, dtype=float))
    big = np.max(np.abs(p)) if len(p) else 0.0
    nz = np.flatnonzero(np.abs(p) > rel * big)
    return p[nz[0]:] if len(nz) else np.zeros(1)


def weighted_reference_path(kp, ki, kd, tf, b, c):
    """C_r(s) = Kp·b + Ki/s + Kd·c·s/(Tf·s + 1) over s·(Tf·s + 1) (Åström & Hägglund, set-point
    weighting of the parallel PID; the I term acts on the whole error), as (numerator, denominator)."""
    num = np.polyadd(np.polyadd(np.polymul([kp * b], np.polymul([1.0, 0.0], [tf, 1.0])), np.polymul([ki], [tf, 1.0])),
                     np.polymul([kd * c], [1.0, 0.0, 0.0]))
    den = np.polymul([1.0, 0.0], [tf, 1.0]) if ki != 0.0 else [tf, 1.0]
    if ki == 0.0:
        num = np.polyadd(np.polymul([kp * b], [tf, 1.0]), [kd * c, 0.0])
    return num, den


def same_tf(n1, d1, n2, d2, rel):
    """Two transfer functions equal coefficient by coefficient after normalizing the denominators'
    leading coefficients (leading coefficients below 1e-9 of the largest are dropped)."""
    n1, d1, n2, d2 = strip_small(n1), strip_small(d1), strip_small(n2), strip_small(d2)
    if len(d1) != len(d2) or len(n1) != len(n2):
        return False, f"degrees {len(n1) - 1}/{len(d1) - 1} vs {len(n2) - 1}/{len(d2) - 1}"
    a = np.concatenate([n1 / d1[0], d1 / d1[0]])
    b = np.concatenate([n2 / d2[0], d2 / d2[0]])
    err = np.max(np.abs(a - b)) / max(np.max(np.abs(b)), 1e-300)
    return err <= rel, f"max coefficient difference {err:.2e} (tol {rel:g})"


# ---- the noise generator, from its documentation ---------------------------------------------------

MASK64 = (1 << 64) - 1


class MersenneTwister64:
    """MT19937-64 (Matsumoto & Nishimura, 2000; parameters as fixed by the C++ standard,
    [rand.predef] mt19937_64), seeded with one integer the way std::mt19937_64(seed) is."""

    def __init__(self, seed):
        self.mt = [0] * 312
        self.mt[0] = seed & MASK64
        for i in range(1, 312):
            prev = self.mt[i - 1]
            self.mt[i] = (6364136223846793005 * (prev ^ (prev >> 62)) + i) & MASK64
        self.index = 312

    def _twist(self):
        mt = self.mt
        for i in range(312):
            x = (mt[i] & 0xFFFFFFFF80000000) | (mt[(i + 1) % 312] & 0x7FFFFFFF)
            xa = x >> 1
            if x & 1:
                xa ^= 0xB5026F5AA96619E9
            mt[i] = mt[(i + 156) % 312] ^ xa
        self.index = 0

    def __call__(self):
        if self.index >= 312:
            self._twist()
        y = self.mt[self.index]
        self.index += 1
        y ^= (y >> 29) & 0x5555555555555555
        y ^= (y << 17) & 0x71D67FFFEDA60000
        y ^= (y << 37) & 0xFFF7EEE000000000
        y ^= y >> 43
        return y & MASK64


def mt64_self_test():
    """The C++ standard fixes the 10000th output of a default-constructed mt19937_64 (seed 5489)."""
    g = MersenneTwister64(5489)
    v = 0
    for _ in range(10000):
        v = g()
    return v == 9981545732273789042


def gaussian_sequence(rms, seed, count):
    """The documented noise (README, disturbance.noise_rms): uniforms u = ((bits >> 11) + 1)·2⁻⁵³
    in (0, 1]; each pair gives rms·√(−2 ln u1)·cos(2π u2), then ·sin(2π u2) (Box–Muller)."""
    g = MersenneTwister64(seed)
    out = []
    while len(out) < count:
        u1 = ((g() >> 11) + 1) * 2.0 ** -53
        u2 = ((g() >> 11) + 1) * 2.0 ** -53
        radius = rms * math.sqrt(-2.0 * math.log(u1))
        angle = 2.0 * math.pi * u2
        out.append(radius * math.cos(angle))
        out.append(radius * math.sin(angle))
    return np.array(out[:count])


# ---- expression plants ----------------------------------------------------------------------------

def _variadic(f):
    def g(*args):
        out = args[0]
        for a in args[1:]:
            out = f(out, a)
        return out
    return g


EXPRESSION_FUNCTIONS = {
    "sin": np.sin, "cos": np.cos, "tan": np.tan, "asin": np.arcsin, "acos": np.arccos, "atan": np.arctan,
    "atan2": np.arctan2, "sinh": np.sinh, "cosh": np.cosh, "tanh": np.tanh, "asinh": np.arcsinh,
    "acosh": np.arccosh, "atanh": np.arctanh, "exp": np.exp, "ln": np.log,
    "log": np.log,  # muparser: log is the natural logarithm (recalled from memory)
    "log2": np.log2, "log10": np.log10, "sqrt": np.sqrt, "abs": np.abs, "sign": np.sign, "rint": np.rint,
    "min": _variadic(np.minimum), "max": _variadic(np.maximum), "sum": _variadic(np.add),
    "avg": lambda *a: _variadic(np.add)(*a) / len(a), "_pi": math.pi, "_e": math.e,
}


def translate_expression(text):
    """muparser text → Python expression (numpy), or None when it uses syntax not translated here
    (?:, &&, ||)."""
    if any(tok in text for tok in ("?", "&&", "||", "=")) and not re.fullmatch(r"[^=]*([<>!]=|==)[^=]*", text):
        if any(tok in text for tok in ("?", "&&", "||")):
            return None
    return text.replace("^", "**")


class ExpressionPlant:
    """[plant.nonlinear] from result.json's spec: x' = f(x, u), y = h(x), in deviation variables
    around an equilibrium found here (scipy.optimize.root) from the spec's guesses."""

    def __init__(self, nl):
        self.names = list(nl["states"])
        self.params = dict(nl["parameters"])
        self.u0 = float(nl["operating_point"]["u"])
        self.guess = np.array([float(nl["operating_point"][s]) for s in self.names])
        exprs = [translate_expression(e) for e in nl["derivatives"]] + [translate_expression(nl["output"])]
        if any(e is None for e in exprs):
            raise NotImplementedError("expression syntax not translated (?:, &&, ||)")
        self.code = [compile(e, "<expr>", "eval") for e in exprs]
        self.n = len(self.names)

    def _env(self, x, u):
        env = dict(EXPRESSION_FUNCTIONS)
        env.update(self.params)
        for i, s in enumerate(self.names):
            env[s] = x[i]
        env["u"] = u
        return env

    def f_abs(self, x, u):
        env = self._env(x, u)
        return np.array([np.asarray(eval(c, {"__builtins__": {}}, env), dtype=float) * np.ones_like(np.asarray(u, float))
                         for c in self.code[:-1]])

    def h_abs(self, x):
        env = self._env(x, 0.0)
        return np.asarray(eval(self.code[-1], {"__builtins__": {}}, env), dtype=float) * np.ones_like(np.asarray(x[0], float))

    def settle(self, reported_states=None):
        sol = optimize.root(lambda x: self.f_abs(x, self.u0), self.guess, method="hybr", tol=1e-14)
        self.x0 = sol.x
        if reported_states is not None:
            # A free integrator has a line of equilibria: accept the tool's point when it is one.
            xr = np.array(reported_states, float)
            if np.max(np.abs(self.f_abs(xr, self.u0))) <= 1e-9 * (1 + np.max(np.abs(self.f_abs(self.guess, self.u0)))):
                self.x0 = xr
        self.y0 = float(self.h_abs(self.x0))
        self.residual = float(np.max(np.abs(self.f_abs(self.x0, self.u0))))
        return sol.success

    # deviation variables (vectorized over columns)
    def f(self, dx, du):
        x = self.x0.reshape(-1, *([1] * (np.ndim(dx) - 1))) + dx
        return self.f_abs(x, self.u0 + du)

    def h(self, dx):
        x = self.x0.reshape(-1, *([1] * (np.ndim(dx) - 1))) + dx
        return self.h_abs(x) - self.y0

    def h_rate(self, dx, dxdot):
        """∂h/∂x · ẋ by a central difference along ẋ (step scaled to the state)."""
        scale = np.maximum(np.max(np.abs(self.x0)), 1.0)
        norm = np.sqrt(np.sum(np.asarray(dxdot) ** 2, axis=0)) + 1e-300
        eps = 1e-6 * scale / norm
        return (self.h(dx + eps * dxdot) - self.h(dx - eps * dxdot)) / (2 * eps)

    def linearization(self):
        """A, B, C by central differences (step ε^(1/3)·max(|v|, 1)) and G(s) = C(sI − A)⁻¹B."""
        n = self.n
        A = np.zeros((n, n))
        B = np.zeros(n)
        C = np.zeros(n)
        for j in range(n):
            h = 6e-6 * max(abs(self.x0[j]), 1.0)
            e = np.zeros(n)
            e[j] = h
            A[:, j] = (self.f_abs(self.x0 + e, self.u0) - self.f_abs(self.x0 - e, self.u0)) / (2 * h)
            C[j] = (self.h_abs(self.x0 + e) - self.h_abs(self.x0 - e)) / (2 * h)
        hu = 6e-6 * max(abs(self.u0), 1.0)
        B[:] = (self.f_abs(self.x0, self.u0 + hu) - self.f_abs(self.x0, self.u0 - hu)) / (2 * hu)
        numer, den = signal.ss2tf(A, B.reshape(-1, 1), C.reshape(1, -1), np.zeros((1, 1)))
        return A, B, C, numer[0], den


# ---- the linear loop -------------------------------------------------------------------------------

def realize(numer, den):
    """Controllable canonical realization (scipy.signal.tf2ss) without tf2ss's dummy state for a
    static gain. Returns A, B (vector), C (vector), D (float)."""
    numer, den = strip(numer), strip(den)
    if len(den) == 1:
        return np.zeros((0, 0)), np.zeros(0), np.zeros(0), float(numer[-1] / den[0]) if len(numer) == 1 else float("nan")
    A, B, C, D = signal.tf2ss(numer, den)
    return A, B[:, 0], C[0, :], float(D[0, 0])


def controller_form(cnum, cden, crnum, crden):
    """The two-input controller u = C_r·r − C·y as written in result.json (numerator/denominator and
    reference_numerator/denominator, one shared denominator) in observable form: the controllable
    form of C (realize) transposed, A = Ac^T, output row = Bc^T, one input column per input, Cc^T
    for y and Ccr^T for r. Returns (Ao, Co, By, Br, Dy, Dr):
        ẋc = Ao·xc + Br·r − By·y,   u = Co·xc + Dr·r − Dy·y."""
    cden = strip(cden)
    crden = strip(crden)
    cnum = strip(cnum) / cden[0]
    crnum = strip(crnum) / crden[0]
    crden = crden / crden[0]
    cden = cden / cden[0]
    if len(cden) != len(crden) or np.max(np.abs(cden - crden)) > 1e-12 * np.max(np.abs(cden)):
        raise ValueError("reference path and controller do not share a denominator (README says they do)")
    Ac, Bc, Cc, Dy = realize(cnum, cden)
    _, _, Ccr, Dr = realize(crnum, cden)
    return Ac.T, Bc, Cc, Ccr, Dy, Dr


class LinearLoop:
    """u = C_r·r − C·y (+ nothing), y = G·(u + d): states [plant | controller], balanced."""

    def __init__(self, gnum, gden, cnum, cden, crnum, crden):
        Ap, Bp, Cp, Dp = realize(gnum, gden)
        Ao, Co, By, Br, Dy, Dr = controller_form(cnum, cden, crnum, crden)
        npl, nc = len(Bp), len(Co)
        k = 1.0 / (1.0 + Dy * Dp)
        n = npl + nc
        # u = k(−Dy·Cp·xp + Co·xc + Dr·r − Dy·Dp·d); y = Cp·xp + Dp·(u + d)
        Ku_x = np.concatenate([-k * Dy * Cp, k * Co])
        Ku_r, Ku_d = k * Dr, -k * Dy * Dp
        Ky_x = np.concatenate([Cp, np.zeros(nc)]) + Dp * Ku_x
        Ky_r, Ky_d = Dp * Ku_r, Dp * (Ku_d + 1.0)
        A = np.zeros((n, n))
        Br_ = np.zeros(n)
        Bd_ = np.zeros(n)
        A[:npl, :npl] = Ap
        A[:npl, :] += np.outer(Bp, Ku_x)
        Br_[:npl] = Bp * Ku_r
        Bd_[:npl] = Bp * (Ku_d + 1.0)
        A[npl:, npl:] = Ao
        A[npl:, :] -= np.outer(By, Ky_x)
        Br_[npl:] = Br - By * Ky_r
        Bd_[npl:] = -By * Ky_d
        if n:
            Ab, T = linalg.matrix_balance(A, permute=False)
            Ti = np.linalg.inv(T)
            A, Br_, Bd_ = Ab, Ti @ Br_, Ti @ Bd_
            Ky_x, Ku_x = Ky_x @ T, Ku_x @ T
        self.A, self.B, self.Bd = A, Br_, Bd_
        self.Cy, self.Dy, self.Dyd = Ky_x, Ky_r, Ky_d
        self.Cu, self.Du, self.Dud = Ku_x, Ku_r, Ku_d
        self.n = n
        self.poles = np.linalg.eigvals(A) if n else np.zeros(0, complex)

    def stable(self):
        return self.n == 0 or np.max(self.poles.real) < 0

    def final(self, r):
        if self.n == 0:
            return self.Dy * r, np.zeros(0)
        x_inf = -np.linalg.solve(self.A, self.B * r)
        return float(self.Cy @ x_inf + self.Dy * r), x_inf

    def horizon(self):
        sigma = np.min(-self.poles.real)
        return math.log(1.0 / HORIZON_DECAY) / sigma


# ---- traces: pieces of an exactly known response ---------------------------------------------------

class Piece:
    """Samples t, y, ẏ, u, u̇ on [t[0], t[-1]], an exact evaluator ev(t) → (y, ẏ, u, u̇) and,
    optionally, a vectorized one evv(times) → (y, u)."""
    __slots__ = ("t", "y", "yd", "u", "ud", "ev", "evv", "uc", "ucv")

    def __init__(self, t, y, yd, u, ud, ev, evv=None, uc=None, ucv=None):
        self.t, self.y, self.yd, self.u, self.ud, self.ev, self.evv = t, y, yd, u, ud, ev, evv
        self.uc, self.ucv = uc, ucv  # the controller's command (before the actuator) and its evaluator


def command_peak(pieces, t_end):
    """max |u_c| over [0, t_end] of pieces that carry the command: every sample (piece ends, the
    0+ kick and every switch included), each interior local maximum of |u_c| refined by
    scipy.optimize.minimize_scalar (bounded, xatol 1e-14·t) on the exact evaluator. None when a
    piece does not carry it."""
    best = 0.0
    for p in pieces:
        if p.uc is None:
            return None
        if p.t[0] > t_end:
            break
        keep = p.t <= t_end
        a = np.abs(p.uc[keep])
        if not len(a):
            continue
        best = max(best, float(np.max(a)))
        for i in np.flatnonzero((a[1:-1] >= a[:-2]) & (a[1:-1] >= a[2:])) + 1:
            lo, hi = float(p.t[i - 1]), float(p.t[i + 1])
            res = optimize.minimize_scalar(lambda s: -abs(float(p.ucv(np.array([s]))[0])), bounds=(lo, hi), method="bounded",
                                           options={"xatol": 1e-14 * max(1.0, hi)})
            best = max(best, -float(res.fun))
    return best


def pieces_until(pieces, t_end):
    """The pieces cut at t_end (the last one ends there exactly, from its evaluator)."""
    out = []
    for p in pieces:
        if p.t[0] >= t_end:
            break
        if p.t[-1] <= t_end:
            out.append(p)
            continue
        keep = p.t < t_end
        y_, yd_, u_, ud_ = p.ev(t_end)
        out.append(Piece(np.append(p.t[keep], t_end), np.append(p.y[keep], y_), np.append(p.yd[keep], yd_),
                         np.append(p.u[keep], u_), np.append(p.ud[keep], ud_), p.ev, p.evv))
        break
    return out


def block_powers(phi, z0, count, block=128):
    """z_j = Φ^j·z0 for j < count, computed by blocks of matrix powers (rows of the result)."""
    n = len(z0)
    m = min(block, count)
    P = np.empty((m, n, n))
    P[0] = np.eye(n)
    for j in range(1, m):
        P[j] = phi @ P[j - 1]
    phi_m = phi @ P[m - 1]
    out = np.empty((count, n))
    z = z0.copy()
    for b in range(0, count, m):
        k = min(m, count - b)
        out[b:b + k] = np.einsum("kij,j->ki", P[:k], z)
        z = phi_m @ z
    return out


def linear_segments(poles, t_end, h_rho, max_points):
    """Geometric segments [0, t_end·10^-K], …, [t_end/10, t_end], each with h·ρ ≤ h_rho for the
    modes still alive at its start (e^{σ·t} > 1e-16)."""
    rho_max = float(np.max(np.abs(poles))) if len(poles) else 1.0 / t_end
    K = int(min(14, max(1, math.ceil(math.log10(max(t_end * rho_max, 10.0))) + 1)))
    edges = [0.0] + [t_end * 10.0 ** (-k) for k in range(K, -1, -1)]
    segs = []
    for a, b in zip(edges[:-1], edges[1:]):
        alive = [abs(p) for p in poles if p.real * a > -37.0] or [1.0 / t_end]
        rho = max(max(alive), 1.0 / t_end)
        n = int(min(max_points, max(64, math.ceil((b - a) * rho / h_rho))))
        segs.append((a, b, n))
    return segs


def linear_trace(loop, r, t_end, h_rho=H_RHO, max_points=MAX_SEGMENT_POINTS, segments=None):
    """Exact step response of a stable LinearLoop: pieces on the multi-scale grid."""
    y_inf, x_inf = loop.final(r)
    A, B, Cy, Cu = loop.A, loop.B * r, loop.Cy, loop.Cu
    Dy, Du = loop.Dy * r, loop.Du * r
    segs = segments or linear_segments(loop.poles, t_end, h_rho, max_points)
    pieces = []
    x = np.zeros(loop.n)
    for a, b, n in segs:
        h = (b - a) / n
        phi = linalg.expm(A * h)
        X = block_powers(phi, x - x_inf, n + 1) + x_inf
        t = a + h * np.arange(n + 1)
        t[-1] = b
        XD = X @ A.T + B
        y = X @ Cy + Dy
        yd = XD @ Cy
        u = X @ Cu + Du
        ud = XD @ Cu

        def ev(tq, a=a, h=h, X=X, n=n):
            j = min(max(int((tq - a) / h), 0), n)
            x_ = x_inf + linalg.expm(A * (tq - (a + j * h))) @ (X[j] - x_inf)
            xd = A @ x_ + B
            return float(Cy @ x_ + Dy), float(Cy @ xd), float(Cu @ x_ + Du), float(Cu @ xd)
        pieces.append(Piece(t, y, yd, u, ud, ev))
        x = X[-1]
    return pieces, y_inf


def samples_of_linear(loop, r, horizon, count):
    """y and u of the exact linear response at t_k = horizon·k/count (the tool's sample times)."""
    pieces, _ = linear_trace(loop, r, horizon, segments=[(0.0, horizon, count)])
    return pieces[0].t, pieces[0].y, pieces[0].u


# ---- metrics ---------------------------------------------------------------------------------------

def _refine_root(f, a, b):
    fa, fb = f(a), f(b)
    if fa == 0.0:
        return a
    if fb == 0.0:
        return b
    if fa * fb > 0:
        return a if abs(fa) < abs(fb) else b
    return optimize.brentq(f, a, b, xtol=1e-14 * max(1.0, abs(b)), rtol=1e-15, maxiter=200)


def latest_tied_peak(t, yn):
    """README "Metric definitions": the peak time is the time of the LATEST local maximum of y/y∞
    within PEAK_TIE of the highest (two humps of nearly equal height are read as the later one).
    Local maxima of the sequence (the refined extrema are in it). A point repeated at a piece
    boundary (same time, same value) counts once: two equal neighbours on a falling slope are not
    a hump."""
    keep = np.concatenate([[True], np.diff(t) > 0])
    t, yn = np.asarray(t)[keep], np.asarray(yn)[keep]
    top = float(np.max(yn))
    k_top = int(np.argmax(yn))
    inner = np.arange(1, len(yn) - 1)
    is_max = (yn[inner] >= yn[inner - 1]) & (yn[inner] >= yn[inner + 1]) & (yn[inner] >= top - PEAK_TIE)
    cands = [k_top] + [int(i) for i in inner[is_max] if i > k_top]
    return float(t[max(cands)])


def measure(pieces, y_inf, r, band_frac, t_int):
    """The README's metrics on an exactly known response (pieces), refined between samples.
    Integrals over [0, t_int]; everything else over the whole trace. Adds `final_entry` (the
    time after which y stays in the band; None when it does not by the end)."""
    if not pieces:
        return None
    t = np.concatenate([p.t for p in pieces])
    y = np.concatenate([p.y for p in pieces])
    yd = np.concatenate([p.yd for p in pieces])
    u = np.concatenate([p.u for p in pieces])
    ud = np.concatenate([p.ud for p in pieces])
    pid = np.concatenate([np.full(len(p.t), i) for i, p in enumerate(pieces)])
    band = band_frac * abs(y_inf)
    levels = [y_inf - band, y_inf + band, 0.1 * y_inf, 0.9 * y_inf]
    ymax, ymin = np.max(y), np.min(y)
    extra = []  # (t, y, yd, u, ud, piece)
    same = pid[:-1] == pid[1:]
    h = np.diff(t)
    # y extrema between samples that could decide a metric
    sc = same & (yd[:-1] * yd[1:] < 0)
    for i in np.flatnonzero(sc):
        reach = h[i] * max(abs(yd[i]), abs(yd[i + 1])) * 1.5 + 1e-15 * max(1.0, abs(y_inf))
        lo, hi = min(y[i], y[i + 1]) - reach, max(y[i], y[i + 1]) + reach
        if hi >= ymax - PEAK_TIE * abs(y_inf) or lo <= ymin or any(lo <= lv <= hi for lv in levels):
            ev = pieces[pid[i]].ev
            tr = _refine_root(lambda s: ev(s)[1], t[i], t[i + 1])
            extra.append((tr, *ev(tr), pid[i]))
    # u extrema that could beat the largest or smallest u
    u_hi, u_lo = np.max(u), np.min(u)
    sc = same & (ud[:-1] * ud[1:] < 0)
    for i in np.flatnonzero(sc):
        reach = h[i] * max(abs(ud[i]), abs(ud[i + 1])) * 1.5
        if max(u[i], u[i + 1]) + reach >= u_hi or min(u[i], u[i + 1]) - reach <= u_lo:
            ev = pieces[pid[i]].ev
            tr = _refine_root(lambda s: ev(s)[3], t[i], t[i + 1])
            extra.append((tr, *ev(tr), pid[i]))
    if extra:
        ex = np.array(extra)
        t = np.concatenate([t, ex[:, 0]])
        y = np.concatenate([y, ex[:, 1]])
        yd = np.concatenate([yd, ex[:, 2]])
        u = np.concatenate([u, ex[:, 3]])
        ud = np.concatenate([ud, ex[:, 4]])
        pid = np.concatenate([pid, ex[:, 5].astype(int)])
        order = np.lexsort((np.arange(len(t)), t, pid))
        t, y, yd, u, ud, pid = t[order], y[order], yd[order], u[order], ud[order], pid[order]
    m = {"final_value": y_inf, "steady_state_error": (r - y_inf) / r}
    yn = y / y_inf
    k = int(np.argmax(yn))
    if yn[k] > 1.0 + 1e-9:
        m["overshoot_pct"], m["peak_time"] = (yn[k] - 1.0) * 100.0, latest_tied_peak(t, yn)
        after = yn[t > m["peak_time"]]
        # README, "Metric definitions": the deepest fall below y∞ after the peak
        m["post_peak_dip_pct"] = max(0.0, 1.0 - float(np.min(after))) * 100.0 if len(after) else 0.0
    else:
        m["overshoot_pct"], m["peak_time"] = 0.0, None
        m["post_peak_dip_pct"] = 0.0
    m["undershoot_pct"] = max(0.0, -float(np.min(yn))) * 100.0
    m["effort_peak"] = float(np.max(np.abs(u)))
    m["_umax"], m["_umin"] = float(np.max(u)), float(np.min(u))

    def crossing(i, level):
        """Root of y − level between sample i−1 and i (same piece), else the boundary."""
        if i == 0 or pid[i] != pid[i - 1]:
            return float(t[i])
        ev = pieces[pid[i]].ev
        return _refine_root(lambda s: ev(s)[0] - level, t[i - 1], t[i])

    def first_reach(frac):
        idx = np.flatnonzero(yn >= frac)
        return crossing(int(idx[0]), frac * y_inf) if len(idx) else None
    t10, t90 = first_reach(0.1), first_reach(0.9)
    m["rise_time"] = (t90 - t10) if (t10 is not None and t90 is not None) else None
    out = np.abs(y - y_inf) > band
    side = np.sign(y - y_inf)
    # first entry: a sample inside, or a jump across the band between two samples
    entry = None
    hit = np.flatnonzero(~out[1:] | (out[:-1] & (side[1:] != side[:-1])))
    if not out[0]:
        entry = float(t[0])
    elif len(hit):
        i = int(hit[0]) + 1
        entry = crossing(i, y_inf + side[i - 1] * band) if out[i - 1] else float(t[i])
    m["band_entry_time"] = entry
    if out[-1]:
        m["settling_time"] = None
        m["final_entry"] = None
    else:
        idx = np.flatnonzero(out)
        if len(idx) == 0:
            m["settling_time"] = 0.0
        else:
            i = int(idx[-1]) + 1
            m["settling_time"] = crossing(i, y_inf + side[i - 1] * band)
        m["final_entry"] = m["settling_time"]
    # integrals over [0, t_int]: trapezoid with the Hermite end correction h²/12·(f'(a) − f'(b))
    sel = t <= t_int
    if not np.all(sel):
        j = int(np.flatnonzero(~sel)[0])
        ev = pieces[pid[j]].ev
        yt, ydt, _, _ = ev(t_int)
        tt, yy, yyd, pp = np.append(t[sel], t_int), np.append(y[sel], yt), np.append(yd[sel], ydt), np.append(pid[sel], pid[j])
    else:
        tt, yy, yyd, pp = t, y, yd, pid
    e, ed = y_inf - yy, -yyd
    hh = np.diff(tt)
    ok = pp[:-1] == pp[1:]
    cross = ok & (e[:-1] * e[1:] < 0)
    smooth = ok & ~cross

    def herm(f, fd):
        return hh / 2 * (f[:-1] + f[1:]) + hh ** 2 / 12 * (fd[:-1] - fd[1:])
    iae = np.where(smooth, herm(np.abs(e), np.sign(e) * ed) * 1.0, 0.0)
    # sign-changing intervals: split at the linear zero
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(cross, np.abs(e[:-1]) / (np.abs(e[:-1]) + np.abs(e[1:])), 0.0)
    iae = iae + np.where(cross, hh / 2 * (np.abs(e[:-1]) * frac + np.abs(e[1:]) * (1 - frac)), 0.0)
    ise = np.where(ok, herm(e * e, 2 * e * ed), 0.0)
    itae_smooth = herm(tt * np.abs(e), np.abs(e) + tt * np.sign(e) * ed)
    itae_cross = hh / 2 * (tt[:-1] * np.abs(e[:-1]) * frac + tt[1:] * np.abs(e[1:]) * (1 - frac))
    itae = np.where(smooth, itae_smooth, np.where(cross, itae_cross, 0.0))
    m["iae"], m["ise"], m["itae"] = float(np.sum(iae)), float(np.sum(ise)), float(np.sum(itae))
    m["_t"], m["_y"] = t, y
    return m


def measure_samples(t, y, u, y_inf, r, band_frac):
    """The metrics the way README says the nonlinear loop's are read: off the samples, crossings
    by linear interpolation, integrals by the trapezoid rule."""
    m = {"final_value": y_inf, "steady_state_error": (r - y_inf) / r}
    yn = y / y_inf
    k = int(np.argmax(yn))
    if yn[k] > 1.0 + 1e-9:
        m["overshoot_pct"], m["peak_time"] = (yn[k] - 1.0) * 100.0, latest_tied_peak(t, yn)
        after = yn[t > m["peak_time"]]
        # README, "Metric definitions": the deepest fall below y∞ after the peak
        m["post_peak_dip_pct"] = max(0.0, 1.0 - float(np.min(after))) * 100.0 if len(after) else 0.0
    else:
        m["overshoot_pct"], m["peak_time"] = 0.0, None
        m["post_peak_dip_pct"] = 0.0
    m["undershoot_pct"] = max(0.0, -float(np.min(yn))) * 100.0
    m["effort_peak"] = float(np.max(np.abs(u)))

    def lin(i, level):
        f0, f1 = y[i - 1], y[i]
        return float(t[i]) if f1 == f0 else float(t[i - 1] + (level - f0) / (f1 - f0) * (t[i] - t[i - 1]))

    def first(frac):
        idx = np.flatnonzero(yn >= frac)
        if not len(idx):
            return None
        i = int(idx[0])
        return float(t[0]) if i == 0 else lin(i, frac * y_inf)
    t10, t90 = first(0.1), first(0.9)
    m["rise_time"] = (t90 - t10) if (t10 is not None and t90 is not None) else None
    band = band_frac * abs(y_inf)
    out = np.abs(y - y_inf) > band
    side = np.sign(y - y_inf)
    entry = None
    hit = np.flatnonzero(~out[1:] | (out[:-1] & (side[1:] != side[:-1])))
    if len(hit):
        i = int(hit[0]) + 1
        entry = lin(i, y_inf + side[i - 1] * band) if out[i - 1] else float(t[i])
    m["band_entry_time"] = entry
    if out[-1]:
        m["settling_time"] = None
    else:
        idx = np.flatnonzero(out)
        m["settling_time"] = 0.0 if not len(idx) else lin(int(idx[-1]) + 1, y_inf + side[int(idx[-1])] * band)
    m["final_entry"] = m["settling_time"]
    e = y_inf - y
    m["iae"] = float(np.trapz(np.abs(e), t))
    m["ise"] = float(np.trapz(e * e, t))
    m["itae"] = float(np.trapz(t * np.abs(e), t))
    return m


# ---- margins -----------------------------------------------------------------------------------------

def loop_frequency(cn, cd, gn, gd, delay=0.0):
    def L(w):
        s = 1j * np.asarray(w, float)
        v = np.polyval(cn, s) * np.polyval(gn, s) / (np.polyval(cd, s) * np.polyval(gd, s))
        return v * np.exp(-s * delay) if delay else v
    return L


def margins(cn, cd, gn, gd, delay=0.0, per_decade=2000):
    """Gain margin (upper: phase crossovers with |L| < 1), phase margin, delay margin, Ms."""
    L = loop_frequency(cn, cd, gn, gd, delay)
    scales = [abs(z) for p in (cn, cd, gn, gd) for z in np.roots(strip(p)) if abs(z) > 0]
    lo = min(scales + [1.0]) * 1e-4
    hi = max(scales + [1.0]) * 1e4
    if delay:
        hi = max(hi, 1e3 / delay)
    n = int(math.ceil(math.log10(hi / lo) * per_decade))
    w = np.logspace(math.log10(lo), math.log10(hi), n)
    Lw = L(w)
    mag = np.abs(Lw)
    ph = np.unwrap(np.angle(Lw))
    lm = np.log(mag)

    def phase_at(x, i):  # continuous phase near sample i
        return ph[i] + np.angle(L(x) / Lw[i])
    # Gain margins (README "Margins"): every phase crossover ω (∠L = −180°) puts a closed-loop pole
    # of K·L on the imaginary axis at ±jω for K = 1/|L(jω)|, and L(0) < 0 puts one at s = 0 for
    # K = −1/L(0) (the Nyquist criterion's crossings of the negative real axis). The upper margin
    # is the smallest such K above 1, the lower one the largest below 1, both in dB.
    gm = []
    crossings = np.flatnonzero(np.floor((ph[:-1] + math.pi) / (2 * math.pi)) != np.floor((ph[1:] + math.pi) / (2 * math.pi)))
    if len(crossings):
        # refine only the crossovers that can be the nearest on either side (within 1 dB of the
        # nearest sampled estimate above and below 0 dB; the estimate is off by far less between
        # two grid points)
        lo_db = -20 * np.log10(np.maximum(mag[crossings], mag[crossings + 1]))
        hi_db = -20 * np.log10(np.minimum(mag[crossings], mag[crossings + 1]))
        keep = np.zeros(len(crossings), bool)
        up = hi_db > 0
        if up.any():
            keep |= up & (np.maximum(lo_db, 0) <= np.min(hi_db[up]) + 1.0)
        down = lo_db < 0
        if down.any():
            keep |= down & (np.minimum(hi_db, 0) >= np.max(lo_db[down]) - 1.0)
        crossings = crossings[keep]
    for i in crossings:
        k = math.floor(max(ph[i], ph[i + 1]) / (2 * math.pi) + 0.5)
        target = (2 * k - 1) * math.pi  # −π + 2πk between the two samples
        if not (min(ph[i], ph[i + 1]) <= target <= max(ph[i], ph[i + 1])):
            continue
        wc = _refine_root(lambda x: phase_at(x, i) - target, w[i], w[i + 1])
        gm.append((-20 * math.log10(abs(L(wc))), wc))
    with np.errstate(divide="ignore", invalid="ignore"):
        l_zero = complex(L(0.0))
    if np.isfinite(l_zero.real) and l_zero.real < 0:
        gm.append((-20 * math.log10(-l_zero.real), 0.0))
    pm = []
    for i in np.flatnonzero(lm[:-1] * lm[1:] < 0):
        wc = _refine_root(lambda x: math.log(abs(L(x))), w[i], w[i + 1])
        phi = math.degrees(phase_at(wc, i))
        m_ = (phi + 180.0) % 360.0
        if m_ > 180.0:
            m_ -= 360.0
        pm.append((m_, wc))
    S = 1.0 / np.abs(1.0 + Lw)
    i = int(np.argmax(S))
    ms, wms = float(S[i]), float(w[i])
    if 0 < i < len(w) - 1:
        res = optimize.minimize_scalar(lambda x: -1.0 / abs(1.0 + L(10 ** x)), bounds=(math.log10(w[i - 1]), math.log10(w[i + 1])),
                                       method="bounded", options={"xatol": 1e-12})
        if -res.fun > ms:
            ms, wms = float(-res.fun), float(10 ** res.x)
    with np.errstate(divide="ignore", invalid="ignore"):
        l0 = abs(L(0.0))
    ms = max(ms, 1.0 / abs(1.0 + l0) if np.isfinite(l0) else 0.0, 1.0)
    out = {"sensitivity_peak": ms, "sensitivity_peak_frequency": wms}
    above = [g for g in gm if g[0] > 0]
    below = [g for g in gm if g[0] < 0]
    out["gain_margin_db"], out["phase_crossover"] = min(above) if above else (math.inf, None)
    out["lower_gain_margin_db"], out["lower_phase_crossover"] = max(below) if below else (None, None)
    if pm:
        p = min(pm)
        out["phase_margin_deg"], out["gain_crossover"] = p
        dm = [math.radians(m_) / wc for m_, wc in pm if m_ > 0]
        out["delay_margin"] = min(dm) if dm else 0.0
    else:
        out["phase_margin_deg"], out["gain_crossover"], out["delay_margin"] = math.inf, None, math.inf
    return out


# ---- the described loop: hybrid continuous-time simulation ---------------------------------------------

class Mode:
    __slots__ = ("side", "kind", "slew")

    def __init__(self, side=0, kind="int", slew=0):
        self.side, self.kind, self.slew = side, kind, slew

    def __repr__(self):
        return f"Mode({self.side}, {self.kind}, {self.slew})"


class Ctx:
    """What is constant over one integration piece: noise value, load, delayed-input source."""
    __slots__ = ("n", "d", "hist")

    def __init__(self, n, d, hist):
        self.n, self.d, self.hist = n, d, hist


class DescribedLoop:
    """The loop the spec describes, from result.json: plant (linear realization or expression
    plant, deviation variables), controller (parallel gains with weights, or C(s) on e), actuator
    (limits, rate limit), anti-windup, delay, load step, noise, sample time."""

    def __init__(self, *, plant, parallel, ctrl_tf, b, c, umin, umax, rate, anti_windup, tt, r, td, dsize,
                 noise_rms, noise_period, seed, delay, horizon, ts, de, structure, notch=None):
        self.plant = plant          # ("linear", Ap, Bp, Cp) or ("expr", ExpressionPlant)
        self.parallel = parallel    # (kp, ki, kd, tf) or None
        self.notch = notch          # (num, den) of N(s) after the parallel law (u_c = N·v), or None
        self.ctrl_tf = ctrl_tf      # (num, den) of C(s)
        self.b, self.c = b, c
        self.umin, self.umax, self.rate = umin, umax, rate
        self.anti_windup, self.tt = anti_windup, tt
        self.r, self.td, self.dsize = r, td, dsize
        self.noise_rms, self.noise_period, self.seed = noise_rms, noise_period, seed
        self.delay, self.horizon, self.ts, self.de = delay, horizon, ts, de
        self.structure = structure

    def with_plant(self, plant):
        other = DescribedLoop.__new__(DescribedLoop)
        other.__dict__.update(self.__dict__)
        other.plant = plant
        return other

    def noise(self, horizon):
        if not self.noise_rms:
            return None
        count = int(math.floor(horizon / self.noise_period)) + 2
        return gaussian_sequence(self.noise_rms, self.seed, count)


def noise_index(t, period):
    return max(0, int(math.floor(t / period + 1e-9)))


class History:
    """The applied u over the integrated past, for the delayed plant input. Within each solver
    step the DOP853 continuous extension is a polynomial of degree 7 in the step fraction, and the
    applied u is affine in the state within a held mode, so a degree-7 polynomial through 8
    Chebyshev nodes of the step reproduces it to rounding (Radau's: degree 3, reproduced too).
    Evaluated by Horner's rule; 0 before t = 0 (the loop at rest)."""
    NODES = 8

    def __init__(self):
        k = np.arange(self.NODES)
        self.x = 0.5 - 0.5 * np.cos((2 * k + 1) * np.pi / (2 * self.NODES))  # Chebyshev nodes in (0, 1)
        self.Vinv_T = np.linalg.inv(np.vander(2 * self.x - 1, self.NODES)).T  # powers of v = 2x − 1
        self.starts, self.widths, self.coefs = [], [], []

    def append(self, sol, a, b, applied):
        ts = np.asarray(sol.ts, float) if hasattr(sol, "ts") else np.array([a, b])
        ts = np.unique(np.concatenate([[a], np.clip(ts, a, b), [b]]))
        starts, widths = ts[:-1], np.diff(ts)
        taus = (starts[:, None] + widths[:, None] * self.x[None, :]).ravel()
        Z = sol(taus)
        U = np.asarray(applied(Z.reshape(Z.shape[0], -1)), float).reshape(len(starts), self.NODES)
        self.starts.extend(starts.tolist())
        self.widths.extend(widths.tolist())
        self.coefs.extend(list(U @ self.Vinv_T))

    def window(self, lo, hi):
        """u(τ) for τ in [lo, hi]: the right limit at lo, the left limit at hi (a switch at either
        end is a break point of the integration)."""
        if hi <= 0.0:
            return lambda tau: np.zeros(np.shape(tau)) if np.ndim(tau) else 0.0
        starts, widths, coefs = self.starts, self.widths, self.coefs
        i_lo = max(bisect.bisect_right(starts, lo) - 1, 0)
        i_hi = max(bisect.bisect_left(starts, hi) - 1, 0)
        s_np = np.array(starts[i_lo:i_hi + 1])
        w_np = np.array(widths[i_lo:i_hi + 1])
        c_np = np.array(coefs[i_lo:i_hi + 1])
        n = self.NODES

        def f(tau):
            if np.ndim(tau):
                tau = np.clip(np.asarray(tau, float), lo, hi)
                i = np.clip(np.searchsorted(s_np, tau, side="right") - 1, 0, len(s_np) - 1)
                v = 2 * (tau - s_np[i]) / w_np[i] - 1
                out = np.zeros_like(tau)
                for j in range(n):
                    out = out * v + c_np[i, j]
                return np.where(tau <= 0.0, 0.0, out)
            tau = min(max(tau, lo), hi)
            if tau <= 0.0:
                return 0.0
            i = min(max(bisect.bisect_right(starts, tau, i_lo, i_hi + 1) - 1, i_lo), i_hi)
            v = 2 * (tau - starts[i]) / widths[i] - 1
            c = coefs[i]
            out = 0.0
            for j in range(n):
                out = out * v + c[j]
            return float(out)
        return f


class ContinuousHybrid:
    """solve_ivp on the continuous loop with its modes held within a piece, terminal events at
    every switch (saturation, conditional integration and its sliding motion, rate limit)."""

    def __init__(self, loop, rho, max_pieces=20000):
        self.L = loop
        self.max_pieces = max_pieces
        kind = loop.plant[0]
        if kind == "linear":
            _, self.Ap, self.Bp, self.Cp = loop.plant
            self.np = len(self.Bp)
            self.expr = None
        else:
            self.expr = loop.plant[1]
            self.np = self.expr.n
        size = self.np
        self.I = self.D = None
        if loop.parallel is not None:
            self.kp, self.ki, self.kd, self.tf = loop.parallel
            if self.ki != 0.0:
                self.I = size
                size += 1
            if self.kd != 0.0:
                self.D = size
                size += 1
            self.nc = 0
            self.N = None
            if loop.notch is not None:
                # The notch after the PID as its own block (README "Filters"): u_c = N·v.
                self.An, self.Bn, self.Cn, self.Dn = realize(*loop.notch)
                self.N, self.nn = size, len(self.Bn)
                size += self.nn
        else:
            self.N = None
            Ac, Bc, Cc, Dc = realize(*loop.ctrl_tf)
            self.Ac, self.Bc, self.Cc, self.Dc = Ac, Bc, Cc, Dc
            self.c0, self.nc = size, len(Bc)
            size += self.nc
        self.UA = None
        if loop.rate is not None:
            self.UA = size
            size += 1
        self.size = size
        self.clamps = loop.parallel is not None and self.I is not None and loop.anti_windup == "conditional-integration"
        self.backcalc = loop.parallel is not None and self.I is not None and loop.anti_windup == "back-calculation"
        self.rho = rho
        self.noise = loop.noise(loop.horizon * EXTEND)
        self._hist = History()
        self._hist_count = 0

    # -- algebra, vectorized over columns of Z (shape (size, k)) ------------------------------------
    def y(self, Z):
        return self.Cp @ Z[:self.np] if self.expr is None else self.expr.h(Z[:self.np])

    def command(self, Z, n):
        L = self.L
        if L.parallel is not None:
            v = self.pid(Z, n)
            return v if self.N is None else self.Cn @ Z[self.N:self.N + self.nn] + self.Dn * v
        ym = self.y(Z) + n
        return self.Cc @ Z[self.c0:self.c0 + self.nc] + self.Dc * (L.r - ym)

    def pid(self, Z, n):
        """The parallel law's output v (before a notch)."""
        L = self.L
        ym = self.y(Z) + n
        u = self.kp * (L.b * L.r - ym)
        if self.I is not None:
            u = u + Z[self.I]
        if self.D is not None:
            u = u + self.kd / self.tf * (L.c * L.r - ym - Z[self.D])
        return u

    def limit(self, side):
        return self.L.umax if side > 0 else self.L.umin

    def applied(self, Z, mode, n):
        if mode.slew != 0:
            return Z[self.UA]
        if mode.side != 0:
            return np.full(Z.shape[1], self.limit(mode.side))
        return self.command(Z, n)

    def deriv(self, t, Z, mode, ctx):
        """dZ and (y, ẏ, u_c, u_a) for columns Z at times t (scalar or array)."""
        L = self.L
        y = self.y(Z)
        ym = y + ctx.n
        uc = self.command(Z, ctx.n)
        ua = self.applied(Z, mode, ctx.n)
        up = (ctx.hist(np.asarray(t, float) - L.delay) if L.delay else ua) + ctx.d
        dZ = np.zeros_like(Z)
        xp = Z[:self.np]
        if self.expr is None:
            dZ[:self.np] = self.Ap @ xp + np.outer(self.Bp, up)
            ydot = self.Cp @ dZ[:self.np]
        else:
            dZ[:self.np] = self.expr.f(xp, up)
            ydot = self.expr.h_rate(xp, dZ[:self.np])
        e = L.r - ym
        if L.parallel is not None:
            if self.D is not None:
                dZ[self.D] = (L.c * L.r - ym - Z[self.D]) / self.tf
            if self.N is not None:
                sl = slice(self.N, self.N + self.nn)
                dZ[sl] = self.An @ Z[sl] + np.outer(self.Bn, self.pid(Z, ctx.n))
            if self.I is not None:
                if self.clamps and mode.kind == "frozen":
                    dZ[self.I] = 0.0
                elif self.clamps and mode.kind == "slide":
                    held = self.kp * ydot
                    if self.D is not None:
                        held = held + self.kd / self.tf * (ydot + dZ[self.D])
                    if self.N is not None:  # u_c' = Cn·xn' + Dn·v' = 0
                        held = held - self.Cn @ dZ[self.N:self.N + self.nn] / self.Dn
                    dZ[self.I] = held
                elif self.backcalc:
                    dZ[self.I] = self.ki * e + (ua - uc) / L.tt
                else:
                    dZ[self.I] = self.ki * e
        else:
            xc = Z[self.c0:self.c0 + self.nc]
            dZ[self.c0:self.c0 + self.nc] = self.Ac @ xc + np.outer(self.Bc, e)
        if self.UA is not None:
            dZ[self.UA] = mode.slew * L.rate
        return dZ, y, ydot, uc, ua

    def command_rate(self, Z, dZ, ydot):
        if self.L.parallel is not None:
            v = -self.kp * ydot
            if self.I is not None:
                v = v + dZ[self.I]
            if self.D is not None:
                v = v + self.kd / self.tf * (-ydot - dZ[self.D])
            return v if self.N is None else self.Cn @ dZ[self.N:self.N + self.nn] + self.Dn * v
        return self.Cc @ dZ[self.c0:self.c0 + self.nc] - self.Dc * ydot

    def uc_rate(self, z, t, mode, ctx):
        Z = z.reshape(-1, 1)
        dZ, _, ydot, _, _ = self.deriv(t, Z, mode, ctx)
        return float(self.command_rate(Z, dZ, ydot)[0])

    # -- modes ----------------------------------------------------------------------------------------
    def on_limit(self, uc):
        for s, lim in ((1, self.L.umax), (-1, self.L.umin)):
            if math.isfinite(lim) and abs(uc - lim) <= 1e-9 * max(1.0, abs(lim)):
                return s
        return 0

    def choose(self, z, t, ctx, prev, fired, ua_before, jump):
        L = self.L
        z = z.copy()
        Z = z.reshape(-1, 1)
        uc = float(self.command(Z, ctx.n)[0])
        e = L.r - float(self.y(Z)[0]) - ctx.n
        if fired == "slide_frozen":
            side, kind = prev.side, "frozen"
        elif fired == "slide_inside":
            side, kind = 0, "int"
        elif fired == "drive":
            side, kind = prev.side, ("int" if prev.kind == "frozen" else "frozen")
        else:
            s = self.on_limit(uc)
            if s:
                lim = self.limit(s)
                if self.clamps:
                    z[self.I] += (lim - uc) / (self.Dn if self.N is not None else 1.0)
                    frozen = s * self.uc_rate(z, t, Mode(s, "frozen", 0), ctx)
                    drive = s * self.ki * e
                    if drive > 0:
                        side, kind = (s, "frozen") if frozen >= 0 else (s, "slide") if frozen + drive > 0 else (0, "int")
                    else:
                        side, kind = ((s, "int") if frozen + drive > 0 else (0, "int"))
                else:
                    slope = s * self.uc_rate(z, t, Mode(s, "int", 0), ctx)
                    side, kind = (s if slope > 0 else 0), "int"
            else:
                side = 1 if uc > L.umax else -1 if uc < L.umin else 0
                kind = "frozen" if (self.clamps and side != 0 and side * self.ki * e > 0) else "int"
        slew = 0
        if self.UA is not None:
            # README/nonlinear.hpp: the applied u slews at ±rate toward the (saturated) command and
            # tracks it while the command moves no faster than the rate; a jump of the command (the
            # step at t = 0, a new noise value) is always slewed through, from where u was.
            uc = float(self.command(z.reshape(-1, 1), ctx.n)[0])
            target = self.limit(side) if side else uc
            base = z[self.UA] if (prev is not None and prev.slew != 0) else ua_before
            if jump:
                z[self.UA] = base
                if target != base:
                    slew = 1 if target > base else -1
            elif prev is not None and prev.slew != 0 and fired != "reach":
                slew = prev.slew if prev.slew * (z[self.UA] - target) < 0 else 0
            if slew == 0 and side == 0 and not (jump and target != base):
                if fired == "rate_up":
                    slew = 1
                elif fired == "rate_dn":
                    slew = -1
                else:
                    slope = self.uc_rate(z, t, Mode(0, kind, 0), ctx)
                    if abs(slope) > L.rate * (1 + 1e-12):
                        slew = 1 if slope > 0 else -1
                if slew:
                    z[self.UA] = base
            if slew == 0:
                z[self.UA] = target
        return z, Mode(side, kind, slew)

    def guards(self, mode, ctx, excluded):
        L = self.L
        out = []

        def add(name, fun, direction):
            if name == excluded:
                return
            def g(t, z):
                return float(fun(t, z.reshape(-1, 1)))
            g.terminal, g.direction, g.name = True, direction, name
            out.append(g)
        cmd = lambda t, Z: self.command(Z, ctx.n)[0]
        if mode.side == 0:
            if math.isfinite(L.umax):
                add("hi_out", lambda t, Z: cmd(t, Z) - L.umax, 1)
            if math.isfinite(L.umin):
                add("lo_out", lambda t, Z: cmd(t, Z) - L.umin, -1)
        elif mode.kind != "slide":
            s, lim = mode.side, self.limit(mode.side)
            add("back_in", lambda t, Z: s * (cmd(t, Z) - lim), -1)
        if self.clamps and mode.side != 0 and mode.kind != "slide":
            s = mode.side
            add("drive", lambda t, Z: s * self.ki * (L.r - self.y(Z)[0] - ctx.n), -1 if mode.kind == "frozen" else 1)
        if mode.kind == "slide":
            s = mode.side

            def held(t, Z):
                return self.deriv(t, Z, mode, ctx)[0][self.I, 0]
            add("slide_frozen", lambda t, Z: s * held(t, Z), -1)
            add("slide_inside", lambda t, Z: s * (self.ki * (L.r - self.y(Z)[0] - ctx.n) - held(t, Z)), -1)
        if self.UA is not None:
            if mode.slew != 0:
                sl = mode.slew
                tgt = (lambda t, Z: self.limit(mode.side)) if mode.side else cmd
                add("reach", lambda t, Z: sl * (Z[self.UA, 0] - tgt(t, Z)), 1)
            elif mode.side == 0:
                def rate_of(t, Z):
                    dZ, _, ydot, _, _ = self.deriv(t, Z, mode, ctx)
                    return self.command_rate(Z, dZ, ydot)[0]
                add("rate_up", lambda t, Z: rate_of(t, Z) - L.rate, 1)
                add("rate_dn", lambda t, Z: rate_of(t, Z) + L.rate, -1)
        return out

    # -- integration ------------------------------------------------------------------------------------
    def run(self, t_end_total):
        L = self.L
        H = t_end_total
        tiny = 1e-12 * H
        breaks = {H}
        if L.dsize and 0.0 < L.td < H:
            breaks.add(L.td)
        if self.noise is not None:
            k = 1
            while k * L.noise_period < H - tiny:
                breaks.add(k * L.noise_period)
                k += 1
        fixed = sorted(breaks)
        delay_breaks = [L.delay] if L.delay and L.delay < H else []  # a heap
        method = "Radau" if self.rho * H > 3e4 else "DOP853"
        z = np.zeros(self.size)
        t = 0.0
        mode = None
        fired = None
        excluded = None
        ua_before = 0.0
        n_prev = None
        segs = []
        zero_runs = 0
        while t < H - tiny:
            n = self.noise[noise_index(t, L.noise_period)] if self.noise is not None else 0.0
            d = L.dsize if (L.dsize and t >= L.td - tiny and L.td < L.horizon) else 0.0
            while delay_breaks and delay_breaks[0] <= t + tiny:
                heapq.heappop(delay_breaks)
            i = bisect.bisect_right(fixed, t + tiny)
            nxt = min(fixed[i] if i < len(fixed) else H, delay_breaks[0] if delay_breaks else H)
            at_break = nxt
            if L.delay:
                nxt = min(nxt, t + L.delay)
            hist = self.history(segs, t, nxt) if L.delay else None
            ctx = Ctx(n, d, hist)
            jump = (mode is None) or (n != n_prev)
            z, mode = self.choose(z, t, ctx, mode, fired, ua_before, jump and fired is None)
            n_prev = n
            guards = self.guards(mode, ctx, excluded)
            stop = min(nxt, t + 1e-9 * H) if excluded else nxt

            fun, jac = self.rhs(mode, ctx, z, t)
            kw = {"jac": jac} if (method == "Radau" and jac is not None) else {}
            sol = solve_piece(fun, (t, stop), z, method=method, rtol=RTOL, atol=ATOL * max(1.0, abs(L.r)),
                              events=guards, dense_output=True, **kw)
            t1 = float(sol.t[-1])
            z1 = sol.y[:, -1].copy()
            if t1 > t:
                segs.append((t, t1, sol.sol, mode, ctx))
                ua_before = float(self.applied(z1.reshape(-1, 1), mode, n)[0])
            # a switch or a break point (not the method-of-steps cap) makes a kink or jump of
            # the applied u, which reaches the plant L later
            if L.delay and (sol.status == 1 or stop == at_break) and t1 + L.delay < H:
                heapq.heappush(delay_breaks, t1 + L.delay)
            excluded = None
            if sol.status == 1:
                name = next(g.name for g, te in zip(guards, sol.t_events) if len(te))
                if t1 - t <= tiny:
                    zero_runs += 1
                    if zero_runs >= 2:
                        excluded, fired, zero_runs = name, None, 0
                    else:
                        fired = name
                else:
                    zero_runs = 0
                    fired = name
                t = t1
            else:
                fired = None
                zero_runs = 0
                t = stop
            z = z1
            if len(segs) > self.max_pieces:
                raise NotImplementedError(f"more than {self.max_pieces} integration pieces (raise with --long)")
        return segs

    def rhs(self, mode, ctx, z, t):
        """The right-hand side for solve_ivp: for a linear plant the loop is affine within a held
        mode, dz = M·z + m + b_u·u(t − L) (assembled below and checked against `deriv`, the
        general form, at the piece's start); otherwise `deriv` itself."""
        if self.expr is not None:
            return (lambda tt, zz: self.deriv(tt, zz.reshape(-1, 1), mode, ctx)[0][:, 0]), None
        M, m, bu = self.affine(mode, ctx)
        hist = ctx.hist
        if self.L.delay:
            fun = lambda tt, zz: M @ zz + m + bu * hist(tt - self.L.delay)
        else:
            fun = lambda tt, zz: M @ zz + m
        ref = self.deriv(t, z.reshape(-1, 1), mode, ctx)[0][:, 0]
        got = fun(t, z)
        if np.max(np.abs(ref - got)) > 1e-9 * (1.0 + np.max(np.abs(ref))):
            raise RuntimeError(f"affine right-hand side disagrees with the general one: {ref} vs {got}")
        return fun, M

    def affine(self, mode, ctx):
        L, nz, npl = self.L, self.size, self.np
        e_ = np.eye(nz)
        cy = np.zeros(nz)
        cy[:npl] = self.Cp
        if L.parallel is not None:
            row_uc, c_uc = -self.kp * cy, self.kp * (L.b * L.r - ctx.n)
            if self.I is not None:
                row_uc = row_uc + e_[self.I]
            if self.D is not None:
                row_uc = row_uc - self.kd / self.tf * (cy + e_[self.D])
                c_uc += self.kd / self.tf * (L.c * L.r - ctx.n)
            row_v, c_v = row_uc, c_uc
            if self.N is not None:
                row_uc = self.Dn * row_v
                row_uc[self.N:self.N + self.nn] += self.Cn
                c_uc = self.Dn * c_v
        else:
            row_uc = -self.Dc * cy
            row_uc[self.c0:self.c0 + self.nc] += self.Cc
            c_uc = self.Dc * (L.r - ctx.n)
        if mode.slew != 0:
            row_ua, c_ua = e_[self.UA], 0.0
        elif mode.side != 0:
            row_ua, c_ua = np.zeros(nz), self.limit(mode.side)
        else:
            row_ua, c_ua = row_uc, c_uc
        M = np.zeros((nz, nz))
        m = np.zeros(nz)
        bu = np.zeros(nz)
        M[:npl, :npl] = self.Ap
        if L.delay:
            bu[:npl] = self.Bp
            m[:npl] = self.Bp * ctx.d
        else:
            M[:npl] += np.outer(self.Bp, row_ua)
            m[:npl] = self.Bp * (c_ua + ctx.d)
        row_e, c_e = -cy, L.r - ctx.n
        if L.parallel is not None:
            if self.D is not None:
                M[self.D] = (-cy - e_[self.D]) / self.tf
                m[self.D] = (L.c * L.r - ctx.n) / self.tf
            if self.N is not None:
                sl = slice(self.N, self.N + self.nn)
                M[sl] = np.outer(self.Bn, row_v)
                M[sl, sl] += self.An
                m[sl] = self.Bn * c_v
            if self.I is not None:
                if self.clamps and mode.kind == "frozen":
                    pass
                elif self.clamps and mode.kind == "slide":
                    yd_row, yd_c, yd_u = self.Cp @ M[:npl], self.Cp @ m[:npl], self.Cp @ bu[:npl]
                    M[self.I] = self.kp * yd_row
                    m[self.I] = self.kp * yd_c
                    bu[self.I] = self.kp * yd_u
                    if self.D is not None:
                        M[self.I] += self.kd / self.tf * (yd_row + M[self.D])
                        m[self.I] += self.kd / self.tf * (yd_c + m[self.D])
                        bu[self.I] += self.kd / self.tf * yd_u
                    if self.N is not None:
                        sl = slice(self.N, self.N + self.nn)
                        M[self.I] -= self.Cn @ M[sl] / self.Dn
                        m[self.I] -= self.Cn @ m[sl] / self.Dn
                elif self.backcalc:
                    M[self.I] = self.ki * row_e + (row_ua - row_uc) / L.tt
                    m[self.I] = self.ki * c_e + (c_ua - c_uc) / L.tt
                else:
                    M[self.I] = self.ki * row_e
                    m[self.I] = self.ki * c_e
        else:
            sl = slice(self.c0, self.c0 + self.nc)
            M[sl, sl] = self.Ac
            M[sl] += np.outer(self.Bc, row_e)
            m[sl] = self.Bc * c_e
        if self.UA is not None:
            m[self.UA] = mode.slew * L.rate
        return M, m, bu

    def history(self, segs, t0, t1):
        """The applied u at τ = t − L for t in [t0, t1]: one earlier piece covers that range
        (every piece boundary plus L is a break point)."""
        L = self.L
        lo, hi = t0 - L.delay, t1 - L.delay
        if hi <= 1e-12 * L.horizon:
            return lambda tau: np.zeros(np.shape(tau)) if np.ndim(tau) else 0.0
        while self._hist_count < len(segs):
            a, b, sol, mode, ctx = segs[self._hist_count]
            self._hist.append(sol, a, b, lambda Z, mode=mode, ctx=ctx: self.applied(Z, mode, ctx.n))
            self._hist_count += 1
        return self._hist.window(lo, hi)

    def pieces(self, segs, h_rho=0.1):
        out = []
        for (a, b, sol, mode, ctx) in segs:
            ts = sol.ts if hasattr(sol, "ts") else np.array([a, b])
            ts = ts[(ts >= a) & (ts <= b)]
            if ts[0] > a:
                ts = np.insert(ts, 0, a)
            if ts[-1] < b:
                ts = np.append(ts, b)
            pts = [ts[:1]]
            for x0, x1 in zip(ts[:-1], ts[1:]):
                m = int(min(64, max(2, math.ceil((x1 - x0) * self.rho / h_rho))))
                pts.append(np.linspace(x0, x1, m + 1)[1:])
            tq = np.concatenate(pts)

            def observe(tq, sol=sol, mode=mode, ctx=ctx):
                Z = sol(tq)
                if Z.ndim == 1:
                    Z = Z.reshape(-1, 1)
                dZ, y, ydot, uc, ua = self.deriv(tq, Z, mode, ctx)
                if mode.slew != 0:
                    ud = np.full(Z.shape[1], mode.slew * self.L.rate)
                elif mode.side != 0:
                    ud = np.zeros(Z.shape[1])
                else:
                    ud = self.command_rate(Z, dZ, ydot)
                return y, ydot, ua, ud, uc
            y, yd, u, ud, uc = observe(tq)

            def ev(s, observe=observe):
                r_ = observe(np.array([s]))
                return float(r_[0][0]), float(r_[1][0]), float(r_[2][0]), float(r_[3][0])

            def evv(times, observe=observe):
                r_ = observe(np.asarray(times, float))
                return np.asarray(r_[0], float), np.asarray(r_[2], float)
            def ucv(times, observe=observe):
                return np.asarray(observe(np.asarray(times, float))[4], float)
            out.append(Piece(tq, np.asarray(y, float), np.asarray(yd, float), np.asarray(u, float), np.asarray(ud, float), ev, evv,
                             np.asarray(uc, float), ucv))
        return out

    def sample(self, segs, times):
        """y and the applied u at `times` (left limits at piece boundaries)."""
        ys = np.empty(len(times))
        us = np.empty(len(times))
        k = 0
        for i, tq in enumerate(times):
            while k + 1 < len(segs) and tq > segs[k][1]:
                k += 1
            a, b, sol, mode, ctx = segs[k]
            Z = sol(min(max(tq, a), b)).reshape(-1, 1)
            ys[i] = self.y(Z)[0]
            us[i] = self.applied(Z, mode, ctx.n)[0]
        return ys, us


# ---- the described loop with a sampled controller --------------------------------------------------------

def z_poly_mul(*ps):
    out = np.array([1.0])
    for p in ps:
        out = np.convolve(out, p)
    return out


def parallel_difference_equation(kp, ki, kd, tf, b, c, ts):
    """u[k] from the documented digital PID (README / nonlinear.hpp), as z⁻¹ polynomials
    (ascending powers): P = Kp·(b·r − y); I by Tustin, Ki·Ts/2·(1 + z⁻¹)/(1 − z⁻¹) on e;
    D by the backward difference on Kd·s/(Tf·s + 1): Kd/(Tf + Ts)·(1 − z⁻¹)/(1 − a·z⁻¹),
    a = Tf/(Tf + Ts), on c·r − y (Franklin, Powell & Workman, Digital Control of Dynamic
    Systems: bilinear and backward-difference rules)."""
    one = np.array([1.0])
    den_i = np.array([1.0, -1.0]) if ki else one
    a = tf / (tf + ts) if kd else 0.0
    den_d = np.array([1.0, -a]) if kd else one
    den = z_poly_mul(den_i, den_d)

    def numerator(bw, cw):
        terms = [kp * bw * den]
        if ki:
            terms.append(ki * ts / 2 * z_poly_mul(np.array([1.0, 1.0]), den_d))
        if kd:
            terms.append(cw * kd / (tf + ts) * z_poly_mul(np.array([1.0, -1.0]), den_i))
        size = max(len(t_) for t_ in terms)
        return sum(np.pad(t_, (0, size - len(t_))) for t_ in terms)
    return numerator(b, c), numerator(1.0, 1.0), den


def tustin_difference_equation(cn, cd, ts):
    """Tustin of C(s) (scipy.signal.cont2discrete, method "bilinear"), as z⁻¹ polynomials."""
    nd, dd, _ = signal.cont2discrete((strip(cn), strip(cd)), ts, method="bilinear")
    nd, dd = np.atleast_1d(np.squeeze(nd)), np.atleast_1d(dd)
    return nd / dd[0], nd / dd[0], dd / dd[0]


def same_coefficients(a, b, rel):
    a, b = np.asarray(a, float), np.asarray(b, float)
    size = max(len(a), len(b))
    a, b = np.pad(a, (0, size - len(a))), np.pad(b, (0, size - len(b)))
    err = float(np.max(np.abs(a - b))) / max(float(np.max(np.abs(b))), 1e-300)
    return err <= rel, err


class Profile:
    """The applied actuator output: (start, value, slope) pieces, right-continuous, 0 before 0."""

    def __init__(self):
        self.starts, self.values, self.slopes = [-math.inf], [0.0], [0.0]

    def add(self, t, v, s):
        if t == self.starts[-1]:
            self.values[-1], self.slopes[-1] = v, s
        else:
            self.starts.append(t)
            self.values.append(v)
            self.slopes.append(s)

    def at(self, t):
        i = max(0, int(np.searchsorted(self.starts, t, side="right")) - 1)
        return self.values[i] + self.slopes[i] * (t - self.starts[i]) if self.starts[i] > -math.inf else self.values[i], self.slopes[i]

    def left(self, t):
        i = max(0, int(np.searchsorted(self.starts, t, side="left")) - 1)
        return self.values[i] + self.slopes[i] * (t - self.starts[i]) if self.starts[i] > -math.inf else self.values[i]

    def breaks(self, a, b):
        i = int(np.searchsorted(self.starts, a, side="right"))
        j = int(np.searchsorted(self.starts, b, side="left"))
        return self.starts[i:j]


class SampledHybrid:
    """The digital controller at k·Ts (documented law), zero-order hold with rate limit, delay and
    load step; the plant integrated exactly between the input's breaks."""

    def __init__(self, loop, rho_plant):
        self.L = loop
        if loop.plant[0] == "linear":
            _, self.Ap, self.Bp, self.Cp = loop.plant
            self.np = len(self.Bp)
            self.expr = None
            n = self.np
            self.M = np.zeros((n + 2, n + 2))
            self.M[:n, :n] = self.Ap
            self.M[:n, n] = self.Bp
            self.M[n, n + 1] = 1.0
        else:
            self.expr = loop.plant[1]
            self.np = self.expr.n
        self.rho = max(rho_plant, 1e-12)
        self.cache = {}
        self.noise = loop.noise(loop.horizon * EXTEND)
        self.commands = []
        self.held_integrator = False

    def output(self, x):
        return float(self.Cp @ x) if self.expr is None else float(self.expr.h(x.reshape(-1, 1))[0])

    def expm(self, h):
        key = float(h)
        phi = self.cache.get(key)
        if phi is None:
            phi = linalg.expm(self.M * h)
            if len(self.cache) < 4096:
                self.cache[key] = phi
        return phi

    def run(self, t_end):
        L = self.L
        ts = L.ts
        K = int(math.floor(t_end / ts + 1e-9))
        prof = Profile()
        x = np.zeros(self.np)
        pieces = []
        par = L.parallel
        if par is not None:
            kp, ki, kd, tf = par
            a_d = tf / (tf + ts) if kd else 0.0
            I = D = e_prev = v_prev = uc_prev = ua_end_prev = 0.0
        else:
            rn, yn, den = (np.asarray(v, float) for v in L.de)
            rh, yh, uh = [], [], []
        self.commands = []
        self.held_integrator = False
        self.samples_t, self.samples_y = [], []
        for k in range(K + 1):
            tk = k * ts
            y = self.output(x)
            n = self.noise[noise_index(tk, L.noise_period)] if self.noise is not None else 0.0
            ym = y + n
            self.samples_t.append(tk)
            self.samples_y.append(y)
            if par is not None:
                e, v = L.r - ym, L.c * L.r - ym
                P = kp * (L.b * L.r - ym)
                dI = ki * ts / 2 * (e + e_prev) if ki else 0.0
                if ki and L.anti_windup == "back-calculation":
                    dI += ts / L.tt * (ua_end_prev - uc_prev)
                Dn = a_d * D + kd / (tf + ts) * (v - v_prev) if kd else 0.0
                uc = P + I + dI + Dn
                if ki and L.anti_windup == "conditional-integration" and ((uc > L.umax and dI > 0) or (uc < L.umin and dI < 0)):
                    dI = 0.0
                    uc = P + I + Dn
                    self.held_integrator = True  # the command after the hold may sit inside the limits
                I += dI
                D, e_prev, v_prev = Dn, e, v
            else:
                rh.insert(0, L.r)
                yh.insert(0, ym)
                uc = sum(c_ * r_ for c_, r_ in zip(rn, rh)) - sum(c_ * y_ for c_, y_ in zip(yn, yh)) \
                    - sum(c_ * u_ for c_, u_ in zip(den[1:], uh))
                uh.insert(0, uc)
                del rh[len(rn):], yh[len(yn):], uh[len(den) - 1:]
            self.commands.append(uc)
            target = min(max(uc, L.umin), L.umax)
            t_next = min((k + 1) * ts, t_end) if k < K else t_end
            if L.rate is not None:
                a_now = prof.left(tk) if k > 0 else 0.0
                if target != a_now:
                    s = L.rate if target > a_now else -L.rate
                    prof.add(tk, a_now, s)
                    t_reach = tk + abs(target - a_now) / L.rate
                    if t_reach < (k + 1) * ts:
                        prof.add(t_reach, target, 0.0)
                else:
                    prof.add(tk, target, 0.0)
            else:
                prof.add(tk, target, 0.0)
            if par is not None:
                ua_end_prev = prof.left((k + 1) * ts)
                uc_prev = uc
            if t_next > tk:
                x = self._integrate(x, tk, t_next, prof, pieces)
        return pieces, prof

    def _integrate(self, x, a, b, prof, pieces):
        L = self.L
        cuts = set([a, b])
        cuts.update(t_ for t_ in prof.breaks(a, b))
        if L.delay:
            cuts.update(t_ + L.delay for t_ in prof.breaks(a - L.delay, b - L.delay))
        if L.dsize and a < L.td < b:
            cuts.add(L.td)
        # break points closer than 1e-9·Ts are one (k·Ts + L and (k + m)·Ts differ in the last bit)
        snapped = []
        for c_ in sorted(c_ for c_ in cuts if a <= c_ <= b):
            if snapped and c_ - snapped[-1] <= 1e-9 * L.ts:
                continue
            snapped.append(c_)
        if snapped[-1] != b:
            snapped[-1] = b
        for t0, t1 in zip(snapped[:-1], snapped[1:]):
            # the input is affine within a sub-interval: read it at the midpoint, away from the
            # break points (no rounding can pick the neighbouring piece)
            mid = 0.5 * (t0 + t1)
            if mid - L.delay >= 0:
                vm, sp = prof.at(mid - L.delay)
                up0 = vm - sp * (mid - t0)
            else:
                up0, sp = 0.0, 0.0
            d = L.dsize if (L.dsize and mid >= L.td and L.td < L.horizon) else 0.0
            vm, sa = prof.at(mid)
            ua0 = vm - sa * (mid - t0)
            m = int(min(2000, max(4, math.ceil((t1 - t0) * self.rho / H_RHO))))
            tq = np.linspace(t0, t1, m + 1)
            if self.expr is None:
                n = self.np
                z0 = np.concatenate([x, [up0 + d, sp]])
                phi = self.expm((t1 - t0) / m)
                Zs = np.empty((m + 1, n + 2))
                Zs[0] = z0
                for j in range(m):
                    Zs[j + 1] = phi @ Zs[j]
                X = Zs[:, :n]
                w = Zs[:, n]
                y = X @ self.Cp
                yd = (X @ self.Ap.T + np.outer(w, self.Bp)) @ self.Cp

                def ev(s, t0=t0, z0=z0, ua0=ua0, sa=sa):
                    zz = linalg.expm(self.M * (s - t0)) @ z0
                    xx = zz[:self.np]
                    return (float(self.Cp @ xx), float(self.Cp @ (self.Ap @ xx + self.Bp * zz[self.np])),
                            ua0 + sa * (s - t0), sa)

                def evv(times, t0=t0, z0=z0, ua0=ua0, sa=sa):
                    dt = np.asarray(times, float) - t0
                    zz = linalg.expm(self.M[None, :, :] * dt[:, None, None]) @ z0
                    return zz[:, :self.np] @ self.Cp, ua0 + sa * dt
                x = X[-1].copy()
            else:
                fun = lambda t_, z_, t0=t0, up0=up0, sp=sp, d=d: self.expr.f(z_.reshape(-1, 1), np.array([up0 + sp * (t_ - t0) + d]))[:, 0]
                sol = solve_piece(fun, (t0, t1), x, method="DOP853", rtol=RTOL, atol=ATOL, dense_output=True)
                X = sol.sol(tq)
                w = up0 + sp * (tq - t0) + d
                dX = self.expr.f(X, w)
                y = self.expr.h(X)
                yd = self.expr.h_rate(X, dX)

                def ev(s, sol=sol, t0=t0, up0=up0, sp=sp, d=d, ua0=ua0, sa=sa):
                    Z = sol.sol(s).reshape(-1, 1)
                    dZ = self.expr.f(Z, np.array([up0 + sp * (s - t0) + d]))
                    return float(self.expr.h(Z)[0]), float(self.expr.h_rate(Z, dZ)[0]), ua0 + sa * (s - t0), sa
                x = sol.y[:, -1].copy()
            else_evv = None if self.expr is not None else evv
            u = ua0 + sa * (tq - t0)
            ud = np.full(len(tq), sa)
            pieces.append(Piece(tq, np.asarray(y, float), np.asarray(yd, float), u, ud, ev, else_evv))
        return x


def discrete_loop(Ap, Bp, Cp, ts, drn, dyn, dden, md=0):
    """The loop at the samples: scipy.signal.cont2discrete(method="zoh") of the plant, closed with
    the difference equation U = (drn·R − dyn·Y)/dden (z⁻¹ coefficients, ascending) and md whole
    periods of delay on u. Returns A, B (r column), C (y row) of x[k+1] = A·x[k] + B·r."""
    Ad, Bd, Cd, _, _ = signal.cont2discrete((Ap, Bp.reshape(-1, 1), Cp.reshape(1, -1), np.zeros((1, 1))), ts, method="zoh")
    size = max(len(drn), len(dyn), len(dden))
    pad = lambda p: np.pad(np.asarray(p, float), (0, size - len(p)))
    drn, dyn, dden = pad(drn), pad(dyn), pad(dden)
    # observable form of U = (drn·R − dyn·Y)/dden in z (the z⁻¹ coefficients are z's, highest first)
    Ac, Bc, Cc, Dc = realize(dyn, dden)
    _, _, Ccr, Dcr = realize(drn, dden)
    Ao, Co, By, Br = Ac.T, Bc, Cc, Ccr
    npl, nc = Ad.shape[0], len(Co)
    n = npl + nc + md
    A = np.zeros((n, n))
    B = np.zeros((n, 1))
    # u = Co·xc + Dcr·r − Dc·y, y = Cd·xp
    A[:npl, :npl] = Ad
    ucol = np.zeros(n)
    ucol[:npl] = -Dc * Cd[0]
    ucol[npl:npl + nc] = Co
    if md == 0:
        A[:npl, :] += np.outer(Bd[:, 0], ucol)
        B[:npl, 0] += Bd[:, 0] * Dcr
    else:
        A[:npl, npl + nc + md - 1] += Bd[:, 0]
        A[npl + nc, :] += ucol
        B[npl + nc, 0] += Dcr
        for j in range(1, md):
            A[npl + nc + j, npl + nc + j - 1] = 1.0
    if nc:
        A[npl:npl + nc, :npl] -= np.outer(By, Cd[0])
        A[npl:npl + nc, npl:npl + nc] += Ao
        B[npl:npl + nc, 0] += Br
    C = np.zeros((1, n))
    C[0, :npl] = Cd[0]
    return A, B, C


def sample_pieces(pieces, times):
    """y and u at `times` from pieces (left limit at a boundary), exact evaluators."""
    ends = np.array([p.t[-1] for p in pieces])
    ys, us = np.empty(len(times)), np.empty(len(times))
    idx = np.minimum(np.searchsorted(ends, times, side="left"), len(pieces) - 1)
    for k in np.unique(idx):
        sel = np.flatnonzero(idx == k)
        p = pieces[k]
        tq = times[sel]
        if p.evv is not None:
            ys[sel], us[sel] = p.evv(tq)
            continue
        for i, t_ in zip(sel, tq):
            j = int(np.searchsorted(p.t, t_))
            if j < len(p.t) and p.t[j] == t_:
                ys[i], us[i] = p.y[j], p.u[j]
            else:
                y_, _, u_, _ = p.ev(t_)
                ys[i], us[i] = y_, u_
    return ys, us


# ---- requirement values ----------------------------------------------------------------------------------

PCT_KEYS = ("overshoot_max_pct", "undershoot_max_pct")
# The regulator requirements (README, "Regulators"): the oracle reads them off the linear loop (the
# load response y = G/(1 + C·G)·d and the closed-loop peaks, check_scipy_load.py's SciPy
# measurements), on the described loop too; the nonlinear loop's own load response is compared by
# check_scipy_load.py.
LOAD_KEYS = {"load_iae_max": "load_iae", "load_peak_max": "load_peak", "load_recovery_time_max": "load_recovery_time"}
PEAK_KEYS = {"noise_gain_max": "noise_gain", "complementary_peak_max": "complementary_peak"}
TOL_REGULATOR = 1e-6  # relative, for both (check_scipy_load.py's accuracy is far finer)
TIME_KEYS = ("peak_time_max", "settling_time_max", "rise_time_max")


def effective_peak_time(m, band_pct, strict):
    """Peak-time requirements (README, "Requirements → constraints"): the time of the peak when
    the overshoot leaves the settling band; otherwise the band entry — the FINAL one when strict
    (issue 11 §2: a response that leaves the band after the credited time earns nothing), the
    first one as README reads today (the later of both within 0.01 points of the band edge)."""
    # README: the peak is visible when the overshoot exceeds the band and the dip after the peak is
    # no deeper than the overshoot (a decaying oscillation); else the final entry into the band
    visible = m["overshoot_pct"] > band_pct and m.get("post_peak_dip_pct", 0.0) <= m["overshoot_pct"]
    if strict:
        return m["peak_time"] if visible else m["final_entry"]
    if m["peak_time"] is not None and m["overshoot_pct"] > band_pct and not visible:
        return m["final_entry"]
    if m["peak_time"] is None:
        return m["band_entry_time"]
    if m["overshoot_pct"] > band_pct + 0.01:
        return m["peak_time"]
    if m["overshoot_pct"] < band_pct - 0.01:
        return m["band_entry_time"]
    return max(m["peak_time"], m["band_entry_time"]) if m["band_entry_time"] is not None else m["peak_time"]


def requirement_value(key, m, mg, tref, band_pct, strict=True):
    if key == "overshoot_max_pct":
        return m["overshoot_pct"]
    if key == "undershoot_max_pct":
        return m["undershoot_pct"]
    if key in ("peak_time_ratio", "peak_time_max"):
        tp = effective_peak_time(m, band_pct, strict)
        if key == "peak_time_max":
            return tp
        return None if (tp is None or not tref) else tp / tref
    if key == "settling_time_max":
        return m["settling_time"]
    if key == "rise_time_max":
        return m["rise_time"]
    if key == "steady_state_error_max":
        return abs(m["steady_state_error"])
    if key == "effort_max":
        # README: on the nonlinear loop effort_max reads the command before the actuator's limits
        # (command_peak); on the linear loop command and applied u are one signal
        return m["command_peak"] if m.get("command_peak") is not None else m["effort_peak"]
    if key in LOAD_KEYS:
        return m.get(LOAD_KEYS[key])
    if mg is None:
        return None
    if key in PEAK_KEYS:
        return mg.get(PEAK_KEYS[key])
    if key == "gain_margin_min_db":
        # README "Margins": the gain may move either way by the limit — the smaller of the upper
        # margin and the magnitude of the lower one
        lower = mg.get("lower_gain_margin_db")
        return min(mg["gain_margin_db"], -lower if lower is not None else math.inf)
    return {"phase_margin_min_deg": mg["phase_margin_deg"], "gain_margin_min_db": mg["gain_margin_db"],
            "sensitivity_peak_max": mg["sensitivity_peak"]}[key]


def claim_tolerance(key, limit, bounds):
    if key in PCT_KEYS:
        return bounds["pct"]
    if key in TIME_KEYS or key == "peak_time_ratio":
        return bounds["time_rel"] * abs(limit)
    if key == "effort_max":
        return bounds["effort_rel"] * abs(limit)
    if key == "steady_state_error_max":
        return bounds["sse"]
    if key == "sensitivity_peak_max":
        return bounds["ms_rel"] * abs(limit)
    if key in LOAD_KEYS or key in PEAK_KEYS:
        return TOL_REGULATOR * abs(limit)
    return bounds["margin"]


def meets(key, value, limit, upper, tol):
    if value is None:
        return False
    return value <= limit + tol if upper else value >= limit - tol


def show(v):
    return "none" if v is None else f"{v:.10g}"


# ---- one spec ------------------------------------------------------------------------------------------

class Findings:
    def __init__(self, name):
        self.name = name
        self.lines = []   # (id, ok, what, detail)
        self.notes = []

    def check(self, cid, ok, what, detail=""):
        self.lines.append((f"{self.name}/{cid}", bool(ok), what, detail))
        return bool(ok)

    def note(self, text):
        self.notes.append(text)


class SpecOracle:
    def __init__(self, result, rc, findings, long_mode):
        self.R = result
        self.rc = rc
        self.F = findings
        self.long = long_mode
        self.h_rho = 0.01 if long_mode else H_RHO
        self.max_pts = 400_000 if long_mode else MAX_SEGMENT_POINTS
        spec = result["spec"]
        self.spec = spec
        self.r = float(spec["reference"]["amplitude"])
        self.band_pct = float(spec["requirements"]["settling_band_pct"])
        self.band = self.band_pct / 100.0
        self.judged = result.get("judged_on", "linear")
        self.expr = None

    # -- rebuild ------------------------------------------------------------------------------------------
    def rebuild(self):
        F, R, spec = self.F, self.R, self.spec
        need = [("plant", "numerator"), ("plant", "denominator"), ("plant", "delay"), ("linear_model", "delay_approximant_order"),
                ("spec", "controller", "setpoint_weight"), ("spec", "controller", "derivative_on"),
                ("spec", "controller", "sample_time"), ("spec", "controller", "anti_windup"),
                ("spec", "controller", "tracking_time"), ("spec", "actuator", "rate_max"), ("spec", "disturbance", "size"),
                ("spec", "disturbance", "time"), ("spec", "disturbance", "noise_rms"), ("spec", "disturbance", "noise_period"),
                ("spec", "disturbance", "seed")]
        missing = []
        for path in need:
            node = R
            for key in path:
                if not isinstance(node, dict) or key not in node:
                    missing.append(".".join(path))
                    break
                node = node[key]
        if not F.check("rebuild/keys", not missing, "result.json holds every key the rebuild needs (issue 12 §2)",
                       "missing: " + ", ".join(missing) if missing else ""):
            return False
        self.gn = strip(R["plant"]["numerator"])
        self.gd = strip(R["plant"]["denominator"])
        self.delay = float(R["plant"]["delay"])
        order = R["linear_model"]["delay_approximant_order"]
        if self.delay > 0:
            pn, pd = pade_delay(self.delay, int(order))
            self.ln, self.ld = np.polymul(self.gn, pn), np.polymul(self.gd, pd)
        else:
            self.ln, self.ld = self.gn, self.gd
        ok, detail = same_tf(R["linear_model"]["numerator"], R["linear_model"]["denominator"], self.ln, self.ld, 1e-9)
        F.check("rebuild/linear_model", ok, "linear_model = plant × Padé(order) of e^{-s·delay} (scipy.interpolate.pade)", detail)
        # the plant as specified against the spec's zeros/poles/gain (both forms filled)
        sp = spec["plant"]
        if sp.get("given_as") != "nonlinear":
            zeros, poles = expand_roots(sp["zeros"]), expand_roots(sp["poles"])
            gn2 = float(sp["gain"]) * np.real(np.poly(zeros)) if len(zeros) else np.array([float(sp["gain"])])
            gd2 = np.real(np.poly(poles))
            ok, detail = same_tf(self.gn, self.gd, gn2, gd2, 1e-9)
            F.check("rebuild/plant", ok, "plant = gain·Π(s − z)/Π(s − p) of the spec, without the delay approximant", detail)
        else:
            try:
                self.expr = ExpressionPlant(sp["nonlinear"])
            except NotImplementedError as exc:
                F.note(f"expression plant not rebuilt: {exc}")
                self.expr = None
            if self.expr is not None:
                lin = R["linear_model"].get("linearization") or {}
                op = lin.get("operating_point", {})
                reported = [op.get("states", {}).get(s) for s in self.expr.names]
                self.expr.settle(reported if all(v is not None for v in reported) else None)
                F.check("rebuild/equilibrium", self.expr.residual <= 1e-8 * max(1.0, float(np.max(np.abs(self.expr.x0)))),
                        "the reported operating point is an equilibrium (f(x0, u0) = 0, our evaluation)",
                        f"max|f| = {self.expr.residual:.2e}")
                if reported and all(v is not None for v in reported):
                    dev = float(np.max(np.abs(np.array(reported) - self.expr.x0)))
                    F.check("rebuild/equilibrium_point", dev <= 1e-7 * max(1.0, float(np.max(np.abs(self.expr.x0)))),
                            "operating point equals scipy.optimize.root's (or is an equilibrium on the same line)", f"max dev {dev:.2e}")
                _, _, _, ln_, ld_ = self.expr.linearization()
                ok, detail = same_tf(self.gn, self.gd, ln_, ld_, 1e-5)
                F.check("rebuild/linearization", ok, "plant = C(sI − A)⁻¹B of our Jacobians (central differences, 1e-5)", detail)
        return True

    def verify_reference_path(self, name, design):
        """The reference path C_r written in result.json, rebuilt from the parallel gains and the set-point
        weight b the design runs with (its own when the search tuned it, else the spec's). With filters
        (README "Filters": u = N·(C_r·r − C·F·y)) the whole controller is rebuilt too: C(s) from the
        parallel gains, N(s) and F(s) from result.json's controller.notch / measurement_filter by their
        documented formulas, and C·F·N and C_r·N compared with what result.json writes."""
        c = design["controller"]
        par = c.get("parallel")
        if not par:
            return
        ctl = self.spec["controller"]
        b = float(c.get("setpoint_weight", ctl["setpoint_weight"]))
        cw = 0.0 if ctl["derivative_on"] == "measurement" else 1.0
        kp, ki, kd, tf = (float(par[k]) for k in ("kp", "ki", "kd", "filter_time"))
        rn, rd = weighted_reference_path(kp, ki, kd, tf, b, cw)
        notch, filt = c.get("notch"), c.get("measurement_filter")
        if notch or filt:
            cn, cd = weighted_reference_path(kp, ki, kd, tf, 1.0, 1.0)  # C itself
            nn, nd, fd = [1.0], [1.0], [1.0]
            if notch:
                w, depth, width = float(notch["frequency"]), float(notch["depth"]), float(notch["width"])
                nn, nd = [1.0, 2.0 * depth * width * w, w * w], [1.0, 2.0 * width * w, w * w]
            if filt:
                T = float(filt["time_constant"])
                fd = [T * T / 2.0, T, 1.0] if int(filt["order"]) == 2 else [T, 1.0]
            wn, wd = np.polymul(np.polymul(cn, nn), [1.0]), np.polymul(np.polymul(cd, nd), fd)
            ok, detail = same_tf(wn, wd, c["numerator"], c["denominator"], 1e-9)
            self.F.check(f"{name}/filters/C", ok, "C·F·N rebuilt from the parallel gains, the notch and the filter", detail)
            rn, rd = np.polymul(np.polymul(rn, nn), fd), np.polymul(np.polymul(rd, nd), fd)
        ok, detail = same_tf(rn, rd, c["reference_numerator"], c["reference_denominator"], 1e-9)
        self.F.check(f"{name}/reference_path", ok, f"C_r = Kp·b + Ki/s + Kd·c·s/(Tf·s + 1) with b = {b:g}, c = {cw:g}", detail)

    def linear_loop(self, design, gn=None, gd=None):
        c = design["controller"]
        return LinearLoop(self.ln if gn is None else gn, self.ld if gd is None else gd, c["numerator"], c["denominator"],
                          c["reference_numerator"], c["reference_denominator"])

    # -- the linear loop ---------------------------------------------------------------------------------------
    def measure_linear(self, loop):
        T = loop.horizon()
        pieces, y_inf = linear_trace(loop, self.r, EXTEND * T, self.h_rho, self.max_pts)
        m = measure(pieces, y_inf, self.r, self.band, T)
        m["_horizon"] = T
        return m, pieces

    def is_sampled(self, design):
        """The design's linear metrics are of the sampled loop (README, "Sampled controllers in the
        design": controller.sample_time set, a strictly proper plant; result.json simulated_loop)."""
        return design.get("simulated_loop") == "sampled"

    def measure_sampled(self, design, ln=None, ld=None):
        """The linear loop of a sampled controller, rebuilt independently: the linear model (plant ×
        Padé, as the tool's linear loop) through a zero-order hold, driven at k·Ts by the documented
        digital law (parallel_difference_equation, or Tustin of C(s)), no limits; the plant integrated
        exactly between samples (SampledHybrid: matrix exponential), so the output between samples is
        seen. y∞ and the horizon T (slowest discrete mode decayed to 1e-4) from the discrete loop
        (cont2discrete(zoh) closed with the same law). Returns (metrics, pieces)."""
        ln = self.ln if ln is None else ln
        ld = self.ld if ld is None else ld
        c = design["controller"]
        ctl = self.spec["controller"]
        ts = float(ctl["sample_time"])
        b = float(c.get("setpoint_weight", ctl["setpoint_weight"]))  # searched b (tune_setpoint_weight) first
        cw = 0.0 if ctl["derivative_on"] == "measurement" else 1.0
        par = c.get("parallel")
        parallel = (float(par["kp"]), float(par["ki"]), float(par["kd"]), float(par["filter_time"])) if par else None
        if parallel is not None:
            rn, yn, den = parallel_difference_equation(*parallel, b, cw, ts)
        else:
            rn, yn, den = tustin_difference_equation(strip(c["numerator"]), strip(c["denominator"]), ts)
        Ap, Bp, Cp, Dp = realize(ln, ld)
        if Dp != 0.0:
            raise NotImplementedError("biproper plant: the tool keeps the continuous loop")
        A, B, C = discrete_loop(Ap, Bp, Cp, ts, rn, yn, den)
        lam = np.abs(np.linalg.eigvals(A))
        if np.max(lam) >= 1.0 - 1e-12:
            return None, None
        y_inf = float((C @ np.linalg.solve(np.eye(len(A)) - A, B))[0, 0]) * self.r
        rates = -np.log(lam[lam > 0]) / ts
        T = math.log(1.0 / HORIZON_DECAY) / float(np.min(rates)) if len(rates) else ts
        if EXTEND * T / ts > (2_000_000 if self.long else 200_000):
            raise NotImplementedError(f"{EXTEND * T / ts:.0f} controller periods")
        loop = DescribedLoop(plant=("linear", Ap, Bp, Cp), parallel=parallel, ctrl_tf=(strip(c["numerator"]), strip(c["denominator"])),
                             b=b, c=cw, umin=-math.inf, umax=math.inf, rate=None, anti_windup="none", tt=None, r=self.r,
                             td=0.0, dsize=0.0, noise_rms=0.0, noise_period=ts, seed=0, delay=0.0, horizon=T, ts=ts,
                             de=(rn, yn, den), structure=c["structure"])
        rho = float(np.max(np.abs(np.linalg.eigvals(Ap)))) if len(Bp) else 1.0
        pieces, _ = SampledHybrid(loop, max(rho, 1.0 / (EXTEND * T))).run(EXTEND * T)
        m = measure(pieces, y_inf, self.r, self.band, T)
        m["_horizon"] = T
        return m, pieces

    def margins_of(self, design, delay_exact=False, gn=None, gd=None):
        c = design["controller"]
        if delay_exact:
            gn, gd, dl = (self.gn if gn is None else gn), (self.gd if gd is None else gd), self.delay
        else:
            gn, gd, dl = (self.ln if gn is None else gn), (self.ld if gd is None else gd), 0.0
        out = margins(strip(c["numerator"]), strip(c["denominator"]), gn, gd, dl, 20000 if self.long else 2000)
        req = self.spec["requirements"]
        if req.get("noise_gain_max") is not None or req.get("complementary_peak_max") is not None:
            cn, cd = strip(c["numerator"]), strip(c["denominator"])
            delay = (lambda s: np.exp(-s * dl)) if dl else (lambda s: 1.0)
            g = lambda s: np.polyval(gn, s) / np.polyval(gd, s) * delay(s)  # noqa: E731
            cf = lambda s: np.polyval(cn, s) / np.polyval(cd, s)  # noqa: E731
            corners = load_reference.corners_of(gn, gd, cn, cd)
            out["complementary_peak"] = load_reference.peak_over_frequency(lambda s: cf(s) * g(s) / (1 + cf(s) * g(s)), corners)
            out["noise_gain"] = load_reference.peak_over_frequency(lambda s: cf(s) / (1 + cf(s) * g(s)), corners)
        return out

    def load_of(self, design, ln, ld):
        """The load response's metrics of `design` on the linear loop with plant ln/ld (with its
        delay's approximant), measured by check_scipy_load.py's exact SciPy simulation; {} when the
        spec asks for no load response."""
        spec = self.spec
        if not any(spec["requirements"].get(k) is not None for k in LOAD_KEYS) and spec["search"]["objective"] != "load_iae":
            return {}
        c = design["controller"]
        cn, cd = strip(c["numerator"]), strip(c["denominator"])
        size = spec["disturbance"]["size"] or 1.0
        r = load_reference.Response(*load_reference.load_transfer(ln, ld, cn, cd, size), points=100_001)
        out = {"load_peak": r.peak(), "load_iae": None, "load_recovery_time": None}
        if cd[-1] == 0.0:  # the controller integrates
            out["load_iae"] = r.iae()
            out["load_recovery_time"] = r.last_exit(spec["requirements"]["settling_band_pct"] / 100.0 *
                                                    abs(spec["reference"]["amplitude"]))
        return out

    # -- the described loop ------------------------------------------------------------------------------------
    def described(self, design, plant=None):
        spec = self.spec
        ctl, act, dist = spec["controller"], spec["actuator"], spec["disturbance"]
        c = design["controller"]
        nl = design.get("nonlinear") or {}
        u0 = float(spec["plant"]["nonlinear"]["operating_point"]["u"]) if self.expr is not None else 0.0
        umin = float(act["min"]) - u0 if act.get("min") is not None else -math.inf
        umax = float(act["max"]) - u0 if act.get("max") is not None else math.inf
        par = c.get("parallel")
        if c.get("measurement_filter"):
            # u = N·(C_r·r − C·F·y) has two inputs; the described loop's state-space controller acts on e.
            raise NotImplementedError("a measurement filter (two-input controller) on the described loop")
        notch_tf = None
        if c.get("notch"):
            # README "Filters": the parallel law with the notch after it as its own block
            # (u_c = N·v), the anti-windup on the PID's integrator against u_c.
            w, depth, width = (float(c["notch"][k]) for k in ("frequency", "depth", "width"))
            notch_tf = ([1.0, 2.0 * depth * width * w, w * w], [1.0, 2.0 * width * w, w * w])
            if not par:
                raise NotImplementedError("a notch on a controller without a parallel form on the described loop")
            if num(ctl.get("sample_time")):
                # The sampled parallel law with N (Tustin derivative, N prewarped) is not rebuilt here.
                raise NotImplementedError("a sampled controller with a notch on the described loop")
        parallel = (float(par["kp"]), float(par["ki"]), float(par["kd"]), float(par["filter_time"])) if par else None
        tt = num(nl.get("tracking_time")) or num(ctl.get("tracking_time"))
        if tt is None and parallel and parallel[1]:
            kp, ki, kd, _ = parallel
            ti = kp / ki
            tt = math.sqrt(ti * kd / kp) if kd > 0 else ti  # documented default: √(Ti·Td), or Ti
        ts = num(ctl.get("sample_time")) or 0.0
        lin_loop = self.linear_loop(design)
        horizon = num(nl.get("horizon"))
        if horizon is None:
            horizon = lin_loop.horizon() + (float(dist["time"]) if float(dist["size"]) else 0.0) + self.delay
        noise_rms = float(dist["noise_rms"])
        period = num(nl.get("noise_period")) or num(dist.get("noise_period")) or (ts if ts else horizon / 2000.0)
        if plant is None:
            if self.expr is not None:
                plant = ("expr", self.expr)
            else:
                Ap, Bp, Cp, Dp = realize(self.gn, self.gd)
                if Dp != 0.0:
                    raise NotImplementedError("biproper plant on the described loop")
                plant = ("linear", Ap, Bp, Cp)
        de = nl.get("difference_equation")
        return DescribedLoop(plant=plant, parallel=parallel, ctrl_tf=(strip(c["numerator"]), strip(c["denominator"])),
                             b=float(c.get("setpoint_weight", ctl["setpoint_weight"])), c=0.0 if ctl["derivative_on"] == "measurement" else 1.0,
                             umin=umin, umax=umax, rate=num(act.get("rate_max")), anti_windup=ctl["anti_windup"], tt=tt,
                             r=self.r, td=float(dist["time"]), dsize=float(dist["size"]), noise_rms=noise_rms,
                             noise_period=period, seed=int(dist["seed"]), delay=self.delay, horizon=horizon, ts=ts,
                             de=(de["reference_numerator"], de["measurement_numerator"], de["denominator"]) if de else None,
                             structure=c["structure"], notch=notch_tf)

    def linear_equivalent(self, loop, pieces):
        """The described loop equals the linear one: linear plant, continuous controller, no delay,
        load step, noise or rate limit, and u within the limits everywhere (exactly, with our
        refined extremes)."""
        if loop.plant[0] != "linear" or loop.ts or loop.delay or loop.dsize or loop.noise_rms or loop.rate is not None:
            return False
        return self._u_range[0] >= loop.umin and self._u_range[1] <= loop.umax

    def simulate_described(self, loop, lin_loop, t_end, budget=None):
        """Pieces of the described loop up to t_end, with how they were made. `budget` bounds the
        work (integration pieces or controller samples); beyond it NotImplementedError says so."""
        budget = budget or (400_000 if self.long else 20_000)
        work = (t_end / loop.ts if loop.ts else 0.0) + (t_end / loop.noise_period if (loop.noise_rms and not loop.ts) else 0.0) \
            + (t_end / loop.delay if (loop.delay and not loop.ts) else 0.0)
        if work > budget:
            raise NotImplementedError(f"about {work:.0f} controller samples or integration pieces (budget {budget}; --long runs it)")
        rho = float(np.max(np.abs(lin_loop.poles))) if lin_loop.n else 1.0
        if loop.plant[0] == "linear" and len(loop.plant[1]):
            rho = max(rho, float(np.max(np.abs(np.linalg.eigvals(loop.plant[1])))))
        if loop.ts:
            if t_end / loop.ts > 200_000:
                raise NotImplementedError(f"{t_end / loop.ts:.0f} controller samples")
            if loop.parallel is None and loop.de is None:
                raise NotImplementedError("sampled lead/lag without a reported difference equation")
            if loop.plant[0] == "linear":
                rho_p = float(np.max(np.abs(np.linalg.eigvals(loop.plant[1])))) if len(loop.plant[2]) else 1.0
            else:
                A, _, _, _, _ = self.expr.linearization()
                rho_p = float(np.max(np.abs(np.linalg.eigvals(A))))
            eng = SampledHybrid(loop, max(rho_p, 1.0 / t_end))
            pieces, _ = eng.run(t_end)
            return pieces, eng, "sampled"
        if loop.delay and t_end / loop.delay > 5000:
            raise NotImplementedError(f"delay {loop.delay:g} s is {t_end / loop.delay:.0f} times shorter than the horizon")
        eng = ContinuousHybrid(loop, rho, max_pieces=int(budget) + 5000)
        segs = eng.run(t_end)
        return eng.pieces(segs), (eng, segs), "hybrid"

    # -- comparisons -----------------------------------------------------------------------------------
    def compare_metrics(self, prefix, tool, mine, T, nonlinear, y_at=None):
        """Reported metrics against ours. A peak time also agrees when the response at the tool's
        time is within FLAT_PEAK·|y∞| of its maximum (a flat top: which sample is highest is
        decided by the integrators' rounding)."""
        F = self.F
        pct = TOL_NL_PCT if nonlinear else TOL_PCT
        for key in ("final_value", "steady_state_error", "overshoot_pct", "undershoot_pct", "peak_time", "band_entry_time",
                    "settling_time", "rise_time", "effort_peak", "command_peak", "iae", "ise", "itae"):
            if key not in tool:
                continue
            a, b = num(tool[key]), mine.get(key)
            if b is None and key == "command_peak":
                continue  # not re-measured on this loop (the engine does not record the command)
            what = f"{key} {show(a)} vs SciPy {show(b)}"
            if key == "final_value":
                ok = abs(a - b) <= TOL_FINAL * max(abs(b), 1e-300)
            elif key == "steady_state_error":
                ok = abs(a - b) <= 1e-9
            elif key in ("overshoot_pct", "undershoot_pct"):
                ok = abs(a - b) <= pct
            elif key in ("peak_time", "band_entry_time", "settling_time", "rise_time"):
                if key == "peak_time" and max(num(tool["overshoot_pct"]) or 0.0, mine["overshoot_pct"]) <= pct:
                    continue  # no visible peak on either side: its time is not defined
                if a is None or b is None:
                    # the tool measured over its horizon T; we look further (EXTEND·T)
                    ok = (a is None and b is None) or (key == "settling_time" and a is None and b is not None and b > T)
                else:
                    tol = max(TOL_NL_TIME_REL * abs(b), TOL_NL_TIME_T * T) if nonlinear else max(TOL_TIME_REL * abs(b), TOL_TIME_T * T)
                    ok = abs(a - b) <= tol
                    what += f" (tol {tol:.3g})"
                    if not ok and key == "peak_time" and y_at is not None:
                        y_inf = mine["final_value"]
                        gap = (1.0 + mine["overshoot_pct"] / 100.0) * y_inf - float(y_at(np.array([a]))[0])
                        ok = abs(gap) <= FLAT_PEAK * abs(y_inf)
                        what += f"; y at the tool's peak time is {gap / abs(y_inf):.2e}·|y∞| below the peak (flat top tol {FLAT_PEAK:g})"
            elif key in ("effort_peak", "command_peak"):
                ok = abs(a - b) <= (TOL_NL_EFFORT if nonlinear else TOL_EFFORT) * max(abs(b), 1e-300)
            else:
                ok = abs(a - b) <= TOL_INTEGRAL * max(abs(a), abs(b)) + 1e-12
            F.check(f"{prefix}/{key}", ok, what)

    def compare_margins(self, prefix, tool, mine):
        F = self.F
        for key, tol, rel in (("gain_margin_db", TOL_MARGIN, False), ("phase_margin_deg", TOL_MARGIN, False),
                              ("delay_margin", TOL_FREQ, True), ("sensitivity_peak", TOL_MS, True),
                              ("phase_crossover", TOL_FREQ, True), ("gain_crossover", TOL_FREQ, True),
                              ("lower_gain_margin_db", TOL_MARGIN, False), ("lower_phase_crossover", TOL_FREQ, True)):
            if key not in tool:
                continue
            a, b = num(tool[key]), mine.get(key)
            if a is None or b is None or math.isinf(a) or math.isinf(b):
                ok = (a is None or math.isinf(a)) == (b is None or math.isinf(b))
            else:
                ok = abs(a - b) <= (tol * abs(b) if rel else tol)
            F.check(f"{prefix}/{key}", ok, f"{key} {show(a)} vs SciPy {show(b)}")

    def check_claims(self, prefix, checks, m, mg, tref, bounds, what_loop):
        """Every `met: true` must hold on our re-measurement (strict definitions)."""
        all_ok = True
        for c in checks:
            key, limit, upper = c["requirement"], float(c["limit"]), c["bound"] == "max"
            v = requirement_value(key, m, mg, tref, self.band_pct, strict=True)
            if not c["met"]:
                continue
            tol = claim_tolerance(key, limit, bounds)
            ok = meets(key, v, limit, upper, tol)
            all_ok &= ok
            self.F.check(f"{prefix}/{key}", ok, f"claimed met on the {what_loop}: {key} {'≤' if upper else '≥'} {limit:g}",
                         f"tool {show(num(c['value']))}, SciPy {show(v)} (tol {tol:.2g})")
        return all_ok

    def check_values(self, prefix, checks, m, mg, tref, T, nonlinear):
        """Each check's value agrees with ours (peak-time requirements: README's first entry or the
        final entry, the definition in transition)."""
        for c in checks:
            key = c["requirement"]
            a = num(c["value"])
            if nonlinear and key in LOAD_KEYS:
                continue  # the nonlinear loop's load response: check_scipy_load.py
            cands = [requirement_value(key, m, mg, tref, self.band_pct, strict=s) for s in (False, True)]
            ok = False
            for b in cands:
                if a is None or b is None:
                    ok |= (a is None and b is None) or (key == "settling_time_max" and a is None and b > T)
                    continue
                if key in PCT_KEYS:
                    ok |= abs(a - b) <= (TOL_NL_PCT if nonlinear else TOL_PCT)
                elif key in TIME_KEYS:
                    ok |= abs(a - b) <= max((TOL_NL_TIME_REL if nonlinear else TOL_TIME_REL) * abs(b),
                                            (TOL_NL_TIME_T if nonlinear else TOL_TIME_T) * T)
                elif key == "peak_time_ratio":
                    ok |= abs(a - b) * tref <= max(TOL_TIME_REL * abs(b) * tref, TOL_TIME_T * T) + 1e-9
                elif key == "steady_state_error_max":
                    ok |= abs(a - b) <= 1e-9
                elif key == "effort_max":
                    ok |= abs(a - b) <= (TOL_NL_EFFORT if nonlinear else TOL_EFFORT) * abs(b)
                elif key == "sensitivity_peak_max":
                    ok |= abs(a - b) <= TOL_MS * abs(b)
                elif key in LOAD_KEYS or key in PEAK_KEYS:
                    ok |= abs(a - b) <= TOL_REGULATOR * abs(b)
                else:
                    ok |= (math.isinf(a) and math.isinf(b)) or abs(a - b) <= TOL_MARGIN
            self.F.check(f"{prefix}/{key}", ok, f"reported value {show(a)} vs SciPy {' / '.join(show(b) for b in cands)}")

    # -- reference -----------------------------------------------------------------------------------------
    def p_overshoot(self, K):
        ref = self.R["designs"].get("reference") or {}
        if self.is_sampled(ref):
            # a sampled spec's reference is aimed and measured on the sampled loop (README)
            p = {"controller": {"numerator": [K], "denominator": [1.0], "structure": "p",
                                "parallel": {"kp": K, "ki": 0.0, "kd": 0.0, "filter_time": 0.0}}}
            m, _ = self.measure_sampled(p)
            return (None, None) if m is None else (m["overshoot_pct"], m["peak_time"])
        loop = LinearLoop(self.ln, self.ld, [K], [1.0], [K], [1.0])
        if not loop.stable():
            return None, None
        m, _ = self.measure_linear(loop)
        return m["overshoot_pct"], m["peak_time"]

    def verify_reference(self):
        F, R = self.F, self.R
        lim = num(self.spec["requirements"].get("overshoot_max_pct"))
        d = R["designs"].get("reference")
        tool_tref = num(R.get("reference_peak_time"))
        if lim is None or d is None or d.get("status") != "ok":
            return tool_tref
        K = float(strip(d["controller"]["numerator"])[-1] / strip(d["controller"]["denominator"])[-1])
        os_, tp = self.p_overshoot(K)
        F.check("reference/overshoot_at_limit", os_ is not None and abs(os_ - lim) <= REFERENCE_PP,
                f"the reference P gain's overshoot equals the limit within {REFERENCE_PP} points (issue 11 §4)",
                f"K = {K:.10g}: SciPy overshoot {show(os_)} % for a {lim:g} % limit")
        if tool_tref is not None and tp is not None:
            loop = LinearLoop(self.ln, self.ld, [K], [1.0], [K], [1.0])
            T = loop.horizon() if loop.stable() else tp
            F.check("reference/peak_time", abs(tool_tref - tp) <= max(TOL_TIME_REL * tp, TOL_TIME_T * T),
                    "reference_peak_time is the re-measured peak time of the reference gain", f"{show(tool_tref)} vs SciPy {show(tp)}")
        if os_ is not None and abs(os_ - lim) <= 1e-4:
            return tp
        # our own gain at the limit, near the tool's (brentq on the overshoot)
        f = lambda k: (self.p_overshoot(k)[0] or 0.0) - lim if self.p_overshoot(k)[0] is not None else math.nan
        lo, hi = K, K
        flo = fhi = f(K)
        for _ in range(30):
            if not math.isnan(flo) and flo < 0:
                break
            lo /= 1.05
            flo = f(lo)
        for _ in range(30):
            if not math.isnan(fhi) and fhi > 0:
                break
            hi *= 1.05
            fhi = f(hi)
        if math.isnan(flo) or math.isnan(fhi) or flo > 0 or fhi < 0:
            F.note("reference: no gain with overshoot at the limit found near the tool's; the tool's peak time is used")
            return tool_tref
        k_star = optimize.brentq(f, min(lo, hi), max(lo, hi), xtol=1e-12 * abs(K))  # K < 0 with reverse action
        _, tp_star = self.p_overshoot(k_star)
        F.note(f"reference: the gain at the limit is {k_star:.10g} (tool {K:.10g}); its peak time {show(tp_star)} s "
               f"(tool {show(tool_tref)} s) is used for peak_time_ratio")
        return tp_star

    # -- one design --------------------------------------------------------------------------------------
    def verify_design(self, name, d, tref):
        """Returns (linear metrics, margins, described-loop metrics, exact-delay margins, bounds)."""
        F = self.F
        if d.get("status") != "ok" or d.get("simulated") is None:
            F.note(f"{name}: status {d.get('status')}: no metrics to check")
            return None
        try:
            loop = self.linear_loop(d)
        except ValueError as exc:
            F.check(f"{name}/linear/rebuild", False, "controller and reference path rebuild", str(exc))
            return None
        poles = expand_roots(d["closed_loop_poles"])
        matched = len(poles) == len(loop.poles) and all(
            np.min(np.abs(loop.poles - p)) <= 1e-6 * max(1.0, abs(p)) for p in poles)
        F.check(f"{name}/linear/poles", matched, "closed-loop poles = eig(A) of the rebuilt loop",
                f"{len(poles)} reported, {len(loop.poles)} rebuilt")
        if self.is_sampled(d):
            try:
                m, pieces = self.measure_sampled(d)
            except NotImplementedError as exc:
                F.note(f"{name}: sampled loop not rebuilt ({exc})")
                return None
            if not F.check(f"{name}/linear/stable", m is not None, "the rebuilt sampled loop is stable (status ok)"):
                return None
        else:
            if not F.check(f"{name}/linear/stable", loop.stable(), "the rebuilt linear loop is stable (status ok)"):
                return None
            m, pieces = self.measure_linear(loop)
            m.update(self.load_of(d, self.ln, self.ld))
        T = m["_horizon"]
        self._u_range = (m["_umin"], m["_umax"])
        self.compare_metrics(f"{name}/linear/metric", d["simulated"], m, T, nonlinear=False,
                             y_at=lambda tq: sample_pieces(pieces, tq)[0])
        mg = None
        if d.get("margins") is not None:
            mg = self.margins_of(d)
            self.compare_margins(f"{name}/linear/margins", d["margins"], mg)
        self.check_values(f"{name}/linear/value", d["checks"], m, mg, tref, T, nonlinear=False)
        linear_claims_ok = self.check_claims(f"{name}/linear/claim", d["checks"], m, mg, tref, CLAIM_LINEAR, "linear loop")
        F.check(f"{name}/linear/meets_all", d["meets_all"] == all(c["met"] for c in d["checks"]),
                "meets_all is the conjunction of the checks")
        out = {"m": m, "mg": mg, "T": T, "loop": loop, "linear_claims_ok": linear_claims_ok}
        nl = d.get("nonlinear")
        if not nl:
            return out
        # the described loop
        try:
            loop_d = self.described(d)
        except NotImplementedError as exc:
            F.note(f"{name}: described loop not rebuilt ({exc})")
            return out
        H = loop_d.horizon
        times = H * np.arange(NONLINEAR_SAMPLES + 1) / NONLINEAR_SAMPLES
        y_inf = m["final_value"]
        try:
            if self.linear_equivalent(loop_d, pieces) and EXTEND * H <= EXTEND * T * 1.0000001 + 1e-12:
                how = "linear (nothing saturates, nothing else nonlinear)"
                pieces_nl = pieces
                _, ys, us = samples_of_linear(loop, self.r, H, NONLINEAR_SAMPLES)
                bounds = CLAIM_LINEAR
                eng = None
            else:
                budget = None if (name == "optimized" or self.long) else 1500
                pieces_nl, eng, how = self.simulate_described(loop_d, loop, EXTEND * H, budget)
                ys, us = sample_pieces(pieces_nl, times)
                bounds = CLAIM_HYBRID
        except NotImplementedError as exc:
            F.note(f"{name}: described loop not simulated ({exc})")
            return out
        m_nl = measure(pieces_nl, y_inf, self.r, self.band, H)
        m_nl.update({k: m[k] for k in LOAD_KEYS.values() if k in m})  # the linear loop's (LOAD_KEYS)
        if how == "sampled":
            m_nl["command_peak"] = float(np.max(np.abs(np.array(eng.commands))))
        elif how == "hybrid":
            m_nl["command_peak"] = command_peak(pieces_nl, EXTEND * H)
        m_mimic = measure_samples(times, ys, us, y_inf, self.r, self.band)
        mg_exact = self.margins_of(d, delay_exact=True) if (mg is not None and self.delay > 0) else mg
        out.update(m_nl=m_nl, mg_exact=mg_exact, bounds=bounds, H=H, how=how, loop_d=loop_d)
        if nl["status"] == "ok" and nl.get("simulated"):
            # the tool's extrema come from a parabola through three samples (README), so a sample
            # maximum of ours would read them low by the parabola's correction (1e-3 points on a
            # lightly damped loop): extrema (overshoot, undershoot, peak time, effort) from the
            # converged measurement refined between samples on the exact pieces, over [0, H];
            # crossings and integrals read off the samples as the README says the tool reads them
            m_exact = measure(pieces_until(pieces_nl, H), y_inf, self.r, self.band, H)
            if how == "sampled":
                cmds = np.abs(np.array(eng.commands))[: int(math.floor(H / loop_d.ts + 1e-9)) + 1]
                m_exact["command_peak"] = float(np.max(cmds))
            elif how == "hybrid":
                m_exact["command_peak"] = command_peak(pieces_nl, H)
            else:  # the linear loop: command and applied u are one signal
                m_exact["command_peak"] = m_exact["effort_peak"]
            m_read = dict(m_mimic)
            m_read.update({k: m_exact[k] for k in ("overshoot_pct", "undershoot_pct", "peak_time", "effort_peak",
                                                   "command_peak") if k in m_exact})
            self.compare_metrics(f"{name}/nonlinear/metric", nl["simulated"], m_read, H, nonlinear=True,
                                 y_at=lambda tq: sample_pieces(pieces_nl, tq)[0])
            self.check_values(f"{name}/nonlinear/value", nl["checks"], m_read, mg, tref, H, nonlinear=True)
        else:
            F.note(f"{name}: the tool's nonlinear run ended with status {nl['status']}")
        out["nonlinear_claims_ok"] = self.check_claims(f"{name}/nonlinear/claim", nl.get("checks", []), m_nl, mg_exact, tref, bounds,
                                                       f"described loop ({how})")
        if nl.get("confirmed"):
            for c, cl in zip(nl.get("checks", []), d["checks"]):
                if not cl["met"]:
                    continue
                key, limit, upper = c["requirement"], float(c["limit"]), c["bound"] == "max"
                v = requirement_value(key, m_nl, mg_exact, tref, self.band_pct, strict=True)
                scale = abs(limit) if limit else 0.01
                tol = CONFIRM_RESOLUTION * scale + claim_tolerance(key, limit, bounds)
                F.check(f"{name}/confirmed/{key}", meets(key, v, limit, upper, tol),
                        f"confirmed: met on the linear loop, within the stated 0.2 % on the described loop ({how})",
                        f"SciPy {show(v)} for {'≤' if upper else '≥'} {limit:g}")
        if loop_d.ts:
            self.verify_sampled(name, d, loop_d, eng if how == "sampled" else None)
        return out

    # -- sampled controller --------------------------------------------------------------------------------
    def verify_sampled(self, name, d, loop_d, eng):
        F = self.F
        de = (d.get("nonlinear") or {}).get("difference_equation")
        if not F.check(f"{name}/sampled/difference_equation_present", de is not None,
                       "a sampled controller's difference equation is reported"):
            return
        ts = loop_d.ts
        if loop_d.parallel is not None:
            kp, ki, kd, tf = loop_d.parallel
            rn, yn, den = parallel_difference_equation(kp, ki, kd, tf, loop_d.b, loop_d.c, ts)
        else:
            rn, yn, den = tustin_difference_equation(*loop_d.ctrl_tf, ts)
        for key, want in (("reference_numerator", rn), ("measurement_numerator", yn), ("denominator", den)):
            ok, err = same_coefficients(de[key], want, 1e-10)
            F.check(f"{name}/sampled/{key}", ok, "reported difference equation against the documented digital law",
                    f"max relative difference {err:.2e}")
        # cont2discrete (zoh) + the REPORTED difference equation through dlsim, when that is the loop
        if eng is None or loop_d.plant[0] != "linear" or loop_d.rate is not None or loop_d.dsize or loop_d.noise_rms:
            return
        m_delay = loop_d.delay / ts
        if abs(m_delay - round(m_delay)) > 1e-9:
            return
        cmds = np.array(eng.commands)
        if np.any(cmds > loop_d.umax) or np.any(cmds < loop_d.umin) or eng.held_integrator:
            return  # the limits or the conditional integration acted: not the linear loop
        md = int(round(m_delay))
        _, Ap, Bp, Cp = loop_d.plant
        drn, dyn, dden = (np.asarray(de[k], float) for k in ("reference_numerator", "measurement_numerator", "denominator"))
        A, B, C = discrete_loop(Ap, Bp, Cp, ts, drn, dyn, dden, md)
        steps = len(eng.samples_t)
        # no time vector: dlsim then returns one output per input sample (with t = arange·ts it
        # recomputes the count as floor(t[-1]/ts) + 1, one short when t[-1]/ts rounds below)
        _, yd_, _ = signal.dlsim((A, B, C, np.zeros((1, 1)), ts), np.full(steps, self.r))
        diff = float(np.max(np.abs(yd_[:, 0] - np.array(eng.samples_y)))) / max(abs(self.r), 1e-300)
        F.check(f"{name}/sampled/dlsim", diff <= 1e-8,
                "samples of the sampled loop = cont2discrete(zoh) plant closed with the reported difference equation (dlsim)",
                f"max |Δy|/|r| = {diff:.2e}")

    # -- perturbation -----------------------------------------------------------------------------------
    def plant_roots(self):
        sp = self.spec["plant"]
        if sp.get("given_as") != "nonlinear":
            return expand_roots(sp["zeros"]), expand_roots(sp["poles"]), float(sp["gain"])
        return np.roots(self.gn), np.roots(self.gd), float(self.gn[0] / self.gd[0])

    def perturbed_plants(self, combos):
        zeros, poles, gain = self.plant_roots()
        groups = []  # a conjugate pair moves together
        used = set()
        for i, p in enumerate(poles):
            if i in used:
                continue
            mate = None
            if p.imag != 0:
                cands = [j for j, q in enumerate(poles) if j not in used and j != i and abs(q - p.conjugate()) <= 1e-9 * max(1, abs(p))]
                mate = cands[0] if cands else None
            used.add(i)
            if mate is not None:
                used.add(mate)
            groups.append([i] + ([mate] if mate is not None else []))
        out = []
        for k in range(combos):
            if k == 0:
                signs = np.ones(len(groups) + 1)
            elif k == 1:
                signs = -np.ones(len(groups) + 1)
            else:
                signs = np.random.default_rng(1000 + k).choice([-1.0, 1.0], size=len(groups) + 1)
            p2 = poles.copy()
            for g, s in zip(groups, signs[1:]):
                for j in g:
                    p2[j] = poles[j] * (1 + s * PERTURB)
            g2 = gain * (1 + signs[0] * PERTURB)
            gn = g2 * np.real(np.poly(zeros)) if len(zeros) else np.array([g2])
            gd = np.real(np.poly(p2))
            out.append((k, "".join("+" if s > 0 else "-" for s in signs), gn, gd))
        return out

    def verify_perturbation(self, name, d, tref, judged, info):
        F = self.F
        if judged == "linear":
            for k, pattern, gn, gd in self.perturbed_plants(PERTURB_COMBOS):
                if self.delay > 0:
                    pn, pd = pade_delay(self.delay, int(self.R["linear_model"]["delay_approximant_order"]))
                    ln, ld = np.polymul(gn, pn), np.polymul(gd, pd)
                else:
                    ln, ld = gn, gd
                if self.is_sampled(d):
                    m, _ = self.measure_sampled(d, ln, ld)
                    if m is None:
                        F.check(f"{name}/perturb/{k}/stable", False, f"perturbed plant ({pattern}): sampled loop stable")
                        continue
                else:
                    loop = self.linear_loop(d, ln, ld)
                    if not loop.stable():
                        F.check(f"{name}/perturb/{k}/stable", False, f"perturbed plant ({pattern}): loop stable")
                        continue
                    m, _ = self.measure_linear(loop)
                    m.update(self.load_of(d, ln, ld))
                mg = self.margins_of(d, gn=ln, gd=ld) if d.get("margins") is not None else None
                self._perturb_checks(name, k, pattern, d["checks"], m, mg, tref, CLAIM_LINEAR)
        else:
            loop_d = info.get("loop_d")
            if loop_d is None or loop_d.plant[0] != "linear":
                F.note(f"{name}: perturbation of the described loop skipped (expression plant: no poles to move)")
                return
            for k, pattern, gn, gd in self.perturbed_plants(2):
                Ap, Bp, Cp, _ = realize(gn, gd)
                loop2 = loop_d.with_plant(("linear", Ap, Bp, Cp))
                if self.delay:
                    pn, pd = pade_delay(self.delay, int(self.R["linear_model"]["delay_approximant_order"]))
                    ln, ld = np.polymul(gn, pn), np.polymul(gd, pd)
                else:
                    ln, ld = gn, gd
                lin = self.linear_loop(d, ln, ld)
                pieces, eng2, how = self.simulate_described(loop2, lin, EXTEND * loop_d.horizon)
                y_inf, _ = lin.final(self.r)
                m = measure(pieces, y_inf, self.r, self.band, loop_d.horizon)
                m["command_peak"] = float(np.max(np.abs(np.array(eng2.commands)))) if how == "sampled" \
                    else command_peak(pieces, EXTEND * loop_d.horizon)
                m.update(self.load_of(d, ln, ld))  # the linear loop's (LOAD_KEYS)
                mg = self.margins_of(d, delay_exact=True, gn=gn, gd=gd) if d.get("margins") is not None else None
                self._perturb_checks(name, k, pattern, d["nonlinear"]["checks"], m, mg, tref, CLAIM_HYBRID)

    def _perturb_checks(self, name, k, pattern, checks, m, mg, tref, bounds):
        for c in checks:
            key, limit, upper = c["requirement"], float(c["limit"]), c["bound"] == "max"
            v = requirement_value(key, m, mg, tref, self.band_pct, strict=True)
            tol = claim_tolerance(key, limit, bounds)
            self.F.check(f"{name}/perturb/{k}/{key}", meets(key, v, limit, upper, tol),
                         f"plant gain and poles moved by 1e-6 ({pattern}): {key} {'≤' if upper else '≥'} {limit:g}",
                         f"SciPy {show(v)}")

    # -- the published rules (README "Published tuning rules") ---------------------------------------------
    def verify_rules(self):
        """Each rule is applied exactly when its design exists, else it has a reason; an applied
        rule's standard form follows from its model by the published formulas, written out here
        (SIMC: Skogestad, J. Process Control 13 (2003) 291–309, Table 1, PID in series form
        converted by Kp = Kc(1 + τD/τI), Ti = τI + τD, Td = τI·τD/(τI + τD); AMIGO PI: Åström &
        Hägglund, J. Process Control 14 (2004) 635–650; AMIGO PID: their "Advanced PID Control",
        2006; recalled from memory); and for a plant of real lags without zeros or integrator,
        the model follows the half rule's statement (same Skogestad paper, §3)."""
        F, R, spec = self.F, self.R, self.spec
        rules = R.get("rules")
        if not F.check("rules/present", isinstance(rules, dict) and set(rules) == {"simc", "amigo"},
                       "result.json has rules.simc and rules.amigo (README, result.json)", str(rules)[:200]):
            return
        ctl = spec["controller"]
        structure, n = ctl["structure"], float(ctl["derivative_filter"])
        sample = float(ctl["sample_time"]) if ctl.get("sample_time") else 0.0
        plant = spec["plant"]
        poles = [complex(p[0], p[1]) for p in plant["poles"]]
        lags_only = (not plant["zeros"] and plant.get("given_as") != "nonlinear"
                     and all(p.imag == 0.0 and p.real < 0.0 for p in poles))
        close = lambda a, b: abs(a - b) <= 1e-9 * max(abs(a), abs(b), 1e-300)  # noqa: E731
        for name, rule in rules.items():
            applied = rule["applied"]
            F.check(f"rules/{name}/applied", applied == (name in R["designs"]) and applied == (rule["reason"] is None),
                    "a rule is applied exactly when its design exists, and a left-out rule has its reason",
                    f"applied {applied}, design {name in R['designs']}, reason {rule['reason']!r}")
            m = rule["model"]
            if m is None:
                continue
            order = m["order"]
            if lags_only:
                lags = sorted((-1.0 / p.real for p in poles), reverse=True)
                k = float(plant["gain"])
                for p in poles:
                    k /= -p.real
                delay = float(plant["delay"]) + sample / 2.0
                if order == 1:
                    want = {"lag": lags[0] + (lags[1] / 2.0 if len(lags) > 1 else 0.0),
                            "delay": delay + (lags[1] / 2.0 if len(lags) > 1 else 0.0) + sum(lags[2:])}
                else:
                    want = {"lag": lags[0],
                            "second_lag": (lags[1] if len(lags) > 1 else 0.0) + (lags[2] / 2.0 if len(lags) > 2 else 0.0),
                            "delay": delay + (lags[2] / 2.0 if len(lags) > 2 else 0.0) + sum(lags[3:])}
                want["gain"] = k
                F.check(f"rules/{name}/model", all(close(float(m[key]), v) or abs(float(m[key]) - v) <= 1e-12 for key, v in want.items()),
                        "the model is the half rule's (Skogestad 2003, §3) on the plant's lags",
                        f"{ {key: m[key] for key in want} } vs {want}")
            if not applied:
                continue
            k, big_l = abs(float(m["gain"])), float(m["delay"])
            if name == "simc":
                tc = float(rule["tau_c"])
                given = (spec.get("rules") or {}).get("simc_tau_c")
                F.check("rules/simc/tau_c", close(tc, float(given)) if given is not None else close(tc, big_l),
                        "τc is rules.simc_tau_c, else the model's delay", f"{tc} vs {given}, L {big_l}")
                s = tc + big_l
                if m["integrating"]:
                    kc, ti = 1.0 / (k * s), 4.0 * s
                else:
                    kc, ti = float(m["lag"]) / (k * s), min(float(m["lag"]), 4.0 * s)
                td = float(m["second_lag"]) if order == 2 else 0.0
                want = {"kp": kc * (1.0 + td / ti), "ti": ti + td, "td": ti * td / (ti + td)}
            else:
                t = float(m["lag"])
                if structure == "pid":
                    want = {"kp": (0.2 + 0.45 * t / big_l) / k, "ti": big_l * (0.4 * big_l + 0.8 * t) / (big_l + 0.1 * t),
                            "td": 0.5 * big_l * t / (0.3 * big_l + t)}
                else:
                    want = {"kp": 0.15 / k + (0.35 - big_l * t / (big_l + t) ** 2) * t / (k * big_l),
                            "ti": 0.35 * big_l + 13.0 * big_l * t * t / (t * t + 12.0 * big_l * t + 7.0 * big_l * big_l),
                            "td": 0.0}
            want["kp"] *= float(R["action"]["sign"])
            std = R["designs"][name]["controller"]["standard"] or {}
            got = {key: float(std.get(key) or 0.0) for key in ("kp", "ti", "td")}
            F.check(f"rules/{name}/settings",
                    all(close(got[key], v) if v != 0.0 else got[key] == 0.0 for key, v in want.items())
                    and (structure != "pid" or close(float(std.get("n") or 0.0), n)),
                    "the controller's standard form follows from the model by the published formulas (N the spec's)",
                    f"{got} vs {want}")

    # -- the whole run -------------------------------------------------------------------------------------
    def verify(self):
        F, R = self.F, self.R
        F.check("run/exit_code", (self.rc == 0) == bool(R["met"]) and self.rc in (0, 1),
                "exit code 0 exactly when result.json says met (README, Exit codes)", f"exit {self.rc}, met {R['met']}")
        if not self.rebuild():
            return
        self.verify_rules()
        tref = self.verify_reference()
        infos = {}
        for name in DESIGNS:
            d = R["designs"].get(name)
            if d is None:
                continue
            self.verify_reference_path(name, d)
            try:
                infos[name] = self.verify_design(name, d, tref)
            except Exception as exc:  # a bug of the oracle, or a loop it cannot handle: loudly
                F.check(f"{name}/oracle", False, "the oracle re-measured this design", f"{type(exc).__name__}: {exc}")
                infos[name] = None
        judged = self.judged
        opt = R["designs"].get("optimized")
        info = infos.get("optimized")
        if opt is not None and info is not None:
            judged_checks = opt["checks"] if judged == "linear" else (opt.get("nonlinear") or {}).get("checks", [])
            F.check("run/met", bool(R["met"]) == all(c["met"] for c in judged_checks),
                    f"met equals the optimized design's verdict on the loop it was judged on ({judged})")
            # issue 11 §1: a run that says met must meet every requirement on the loop the spec describes
            if R["met"] and judged == "linear" and "m_nl" in info:
                for c in opt["checks"]:
                    key, limit, upper = c["requirement"], float(c["limit"]), c["bound"] == "max"
                    v = requirement_value(key, info["m_nl"], info["mg_exact"], tref, self.band_pct, strict=True)
                    tol = claim_tolerance(key, limit, info["bounds"])
                    F.check(f"described/{key}", meets(key, v, limit, upper, tol),
                            f"met (exit 0) on the loop the spec describes ({info['how']}): {key} {'≤' if upper else '≥'} {limit:g}",
                            f"SciPy {show(v)}")
        for name in DESIGNS:
            d = R["designs"].get(name)
            info = infos.get(name)
            if d is None or info is None:
                continue
            claimed = d["meets_all"] if judged == "linear" else bool((d.get("nonlinear") or {}).get("meets_all"))
            ok_so_far = info.get("linear_claims_ok") if judged == "linear" else info.get("nonlinear_claims_ok")
            if claimed and ok_so_far:
                try:
                    self.verify_perturbation(name, d, tref, judged, info)
                except NotImplementedError as exc:
                    F.note(f"{name}: perturbation not run ({exc})")


# ---- the oracle checked against closed forms ------------------------------------------------------------------

def self_tests():
    """The re-measurement machinery against closed forms, before it judges anything."""
    F = Findings("oracle/self")
    # second-order loop: G = ω²/(s(s + 2ζω)) under unity feedback gives T = ω²/(s² + 2ζωs + ω²);
    # overshoot e^{−πζ/√(1−ζ²)}, peak time π/(ω√(1−ζ²)) (any introductory control text);
    # ISE = (1 + 4ζ²)/(4ζω) (integral-square-error tables; recalled from memory)
    z, w = 0.3, 2.0
    loop = LinearLoop([w * w], [1.0, 2 * z * w, 0.0], [1.0], [1.0], [1.0], [1.0])
    T = loop.horizon()
    pieces, y_inf = linear_trace(loop, 1.0, EXTEND * T)
    m = measure(pieces, y_inf, 1.0, 0.02, T)
    os_ = 100 * math.exp(-math.pi * z / math.sqrt(1 - z * z))
    tp = math.pi / (w * math.sqrt(1 - z * z))
    F.check("second_order/overshoot", abs(m["overshoot_pct"] - os_) <= 1e-9, "overshoot = e^{−πζ/√(1−ζ²)}", f"{m['overshoot_pct']!r} vs {os_!r}")
    F.check("second_order/peak_time", abs(m["peak_time"] - tp) <= 1e-9, "peak time = π/ω_d", f"{m['peak_time']!r} vs {tp!r}")
    ise = (1 + 4 * z * z) / (4 * z * w)
    F.check("second_order/ise", abs(m["ise"] - ise) <= 1e-6 * ise, "ISE = (1 + 4ζ²)/(4ζω)", f"{m['ise']!r} vs {ise!r}")
    # the last band exit of the second-order response: the root of |y − 1| = band after which
    # every extremum stays inside (extrema at kπ/ω_d with |y − 1| = e^{−ζω t}·… exactly)
    wd = w * math.sqrt(1 - z * z)
    y_of = lambda t: 1 - math.exp(-z * w * t) * (math.cos(wd * t) + z / math.sqrt(1 - z * z) * math.sin(wd * t))
    k = 1
    while math.exp(-z * w * k * math.pi / wd) >= 0.02:
        k += 1
    last = k - 1  # the last extremum outside the band
    a, b = last * math.pi / wd, k * math.pi / wd
    ts = optimize.brentq(lambda t: abs(y_of(t) - 1) - 0.02, a, b, xtol=1e-15)
    F.check("second_order/settling", abs(m["settling_time"] - ts) <= 1e-9, "settling = last exit, from the closed-form response",
            f"{m['settling_time']!r} vs {ts!r}")
    # first-order lag τ: IAE = τ(1 − e^{−T/τ}), ITAE = τ²(1 − e^{−T/τ}(1 + T/τ)) (elementary integrals)
    tau = 0.7
    loop = LinearLoop([1.0 / tau], [1.0, 0.0], [1.0], [1.0], [1.0], [1.0])
    T = loop.horizon()
    pieces, y_inf = linear_trace(loop, 1.0, EXTEND * T)
    m = measure(pieces, y_inf, 1.0, 0.02, T)
    iae, itae = tau * (1 - math.exp(-T / tau)), tau * tau * (1 - math.exp(-T / tau) * (1 + T / tau))
    F.check("first_order/integrals", abs(m["iae"] - iae) <= 1e-7 * iae and abs(m["itae"] - itae) <= 1e-7 * itae,
            "IAE and ITAE of e^{−t/τ}", f"{m['iae']!r} vs {iae!r}, {m['itae']!r} vs {itae!r}")
    # saturated P loop on 1/(s + 1): u = U until K(r − y) = U, then linear — piecewise closed form
    K, U, r = 4.0, 1.5, 1.0
    Ap, Bp, Cp, _ = realize([1.0], [1.0, 1.0])
    dl = DescribedLoop(plant=("linear", Ap, Bp, Cp), parallel=(K, 0.0, 0.0, 0.0), ctrl_tf=(np.array([K]), np.array([1.0])),
                       b=1.0, c=1.0, umin=-U, umax=U, rate=None, anti_windup="none", tt=None, r=r, td=0.0, dsize=0.0,
                       noise_rms=0.0, noise_period=1.0, seed=1, delay=0.0, horizon=5.0, ts=0.0, de=None, structure="p")
    eng = ContinuousHybrid(dl, 5.0)
    segs = eng.run(5.0)
    t1 = -math.log(1 - (r - U / K) / U)
    y1 = r - U / K
    yinf = K * r / (1 + K)
    exact = lambda t: U * (1 - math.exp(-t)) if t <= t1 else yinf + (y1 - yinf) * math.exp(-(1 + K) * (t - t1))
    tq = np.linspace(0, 5.0, 501)
    ys, _ = eng.sample(segs, tq)
    err = max(abs(a_ - exact(t_)) for a_, t_ in zip(ys, tq))
    F.check("saturated_p/trace", err <= 1e-8, "saturated P loop against its piecewise closed form (events)", f"max |Δy| = {err:.2e}")
    F.check("saturated_p/switch", any(abs(sg[1] - t1) <= 1e-10 for sg in segs), "the saturation switch located at its closed-form time",
            f"t1 = {t1!r}")
    # a hybrid loop with nothing nonlinear is the linear loop
    gn, gd = [3.0], [1.0, 4.0, 3.0]
    cn, cd = [2.0, 1.0], [1.0, 0.0]
    lin = LinearLoop(gn, gd, cn, cd, cn, cd)
    Ap, Bp, Cp, _ = realize(gn, gd)
    dl = DescribedLoop(plant=("linear", Ap, Bp, Cp), parallel=(2.0, 1.0, 0.0, 0.0), ctrl_tf=(np.array(cn), np.array(cd)),
                       b=1.0, c=1.0, umin=-math.inf, umax=math.inf, rate=None, anti_windup="none", tt=None, r=1.0, td=0.0,
                       dsize=0.0, noise_rms=0.0, noise_period=1.0, seed=1, delay=0.0, horizon=10.0, ts=0.0, de=None, structure="pi")
    eng = ContinuousHybrid(dl, 5.0)
    segs = eng.run(10.0)
    ys, _ = eng.sample(segs, tq * 2)
    pieces, _ = linear_trace(lin, 1.0, 10.0)
    yl, _ = sample_pieces(pieces, tq * 2)
    err = float(np.max(np.abs(ys - yl)))
    F.check("hybrid_equals_linear", err <= 1e-8, "solve_ivp loop without limits = the exact linear response", f"max |Δy| = {err:.2e}")
    F.check("noise/mt19937_64", mt64_self_test(), "MT19937-64: the C++ standard's 10000th output 9981545732273789042")
    return F


# ---- running specloop and the checks --------------------------------------------------------------------------

def run_one(task):
    binary, spec_path, out_root, long_mode = task
    name = pathlib.Path(spec_path).stem
    group = pathlib.Path(spec_path).parent.name
    label = f"{group}/{name}"
    F = Findings(label)
    out_dir = pathlib.Path(out_root) / group / name
    started = time.time()
    proc = subprocess.run([binary, "design", str(spec_path), "--out", str(out_dir)], capture_output=True, text=True, timeout=600)
    result_path = out_dir / "result.json"
    if proc.returncode not in (0, 1) or not result_path.exists():
        F.check("run/result", False, "specloop design exits 0 or 1 and writes result.json",
                f"exit {proc.returncode}: {proc.stderr.strip()[-400:]}")
        return F, time.time() - started
    result = json.loads(result_path.read_text())
    try:
        SpecOracle(result, proc.returncode, F, long_mode).verify()
    except Exception as exc:
        import traceback
        F.check("oracle", False, "the oracle ran to the end", f"{type(exc).__name__}: {exc} | " +
                traceback.format_exc().strip().splitlines()[-3].strip())
    return F, time.time() - started


def known(cid):
    for pattern, why in KNOWN_FAILING.items():
        if fnmatch.fnmatchcase(cid, pattern):
            return pattern, why
    return None


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--probe")
    ap.add_argument("--long", action="store_true", help="finer grids (h·ρ 0.01, 20000 frequency points per decade)")
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--only", default="")
    ap.add_argument("--strict-known", action="store_true")
    ap.add_argument("--keep", help="write the design outputs here instead of a temporary folder")
    args = ap.parse_args()
    root = pathlib.Path(args.source_dir)
    specs = sorted((root / "specs").glob("*.toml"))
    unusual = root / "tests" / "unusual_plants"
    if unusual.is_dir():
        specs += sorted(unusual.glob("*.toml"))
    else:
        print("NOTE  tests/unusual_plants/ does not exist on this branch: nothing taken from it")
    specs += sorted((root / "tests" / "claims").glob("*.toml"))
    specs = [s for s in specs if args.only in str(s)]
    passed = failed = known_failed = 0
    used = set()
    for cid, ok, what, detail in self_tests().lines:
        print(f"{'PASS' if ok else 'FAIL'}  {cid}: {what}" + (f"  [{detail}]" if detail else ""))
        passed += ok
        failed += not ok
    with tempfile.TemporaryDirectory() as tmp:
        out_root = args.keep or tmp
        tasks = [(args.specloop, str(s), out_root, args.long) for s in specs]
        with concurrent.futures.ProcessPoolExecutor(max_workers=max(1, args.jobs)) as pool:
            for F, seconds in pool.map(run_one, tasks):
                print(f"---- {F.name} ({seconds:.1f} s)", flush=True)
                for note in F.notes:
                    print(f"NOTE  {F.name}: {note}")
                for cid, ok, what, detail in F.lines:
                    tail = f"  [{detail}]" if detail else ""
                    hit = None if ok else known(cid)
                    if ok:
                        passed += 1
                        print(f"PASS  {cid}: {what}{tail}")
                    elif hit:
                        known_failed += 1
                        used.add(hit[0])
                        print(f"KNOWN FAILING  {cid}: {what}{tail}  <-- {hit[1]}")
                    else:
                        failed += 1
                        print(f"FAIL  {cid}: {what}{tail}")
    if not args.only:
        for pattern in KNOWN_FAILING:
            if pattern not in used:
                print(f"KNOWN FAILING entry matched no failure — it passes now, remove it: {pattern}")
                if args.strict_known:
                    failed += 1
    if known_failed:
        print(f"KNOWN FAILING: {known_failed} checks fail for reasons other branches fix (KNOWN_FAILING in this file)")
    print(f"{passed} passed, {failed} failed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
