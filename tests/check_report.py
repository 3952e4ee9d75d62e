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
  time axis    the step figure's x range (step.gp) reaches every plotted response's last sample
               (its CSV) and every settling time result.json reports for a plotted response
               (linear, and the recommended design on the nonlinear loop).
  legends      in each figure's SVG, every legend box (gnuplot's closed black rectangle) lies
               outside every plot area (the closed border rectangle), and no plotted point, curve
               vertex or point of a curve's segments (every 2 px) inside a plot area falls in a
               legend box.
  labels       no two texts of a figure overlap (boxes estimated from position, anchor, font size
               and length: 0.55 em per character), and no plotted curve or point crosses a label
               written inside a plot area; the margins table under the frequency figure
               has one row per design drawn there, each equal to result.json's margins.
  controller   the recommended-controller box states where the derivative acts, the set-point
               weight, the action and the sample time, each equal to the spec (read with tomllib)
               or its default.
  units        the spec's [units] (or the defaults) name the figures' axes, the requirement
               table's time and effort cells, and result.json's `units`.
  modes        each design's signed mode contributions on the page equal result.json's, which
               add up to 100 % (contribution_sum).
  s-plane      the dominant pair is not drawn as open squares; for a delayed plant (a variant spec
               with plant.delay, a sampled controller, derivative on the measurement and a
               set-point weight) the points marked as Padé poles and zeros are the roots of the
               [3/3] Padé approximant of e^(−sτ) from scipy.interpolate.pade, and the legend names
               them.
