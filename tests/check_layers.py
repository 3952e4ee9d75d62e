#!/usr/bin/env python3
"""The architecture's rules, checked on the source tree (DEVELOPERS.md, "Architecture"):

  1. Every source and public header sits in a layer folder: src/<layer>/, include/specloop/<layer>/.
  2. A file (and a unit test in tests/<layer>/) includes only its own layer and the layers before it, in the order
     core < sim < spec < fit < design < output < sweep < cli. A new back edge fails with the file, the
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

LAYERS = ["core", "sim", "spec", "fit", "design", "output", "sweep", "cli"]
RANK = {name: i for i, name in enumerate(LAYERS)}
MAX_FILE_LINES = 600
MAX_FUNCTION_LINES = 150
# path (relative to the source dir) or "path:function" → why it may be longer.
SIZE_EXCEPTIONS = {
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


def test_files(root):
    """The unit tests, tests/<layer>/test_*.cpp: held to the include order, not to the sizes."""
    for layer in LAYERS:
        yield from ((layer, p) for p in sorted((root / "tests" / layer).glob("*.cpp")))


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


def check(root, exceptions):
    """(problems, layer edges, sizes) of the tree at `root`."""
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
        if count > MAX_FILE_LINES and rel not in exceptions:
            problems.append(f"{rel}: {count} lines (at most {MAX_FILE_LINES} unless listed in SIZE_EXCEPTIONS)")
        for name, start, length in functions(path):
            sizes.append((length, f"{rel}:{start}", name))
            if length > MAX_FUNCTION_LINES and f"{rel}:{name}" not in exceptions:
                problems.append(f"{rel}:{start}: {name} is {length} lines (at most {MAX_FUNCTION_LINES} unless listed)")
    for layer, path in test_files(root):
        rel = path.relative_to(root).as_posix()
        for number, line in enumerate(path.read_text().split("\n"), 1):
            m = INCLUDE.match(line)
            target = layer_of_include(m.group(1)) if m else None
            if target is not None and RANK[target] > RANK[layer]:
                problems.append(f"{rel}:{number}: a test of the {layer} layer includes \"{m.group(1)}\" of the "
                                f"later {target} layer (move the test to tests/{target}/)")
    loose = sorted(p.name for p in (root / "tests").glob("test_*.cpp")) if (root / "tests").is_dir() else []
    problems += [f"tests/{name}: a unit test outside the layer folders tests/<layer>/" for name in loose]
    return problems, edges, sizes


def self_test():
    """The checker must catch what it is for: a back edge, a file outside the layers, a long file
    and a long function; and must pass a clean tree (method bodies inside a class, lambdas)."""
    import tempfile
    with tempfile.TemporaryDirectory() as tmp:
        root = pathlib.Path(tmp)

        def write(rel, text):
            (root / rel).parent.mkdir(parents=True, exist_ok=True)
            (root / rel).write_text(text)

        body = "".join(f"  x += {i};\n" for i in range(120))
        write("include/specloop/core/a.hpp", "#pragma once\n")
        half = "".join(f"  x += {i};\n" for i in range(60))
        method = "  int f(int x) const {\n" + half + "    return [&](int y) {\n" + half + "    return y; }(x);\n  }\n"
        # A 250-line class of two 124-line methods (each with a lambda inside): nothing to report.
        write("src/core/a.cpp", '#include "specloop/core/a.hpp"\nclass A {\n public:\n' + method
              + method.replace("int f(", "int g(") + "};\n")
        clean, _, _ = check(root, {})
        assert clean == [], clean
        write("src/sim/b.cpp", '#include "specloop/design/d.hpp"\n#include "specloop/core/a.hpp"\n')
        write("src/loose.cpp", "int z;\n")
        write("src/spec/long.cpp", "int f(int x) {\n" + body * 2 + "  return x;\n}\n" + "\n" * 400)
        write("tests/sim/test_b.cpp", '#include "specloop/output/r.hpp"\n')
        problems, _, _ = check(root, {})
        expect = ["src/sim/b.cpp:1: the sim layer includes", "src/loose.cpp: not in a layer folder",
                  "src/spec/long.cpp: 643 lines", "src/spec/long.cpp:1: f is 243 lines",
                  "tests/sim/test_b.cpp:1: a test of the sim layer includes"]
        for e in expect:
            assert any(p.startswith(e) for p in problems), (e, problems)
        assert len(problems) == len(expect), problems
        excused, _, _ = check(root, {"src/spec/long.cpp": "test", "src/spec/long.cpp:f": "test"})
        assert len(excused) == 3, excused
    print("check_layers: self-test passed (back edges in src and tests, loose file, long file, long function caught)")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--source-dir", default=str(pathlib.Path(__file__).resolve().parents[1]))
    ap.add_argument("--report", action="store_true")
    args, _ = ap.parse_known_args()
    self_test()
    problems, edges, sizes = check(pathlib.Path(args.source_dir), SIZE_EXCEPTIONS)
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
