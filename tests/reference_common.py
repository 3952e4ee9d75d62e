"""Shared by the Python reference checks: the pass/fail tally and its closing line, one piece of a
piecewise (hybrid) solve_ivp solution, and the sampling of such a solution."""


class Tally:
    """Counts checks, prints one line per check, and the closing `N passed, N failed` line."""

    def __init__(self):
        self.passed = 0
        self.failed = 0

    def check(self, case, what, ok, detail=""):
        ok = bool(ok)
        if ok:
            self.passed += 1
        else:
            self.failed += 1
        print(f"{'PASS' if ok else 'FAIL'}  {case}: {what}" + (f"  [{detail}]" if detail else ""), flush=True)
        return ok


def sample_segments(segments, samples, observe):
    """Reads a hybrid solution at `samples` (increasing): `segments` are (t0, t1, dense, *mode) in
    time order, `dense` solve_ivp's dense output on [t0, t1]; `observe(x, *mode)` returns (y, u).
    A sample on a switch takes the earlier segment (the left limit). Returns two lists."""
    ys, us = [], []
    k = 0
    for ts in samples:
        while k + 1 < len(segments) and ts > segments[k][1]:
            k += 1
        t0, t1, dense, *mode = segments[k]
        y, u = observe(dense(min(max(ts, t0), t1)), *mode)
        ys.append(y)
        us.append(u)
    return ys, us


class TerminalEvents(list):
    """solve_ivp events that stop the integration: `add(fun, direction)` marks `fun` terminal with
    the given crossing direction and keeps it, in order (the index says which guard fired)."""

    def add(self, fun, direction):
        fun.terminal = True
        fun.direction = direction
        self.append(fun)


def solve_piece(fun, span, y0, **kw):
    """scipy.integrate.solve_ivp over one piece, raising RuntimeError on failure — except one:
    solve_ivp refuses a last step shorter than 10 ulps of t ("required step size is less than
    spacing between numbers") when its previous step landed a rounding short of the bound, which
    depends on the machine's rounding (seen on a 177 s horizon, 1e-14 s short). The piece has then
    reached its end to the time's resolution: the result is returned as finished there (t[-1] set
    to the bound, status 0; the state is the one a rounding earlier)."""
    from scipy import integrate
    sol = integrate.solve_ivp(fun, span, y0, **kw)
    if sol.success:
        return sol
    end = float(span[1])
    if sol.status == -1 and len(sol.t) and sol.t[-1] < end and end - sol.t[-1] <= 1e-12 * max(1.0, abs(end)):
        sol.t[-1] = end
        sol.status, sol.success = 0, True
        return sol
    raise RuntimeError(f"solve_ivp failed at t = {float(sol.t[-1]) if len(sol.t) else span[0]:.6g}: {sol.message}")