The last line is "N passed, M failed"; exit status 1 on any failure.
"""
import argparse
import csv
import html.parser
import json
import math
import pathlib
import re
import shutil
import subprocess
import sys
import tempfile
import tomllib

import numpy as np
from PIL import Image
from scipy.interpolate import CubicSpline, pade
from scipy.optimize import brentq

from reference_common import Tally

FIGURES = ["step", "effort", "splane", "frequency"]
LOAD_KEYS = ("load_iae_max", "load_peak_max", "load_recovery_time_max")


def figures_of(result):
    """The figures a report has: FIGURES, the envelope with [uncertainty], the load response where
    the spec asks for it (a load requirement or objective = "load_iae"; README, "Regulators")."""
    spec = result["spec"]
    load = any(spec["requirements"].get(k) is not None for k in LOAD_KEYS) or spec["search"]["objective"] == "load_iae"
    return FIGURES + (["envelope"] if result.get("robust") else []) + (["load"] if load else [])
PEAK_TIE = 1e-4  # README "Metric definitions": humps within this × |y∞| of the highest are one peak


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


class PageParser(html.parser.HTMLParser):
    """Every table by id as rows of (attrs, text) cells, and the <li class="modes"> lines by design."""

    def __init__(self):
        super().__init__()
        self.tables = {}
        self.table = None
        self.row = None
        self.cell = None
        self.modes = {}
        self.li = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table":
            self.table = a.get("id")
            self.tables[self.table] = []
        elif tag == "tr" and self.table is not None:
            self.row = []
            self.tables[self.table].append(self.row)
        elif tag in ("td", "th") and self.row is not None:
            self.cell = [a, ""]
        elif tag == "li" and a.get("class") == "modes":
            self.li = [a.get("data-design"), ""]

    def handle_endtag(self, tag):
        if tag == "table":
            self.table = None
        elif tag in ("td", "th") and self.cell is not None:
            self.row.append(tuple(self.cell))
            self.cell = None
        elif tag == "li" and self.li is not None:
            # the contributions' line; a design's "Modes cancel: …" line (same class) follows it
            if self.li[1].startswith("Closed-loop modes"):
                self.modes[self.li[0]] = self.li[1]
            self.li = None

    def handle_data(self, data):
        if self.cell is not None:
            self.cell[1] += data
        if self.li is not None:
            self.li[1] += data


NUMBER = r"[-+]?\d+(?:\.\d+)?"


def svg_rectangles(svg, stroke):
    """Closed axis-parallel rectangles drawn with `stroke`: (x0, y0, x1, y1)."""
    out = set()
    for m in re.finditer(r"<path stroke='" + re.escape(stroke) + r"'\s+d='([^']*Z)\s*'", svg):
        pts = [(float(x), float(y)) for x, y in re.findall(f"({NUMBER}),({NUMBER})", m.group(1))]
        xs, ys = [p[0] for p in pts], [p[1] for p in pts]
        if len(pts) == 5 and len(set(round(x, 2) for x in xs)) == 2 and len(set(round(y, 2) for y in ys)) == 2:
            out.add((min(xs), min(ys), max(xs), max(ys)))
    return sorted(out)


def svg_plot_vertices(svg):
    """Per plotted series (from one gnuplot_plot_N group to the next): a list of paths, each a list
    of (x, y) vertices; points drawn as symbols are one-vertex paths."""
    groups = []
    for body in svg.split('<g id="gnuplot_plot_')[1:]:
        paths = [[(float(x), float(y)) for x, y in re.findall(f"({NUMBER}),({NUMBER})", sub)]
                 for d in re.findall(r"\sd='([^']*)'", body) for sub in d.split("M") if sub.strip()]
        paths += [[(float(x), float(y))]
                  for x, y in re.findall(rf"<use xlink:href='#gpPt\d+' transform='translate\(({NUMBER}),({NUMBER})\)", body)]
        groups.append(paths)
    return groups


def svg_texts(svg):
    """Estimated boxes (x0, y0, x1, y1, text) of every text: 0.55 em per character, one em high."""
    boxes = set()
    for m in re.finditer(r'<g transform="translate\(([-\d.]+),([-\d.]+)\)( rotate\(270\))?"[^>]*font-size="([\d.]+)"\s+'
                         r'text-anchor="(\w+)">\s*<text>(.*?)</text>', svg, re.S):
        x, y, rotated, size, anchor = float(m.group(1)), float(m.group(2)), bool(m.group(3)), float(m.group(4)), m.group(5)
        text = html.unescape(re.sub(r"<[^>]+>", "", m.group(6))).strip()
        if not text:
            continue
        width, height = 0.55 * size * len(text), size
        start = {"start": 0.0, "middle": -width / 2, "end": -width}[anchor]
        if rotated:
            boxes.add((x - 0.8 * height, y - start - width, x + 0.2 * height, y - start, text))
        else:
            boxes.add((x + start, y - 0.8 * height, x + start + width, y + 0.2 * height, text))
    return sorted(boxes)


def overlap(a, b, slack=0.5):
    return a[0] + slack < b[2] and b[0] + slack < a[2] and a[1] + slack < b[3] and b[1] + slack < a[3]


def inside(p, r, slack=0.5):
    return r[0] + slack < p[0] < r[2] - slack and r[1] + slack < p[1] < r[3] - slack


def check_figures(tally, name, out, figures=FIGURES):
    """Legends outside the plot areas and off the curves; no two texts overlapping."""
    for fig in figures:
        svg = (out / "plots" / f"{fig}.svg").read_text()
        areas = svg_rectangles(svg, "rgb( 85,  85,  85)")
        keys = svg_rectangles(svg, "black")
        tally.check(name, f"{fig}: plot area(s) and legend box(es) found", areas and keys and len(keys) == len(areas),
                    f"{len(areas)} areas, {len(keys)} legends")
        clash = [(k, a) for k in keys for a in areas if overlap(k, a)]
        tally.check(name, f"{fig}: every legend lies outside every plot area", not clash, str(clash[:2]))
        texts = svg_texts(svg)
        # Labels written inside a plot area (the limits' names), as boxes.
        labels = [t for t in texts if any(inside((t[0], t[1]), a) and inside((t[2], t[3]), a) for a in areas)]
        covered, under_label = [], []
        for paths in svg_plot_vertices(svg):
            for path in paths:
                if any(all(inside(p, k, -1.0) for p in path) for k in keys):
                    continue  # a legend's own sample line or symbol
                # Every vertex, and points every 2 px along each segment (a line may cross a box).
                along = list(path)
                for (x0, y0), (x1, y1) in zip(path, path[1:]):
                    n = int(math.hypot(x1 - x0, y1 - y0) / 2.0)
                    along += [(x0 + (x1 - x0) * i / n, y0 + (y1 - y0) * i / n) for i in range(1, n)]
                covered += [p for p in along for k in keys if inside(p, k) and any(inside(p, a, -1.0) for a in areas)]
                under_label += [(t[4], p) for p in along for t in labels if inside(p, t, 1.0)]
        tally.check(name, f"{fig}: no plotted point lies under a legend", not covered, str(covered[:3]))
        tally.check(name, f"{fig}: no plotted curve or point crosses a label inside the plot ({len(labels)} labels)",
                    not under_label, str(under_label[:3]))
        clashes = [(a[4], b[4]) for i, a in enumerate(texts) for b in texts[i + 1:] if overlap(a, b) and a[4] != b[4]]
        tally.check(name, f"{fig}: no two texts overlap ({len(texts)} texts)", texts and not clashes, str(clashes[:3]))


def check_time_axis(tally, name, out, result):
    """The step figure's x range covers every plotted response's last sample and reported settling time."""
    script = (out / "plots" / "step.gp").read_text()
    m = re.search(rf"set xrange \[0:({NUMBER}(?:e[-+]?\d+)?)\]", script)
    if not tally.check(name, "step: a fixed x range", m is not None):
        return
    x_max = float(m.group(1))
    plotted = sorted(set(re.findall(r"'\.\./series/(step_[a-z_]+\.csv)'", script)))
    ends, settled = {}, {}
    for f in plotted:
        _, data = read_csv(out / "series" / f)
        ends[f] = data[-1, 0]
        design = f[len("step_"):-len(".csv")]
        nonlinear = design.endswith("_nonlinear")
        d = result["designs"][design.removesuffix("_nonlinear")]
        metrics = (d["nonlinear"] or {}).get("simulated") if nonlinear else d["simulated"]
        if metrics and metrics.get("settling_time") is not None:
            settled[f] = metrics["settling_time"]
    tally.check(name, "step: the figure plots the recommended design on both loops",
                any(f.endswith("_nonlinear.csv") for f in plotted) and len(plotted) >= 3, str(plotted))
    late = {f: t for f, t in ends.items() if t > x_max * (1 + 1e-9)}
    tally.check(name, "step: the x range reaches every plotted response's last sample", not late, f"x ≤ {x_max}: {late}")
    unseen = {f: t for f, t in settled.items() if t > x_max}
    tally.check(name, "step: the x range covers every reported settling time of a plotted response", not unseen,
                f"x ≤ {x_max}: {unseen}")
    effort = (out / "plots" / "effort.gp").read_text()
    tally.check(name, "effort: the same time axis", f"set xrange [0:{m.group(1)}]" in effort)


def check_page_content(tally, name, out, result, page, spec_toml, expect_delay=False):
    """The controller box, the margins table, units, the mode contributions, the s-plane marks."""
    parser = PageParser()
    parser.feed(page)
    controller = spec_toml.get("controller", {})
    units = {"output": "output units", "input": "input units", "time": "s"} | spec_toml.get("units", {})
    # The recommended-controller box.
    box = {c[0].get("data-field"): c[0].get("data-value") for row in parser.tables.get("controller-box", [])
           for c in row if "data-value" in c[0]}
    best = "optimized" if result["designs"].get("optimized") else "classical"
    structure = result["designs"][best]["controller"]["structure"]
    has_d = structure in ("pd", "pid", "lead") and (result["designs"][best]["controller"]["parallel"] or {}).get("kd", 0) != 0
    want = {"design": best,
            "derivative_on": controller.get("derivative_on", "error") if has_d else "none",
            "setpoint_weight": repr(float(controller.get("setpoint_weight", 1.0)))
            if result["designs"][best]["controller"]["parallel"] else "none",
            "action": "direct",
            "sample_time": repr(float(controller["sample_time"])) if "sample_time" in controller else "continuous"}
    got = {k: box.get(k) for k in want}
    if got.get("setpoint_weight") not in (None, "none"):
        got["setpoint_weight"] = repr(float(got["setpoint_weight"]))
    if got.get("sample_time") not in (None, "continuous"):
        got["sample_time"] = repr(float(got["sample_time"]))
    tally.check(name, "controller box: design, derivative, set-point weight, action, sample time as specified", got == want,
                f"{got} vs {want}")
    # The published rules: one row per rule of result.json, applied exactly when its design
    # exists, a left-out rule showing its reason (never silently absent).
    rule_rows = [r for r in parser.tables.get("rules", [])[1:] if r]
    shown = {r[0][0].get("data-rule"): (r[0][0].get("data-applied"), r[3][1]) for r in rule_rows}
    want_rules = result.get("rules", {})
    ok_rules = set(shown) == set(want_rules) and all(
        (shown[k][0] == "true") == v["applied"] == (k in result["designs"])
        and (v["applied"] or v["reason"] in shown[k][1])
        for k, v in want_rules.items())
    tally.check(name, "published rules: each rule of result.json in the report, applied or with its reason", ok_rules,
                f"{shown} vs {json.dumps(want_rules)[:300]}")
    # Margins under the frequency figure: one row per design drawn there, equal to result.json.
    rows = parser.tables.get("margins", [])[1:]
    drawn = sorted(f.stem[len("frequency_"):] for f in (out / "series").glob("frequency_*.csv"))
    ok, detail = [r[0][1] for r in rows] == [d for d in ("classical", "optimized") if d in drawn], ""
    for r in rows:
        m = result["designs"][r[0][1]]["margins"]
        for attrs, text in r[1:]:
            v, want_v = attrs["data-value"], m[attrs["data-field"]]
            if want_v == "infinite" or want_v is None:
                ok &= v == "none"
            elif v == "none" or float(v) != want_v:
                ok, detail = False, f"{r[0][1]} {attrs['data-field']}: {v} vs {want_v}"
    tally.check(name, "margins table: one row per drawn design, values equal result.json", ok and rows, detail)
    tally.check(name, "margins table: the designs' rows differ", len({tuple(c[1] for c in r[1:]) for r in rows}) == len(rows))
    # Units: axes, table cells, result.json.
    svg = {f: (out / "plots" / f"{f}.svg").read_text() for f in FIGURES}
    labels = {"step": [f"y ({units['output']})", f"time ({units['time']})"],
              "effort": [f"u ({units['input']})", f"time ({units['time']})"],
              "splane": [f"real (1/{units['time']})", f"imaginary (rad/{units['time']})"],
              "frequency": [f"ω (rad/{units['time']})"]}
    missing = [(f, l) for f, ls in labels.items() for l in ls if f">{html.escape(l, quote=False)}<" not in svg[f]]
    tally.check(name, "units: the figures' axes name the spec's units", not missing, str(missing))
    tally.check(name, "units: result.json carries them", result.get("units") == units, f"{result.get('units')} vs {units}")
    unit_of = {"peak_time_max": units["time"], "settling_time_max": units["time"], "rise_time_max": units["time"],
               "effort_max": units["input"]}
    bad = []
    for row in parser.tables.get("requirements", []):
        key = row[0][0].get("data-key") if row else None
        if key in unit_of:
            # "none" (with its ✗ when the design has no value: an unstable hand design) has no unit.
            bad += [c[1] for c in row[1:] if "data-slack" not in c[0] and c[1].split(" ")[0] != "none"
                    and f" {unit_of[key]}" not in c[1]]
    tally.check(name, "units: the requirement table's time and effort cells carry them", not bad, str(bad[:3]))
    # Signed mode contributions: on the page as in result.json, adding up to 100 %.
    worst, sums, seen = 0.0, [], 0
    for design, d in result["designs"].items():
        dom = d.get("dominance")
        if not dom:
            continue
        seen += 1
        line = parser.modes.get(design, "")
        shown = [float(v) for v in re.findall(r": ([-+]\d+\.\d) %", line)]
        want_c = [round(100 * m["contribution"], 1) for m in dom["modes"] if m["contribution"] is not None]
        worst = max([worst] + [abs(a - b) for a, b in zip(shown, want_c)] + ([99.0] if len(shown) != len(want_c) else []))
        total = sum(m["contribution"] for m in dom["modes"] if m["contribution"] is not None)
        sums.append(abs(total - dom["contribution_sum"]) + abs(dom["contribution_sum"] - 1.0))
    tally.check(name, "modes: the page shows result.json's signed contributions", seen and worst <= 0.051, f"worst {worst}")
    tally.check(name, "modes: the contributions add up to 100 %", sums and max(sums) <= 1e-6, f"worst {max(sums or [0])}")
    # The s-plane: the dominant pair's mark, the Padé poles and zeros of a delayed plant.
    script = (out / "plots" / "splane.gp").read_text()
    dom_line = next((l for l in script.split(", \\") if "'dominant_pair'" in l), "")
    ok = bool(dom_line) and " pt 4 " not in dom_line
    tally.check(name, "s-plane: the dominant pair is not drawn as open squares", ok, "" if ok else dom_line)
    points = list(csv.reader(open(out / "series" / "splane_points.csv")))
    rx = re.search(rf"set xrange \[({NUMBER}(?:e[-+]?\d+)?):({NUMBER}(?:e[-+]?\d+)?)\]", script)
    ry = re.search(rf"set yrange \[({NUMBER}(?:e[-+]?\d+)?):({NUMBER}(?:e[-+]?\d+)?)\]", script)
    outside_view = [r for r in points[1:] if not r[0].startswith("damping_line")
                    and not (float(rx.group(1)) <= float(r[2]) <= float(rx.group(2))
                             and float(ry.group(1)) <= float(r[3]) <= float(ry.group(2)))]
    tally.check(name, "s-plane: every marked pole and zero is in view", rx and ry and not outside_view, str(outside_view[:3]))
    marked = {kind: [complex(float(r[2]), float(r[3])) for r in points[1:] if r[0] == kind]
              for kind in ("delay_approximant_pole", "delay_approximant_zero")}
    tau = float(spec_toml.get("plant", {}).get("delay", 0.0))
    if not expect_delay:
        tally.check(name, "s-plane: no Padé marks without a delay", not any(marked.values()) or tau > 0)
        return
    # e^{-x} ≈ p(x)/q(x), [3/3] from its Taylor coefficients (SciPy); s = x/τ.
    p, q = pade([(-1) ** k / math.factorial(k) for k in range(7)], 3, 3)
    for kind, poly in (("delay_approximant_pole", q), ("delay_approximant_zero", p)):
        want_r = sorted(np.roots(poly.coeffs) / tau, key=lambda z: (z.real, z.imag))
        got_r = sorted(marked[kind], key=lambda z: (z.real, z.imag))
        err = max((abs(a - b) / abs(b) for a, b in zip(got_r, want_r)), default=1.0) if len(got_r) == len(want_r) else 1.0
        tally.check(name, f"s-plane: the {kind.split('_')[-1]}s marked as Padé are the [3/3] Padé approximant's "
                    "(scipy.interpolate.pade)", err <= 1e-6, f"{got_r} vs {want_r}")
    tally.check(name, "s-plane: the legend names the Padé poles and zeros",
                ">Padé poles (order-3 stand-in for the delay)<" in svg["splane"]
                and ">Padé zeros (order-3 stand-in for the delay)<" in svg["splane"])


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
    d = s.derivative()

    def refined(k):
        lo, hi = max(k - 1, 0), min(k + 1, len(fine) - 1)
        return brentq(d, fine[lo], fine[hi]) if d(fine[lo]) * d(fine[hi]) < 0 else fine[k]
    k = int(np.argmax(yf))
    top = refined(k)
    overshoot = max(0.0, (s(top) - y_inf) / abs(y_inf) * 100.0)
    # README "Metric definitions": the peak time is the LATEST hump within PEAK_TIE·|y∞| of the
    # highest (two humps of nearly equal height read as the later one).
    tp = top
    inner = np.arange(1, len(yf) - 1)
    humps = inner[(yf[inner] >= yf[inner - 1]) & (yf[inner] >= yf[inner + 1]) & (inner > k)
                  & ((yf[inner] - s(top)) * np.sign(y_inf) >= -2 * PEAK_TIE * abs(y_inf))]
    for j in humps:
        tj = refined(int(j))
        if (s(tj) - s(top)) * np.sign(y_inf) >= -PEAK_TIE * abs(y_inf) and tj > tp:
            tp = tj

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
    tally.check("setup", "the demo specs are there", len(specs) >= 5, str(len(specs)))
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
        # A variant of the conveyor: a transport delay (Padé marks), a sampled controller, derivative
        # on the measurement, a set-point weight, and units of its own (minutes as the time unit:
        # labels only, so every time of the spec is read in minutes).
        variant = work / "conveyor_variant.toml"
        text = pathlib.Path(args.source_dir, "specs", "conveyor_speed.toml").read_text()
        text = text.replace("delay = 0.0", "delay = 0.02").replace("[units]", "[units_old]")
        text = text.replace("[controller]\n", "[controller]\nsample_time = 0.004\nderivative_on = \"measurement\"\n"
                            "setpoint_weight = 0.6\n")
        text = text[:text.index("[units_old]")] + '[units]\noutput = "belt m/min"\ninput = "% drive"\ntime = "min"\n'
        variant.write_text(text)
        for spec in specs + [variant]:
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
            # A robust spec ([uncertainty]) adds the envelope figure (every plant's step response), a
            # regulator spec the load response (with load_peak_max drawn).
            figures = figures_of(result)
            if "load" in figures:
                gp = (out / "plots" / "load.gp").read_text()
                limit = result["spec"]["requirements"]["load_peak_max"]
                tally.check(name, "load figure: load_peak_max drawn", limit is None or "load\\_peak\\_max" in gp)
                tally.check(name, "load figure: one series per design", len(list((out / "series").glob("load_*.csv"))) ==
                            sum(1 for d in result["designs"].values() if d["status"] == "ok"))
            tally.check(name, f"html: the {len(figures)} figures inline", parser.figures_with_svg == {f"fig-{f}" for f in figures},
                        str(sorted(parser.figures_with_svg)))
            tally.check(name, "safety caution on both pages", "not a verified machine" in page and "not a verified machine" in md)
            tally.check(name, "markdown links every figure", all(f"plots/{f}.svg" in md for f in figures))
            check_table(tally, name, parser, result)
            check_series(tally, name, out, result)
            check_locus(tally, name, out, result)
            check_figures(tally, name, out, [f for f in figures if f != "envelope"])
            check_time_axis(tally, name, out, result)
            spec_toml = tomllib.loads(spec.read_text())
            check_page_content(tally, name, out, result, page, spec_toml, expect_delay=spec == variant)
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
                            dparser.figures_with_svg == {f"fig-{f}" for f in figures}, str(sorted(dparser.figures_with_svg)))
        tally.check("specs", "a spec without a ζ-line crossing is among them", crossing_seen)
        # The committed example (README) has the files and keys a fresh run writes, so it cannot rot.
        example = pathlib.Path(args.source_dir, "results", "examples", "conveyor_speed")
        fresh = work / "conveyor_speed"
        if fresh.exists():
            def listing(root):
                return sorted(str(p.relative_to(root)) for p in root.rglob("*") if p.is_file())
            tally.check("example", "results/examples/conveyor_speed holds the files a fresh run writes",
                        listing(example) == listing(fresh), f"{listing(example)} vs {listing(fresh)}")

            def keys(v, depth=3):
                if isinstance(v, dict) and depth:
                    return {k: keys(x, depth - 1) for k, x in v.items()}
                return None
            old = json.loads((example / "result.json").read_text())
            new = json.loads((fresh / "result.json").read_text())
            tally.check("example", "results/examples/conveyor_speed/result.json has the current keys", keys(old) == keys(new))
    print(f"{tally.passed} passed, {tally.failed} failed")
    return 1 if tally.failed else 0


if __name__ == "__main__":
    sys.exit(main())
