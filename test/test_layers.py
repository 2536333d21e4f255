"""The house's layers, checked on the sources: every import of every module of the package
(module level and inside functions, read with Python's own parser, ``ast``) goes to its own layer
or a lower one, the estimation core imports no ROS, bag, file-format or plotting library, and no
modules import each other in a circle.

Layer order (DESIGN.md section 5, the project's rules): core < io < sim < ros < offline <
top (cli.py, demo.py).
"""
from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = "interaction_estimator"
ROOT = Path(__file__).resolve().parents[1] / PACKAGE
LAYERS = ("core", "io", "sim", "ros", "offline", "top")
# what core/ must not import (top-level names); ROS message packages are matched by suffix
CORE_FORBIDDEN = {"rclpy", "rosbags", "mcap", "matplotlib", "yaml", "pyarrow", "polars",
                  "rosbag2_py", "launch", "launch_ros"}
ROS_PACKAGE_SUFFIXES = ("_msgs", "_srvs", "_interfaces")

# Known violations inside core/, left to the core rewrite (the lead removes each entry with the
# fix; an entry that no longer occurs fails the test, so the list cannot go stale).
KNOWN_CORE_VIOLATIONS: set[tuple[str, str]] = set()
# Known circles outside core/, left to their owner (remove the entry with the fix; a circle
# that no longer exists fails the test). None today.
KNOWN_CYCLES: list[list[str]] = []


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(ROOT.rglob("*.py")):
        parts = path.relative_to(ROOT.parent).with_suffix("").parts
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


MODULES = _modules()


def layer(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 2 and parts[1] in LAYERS else "top"


def _resolve(name: str) -> str:
    """The module a dotted name refers to: itself, or the longest module prefix (a name
    imported from a module)."""
    while name and name not in MODULES:
        name = name.rpartition(".")[0]
    return name


def imports(module: str) -> set[str]:
    """Every name ``module`` imports: package modules resolved to module names, other
    packages as their top-level name."""
    path = MODULES[module]
    is_package = path.name == "__init__.py"
    package = module if is_package else module.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
        if isinstance(node, ast.Import):
            for alias in node.names:
                found.add(alias.name)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                stem = ".".join(base + ([node.module] if node.module else []))
            else:
                stem = node.module or ""
            for alias in node.names:
                found.add(f"{stem}.{alias.name}" if f"{stem}.{alias.name}" in MODULES else stem)
    out = set()
    for name in found:
        if name == PACKAGE or name.startswith(PACKAGE + "."):
            target = _resolve(name)
            if target and target != module and target != PACKAGE:
                out.add(target)
        else:
            out.add(name.split(".")[0])
    return out


GRAPH = {m: imports(m) for m in MODULES}


def _violations() -> set[tuple[str, str]]:
    bad = set()
    for module, targets in GRAPH.items():
        mine = LAYERS.index(layer(module))
        for target in targets:
            if target in MODULES:
                if LAYERS.index(layer(target)) > mine:
                    bad.add((module, target))
            elif layer(module) == "core" and (target in CORE_FORBIDDEN
                                              or target.endswith(ROS_PACKAGE_SUFFIXES)):
                bad.add((module, target))
    return bad


def test_the_parser_sees_the_imports_it_must():
    # reference: imports written in the sources, read by hand
    assert "interaction_estimator.core.samples" in GRAPH["interaction_estimator.io.bag"]
    assert "interaction_estimator.io.cdr" in GRAPH["interaction_estimator.io.bag"]
    assert "rosbags" in GRAPH["interaction_estimator.io.cdr"]                # inside a function
    assert "interaction_estimator.ros.parameters" in GRAPH["interaction_estimator.ros.node"]
    assert "rclpy" in GRAPH["interaction_estimator.ros.node"]
    assert {layer(m) for m in MODULES} == set(LAYERS)


def test_no_lower_layer_imports_a_higher_one():
    bad = _violations()
    unexpected = sorted(bad - KNOWN_CORE_VIOLATIONS)
    assert not unexpected, "imports against the layer order core < io < sim < ros < offline " \
        "< cli/demo, or of a ROS/bag/file/plotting library in core/:\n" + "\n".join(
            f"  {a} imports {b}" for a, b in unexpected)
    gone = sorted(KNOWN_CORE_VIOLATIONS - bad)
    assert not gone, f"fixed, remove from KNOWN_CORE_VIOLATIONS: {gone}"


def _cycles() -> list[list[str]]:
    """The strongly connected components of more than one module (Tarjan 1972)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(t for t in GRAPH[v] if t in MODULES):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                out.append(sorted(component))

    for v in sorted(GRAPH):
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles():
    cycles = _cycles()
    unexpected = [c for c in cycles if c not in KNOWN_CYCLES]
    assert not unexpected, f"modules that import each other in a circle: {unexpected}"
    gone = [c for c in KNOWN_CYCLES if c not in cycles]
    assert not gone, f"fixed, remove from KNOWN_CYCLES: {gone}"


def test_the_checks_catch_what_they_must(monkeypatch):
    """The checks themselves, on a graph with one violation of each kind."""
    monkeypatch.setitem(GRAPH, "interaction_estimator.io.cdr",
                        GRAPH["interaction_estimator.io.cdr"] | {"interaction_estimator.ros.node"})
    monkeypatch.setitem(GRAPH, "interaction_estimator.core.samples",
                        GRAPH["interaction_estimator.core.samples"] | {"std_msgs", "rosbags"})
    bad = _violations()
    assert ("interaction_estimator.io.cdr", "interaction_estimator.ros.node") in bad
    assert {("interaction_estimator.core.samples", "std_msgs"),
            ("interaction_estimator.core.samples", "rosbags")} <= bad
    monkeypatch.setitem(GRAPH, "interaction_estimator.core.samples",
                        GRAPH["interaction_estimator.core.samples"]
                        | {"interaction_estimator.io.bag"})
    assert any("interaction_estimator.core.samples" in c for c in _cycles())
