"""The package layout: imports flow one way, from the command line down to
the data, and no module imports itself back through others.

    cli -> report -> analysis -> engine -> models -> io -> density -> errors, progress

A module may import modules of its own stage or of any lower stage, never
of a higher one, and the import graph (every import statement, also those
inside functions) has no cycle. ``signfree/__init__.py`` (the lazy public
API) and ``signfree/__main__.py`` stand above every stage. (Common practice
for layered packages; the rule itself is this project's.)
"""
import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "signfree"
STAGES = ["errors", "progress", "density", "scenarios", "io", "models", "engine", "analysis", "report",
          "cli"]
RANK = {"errors": 0, "progress": 0, "density": 1, "scenarios": 1, "io": 2, "models": 3, "engine": 4,
        "analysis": 5, "report": 6, "cli": 7}
MAX_LINES = 550


def modules():
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def stage(name):
    parts = name.split(".")
    return parts[1] if len(parts) > 1 else None


def imports_of(path, name, known):
    """Every signfree module named by an import statement of the file."""
    tree = ast.parse(path.read_text())
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    found = set()
    for node in ast.walk(tree):
        targets = []
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                up = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join(up + ([base] if base else []))
            # "from pkg import mod" names the module; "from mod import name" the module
            targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in known else base
                       for a in node.names]
        for t in targets:
            if t in known and t != name:
                found.add(t)
    return found


@pytest.fixture(scope="module")
def graph():
    known = modules()
    return {name: imports_of(path, name, known) for name, path in known.items()}


def test_every_module_belongs_to_a_stage():
    for name in modules():
        if name in ("signfree", "signfree.__main__"):
            continue
        assert stage(name) in RANK, f"{name} is in no stage of {STAGES}"


def test_imports_flow_from_the_command_line_down(graph):
    upward = []
    for name, targets in graph.items():
        if name in ("signfree", "signfree.__main__"):
            continue
        for t in targets:
            if t == "signfree" or RANK[stage(t)] > RANK[stage(name)]:
                upward.append(f"{name} imports {t}")
    assert not upward, "imports against the direction:\n" + "\n".join(sorted(upward))


def test_the_import_graph_has_no_cycle(graph):
    # a package's __init__ re-exporting its own modules is not an edge back
    edges = {n: {t for t in ts if not n.startswith(t + ".")} for n, ts in graph.items()}
    state, stack, cycles = {}, [], []

    def visit(n):
        state[n] = 1
        stack.append(n)
        for t in edges.get(n, ()):
            if state.get(t) == 1:
                cycles.append(stack[stack.index(t):] + [t])
            elif t not in state:
                visit(t)
        stack.pop()
        state[n] = 2

    for n in sorted(edges):
        if n not in state:
            visit(n)
    assert not cycles, "import cycles:\n" + "\n".join(" -> ".join(c) for c in cycles)


def test_no_library_module_imports_the_command_line(graph):
    bad = [f"{n} imports {t}" for n, ts in graph.items() for t in ts
           if stage(t) == "cli" and stage(n) != "cli" and n != "signfree.__main__"]
    assert not bad, "\n".join(bad)


def test_modules_stay_small():
    long = {name: len(path.read_text().splitlines()) for name, path in modules().items()}
    assert not {n: c for n, c in long.items() if c > MAX_LINES}
