"""Shared by the checks of `specloop fit` (tests/check_fit_*.py) and its benchmark (bench/fit_bench.py):
synthetic recorded tests from known plants, computed by SciPy, and an independent least-squares fit
of the same models with scipy.optimize.least_squares.

The plants are the five model kinds of README "Fitting a plant from a test" (the contract in
notes: parameter names and models, time in the CSV's unit, the delay L ≥ 0 continuous):
  first-order-delay   k, T, L          G = k/(T s + 1) e^(−L s)
  second-order-delay  k, T1, T2, L     G = k/((T1 s + 1)(T2 s + 1)) e^(−L s), T1 ≥ T2
  underdamped-delay   k, wn, zeta, L   G = k wn²/(s² + 2 zeta wn s + wn²) e^(−L s)
  integrator-delay    k, T, L          G = k/(s (T s + 1)) e^(−L s)
  poles-zeros (2/1)   k, p1, p2, z1, L G = k (s/z1 + 1)/((s/p1 + 1)(s/p2 + 1)) e^(−L s)  (k the DC gain)

The recorded input is held between samples (zero-order hold: the value logged at t_i acts on
[t_i, t_{i+1})), and the plant sees it L later. The true response at the sample instants is computed
exactly, two independent ways that the self-test holds together to 1e-9 of the output's span:
  * `exact_zoh_response` (the data's truth): the plant's state-space realization stepped by
    scipy.signal.cont2discrete(method="zoh") — the exponential of the augmented matrix
    [[A, B], [0, 0]]·h, exact for a constant input — over every interval of the union of the
    sample instants and the delayed input breaks t_j + L (the delay is therefore exact, not an
    approximant, and not rounded to the grid);
  * `step_superposition` (the SciPy fitter's model): the input as a sum of steps Δu_j at t_j and
    the closed-form step response of each kind, y(t_i) = Σ_j Δu_j · s(t_i − t_j − L).
`self_test()` also checks the first against scipy.signal.dlsim on an even grid with a delay of whole
samples (the textbook ZOH discretization, common practice).

Records are absolute: an operating point (u0, y0) held over a leading steady stretch, then the
excitation (one step, several steps, or a pseudo-random binary sequence from a 7-bit maximal-length
shift register), on a logger's uneven grid (the nominal period ±10 % jitter stamped to period/20,
and a few samples dropped), with seeded Gaussian measurement noise (numpy.random.default_rng) at one of three levels
(a fraction of the noise-free output's span).
"""
import math

import numpy as np
from scipy import optimize, signal

# ---- the kinds ---------------------------------------------------------------------------------------

NOISE_LEVELS = {"low": 0.002, "medium": 0.01, "high": 0.04}   # σ as a fraction of the output's span
U0, Y0, DU = 35.0, 48.0, 10.0                                 # operating point and input step (absolute)


def _ss_first(p):
    k, T = p["k"], p["T"]
    return np.array([[-1.0 / T]]), np.array([[1.0 / T]]), np.array([[k]])


def _ss_second(p):
    k, T1, T2 = p["k"], p["T1"], p["T2"]
    A = np.array([[-1.0 / T1, 0.0], [1.0 / T2, -1.0 / T2]])
    return A, np.array([[1.0 / T1], [0.0]]), np.array([[0.0, k]])


def _ss_underdamped(p):
    k, wn, z = p["k"], p["wn"], p["zeta"]
    A = np.array([[0.0, 1.0], [-wn * wn, -2.0 * z * wn]])
    return A, np.array([[0.0], [wn * wn]]), np.array([[k, 0.0]])


def _ss_integrator(p):
    k, T = p["k"], p["T"]
    A = np.array([[-1.0 / T, 0.0], [1.0, 0.0]])
    return A, np.array([[1.0 / T], [0.0]]), np.array([[0.0, k]])


def _ss_poles_zeros(p):
    k, p1, p2, z1 = p["k"], p["p1"], p["p2"], p["z1"]
    num = k * p1 * p2 / z1 * np.array([1.0, z1])
    den = np.polymul([1.0, p1], [1.0, p2])
    A, B, C, D = signal.tf2ss(num, den)
    return A, B, C


