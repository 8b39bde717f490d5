"""Imports point one way: lower layers never import higher ones."""

from __future__ import annotations

import ast
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "cfgcheck"

# Lower number = lower layer. A module may import only modules of its own layer or below.
LAYERS = {
    "findings": 0, "load": 0, "knowledge": 0,
    "layouts": 1, "schedule": 1, "waivers": 1,
    "view": 2, "catalogue": 2,
    "checks": 3, "plan": 3, "links": 3, "parallel": 3,
    "engine": 4,
    "render": 5, "fix": 5, "project": 5, "baseline": 5, "schema": 3,
    "api": 6, "editor": 6, "lrcurve": 1,
    "cli": 7, "fastcli": 7, "__main__": 8, "__init__": 9,
}


def _layer(module: str) -> int | None:
    top = module.split(".")[0]
    return LAYERS.get(top)


def _imports(path: Path):
    tree = ast.parse(path.read_text())
    rel = path.relative_to(PKG).with_suffix("")
    parts = list(rel.parts)
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = parts[: len(parts) - node.level]
                target = ".".join(base + ([node.module] if node.module else []))
                if not target and node.names:
                    for alias in node.names:
                        yield alias.name
                    continue
                yield target
            elif node.module and node.module.startswith("cfgcheck"):
                yield node.module[len("cfgcheck."):]
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("cfgcheck."):
                    yield alias.name[len("cfgcheck."):]


def test_no_upward_imports():
    upward = []
    for path in PKG.rglob("*.py"):
        me = ".".join(path.relative_to(PKG).with_suffix("").parts)
        my_layer = _layer(me)
        if my_layer is None:
            upward.append(f"{me}: module not assigned to a layer in this test")
            continue
        for target in _imports(path):
            t_layer = _layer(target) if target else None
            if t_layer is not None and t_layer > my_layer:
                upward.append(f"{me} (layer {my_layer}) imports {target} (layer {t_layer})")
    assert upward == []


def test_only_the_cli_exits_or_touches_argv():
    offenders = []
    for path in PKG.rglob("*.py"):
        if path.name in ("cli.py", "__main__.py"):
            continue
        text = path.read_text()
        for word in ("sys.exit(", "sys.argv", "typer.Exit"):
            if word in text:
                offenders.append(f"{path.name}: {word}")
    assert offenders == []


def _module_graph() -> dict[str, set[str]]:
    """module -> the cfgcheck modules it imports, at module level or inside functions."""
    graph: dict[str, set[str]] = {}
    for path in PKG.rglob("*.py"):
        me = ".".join(path.relative_to(PKG).with_suffix("").parts)
        graph[me] = {t for t in _imports(path) if t and t != me}
    return graph


def test_no_import_cycle_even_inside_functions():
    graph = _module_graph()
    known = set(graph)

    def resolve(name: str) -> str | None:
        while name and name not in known:
            name = name.rpartition(".")[0]
        return name or None

    edges = {m: {r for t in ts if (r := resolve(t)) and r != m} for m, ts in graph.items()}
    cycles = []
    state: dict[str, int] = {}

    def visit(m: str, stack: list[str]) -> None:
        state[m] = 1
        stack.append(m)
        for t in sorted(edges.get(m, ())):
            if state.get(t) == 1:
                cycles.append(" -> ".join(stack[stack.index(t):] + [t]))
            elif t not in state:
                visit(t, stack)
        stack.pop()
        state[m] = 2

    for m in sorted(edges):
        if m not in state:
            visit(m, [])
    # package __init__ modules re-export lazily from their own submodules; that is not a cycle
    cycles = [c for c in cycles if not c.startswith("__init__")]
    assert cycles == []
