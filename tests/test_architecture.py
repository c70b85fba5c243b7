"""The package reads as the pipeline: config → catalogues → measurements → comparison →
report, each stage importing only earlier ones, with no import cycle and no import hidden
in a function.

The layers are listed here once; a new module belongs to its package's layer unless named
below. Function-level imports of third-party packages (optional dependencies such as h5py,
pyarrow, distributed) stay allowed: they are not part of this rule.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import conecheck

PACKAGE = Path(conecheck.__file__).resolve().parent

#: Layers from first to last; a module may import its own layer and earlier ones.
LAYERS = [
    ("foundation", ["errors", "atomic", "units", "cosmology", "sphere", "streams", "periodic",
                    "jackknife", "loader", "version", "healpix_pixels", "pairs",
                    "footprint.protocols"]),
    ("statistics", ["stats"]),
    ("settings", ["cone.settings", "cone.corrections", "compare.rules",
                  "attribution.settings"]),
    ("config", ["config", "config_docs", "demo"]),
    ("catalogues", ["catalog", "box", "footprint", "cone"]),
    ("comparison", ["compare"]),
    ("pipeline", ["run"]),
    ("attribution", ["attribution"]),
    ("report", ["report"]),
    ("front", ["run.validate", "commands", "cli", "api", ""]),
]


def _modules() -> dict[str, Path]:
    out = {}
    for p in PACKAGE.rglob("*.py"):
        parts = list(p.relative_to(PACKAGE).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = p
    return out


MODULES = _modules()


def _layer(module: str) -> int:
    best, rank = -1, None
    for i, (_, prefixes) in enumerate(LAYERS):
        for prefix in prefixes:
            if (module == prefix or module.startswith(prefix + ".") or prefix == "") \
                    and len(prefix) > best:
                best, rank = len(prefix), i
    assert rank is not None, module
    return rank


def _imports(module: str) -> list[tuple[str, bool]]:
    """(imported conecheck module, inside a function or class body) of ``module``."""
    path = MODULES[module]
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    nested = {id(n) for f in ast.walk(tree)
              if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef))
              for n in ast.walk(f) if n is not f}
    out = []
    for node in ast.walk(tree):
        targets = []
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".") if package else []
                base = base[:len(base) - node.level + 1]
                root = ".".join(base + ([node.module] if node.module else []))
            elif node.module and node.module.startswith("conecheck"):
                root = node.module.removeprefix("conecheck").lstrip(".")
            else:
                continue
            for alias in node.names:
                sub = f"{root}.{alias.name}".strip(".")
                targets.append(sub if sub in MODULES else root)
        elif isinstance(node, ast.Import):
            targets = [a.name.removeprefix("conecheck").lstrip(".") for a in node.names
                       if a.name.split(".")[0] == "conecheck"]
        for t in targets:
            if t in MODULES and t != module:
                out.append((t, id(node) in nested))
    return out


GRAPH = {m: _imports(m) for m in MODULES}


def test_every_module_has_a_layer():
    for m in MODULES:
        _layer(m)


def test_no_module_imports_a_later_stage():
    wrong = [f"{m} ({LAYERS[_layer(m)][0]}) imports {t} ({LAYERS[_layer(t)][0]})"
             for m, deps in GRAPH.items() for t, _ in deps if _layer(t) > _layer(m)]
    assert not wrong, "\n".join(wrong)


def test_no_import_cycle():
    edges = {m: {t for t, _ in deps} for m, deps in GRAPH.items()}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> list[str] | None:
        state[m] = 1
        stack.append(m)
        for t in sorted(edges[m]):
            if state.get(t) == 1:
                return stack[stack.index(t):] + [t]
            if t not in state and (cycle := visit(t)):
                return cycle
        stack.pop()
        state[m] = 2
        return None

    for m in sorted(edges):
        if m not in state:
            cycle = visit(m)
            assert cycle is None, " → ".join(cycle)


def test_no_conecheck_import_hides_in_a_function():
    hidden = [f"{m} imports {t} inside a function or class"
              for m, deps in GRAPH.items() for t, inside in deps if inside]
    assert not hidden, "\n".join(hidden)


def test_the_version_is_stated_once_for_the_package_and_pyproject():
    text = (PACKAGE.parent / "pyproject.toml").read_text(encoding="utf-8")
    assert re.search(r'^version = "([^"]+)"', text, re.M).group(1) == conecheck.__version__