def _step_first(p, tau):
    return p["k"] * -np.expm1(-tau / p["T"])


def _step_second(p, tau):
    k, T1, T2 = p["k"], p["T1"], p["T2"]
    if abs(T1 - T2) <= 1e-6 * max(T1, T2):
        T = 0.5 * (T1 + T2)
        return k * (1.0 - (1.0 + tau / T) * np.exp(-tau / T))
    return k * (1.0 - (T1 * np.exp(-tau / T1) - T2 * np.exp(-tau / T2)) / (T1 - T2))


def _step_underdamped(p, tau):
    k, wn, z = p["k"], p["wn"], p["zeta"]
    wd = wn * math.sqrt(1.0 - z * z)
    return k * (1.0 - np.exp(-z * wn * tau) * (np.cos(wd * tau) + z / math.sqrt(1.0 - z * z) * np.sin(wd * tau)))


def _step_integrator(p, tau):
    k, T = p["k"], p["T"]
    return k * (tau + T * np.expm1(-tau / T))


def _step_poles_zeros(p, tau):
    # Partial fractions of G(s)/s (worked out for this file): residues −k p2 (z − p1)/(z (p2 − p1))
    # at −p1 and −k p1 (z − p2)/(z (p1 − p2)) at −p2, 1 at 0 (times k).
    k, p1, p2, z = p["k"], p["p1"], p["p2"], p["z1"]
    if abs(p1 - p2) <= 1e-6 * max(p1, p2):
        p1 = p1 * (1.0 + 1e-6)
    r1 = -p2 * (z - p1) / (z * (p2 - p1))
    r2 = -p1 * (z - p2) / (z * (p1 - p2))
    return k * (1.0 + r1 * np.exp(-p1 * tau) + r2 * np.exp(-p2 * tau))


KINDS = {
    "first-order-delay": dict(names=["k", "T", "L"], ss=_ss_first, step=_step_first,
                              true={"k": 1.8, "T": 12.0, "L": 3.7}, period=0.4, span=160.0),
    "second-order-delay": dict(names=["k", "T1", "T2", "L"], ss=_ss_second, step=_step_second,
                               true={"k": 0.9, "T1": 15.0, "T2": 4.0, "L": 2.6}, period=0.4, span=200.0),
    "underdamped-delay": dict(names=["k", "wn", "zeta", "L"], ss=_ss_underdamped, step=_step_underdamped,
                              true={"k": 1.3, "wn": 0.6, "zeta": 0.25, "L": 1.4}, period=0.15, span=60.0),
    "integrator-delay": dict(names=["k", "T", "L"], ss=_ss_integrator, step=_step_integrator,
                             true={"k": 0.05, "T": 6.0, "L": 2.2}, period=0.3, span=120.0),
    "poles-zeros": dict(names=["k", "p1", "p2", "z1", "L"], ss=_ss_poles_zeros, step=_step_poles_zeros,
                        true={"k": 1.5, "p1": 0.4, "p2": 0.08, "z1": 0.15, "L": 1.0}, period=0.3, span=150.0),
}
ORDER = list(KINDS)


def cli_model_args(kind):
    """The `specloop fit` arguments selecting one kind (poles-zeros: 2 poles, 1 zero here)."""
    if kind == "poles-zeros":
        return ["--model", "poles-zeros", "--poles", "2", "--zeros", "1"]
    return ["--model", kind]


def default_excitation(kind):
    """An integrator's output only comes back with a pulse; the others take one step."""
    return "steps" if kind == "integrator-delay" else "step"


# ---- grid and input ---------------------------------------------------------------------------------------

