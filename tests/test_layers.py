"""The package's dependency picture: imports run downward through the layers, with no circle, no
private name borrowed from another module, and first-party imports at module top.

Layers, lowest first (DEVELOPERS.md "Layers"): a module may import from its own layer and the
layers below it, never from a layer above.
"""

from __future__ import annotations

import ast
from collections import defaultdict
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parent.parent / "uncertainty"

#: Layer of each top-level part of the package, lowest first.
LAYERS = ("core", "physiology", "distributions", "forms", "priors", "study", "analyses", "app")

#: Third-party packages heavy enough to import lazily (``fluidshift --help`` stays fast).
HEAVY = ("pymc", "pytensor", "matplotlib", "SALib", "pandas", "dask", "nutpie", "arviz", "distributed")


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _modules() -> dict[str, ast.Module]:
    return {_module_name(p): ast.parse(p.read_text(encoding="utf-8"), str(p))
            for p in sorted(PACKAGE.rglob("*.py")) if "__pycache__" not in p.parts}


MODULES = _modules()


def _layer(module: str) -> int | None:
    parts = module.split(".")
    if len(parts) < 2:
        return None  # the package itself: its lazy API sits above every layer
    return LAYERS.index(parts[1]) if parts[1] in LAYERS else None


def _resolve(module: str, node: ast.ImportFrom) -> str:
    if node.level == 0:
        return node.module or ""
    base = module.split(".")
    is_package = (PACKAGE.parent / Path(*base) / "__init__.py").exists()
    base = base if is_package else base[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _imports(module: str, tree: ast.Module) -> list[tuple[str, str | None, int, bool]]:
    """(imported module, imported name or None, line, at module top) for every first-party import."""
    top = {id(n) for n in tree.body}
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("uncertainty"):
                    out.append((a.name, None, node.lineno, id(node) in top))
        elif isinstance(node, ast.ImportFrom):
            target = _resolve(module, node)
            if target.startswith("uncertainty"):
                for a in node.names:
                    sub = f"{target}.{a.name}"
                    if sub in MODULES:
                        out.append((sub, None, node.lineno, id(node) in top))
                    else:
                        out.append((target, a.name, node.lineno, id(node) in top))
    return out


def _graph() -> dict[str, set[str]]:
    graph: dict[str, set[str]] = defaultdict(set)
    for module, tree in MODULES.items():
        for target, _, _, _ in _imports(module, tree):
            if target in MODULES and target != module:
                graph[module].add(target)
    return graph


def test_every_module_sits_in_a_layer():
    stray = [m for m in MODULES if m != "uncertainty" and _layer(m) is None]
    assert not stray, f"modules outside the layers {LAYERS}: {stray}"


def test_imports_only_run_downward():
    upward = []
    for module, tree in MODULES.items():
        here = _layer(module)
        for target, _, line, _ in _imports(module, tree):
            there = _layer(target)
            if here is not None and there is not None and there > here:
                upward.append(f"{module}:{line} imports {target} ({LAYERS[here]} -> {LAYERS[there]})")
    assert not upward, "upward imports:\n" + "\n".join(upward)


def test_no_import_circle():
    graph = _graph()
    cycles, state = [], {}

    def visit(node: str, stack: list[str]) -> None:
        state[node] = 1
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                # a package importing its own submodules (re-exports) is not a circle
                cyc = stack[stack.index(nxt):] + [nxt]
                if not all(a.startswith(b + ".") or b.startswith(a + ".") for a, b in zip(cyc, cyc[1:], strict=False)):
                    cycles.append(" -> ".join(cyc))
            elif nxt not in state:
                visit(nxt, stack + [nxt])
        state[node] = 2

    for m in sorted(MODULES):
        if m not in state:
            visit(m, [m])
    assert not cycles, "import circles:\n" + "\n".join(cycles)


def test_no_private_name_crosses_a_module():
    borrowed = []
    for module, tree in MODULES.items():
        for target, name, line, _ in _imports(module, tree):
            if name and name.startswith("_") and target != module:
                borrowed.append(f"{module}:{line} imports {target}.{name}")
        for node in ast.walk(tree):  # module._private attribute access on an imported module
            if isinstance(node, ast.Attribute) and node.attr.startswith("_") and not node.attr.startswith("__") \
                    and isinstance(node.value, ast.Name) and node.value.id in _module_aliases(module, tree):
                borrowed.append(f"{module}:{node.lineno} uses {node.value.id}.{node.attr}")
    assert not borrowed, "private names used across modules:\n" + "\n".join(borrowed)


def _module_aliases(module: str, tree: ast.Module) -> set[str]:
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and _resolve(module, node).startswith("uncertainty"):
            for a in node.names:
                if f"{_resolve(module, node)}.{a.name}" in MODULES:
                    names.add(a.asname or a.name)
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("uncertainty") and a.asname:
                    names.add(a.asname)
    return names


def test_first_party_imports_at_module_top():
    hidden = [f"{m}:{line} imports {t}" for m, tree in MODULES.items() for t, _, line, top in _imports(m, tree)
              if not top and not _allowed_lazy(m, t)]
    assert not hidden, "first-party imports inside functions (move them to the top):\n" + "\n".join(hidden)


#: Lazy first-party imports that keep start-up light: the command line loads a command's module only
#: when that command runs, and the package's API resolves its functions on first use.
LAZY_ALLOWED = {"uncertainty": ("",), "uncertainty.app.cli": ("uncertainty.app.commands",),
                "uncertainty.physiology.whole_body": ("uncertainty.physiology.whole_body_op",),
                "uncertainty.physiology.balance": ("uncertainty.physiology.safety_root_op",),
                "uncertainty.physiology.iteration": ("uncertainty.physiology.cut_gradient",)}
#: Modules that define PyTensor Ops (a class needs its base at import): they import PyTensor at their top and are
#: themselves imported only inside functions (:data:`LAZY_ALLOWED`), so start-up stays light.
PYTENSOR_MODULES = ("uncertainty.physiology.whole_body_op", "uncertainty.physiology.cut_gradient",
                    "uncertainty.physiology.safety_root_op")


def _allowed_lazy(module: str, target: str) -> bool:
    return any(target.startswith(prefix) for prefix in LAZY_ALLOWED.get(module, ()))


@pytest.mark.parametrize("heavy", HEAVY)
def test_heavy_libraries_stay_lazy(heavy):
    eager = []
    for module, tree in MODULES.items():
        if module in PYTENSOR_MODULES:
            continue
        for node in tree.body:
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else \
                [node.module or ""] if isinstance(node, ast.ImportFrom) and node.level == 0 else []
            if any(n == heavy or n.startswith(heavy + ".") for n in names):
                eager.append(f"{module}:{node.lineno}")
    assert not eager, f"{heavy} imported at module top (import it inside the function that needs it): {eager}"


def test_pytensor_modules_are_imported_lazily_only():
    eager = [f"{m}:{line} imports {t}" for m, tree in MODULES.items() for t, _, line, top in _imports(m, tree)
             if top and any(t == p or t.startswith(p + ".") for p in PYTENSOR_MODULES)]
    assert not eager, "a module that imports PyTensor at its top is imported at another's top:\n" + "\n".join(eager)
