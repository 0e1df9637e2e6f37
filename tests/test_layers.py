"""The package's layer order and import graph, read from the source with ``ast``.

Layers, lowest first (DEVELOPERS.md, "Layer order"): a module imports only from its own layer
or a lower one; ``text`` and ``engine`` know nothing of each other; no import circle anywhere
(imports inside functions count too); no private name is imported from another module.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "lintext"
LAYERS = [
    {"lintext", "errors", "files", "outputs", "resources", "arrays"},
    {"text", "engine"},
    {"model", "model_check", "model_tables", "confidence"},
    {"evidence", "explanation", "pipeline", "from_store", "predictions"},
    {"report"},
    {"tuning"},
    {"estimator"},
    {"cli", "__main__"},
]
APART = [("text", "engine")]  # same layer, but neither may import the other
LIMIT = 450  # lines per module; the compiled kernels are one file on purpose (numba's cache)
EXEMPT = {"lintext.engine.compiled"}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def imports(name: str, path: Path):
    """(imported module, imported names) for every import statement of a module."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] == "lintext":
                    yield alias.name, []
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "lintext":
                continue
            names = [a.name for a in node.names]
            submodules = [f"{target}.{n}" for n in names if f"{target}.{n}" in MODULES]
            yield (target, [n for n in names if f"{target}.{n}" not in MODULES])
            for sub in submodules:
                yield sub, []


def graph() -> dict:
    edges = {}
    for name, path in MODULES.items():
        edges[name] = {target: names for target, names in imports(name, path) if target != name}
    return edges


def layer(module: str) -> int:
    key = module.split(".")[1] if "." in module else module
    for i, members in enumerate(LAYERS):
        if key in members:
            return i
    raise AssertionError(f"{module} is in no layer: add it to LAYERS and to DEVELOPERS.md")


def test_every_module_imports_only_its_own_layer_or_lower():
    wrong = []
    for source, targets in graph().items():
        for target in targets:
            if layer(target) > layer(source):
                wrong.append(f"{source} imports {target}")
            for a, b in APART:
                pair = {source.split(".")[1:2][0] if "." in source else "", target.split(".")[1:2][0] if "." in target else ""}
                if pair == {a, b}:
                    wrong.append(f"{source} imports {target} ({a} and {b} know nothing of each other)")
    assert not wrong, "\n".join(wrong)


def test_no_import_circle():
    edges = {s: {t for t in ts if t in MODULES and t != "lintext"} for s, ts in graph().items()}
    state, stack, cycles = {}, [], []

    def visit(node):
        state[node] = "open"
        stack.append(node)
        for nxt in sorted(edges.get(node, ())):
            if state.get(nxt) == "open":
                cycles.append(" -> ".join(stack[stack.index(nxt):] + [nxt]))
            elif nxt not in state:
                visit(nxt)
        stack.pop()
        state[node] = "done"

    for node in sorted(edges):
        if node not in state:
            visit(node)
    assert not cycles, "\n".join(cycles)


def test_no_private_name_crosses_modules():
    crossing = [f"{source} imports {name} from {target}" for source, targets in graph().items()
                for target, names in targets.items() for name in names if name.startswith("_") and not name.startswith("__")]
    assert not crossing, "\n".join(crossing)


@pytest.mark.parametrize("name", sorted(MODULES))
def test_module_size(name):
    lines = MODULES[name].read_text(encoding="utf-8").count("\n")
    assert name in EXEMPT or lines <= LIMIT, f"{name} has {lines} lines; split it (DEVELOPERS.md)"
