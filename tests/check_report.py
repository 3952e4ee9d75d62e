#!/usr/bin/env python3
"""The design report, checked from outside: a real browser, SciPy, and the characteristic equation.

Invoked by CTest as
    /usr/bin/python3 tests/check_report.py --specloop BIN --source-dir ROOT [--chromium PATH]

For every spec in specs/, `specloop design SPEC --out DIR` must write report.html, report.md,
result.json, series/*.csv and plots/{step,effort,splane,frequency}.{gp,svg,png}. Then:

  browser      Debian's headless Chromium loads report.html from disk with every host name
               unresolvable and a network log on. The screenshot must not be blank (more than
               2 % non-white pixels and at least 16 distinct colours); the DOM (after load) must
               hold the requirement table and the four figures, each with an inline <svg>; the
               network log must show no request made by the page (requests the browser makes for
               itself carry the initiator "not an origin" and are ignored). A sentinel page with
               one external image is run through the same log first: if it is not flagged, the
               detector is broken and the check fails.
  table        every cell of the requirement table (parsed from the HTML with html.parser) carries
               the value of result.json exactly (data-value, 17 significant digits) and shows it
               to 4 significant digits; the slack column carries the optimized design's `slack`.
  series       the CSV step responses re-measured with SciPy (cubic spline through the samples,
               scipy.interpolate.CubicSpline; crossings by scipy.optimize.brentq) reproduce
               result.json's overshoot, peak, rise and settling times. For the linear loop the samples are those of the exact simulation:
               0.002 points, 0.01 % or a twentieth of a sample step. For the nonlinear loop the
               report keeps 2000 of the confirmation's 20000 samples: 0.05 points, 0.2 % or two
               report sample steps.
  root locus   every plotted pole set satisfies the characteristic equation D(s) + k·N(s) = 0 of
               the recommended loop (N, D from result.json, evaluated with numpy.polyval) to a
               relative residual of 1e-7, and the design's own closed-loop poles lie on the
               plotted locus at k = 1 (within 1e-6 of the pole's magnitude).
  no crossing  a spec whose plant has no ζ-line crossing still gets every section, and the page
               says so.
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import csv
import html.parser
import json
import pathlib
import shutil
import subprocess
import sys
import tempfile

import numpy as np
from PIL import Image
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

from reference_common import Tally

FIGURES = ["step", "effort", "splane", "frequency"]


class ReportParser(html.parser.HTMLParser):
    """Collects the requirement table's cells (with attributes), figure ids with an <svg> inside,
    and every src/href attribute."""

    def __init__(self):
        super().__init__()
        self.in_table = False
        self.cell = None
        self.cells = []  # (attrs, text)
        self.figure = None
        self.figures_with_svg = set()
        self.links = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        for key in ("src", "href"):
            if key in a and not a[key].startswith("#"):
                self.links.append(a[key])
        if tag == "table" and a.get("id") == "requirements":
            self.in_table = True
        elif tag == "td" and self.in_table:
            self.cell = [a, ""]
        elif tag == "figure":
            self.figure = a.get("id")
        elif tag == "svg" and self.figure:
            self.figures_with_svg.add(self.figure)

    def handle_endtag(self, tag):
        if tag == "table" and self.in_table:
            self.in_table = False
        elif tag == "td" and self.cell is not None:
            self.cells.append(tuple(self.cell))
            self.cell = None
        elif tag == "figure":
            self.figure = None

    def handle_data(self, data):
        if self.cell is not None:
            self.cell[1] += data


def chromium_run(chromium, page, work, screenshot=None, dump_dom=False):
    """Loads `page` headless with no name resolution; returns (stdout, page-initiated URLs)."""
    netlog = pathlib.Path(work, "net.json")
    if netlog.exists():
        netlog.unlink()
    cmd = [chromium, "--headless=new", "--no-sandbox", "--disable-gpu", "--hide-scrollbars", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-default-apps",
           "--disable-sync", "--host-resolver-rules=MAP * ~NOTFOUND", f"--log-net-log={netlog}",
           f"--user-data-dir={pathlib.Path(work, 'profile')}", "--window-size=1100,2600"]
    if screenshot:
        cmd.append(f"--screenshot={screenshot}")
    if dump_dom:
        cmd.append("--dump-dom")
    cmd.append(pathlib.Path(page).resolve().as_uri())
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    log = json.loads(netlog.read_text()) if netlog.exists() else {"events": [], "constants": {"logEventTypes": {}}}
    names = {v: k for k, v in log["constants"]["logEventTypes"].items()}
    urls = set()
    for e in log["events"]:
        p = e.get("params", {})
        if names.get(e["type"]) == "URL_REQUEST_START_JOB" and "url" in p and p.get("initiator") != "not an origin":
            if not str(p.get("url", "")).startswith(("file:", "data:", "chrome:", "about:")):
                urls.add(p.get("url"))
    return proc.stdout, urls


def measure(t, y, y_inf, band):
    """Overshoot, peak, rise (10-90 %) and settling times of samples, refined on a cubic spline."""
    s = CubicSpline(t, y)
    fine = np.linspace(t[0], t[-1], 40 * len(t))
    yf = s(fine)
    k = int(np.argmax(yf))
    lo, hi = max(k - 1, 0), min(k + 1, len(fine) - 1)
    d = s.derivative()
    tp = brentq(d, fine[lo], fine[hi]) if d(fine[lo]) * d(fine[hi]) < 0 else fine[k]
    overshoot = max(0.0, (s(tp) - y_inf) / abs(y_inf) * 100.0)

    def first_crossing(level):
        idx = np.nonzero((yf - level) * np.sign(y_inf) >= 0)[0]
        if len(idx) == 0 or idx[0] == 0:
            return None
        return brentq(lambda x: s(x) - level, fine[idx[0] - 1], fine[idx[0]])

    t10, t90 = first_crossing(0.1 * y_inf), first_crossing(0.9 * y_inf)
    outside = np.nonzero(np.abs(yf - y_inf) > band * abs(y_inf))[0]
    ts = None
    if len(outside) and outside[-1] + 1 < len(fine):
        j = outside[-1]
        edge = y_inf + np.sign(yf[j] - y_inf) * band * abs(y_inf)
        ts = brentq(lambda x: s(x) - edge, fine[j], fine[j + 1])
    return {"overshoot_pct": overshoot, "peak_time": tp if overshoot > 0 else None,
            "rise_time": (t90 - t10) if (t10 is not None and t90 is not None) else None, "settling_time": ts}


def read_csv(path):
    with open(path) as f:
        rows = list(csv.reader(f))
    header = rows[0]
    data = np.array([[float(v) for v in r] for r in rows[1:]])
    return header, data


def check_series(tally, name, out, result):
    band = result["spec"]["requirements"].get("settling_band_pct", 2.0) / 100.0
    best = "optimized" if result["designs"].get("optimized") else "classical"
    d = result["designs"][best]
    for nonlinear in (False, True):
        f = out / "series" / f"step_{best}{'_nonlinear' if nonlinear else ''}.csv"
        if not f.exists():
            tally.check(name, f"{f.name} exists", False)
            continue
        header, data = read_csv(f)
        tally.check(name, f"{f.name}: header with units", header[0] == "time_s", ",".join(header))
        ref = d["nonlinear"]["simulated"] if nonlinear else d["simulated"]
        if ref is None:
            continue
        m = measure(data[:, 0], data[:, 1], ref["final_value"], band)
        step = float(np.max(np.diff(data[:, 0])))
        tol_os = 0.05 if nonlinear else 0.002
        tally.check(name, f"{f.name}: overshoot re-measured", abs(m["overshoot_pct"] - ref["overshoot_pct"]) <= tol_os,
                    f"{m['overshoot_pct']:.5f} vs {ref['overshoot_pct']:.5f} %")
        for key in ("peak_time", "rise_time", "settling_time"):
            a, b = m[key], ref[key]
            if a is None or b is None:
                # Peak time is defined only with overshoot; a near-zero overshoot may round either way.
                ok = (a is None) == (b is None) or (key == "peak_time" and ref["overshoot_pct"] < tol_os)
                tally.check(name, f"{f.name}: {key} defined alike", ok, f"{a} vs {b}")
                continue
            tol = max(2e-3 * abs(b), 2.0 * step) if nonlinear else max(1e-4 * abs(b), 0.05 * step)
            tally.check(name, f"{f.name}: {key} re-measured", abs(a - b) <= tol, f"{a:.6g} vs {b:.6g} s (tol {tol:.3g})")


def check_locus(tally, name, out, result):
    best = "optimized" if result["designs"].get("optimized") else "classical"
    d = result["designs"][best]
    n = np.polymul(d["controller"]["numerator"], result["linear_model"]["numerator"])
    den = np.polymul(d["controller"]["denominator"], result["linear_model"]["denominator"])
    _, data = read_csv(out / "series" / "locus.csv")
    worst = 0.0
    for k, _, re, im in data:
        s = complex(re, im)
        a, b = np.polyval(den, s), k * np.polyval(n, s)
        scale = sum(abs(c) * abs(s) ** i for i, c in enumerate(den[::-1])) + \
            k * sum(abs(c) * abs(s) ** i for i, c in enumerate(n[::-1]))
        worst = max(worst, abs(a + b) / scale)
    tally.check(name, "locus: every plotted pole satisfies D + k·N = 0", worst <= 1e-7, f"worst relative residual {worst:.2e}")
    at_one = data[np.abs(data[:, 0] - 1.0) < 1e-12]
    plotted = [complex(r[2], r[3]) for r in at_one]
    own = [complex(p[0], p[1]) for p in d["closed_loop_poles"]]
    miss = max((min(abs(p - q) for q in plotted) / max(abs(p), 1e-9) for p in own), default=1.0) if plotted else 1.0
    tally.check(name, "locus: the design's closed-loop poles lie on it at k = 1", miss <= 1e-6, f"worst {miss:.2e}")


def check_table(tally, name, parser, result):
    designs = result["designs"]
    # Row by row: data-key cell, limit cell, one cell per design.
    rows, row = [], None
    for attrs, text in parser.cells:
        if "data-key" in attrs:
            row = {"key": attrs["data-key"], "cells": []}
            rows.append(row)
        elif row is not None and "data-design" in attrs:
            row["cells"].append((attrs, text))
        elif row is not None and "data-slack" in attrs:
            row["slack"] = float(attrs["data-slack"])
    # The slack column: the optimized design's `slack` from result.json, exactly.
    if "optimized" in designs:
        want = {c["requirement"]: c["slack"] for c in designs["optimized"]["checks"]}
        got = {r["key"]: r.get("slack") for r in rows}
        tally.check(name, "table: slack column = the optimized design's slack in result.json", got == want,
                    f"{got} vs {want}")
    ok_exact = ok_shown = True
    detail = ""
    count = 0
    for row in rows:
        for attrs, text in row["cells"]:
            check = next(c for c in designs[attrs["data-design"]]["checks"] if c["requirement"] == row["key"])
            v = check["value"]
            count += 1
            if v is None:
                ok_exact &= attrs["data-value"] == "none"
                continue
            if float(attrs["data-value"]) != v:
                ok_exact = False
                detail = f"{row['key']}/{attrs['data-design']}: {attrs['data-value']} vs {v}"
            shown = float(text.split()[0])
            if abs(shown - v) > 5e-4 * abs(v) + 1e-300:
                ok_shown = False
                detail = f"{row['key']}/{attrs['data-design']}: shown {shown} vs {v}"
            if (attrs["data-met"] == "true") != check["met"]:
                ok_exact = False
                detail = f"{row['key']}/{attrs['data-design']}: met flag"
    expected = sum(len(d["checks"]) for d in designs.values())
    tally.check(name, "table: one cell per design and requirement", count == expected, f"{count} vs {expected}")
    tally.check(name, "table: cell values equal result.json exactly", ok_exact, detail)
    tally.check(name, "table: shown values to 4 significant digits", ok_shown, detail)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--specloop", required=True)
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--chromium", default=shutil.which("chromium") or "/usr/bin/chromium")
    args, _ = ap.parse_known_args()
    tally = Tally()
    specs = sorted(pathlib.Path(args.source_dir, "specs").glob("*.toml"))
    have_chromium = pathlib.Path(args.chromium).exists()
    tally.check("setup", "chromium found (Debian package chromium)", have_chromium, args.chromium)
    with tempfile.TemporaryDirectory() as work:
        work = pathlib.Path(work)
        if have_chromium:
            sentinel = work / "sentinel.html"
            sentinel.write_text('<html><body><img src="http://example.invalid/pixel.png"></body></html>')
            _, urls = chromium_run(args.chromium, sentinel, work, dump_dom=True)
            tally.check("setup", "the request detector flags an external image", len(urls) == 1, str(urls))
        crossing_seen = False
        for spec in specs:
            name = spec.stem
            out = work / name
            run = subprocess.run([args.specloop, "design", str(spec), "--out", str(out)], capture_output=True, text=True,
                                 timeout=300)
            if not tally.check(name, "design exits 0 or 1", run.returncode in (0, 1), run.stderr.strip()):
                continue
            files = ["report.html", "report.md", "result.json"] + [f"plots/{f}.{e}" for f in FIGURES for e in ("gp", "svg", "png")]
            missing = [f for f in files if not (out / f).exists()]
            tally.check(name, "every output file written", not missing, f"missing {missing}")
            tally.check(name, "series written", len(list((out / "series").glob("*.csv"))) >= 4)
            tally.check(name, "no staging folder left", not list(work.glob(f".{name}.partial-*")))
            if missing:
                continue
            result = json.loads((out / "result.json").read_text())
            page = (out / "report.html").read_text()
            md = (out / "report.md").read_text()
            parser = ReportParser()
            parser.feed(page)
            tally.check(name, "html: no external references", not [l for l in parser.links if "://" in l], str(parser.links))
            tally.check(name, "html: the four figures inline", parser.figures_with_svg == {f"fig-{f}" for f in FIGURES},
                        str(sorted(parser.figures_with_svg)))
            tally.check(name, "safety caution on both pages", "not a verified machine" in page and "not a verified machine" in md)
            tally.check(name, "markdown links every figure", all(f"plots/{f}.svg" in md for f in FIGURES))
            check_table(tally, name, parser, result)
            check_series(tally, name, out, result)
            check_locus(tally, name, out, result)
            if "no usable crossing" in page:
                crossing_seen = True
                tally.check(name, "no ζ-line crossing: every section still present",
                            all(f'id="{s}"' in page for s in ("controller", "requirement-table", "figures", "approximation",
                                                              "confirmation", "search", "spec", "safety")))
            if have_chromium:
                shot = work / f"{name}.png"
                dom, urls = chromium_run(args.chromium, out / "report.html", work, screenshot=shot)
                img = Image.open(shot).convert("RGB")
                pixels = np.asarray(img).reshape(-1, 3)
                non_white = float(np.mean(np.any(pixels < 245, axis=1)))
                colours = len(np.unique(pixels[::7], axis=0))
                tally.check(name, "browser: screenshot not blank", non_white > 0.02 and colours >= 16,
                            f"{non_white:.1%} non-white, {colours} colours")
                tally.check(name, "browser: no request made by the page", not urls, str(urls))
                dom, _ = chromium_run(args.chromium, out / "report.html", work, dump_dom=True)
                dparser = ReportParser()
                dparser.feed(dom)
                tally.check(name, "browser DOM: requirement table present", len(dparser.cells) > 0)
                tally.check(name, "browser DOM: every figure present with its svg",
                            dparser.figures_with_svg == {f"fig-{f}" for f in FIGURES}, str(sorted(dparser.figures_with_svg)))
        tally.check("specs", "a spec without a ζ-line crossing is among them", crossing_seen)
        # The committed example (README) has the files and keys a fresh run writes, so it cannot rot.
        example = pathlib.Path(args.source_dir, "results", "conveyor_speed")
        fresh = work / "conveyor_speed"
        if fresh.exists():
            def listing(root):
                return sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_file())
            tally.check("example", "results/conveyor_speed holds the files a fresh run writes",
                        listing(example) == listing(fresh), f"{listing(example)} vs {listing(fresh)}")

            def keys(v, depth=3):
                if isinstance(v, dict) and depth:
                    return {k: keys(x, depth - 1) for k, x in v.items()}
                return None
            old = json.loads((example / "result.json").read_text())
            new = json.loads((fresh / "result.json").read_text())
            tally.check("example", "results/conveyor_speed/result.json has the current keys", keys(old) == keys(new))
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
