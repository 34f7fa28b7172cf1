"""The package layout: no import cycle, no import from a lower layer to a higher one, and modules
and functions of a readable size.

The layers, lowest first (a module may import from its own layer or any lower one):

  0  foundation    smle._config, smle.errors, smle.params, smle.distributions, smle.pareto_tail,
                   smle.report_text
  1  engine        smle.engine.*  (knows no particular model; may take a model instance)
  2  models        smle.models.*
  3  likelihood    smle.validation, smle.likelihood
  4  reference     smle.reference.*
  5  fitting       smle.fit, smle.results, smle.restricted
  6  diagnostics   smle.diagnostics.*
  7  decision      smle.decision.*  (comparison of fitted models, coverage and score tests)
  8  data          smle.data.*  (independent: imports only smle.errors)
  9  study         smle.study.*
 10  cli           smle.cli.*
     (smle/__init__.py, the public surface, sits above them all)

Common practice (not a published source): a layered package without cycles, so that each layer
can be read, tested and changed knowing only the layers below it.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "smle"

LAYERS = [
    ("foundation", ["smle._config", "smle.errors", "smle.params", "smle.distributions", "smle.pareto_tail",
                    "smle.report_text"]),
    ("engine", ["smle.engine"]),
    ("models", ["smle.models"]),
    ("likelihood", ["smle.validation", "smle.exact_likelihood", "smle.likelihood_result", "smle.likelihood"]),
    ("reference", ["smle.reference"]),
    ("fitting", ["smle.optimizer", "smle.fit", "smle.fit_exact", "smle.results", "smle.restricted"]),
    ("diagnostics", ["smle.diagnostics"]),
    ("decision", ["smle.decision"]),
    ("data", ["smle.data"]),
    ("study", ["smle.study"]),
    ("cli", ["smle.cli"]),
    ("public", ["smle"]),
]

MAX_MODULE_LINES = 450
MAX_FUNCTION_LINES = 80
# Functions allowed to be longer than MAX_FUNCTION_LINES, each with the reason.
LONG_FUNCTIONS: dict[str, str] = {
    "smle.fit.fit": "a public entry point whose docstring documents every argument (35 lines); the body is 31",
    "smle.likelihood.loglik": "a public entry point whose docstring documents every argument and the regions where "
                              "EIS breaks down (46 lines); the body is 42",
    "smle.data.demo.demo_scenario": "the demo scenario's steps read best in one place; its file is being changed "
                                    "on another branch, split after that merge",
    "smle.data.prepare.prepare_daily": "one pass over the intraday table; its file is being changed on another "
                                       "branch, split after that merge",
    "smle.study.runner.run_study": "the study loop with its resume and store bookkeeping; its file is being "
                                   "changed on another branch, split after that merge",
}


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _resolve(name: str) -> str | None:
    """The module ``name`` refers to: itself, or its nearest enclosing package or module."""
    while name:
        if name in MODULES:
            return name
        name = name.rpartition(".")[0]
    return None


def _imports(module: str) -> set[str]:
    """Every smle module imported by ``module``, at any depth of its code (functions included)."""
    tree = ast.parse(MODULES[module].read_text())
    package = module if MODULES[module].name == "__init__.py" else module.rpartition(".")[0]
    found = set()
    for node in ast.walk(tree):
        names = []
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")
                anchor = anchor[: len(anchor) - (node.level - 1)]
                base = ".".join(anchor + ([base] if base else []))
            # "from smle.x import y": y may be a submodule
            names = [f"{base}.{alias.name}" for alias in node.names] + [base]
        for name in names:
            if name == "smle" or name.startswith("smle."):
                target = _resolve(name)
                if target is not None and target != module:
                    found.add(target)
    return found


GRAPH = {module: _imports(module) for module in MODULES}


def _layer(module: str) -> int:
    best, best_length = None, -1
    for index, (_, prefixes) in enumerate(LAYERS):
        for prefix in prefixes:
            if (module == prefix or module.startswith(prefix + ".")) and len(prefix) > best_length:
                best, best_length = index, len(prefix)
    assert best is not None, f"{module} is in no layer: add it to LAYERS (and to DEVELOPERS.md)"
    return best


def test_every_module_has_a_layer():
    for module in MODULES:
        _layer(module)


def test_no_upward_import():
    upward = [
        f"{module} ({LAYERS[_layer(module)][0]}) imports {target} ({LAYERS[_layer(target)][0]})"
        for module, targets in GRAPH.items()
        for target in sorted(targets)
        if _layer(target) > _layer(module) and not (module == "smle" or target == "smle")
    ]
    assert not upward, "imports from a lower layer to a higher one:\n" + "\n".join(upward)


def _cycles() -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan).

    Edges into a package's ``__init__`` are left out: ``from smle.models import register`` in
    a model module that the package imports at its bottom (registration) is the intended pattern,
    not a cycle between two ideas.
    """
    graph = {m: {t for t in ts if MODULES[t].name != "__init__.py"} for m, ts in GRAPH.items()}
    index, low, stack, on_stack, out = {}, {}, [], set(), []

    def visit(node):
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for target in graph.get(node, ()):
            if target not in index:
                visit(target)
                low[node] = min(low[node], low[target])
            elif target in on_stack:
                low[node] = min(low[node], index[target])
        if low[node] == index[node]:
            component = []
            while True:
                member = stack.pop()
                on_stack.discard(member)
                component.append(member)
                if member == node:
                    break
            if len(component) > 1:
                out.append(sorted(component))

    for node in graph:
        if node not in index:
            visit(node)
    return out


def test_no_import_cycle():
    cycles = _cycles()
    assert not cycles, "import cycles between modules:\n" + "\n".join(" <-> ".join(c) for c in cycles)


def test_module_size():
    long = [f"{m}: {len(p.read_text().splitlines())} lines" for m, p in MODULES.items()
            if len(p.read_text().splitlines()) > MAX_MODULE_LINES]
    assert not long, f"modules over {MAX_MODULE_LINES} lines (split by idea):\n" + "\n".join(long)


def test_function_size():
    long = []
    for module, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                length = node.end_lineno - node.lineno + 1
                name = f"{module}.{node.name}"
                if length > MAX_FUNCTION_LINES and name not in LONG_FUNCTIONS:
                    long.append(f"{name}: {length} lines")
    assert not long, f"functions over {MAX_FUNCTION_LINES} lines:\n" + "\n".join(long)


@pytest.mark.parametrize("reason", list(LONG_FUNCTIONS.values()) or ["(none)"])
def test_long_functions_say_why(reason):
    assert reason.strip()
