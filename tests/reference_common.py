"""Shared by the Python reference checks: the pass/fail tally and its closing line."""


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
