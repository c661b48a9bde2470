"""The package's shape: no import cycles (lazy imports included), layers import downwards."""

from __future__ import annotations

import ast
from pathlib import Path

import geonorm

PACKAGE = Path(geonorm.__file__).parent
# Lower layers never import higher ones: text → answer, then tables, then people and figures,
# then the service above them all.
LAYERS = ["resolve", "batch", "review", "figures", "service"]


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports(path: Path) -> set[str]:
    """Every geonorm module ``path`` imports, at the top or inside a function."""
    name = _module_name(path)
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.startswith("geonorm"):
                for alias in node.names:  # "from . import prior" names a module
                    sub = f"{target}.{alias.name}"
                    found.add(sub if _exists(sub) else target)
        elif isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("geonorm")}
    found.discard(name)
    return {m for m in found if _exists(m)}


def _exists(module: str) -> bool:
    rel = Path(*module.split(".")[1:])
    base = PACKAGE / rel
    return base.with_suffix(".py").exists() or (base / "__init__.py").exists()


def _graph() -> dict[str, set[str]]:
    return {_module_name(p): _imports(p) for p in PACKAGE.rglob("*.py")}


def test_no_import_cycles_lazy_imports_included():
    graph = _graph()
    assert len(graph) > 30
    state: dict[str, int] = {}
    cycles: list[list[str]] = []

    def visit(node: str, path: list[str]) -> None:
        state[node] = 1
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                cycles.append([*path[path.index(nxt) :], nxt])
            elif nxt not in state:
                visit(nxt, [*path, nxt])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert cycles == []


def test_layers_import_downwards():
    graph = _graph()
    wrong = []
    for module, targets in graph.items():
        parts = module.split(".")
        if len(parts) < 3 or parts[1] not in LAYERS:
            continue
        level = LAYERS.index(parts[1])
        for target in targets:
            tparts = target.split(".")
            if len(tparts) >= 2 and tparts[1] in LAYERS and LAYERS.index(tparts[1]) > level:
                wrong.append(f"{module} imports {target}")
    assert wrong == []


def test_the_top_level_reads_as_the_pipeline():
    names = {p.name for p in PACKAGE.iterdir() if not p.name.startswith(("_", "."))}
    assert {"resolve", "batch", "review", "figures", "cli.py", "errors.py"} <= names
    flat = [p for p in PACKAGE.glob("*.py") if p.name not in ("__init__.py", "__main__.py")]
    assert len(flat) <= 10, "new modules belong in a subpackage"