def logger_grid(samples, period, seed, jitter=0.1, dropped=3):
    """A logger's time stamps: k·period ± jitter·period (uniform), stamped to a resolution of
    period/20 (as a logger's clock ticks; so the intervals take a handful of distinct lengths),
    `dropped` samples missing (never in the first fifth), strictly increasing, starting at 0."""
    rng = np.random.default_rng(seed)
    n = samples + dropped
    t = np.arange(n) * period + rng.uniform(-jitter, jitter, n) * period
    t = np.round(t / (period / 20.0)) * (period / 20.0)
    t[0] = 0.0
    drop = rng.choice(np.arange(n // 5, n - 1), size=dropped, replace=False) if dropped else []
    t = np.delete(t, drop)
    assert np.all(np.diff(t) > 0)
    return t


def prbs7(length):
    """A 7-bit maximal-length shift-register sequence (taps 7 and 6: x^7 + x^6 + 1, common practice)."""
    state, out = 0x7F, []
    for _ in range(length):
        bit = ((state >> 6) ^ (state >> 5)) & 1
        out.append(state & 1)
        state = ((state << 1) | bit) & 0x7F
    return np.array(out, float)


def excitation(kind, t, shape, lead_fraction=0.15):
    """The input's deviation from u0 at each sample (ZOH): zero over the leading steady stretch,
    then `shape`: "step" (+DU), "steps" (several levels; an integrator gets a pulse up then down),
    "prbs" (±DU/2 from a 7-bit sequence, clocked at about a third of the plant's slowest time)."""
    span = t[-1]
    lead = lead_fraction * span
    u = np.zeros_like(t)
    if shape == "step":
        u[t >= lead] = DU
    elif shape == "steps":
        if kind == "integrator-delay":
            levels = [(lead, 1.0), (0.4 * span, 0.0), (0.6 * span, -1.0), (0.8 * span, 0.0)]
        else:
            levels = [(lead, 1.0), (0.45 * span, 0.4), (0.7 * span, -0.5)]
        for at, level in levels:
            u[t >= at] = DU * level
    elif shape == "prbs":
        slow = {"first-order-delay": 12.0, "second-order-delay": 15.0, "underdamped-delay": 3.0,
                "integrator-delay": 6.0, "poles-zeros": 8.0}[kind]
        clock = slow / 3.0
        k0 = int(np.searchsorted(t, lead))
        bits = prbs7(int((span - lead) / clock) + 2)
        idx = ((t[k0:] - t[k0]) / clock).astype(int)
        u[k0:] = DU * (bits[idx] - 0.5)
        if kind == "integrator-delay":
            u[k0:] -= np.mean(u[k0:])     # zero mean, so the integrator's output stays bounded
    else:
        raise ValueError(shape)
    return u


# ---- the exact responses -------------------------------------------------------------------------------

def exact_zoh_response(A, B, C, L, t, u):
    """y at the samples t of the plant (A, B, C) fed with u (deviation, held between samples) delayed
    by L: cont2discrete(zoh) over every interval between consecutive events (sample instants and
    the delayed input changes t_j + L). Starts at rest (x = 0, u = u[0] = 0 before t[0])."""
    change = np.nonzero(np.diff(u) != 0.0)[0] + 1
    breaks = t[change] + L
    events = np.union1d(t, breaks[breaks < t[-1]])
    levels_t = np.concatenate(([-np.inf], t[change] + L))
    levels_u = np.concatenate(([u[0]], u[change]))
    x = np.zeros(A.shape[0])
    D = np.zeros((1, 1))
    out, i = np.empty_like(t), 0
    cache = {}
    for a, b in zip(events[:-1], events[1:]):
        if a == t[i]:
            out[i] = (C @ x)[0]
            i += 1
        level = levels_u[np.searchsorted(levels_t, a, side="right") - 1]
        h = b - a
        key = float(h)
        if key not in cache:
            Ad, Bd, _, _, _ = signal.cont2discrete((A, B, C, D), h, method="zoh")
            cache[key] = (Ad, Bd[:, 0])
        Ad, Bd = cache[key]
        x = Ad @ x + Bd * level
    out[-1] = (C @ x)[0]
    return out


def step_superposition(kind, p, t, u):
    """The same response from the closed-form step response of `kind` (parameters p, a dict):
    Σ_j Δu_j s(t − t_j − L), the changes at samples j (ZOH)."""
    step = KINDS[kind]["step"]
    change = np.nonzero(np.diff(u) != 0.0)[0] + 1
    y = np.zeros_like(t)
    if u[0] != 0.0:
        raise ValueError("the record must start at rest (u − u0 = 0)")
    for j in change:
        tau = t - t[j] - p["L"]
        mask = tau > 0.0
        y[mask] += (u[j] - u[j - 1]) * step(p, tau[mask])
    return y


# ---- a record ---------------------------------------------------------------------------------------------

class Record:
    """One synthetic recorded test: absolute t, u, y (noisy), the noise-free y, the truth."""

    def __init__(self, kind, params, t, u_dev, y_clean_dev, sigma, seed):
        self.kind, self.params, self.sigma, self.seed = kind, dict(params), sigma, seed
        self.t = t
        self.u = U0 + u_dev
        self.y_clean = Y0 + y_clean_dev
        rng = np.random.default_rng(seed)
        self.y = self.y_clean + (rng.normal(0.0, sigma, t.size) if sigma > 0 else 0.0)

    def write_csv(self, path, header=None, columns=("t", "u", "y")):
        lines = [f"# synthetic recorded test (tests/fit_reference.py): {self.kind} "
                 + ", ".join(f"{k}={v:g}" for k, v in self.params.items())
                 + f"; operating point u0={U0:g} y0={Y0:g}; noise sigma={self.sigma:.6g}, seed {self.seed}"]
        if header:
            lines += [f"# {h}" for h in header]
        lines.append(",".join(columns))
        lines += [f"{a:.12g},{b:.12g},{c:.12g}" for a, b, c in zip(self.t, self.u, self.y)]
        path.write_text("\n".join(lines) + "\n")


class CleanResponse:
    """The noise-free part of a family of records (one kind, one input, one grid): computed once by
    `exact_zoh_response`, then `record(level, seed)` adds seeded noise."""

    def __init__(self, kind, shape="step", samples=400, params=None, grid_seed=7, period=None, span=None,
                 jitter=0.1, dropped=3):
        info = KINDS[kind]
        self.kind, self.shape = kind, shape
        self.params = dict(params or info["true"])
        span = span or info["span"]
        period = period or span / samples
        self.t = logger_grid(samples, period, grid_seed, jitter, dropped)
        self.u_dev = excitation(kind, self.t, shape)
        A, B, C = info["ss"](self.params)
        self.y_dev = exact_zoh_response(A, B, C, self.params["L"], self.t, self.u_dev)
        self.y_span = float(np.ptp(self.y_dev))

    def sigma(self, level):
        return NOISE_LEVELS[level] * self.y_span if level in NOISE_LEVELS else float(level)

    def record(self, level, seed):
        return Record(self.kind, self.params, self.t, self.u_dev, self.y_dev, self.sigma(level), seed)


# ---- the independent SciPy fit ---------------------------------------------------------------------------

LOWER = {"k": -np.inf, "T": 1e-6, "T1": 1e-6, "T2": 1e-6, "wn": 1e-6, "zeta": 0.005, "L": 0.0,
         "p1": 1e-6, "p2": 1e-6, "z1": 1e-6}
UPPER = {"zeta": 0.995}


class ScipyFit:
    """A least-squares fit of one kind by scipy.optimize.least_squares (trust-region reflective,
    bounds T, wn, rates > 0, L ≥ 0, 0 < zeta < 1), the model `step_superposition`, the residual
    y − y0 − ŷ(u − u0). Covariance σ̂²·(JᵀJ)⁻¹ with σ̂² = SSR/(N − p) (the contract's scaling), J by
    3-point differences at the optimum. Second-order T1 ≥ T2 and poles p1 ≥ p2 are ordered after
    the fit (the model is symmetric in them). With `offset`, a constant c is fitted beside them
    (y − y0 − c − ŷ: the output's operating point estimated with the model), named "c"."""

    def __init__(self, kind, t, u, y, u0, y0, starts, offset=False):
        self.kind = kind
        names = KINDS[kind]["names"] + (["c"] if offset else [])
        self.names = names
        ud, yd = np.asarray(u) - u0, np.asarray(y) - y0
        lo = np.array([LOWER.get(n, -np.inf) for n in names])
        hi = np.array([UPPER.get(n, np.inf) for n in names])

        def residual(theta):
            p = dict(zip(names, theta))
            return yd - p.get("c", 0.0) - step_superposition(kind, p, t, ud)

        best = None
        for start in starts:
            x0 = np.clip(np.array([start.get(n, 0.0) for n in names], float), lo + 1e-9, hi - 1e-9)
            try:
                r = optimize.least_squares(residual, x0, bounds=(lo, hi), method="trf", x_scale="jac",
                                           ftol=1e-12, xtol=1e-12, gtol=1e-12, max_nfev=4000)
            except ValueError:
                continue
            if best is None or r.cost < best.cost:
                best = r
        theta = best.x.copy()
        order = list(range(len(names)))
        if kind == "second-order-delay" and theta[2] > theta[1]:
            order[1], order[2] = 2, 1
        if kind == "poles-zeros" and theta[2] > theta[1]:
            order[1], order[2] = 2, 1
        theta = theta[order]
        J = _jacobian(residual, best.x, lo, hi)[:, order]
        self.ssr = float(2.0 * best.cost)
        n, m = len(t), len(names)
        self.samples = n
        self.sigma2 = self.ssr / (n - m)
        self.rms = math.sqrt(self.ssr / n)
        try:
            self.cov = self.sigma2 * np.linalg.inv(J.T @ J)
        except np.linalg.LinAlgError:
            self.cov = np.full((m, m), np.nan)
        self.values = dict(zip(names, theta))
        self.std = dict(zip(names, np.sqrt(np.abs(np.diag(self.cov)))))
        self.status = best.status
        self.nfev = best.nfev


def _jacobian(residual, x, lo, hi):
    """Central differences (one-sided at an active bound), step 1e-6·max(|x|, 1e-3)."""
    cols = []
    for i in range(x.size):
        h = 1e-6 * max(abs(x[i]), 1e-3)
        a, b = x.copy(), x.copy()
        a[i] = min(x[i] + h, hi[i])
        b[i] = max(x[i] - h, lo[i])
        cols.append(-(residual(a) - residual(b)) / (a[i] - b[i]))   # d(model)/dθ = −d(residual)/dθ
    return np.column_stack(cols)


# ---- the two-point methods ---------------------------------------------------------------------------------

def crossing_time(t, y, level):
    """First time the samples reach `level` (linear interpolation between the two samples around it)."""
    i = int(np.argmax(y >= level))
    if i == 0:
        raise ValueError("no crossing")
    return t[i - 1] + (level - y[i - 1]) / (y[i] - y[i - 1]) * (t[i] - t[i - 1])


def smith_two_point(t28, t63):
    """C. L. Smith, Digital Computer Process Control (Intext, 1972): from the times (after the step)
    at which a step response reaches 28.3 % and 63.2 % of its change, T = 1.5 (t63 − t28),
    L = t63 − T. (Constants recalled from memory; exact for first order plus delay up to their
    rounding: 1.5·(1 − 0.333)T = 1.0005 T.)"""
    T = 1.5 * (t63 - t28)
    return T, t63 - T


def sundaresan_krishnaswamy(t35, t85):
    """K. R. Sundaresan and P. R. Krishnaswamy, "Estimation of time delay, time constant parameters
    in time, frequency and Laplace domains", Can. J. Chem. Eng. 56 (1978) 257–262 (the method
    usually cited as 1977): from the 35.3 % and 85.3 % times, T = 0.67 (t85 − t35),
    L = 1.3 t35 − 0.29 t85. (Constants recalled from memory; on first order plus delay they give
    T within 0.7 % and L within 1 % + 0.01 T.)"""
    return 0.67 * (t85 - t35), 1.3 * t35 - 0.29 * t85


# ---- self-test ----------------------------------------------------------------------------------------------

def self_test(tally):
    """The two exact responses agree on every kind and input shape; the cont2discrete stepping
    agrees with scipy.signal.dlsim on an even grid with a whole-sample delay."""
    for kind in ORDER:
        for shape in ("step", "steps", "prbs"):
            c = CleanResponse(kind, shape, samples=300)
            sup = step_superposition(kind, c.params, c.t, c.u_dev)
            err = float(np.max(np.abs(sup - c.y_dev)))
            tally.check(f"reference/{kind}/{shape}", "cont2discrete(zoh) stepping = closed-form superposition",
                        err <= 1e-9 * max(c.y_span, 1e-12), f"max diff {err:.2e}, span {c.y_span:.3g}")
    info = KINDS["second-order-delay"]
    p = dict(info["true"], L=2.0)
    h = 0.5
    t = np.arange(300) * h
    u = np.where(t >= 10.0, DU, 0.0)
    A, B, C = info["ss"](p)
    mine = exact_zoh_response(A, B, C, p["L"], t, u)
    sysd = signal.cont2discrete((A, B, C, np.zeros((1, 1))), h, method="zoh")
    shift = int(round(p["L"] / h))
    u_del = np.concatenate((np.zeros(shift), u[:-shift]))
    _, yd, _ = signal.dlsim(sysd, u_del, t=t)
    err = float(np.max(np.abs(mine - yd[:, 0])))
    tally.check("reference/dlsim", "exact stepping = dlsim with a whole-sample delay (even grid)",
                err <= 1e-9 * float(np.ptp(yd)), f"max diff {err:.2e}")


# ---- running the tool -------------------------------------------------------------------------------------

def run_fit(specloop, csv_path, out_dir, extra=(), timeout=300):
    """`specloop fit CSV --out DIR EXTRA...`; returns (CompletedProcess, fit.json as a dict or None).
    fit.json is read after exit 0 and exit 1 (no model identifiable: every model still reported)."""
    import json
    import subprocess
    proc = subprocess.run([str(specloop), "fit", str(csv_path), "--out", str(out_dir), *extra],
                          capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL)
    path = out_dir / "fit.json"
    fit = json.loads(path.read_text()) if proc.returncode in (0, 1) and path.exists() else None
    return proc, fit


def model_entry(fit, kind):
    """The entry of `fit.json`'s models for `kind` (None when absent)."""
    for m in fit.get("models", []):
        if m.get("kind") == kind:
            return m
    return None


def tool_parameters(entry, kind):
    """{name: (value, std_error, low, high)} of a fit.json model entry, in this file's names; the
    poles of poles-zeros ordered fastest first (p1 ≥ p2, as ScipyFit orders them); a null reads NaN."""
    ps = entry["parameters"]
    out = {n: tuple(math.nan if ps[n].get(f) is None else float(ps[n][f]) for f in ("value", "std_error", "low", "high"))
           for n in ps}   # null (no covariance) reads as NaN, which no check accepts
    if kind == "poles-zeros":
        poles = sorted((out[n] for n in out if n.startswith("p")), key=lambda v: -v[0])
        for i, v in enumerate(poles):
            out[f"p{i + 1}"] = v
    return out


# ---- checks that fail today for a reason the fitter's branch is to fix -------------------------------------

# fnmatch patterns of "CASE: WHAT" lines, per check script, each with its reason (as the oracle's
# KNOWN_FAILING in check_scipy_claims.py): a matching failure prints "KNOWN FAILING" and does not
# fail the run; an entry that matches no failure any more is printed "remove it".
KNOWN_FAILING = {}


class KnownTally:
    """reference_common.Tally with a KNOWN_FAILING list: check(case, what, ok, detail)."""

    def __init__(self, script):
        from reference_common import Tally
        self.tally = Tally()
        self.known = KNOWN_FAILING.get(script, [])
        self.used = set()
        self.known_failed = 0

    @property
    def passed(self):
        return self.tally.passed

    @property
    def failed(self):
        return self.tally.failed

    def check(self, case, what, ok, detail=""):
        import fnmatch
        if not ok:
            for i, (pattern, reason) in enumerate(self.known):
                if fnmatch.fnmatchcase(f"{case}: {what}", pattern):
                    self.used.add(i)
                    self.known_failed += 1
                    print(f"KNOWN FAILING  {case}: {what}  [{detail}]  — {reason}", flush=True)
                    return False
        return self.tally.check(case, what, ok, detail)

    def finish(self):
        """Prints the unused entries and the closing line; returns the exit status."""
        for i, (pattern, reason) in enumerate(self.known):
            if i not in self.used:
                print(f"NOTE  KNOWN_FAILING entry {pattern!r} matches no failure any more: remove it")
        if self.known_failed:
            print(f"NOTE  {self.known_failed} known failing (fit_reference.KNOWN_FAILING)")
        print(f"{self.passed} passed, {self.failed} failed")
        return 1 if self.failed else 0
