#!/usr/bin/env python3
"""The architecture's rules, checked on the source tree (DEVELOPERS.md, "Architecture"):

  1. Every source and public header sits in a layer folder: src/<layer>/, include/specloop/<layer>/.
  2. A file includes only its own layer and the layers before it, in the order
     core < sim < spec < design < output < sweep < cli. A new back edge fails with the file, the
     line and both layers named.
  3. No file over 600 lines and no function over 150 lines, except those listed in SIZE_EXCEPTIONS
     below with the reason (the guide repeats them).

Usage: tests/check_layers.py [--source-dir DIR] [--report]   (--report prints the largest files and
functions and the include graph's layer edges, and checks nothing)
"""
import argparse
import pathlib
import re
import sys

LAYERS = ["core", "sim", "spec", "design", "output", "sweep", "cli"]
RANK = {name: i for i, name in enumerate(LAYERS)}
MAX_FILE_LINES = 600
MAX_FUNCTION_LINES = 150
# path (relative to the source dir) or "path:function" → why it may be longer.
SIZE_EXCEPTIONS = {
    "src/design/design.cpp": "being split (issue 13)",
    "src/design/design_run.cpp:run_design": "being split (issue 13)",
    "src/output/report.cpp": "being split (issue 13)",
    "src/output/report.cpp:sections": "being split (issue 13)",
    "src/sim/nonlinear.cpp": "being split (issue 13)",
    "src/sim/nonlinear.cpp:measure": "being split (issue 13)",
    "src/sim/nonlinear.cpp:simulate_nonlinear": "being split (issue 13)",
    "src/sim/response.cpp": "being split (issue 13)",
    "src/sim/response.cpp:StepSimulator::simulate": "being split (issue 13)",
    "src/sim/sampled_loop.cpp:SampledStepSimulator::simulate": "being split (issue 13)",
    "src/spec/spec.cpp": "being split (issue 13)",
    "src/spec/spec.cpp:read_nonlinear_form": "being split (issue 13)",
}

INCLUDE = re.compile(r'^\s*#\s*include\s+"([^"]+)"')


def layer_of_include(target):
    """The layer an include names: "specloop/<layer>/x.hpp" or the private "<layer>/x.hpp"."""
    parts = target.split("/")
    if parts[0] == "specloop" and len(parts) >= 3:
        return parts[1]
    if len(parts) >= 2 and parts[0] in RANK:
        return parts[0]
    return None


def files(root):
    for base in (root / "src", root / "include" / "specloop"):
        for path in sorted(base.rglob("*")):
            if path.suffix in (".cpp", ".hpp"):
                yield base, path


def strip_code(text):
    """Comments, string and character literals blanked out (newlines kept), so braces count right."""
    out = []
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if text.startswith("//", i):
            j = text.find("\n", i)
            j = n if j < 0 else j
            i = j
        elif text.startswith("/*", i):
            j = text.find("*/", i + 2)
            j = n if j < 0 else j + 2
            out.append("\n" * text.count("\n", i, j))
            i = j
        elif text.startswith('R"', i):
            m = re.match(r'R"([^(]*)\(', text[i:])
            end = text.find(")" + m.group(1) + '"', i) if m else -1
            j = n if end < 0 else end + len(m.group(1)) + 2
            out.append('""' + "\n" * text.count("\n", i, j))
            i = j
        elif c in "\"'":
            j = i + 1
            while j < n and text[j] != c:
                j += 2 if text[j] == "\\" else 1
            out.append(c + c)
            i = j + 1
        else:
            out.append(c)
            i += 1
    return "".join(out)


OPENING = re.compile(r"\)\s*(const\s*)?(noexcept\s*)?(override\s*)?(->\s*[\w:<>,\s*&]+)?\{\s*$")
NAME = re.compile(r"([~\w:]+)\s*\(")


def functions(path):
    """(name, first line, line count) of every function body not nested in another one."""
    lines = strip_code(path.read_text()).split("\n")
    found = []
    depth = 0
    inside = None  # (name, start line, depth before its brace)
    signature = []  # the lines since the last statement, block or declaration ended
    for number, line in enumerate(lines, 1):
        stripped = line.strip()
        if inside is None and OPENING.search(line) and not re.match(r"(if|for|while|switch|catch|else|do)\b|\}",
                                                                     stripped):
            names = [m for m in NAME.findall(" ".join(signature + [line]))
                     if m not in ("if", "for", "while", "switch", "catch", "decltype", "sizeof", "alignof")]
            if names:
                inside = (names[0], number, depth)
        depth += line.count("{") - line.count("}")
        if inside is not None and depth <= inside[2]:
            found.append((inside[0], inside[1], number - inside[1] + 1))
            inside = None
        if not stripped or stripped.startswith("#") or stripped.endswith((";", "{", "}")) or \
                re.match(r"(public|private|protected)\s*:$", stripped):
            signature = []
        else:
            signature.append(line)
    return found


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--source-dir", default=str(pathlib.Path(__file__).resolve().parents[1]))
    ap.add_argument("--report", action="store_true")
    args, _ = ap.parse_known_args()
    root = pathlib.Path(args.source_dir)
    problems = []
    edges = {}
    sizes = []
    for base, path in files(root):
        rel = path.relative_to(root).as_posix()
        inner = path.relative_to(base).parts
        if len(inner) < 2 or inner[0] not in RANK:
            problems.append(f"{rel}: not in a layer folder ({', '.join(LAYERS)})")
            continue
        layer = inner[0]
        for number, line in enumerate(path.read_text().split("\n"), 1):
            m = INCLUDE.match(line)
            if not m:
                continue
            target = layer_of_include(m.group(1))
            if target is None:
                problems.append(f"{rel}:{number}: #include \"{m.group(1)}\" names no layer")
                continue
            edges[(layer, target)] = edges.get((layer, target), 0) + 1
            if RANK[target] > RANK[layer]:
                problems.append(f"{rel}:{number}: the {layer} layer includes \"{m.group(1)}\" of the later "
                                f"{target} layer (order: {' < '.join(LAYERS)})")
        count = path.read_text().count("\n")
        sizes.append((count, rel, None))
        if count > MAX_FILE_LINES and rel not in SIZE_EXCEPTIONS:
            problems.append(f"{rel}: {count} lines (at most {MAX_FILE_LINES} unless listed in SIZE_EXCEPTIONS)")
        for name, start, length in functions(path):
            sizes.append((length, f"{rel}:{start}", name))
            if length > MAX_FUNCTION_LINES and f"{rel}:{name}" not in SIZE_EXCEPTIONS:
                problems.append(f"{rel}:{start}: {name} is {length} lines (at most {MAX_FUNCTION_LINES} unless listed)")
    if args.report:
        print("layer edges (from → to: includes):")
        for (a, b), k in sorted(edges.items(), key=lambda e: (RANK[e[0][0]], RANK[e[0][1]])):
            print(f"  {a:7} → {b:7} {k}{'   BACK EDGE' if RANK[b] > RANK[a] else ''}")
        print("largest files:")
        for count, rel, _ in sorted((s for s in sizes if s[2] is None), reverse=True)[:15]:
            print(f"  {count:5}  {rel}")
        print("longest functions:")
        for count, rel, name in sorted((s for s in sizes if s[2] is not None), reverse=True)[:25]:
            print(f"  {count:5}  {rel}  {name}")
        return 0
    for p in problems:
        print(p)
    print(f"check_layers: {len(problems)} problem(s)" if problems else "check_layers: the tree keeps its layers")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
