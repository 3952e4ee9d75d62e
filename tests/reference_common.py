"""Shared by the Python reference checks: the pass/fail tally and its closing line, and the
sampling of a piecewise (hybrid) solve_ivp solution."""


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
