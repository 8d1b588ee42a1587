"""The package's layers: each module imports only from its own layer or the ones below,
and no two modules import each other (directly or through others).

Layers, bottom to top: the base modules (``errors``, ``files``, ``versions``, ``_version``),
``core`` (numerics on arrays), ``corpus`` (the stored corpus), ``provenance`` (cache,
models, experiments), ``analysis``, ``app``, and on top the package itself (``tracer``, whose
``__init__`` hands out the Python API of ``tracer.app.api``): no module imports the package root. Imports inside functions count too: a
deferred import is for start-up time only, never a way around a cycle.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "tracer"
LAYERS = ["base", "core", "corpus", "provenance", "analysis", "app", "package"]


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def layer_of(module: str) -> int:
    parts = module.split(".")
    if module == "tracer":
        return LAYERS.index("package")
    return LAYERS.index(parts[1]) if len(parts) > 1 and parts[1] in LAYERS else 0


def imports_of(path: Path) -> set[str]:
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("tracer"):
            found.add(node.module)
            found.update(f"{node.module}.{a.name}" for a in node.names)
        elif isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.startswith("tracer"))
    return found


def graph() -> dict[str, set[str]]:
    modules = {module_name(p): p for p in PACKAGE.rglob("*.py")}
    return {m: {i for i in imports_of(p) if i in modules and i != m} for m, p in modules.items()}


def test_each_module_imports_only_its_own_layer_or_below():
    wrong = [f"{m} ({LAYERS[layer_of(m)]}) imports {i} ({LAYERS[layer_of(i)]})"
             for m, deps in graph().items() for i in sorted(deps) if layer_of(i) > layer_of(m)]
    assert not wrong, "\n".join(wrong)


def test_no_import_cycles():
    g = graph()
    state: dict[str, int] = {}
    cycles = []

    def visit(m, stack):
        state[m] = 1
        for d in sorted(g[m]):
            if state.get(d) == 1:
                cycles.append(" -> ".join(stack[stack.index(d):] + [d]))
            elif d not in state:
                visit(d, stack + [d])
        state[m] = 2

    for m in sorted(g):
        if m not in state:
            visit(m, [m])
    assert not cycles, "\n".join(cycles)


def test_the_layer_rule_sees_a_wrong_import(tmp_path):
    # the checks above would pass on an empty graph; make sure an upward import is caught
    f = tmp_path / "x.py"
    f.write_text("def g():\n    from tracer.app.cli import main\n", encoding="utf-8")
    assert "tracer.app.cli" in imports_of(f)
    assert layer_of("tracer.app.cli") > layer_of("tracer.core.pmi") > layer_of("tracer.errors")
    # the package root sits above everything: a module reading tracer.__version__ from it is caught
    g = tmp_path / "y.py"
    g.write_text("from tracer import __version__\n", encoding="utf-8")
    assert "tracer" in imports_of(g) and layer_of("tracer") > layer_of("tracer.app.api")
