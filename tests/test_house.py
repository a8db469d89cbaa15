"""The shape of the house: import layers, no import circles, module sizes,
a light ``import famwise``, one place that opens a dask client.

These are the contributor guide's rules (DEVELOPERS.md, "Map of the house"),
checked on the source so that a change that breaks them fails here, not in a
review.  Imports inside functions count; a module's import of its own package
(``from . import x`` inside that package's modules) does not.
"""

from __future__ import annotations

import ast
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
# physical folder -> dotted package it installs as (pyproject.toml package-dir)
FOLDERS = {"famwise": "famwise", "diagnostics": "famwise.diagnostics",
           "resample": "famwise.resample"}

# Lowest first.  A module may import its own layer or lower, never higher.
LAYERS = [
    ("famwise.core",),
    ("famwise.intake", "famwise.distributions"),
    ("famwise.model",),
    ("famwise.procedures", "famwise.resample"),
    ("famwise.diagnostics",),
    ("famwise.report",),
    ("famwise.comparison", "famwise.api"),
    ("famwise.batching", "famwise.planning", "famwise.scenarios"),
    ("famwise.cli",),
    ("famwise.__main__",),
]
MAX_LINES = 800


def _modules() -> dict[str, Path]:
    found = {}
    for folder, dotted in FOLDERS.items():
        for path in sorted((ROOT / folder).rglob("*.py")):
            rel = path.relative_to(ROOT / folder).with_suffix("")
            parts = [] if rel.parts == ("__init__",) else list(rel.parts)
            if parts and parts[-1] == "__init__":
                parts = parts[:-1]
            found[".".join([dotted, *parts])] = path
    return found


MODULES = _modules()


def _layer(module: str) -> int | None:
    for level, prefixes in enumerate(LAYERS):
        if any(module == p or module.startswith(p + ".") for p in prefixes):
            return level
    return None                      # the package root (famwise/__init__.py)


def _imports(module: str, path: Path) -> set[str]:
    """Every famwise module that ``module`` imports, anywhere in its body."""
    is_pkg = path.name == "__init__.py"
    package = module if is_pkg else module.rpartition(".")[0]
    out = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.startswith("famwise"))
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if not target.startswith("famwise"):
                continue
            for alias in node.names:       # `from pkg import submodule`
                sub = f"{target}.{alias.name}"
                out.add(sub if sub in MODULES else target)
    return out


def _own_package(importer: str, target: str) -> bool:
    """``target`` is a package that contains ``importer`` (its own package)."""
    return importer.startswith(target + ".")


GRAPH = {m: {t for t in _imports(m, p) if t in MODULES and t != m and not _own_package(m, t)}
         for m, p in MODULES.items()}


def test_every_module_belongs_to_a_layer():
    # common practice, no source: a module outside the map has no place in the house
    missing = sorted(m for m in MODULES if m != "famwise" and _layer(m) is None)
    assert not missing, f"add these to LAYERS and to DEVELOPERS.md's map: {missing}"


def test_no_import_reaches_a_higher_stage():
    upward = [f"{m} (layer {_layer(m)}) imports {t} (layer {_layer(t)})"
              for m, targets in GRAPH.items() for t in sorted(targets)
              if _layer(m) is not None and _layer(t) is not None and _layer(t) > _layer(m)]
    assert not upward, "\n".join(upward)


def test_no_import_circles():
    # Tarjan's strongly connected components; any component of two or more
    # modules is a circle.
    index, low, stack, on, circles = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in GRAPH[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                circles.append(sorted(comp))

    sys.setrecursionlimit(10_000)
    for v in GRAPH:
        if v not in index:
            visit(v)
    assert not circles, circles


def test_modules_stay_small():
    big = {m: n for m, p in MODULES.items()
           if (n := len(p.read_text(encoding="utf-8").splitlines())) >= MAX_LINES}
    assert not big, f"split these modules (>= {MAX_LINES} lines): {big}"


def test_one_place_opens_a_dask_client():
    openers = sorted(m for m, p in MODULES.items()
                     if any(isinstance(n, ast.Call) and getattr(n.func, "attr", getattr(n.func, "id", ""))
                            in ("Client", "LocalCluster")
                            for n in ast.walk(ast.parse(p.read_text(encoding="utf-8")))))
    assert openers == ["famwise.resample.dask_client"], openers


def _loaded_after(code: str) -> set[str]:
    heavy = ("pandas", "scipy.stats", "matplotlib", "numba", "joblib", "dask")
    probe = (f"import sys\n{code}\n"
             f"print(','.join(m for m in {heavy!r} if m in sys.modules))")
    env = {**os.environ, "PYTHONWARNINGS": "ignore"}
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         env=env, check=True).stdout.strip()
    return set(filter(None, out.split(",")))


@pytest.mark.parametrize("code", [
    "import famwise",
    "import famwise; famwise.__version__; famwise.FamwiseInputError",
    # what `famwise --help`, `--version` and `famwise procedures` load
    "from famwise.cli.commands import build_parser; build_parser()",
    "from famwise.procedures import CATALOGUE",
])
def test_import_famwise_stays_light(code):
    # the start-up promise of the README's benchmark section: none of the heavy
    # libraries loads until a function that needs it runs (sys.modules, not a timer)
    assert _loaded_after(code) == set()


def test_the_lazy_names_resolve():
    import famwise
    for name in famwise.__all__:
        assert getattr(famwise, name) is not None
    assert set(famwise._LAZY) <= set(dir(famwise))
