"""The package's shape: who may import whom, and that modules stay readable.

Read from the source with ``ast`` (nothing is imported), so a rule broken anywhere fails here,
not only on a path some other test happens to take. Imports inside functions and under
``if TYPE_CHECKING:`` are the sanctioned way to defer a dependency and are not counted.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
PACKAGES = ("sweep", "kernels")
MAX_MODULE_LINES = 500  # a module past this must be split (issue: ~400 must earn its size); kernels exempt


def _modules() -> dict[str, Path]:
    found = {}
    for package in PACKAGES:
        for file in sorted((ROOT / package).rglob("*.py")):
            parts = file.relative_to(ROOT).with_suffix("").parts
            name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
            found[name] = file
    return found


def _top_level_imports(file: Path, name: str, known: set[str]) -> set[str]:
    """The project modules ``file`` imports when it is imported (not inside functions)."""
    tree = ast.parse(file.read_text(encoding="utf-8"))
    package = name if file.name == "__init__.py" else name.rpartition(".")[0]
    targets: set[str] = set()

    def visit(nodes):
        for node in nodes:
            if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
                continue
            if isinstance(node, (ast.If, ast.Try)):
                visit(node.body)
                visit(getattr(node, "orelse", []))
                for handler in getattr(node, "handlers", []):
                    visit(handler.body)
            elif isinstance(node, ast.Import):
                targets.update(alias.name for alias in node.names)
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else []))
                for alias in node.names:  # `from a import b` imports a.b when b is a module
                    targets.add(f"{base}.{alias.name}" if f"{base}.{alias.name}" in known else base)

    visit(tree.body)
    resolved = set()
    for target in targets:
        while target and target not in known:
            target = target.rpartition(".")[0]
        if target and target != name:
            resolved.add(target)
    return resolved


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    known = set(modules)
    return {name: _top_level_imports(file, name, known) for name, file in modules.items()}


def test_module_imports_have_no_cycles():
    """A cycle makes import order decide what works (common practice)."""
    graph = _graph()
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node):
        state[node] = 1
        stack.append(node)
        for dep in sorted(graph[node]):
            if state.get(dep) == 1:
                cycle = stack[stack.index(dep):] + [dep]
                raise AssertionError("import cycle: " + " -> ".join(cycle))
            if dep not in state:
                visit(dep)
        stack.pop()
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node)


def test_kernels_do_not_import_the_sweep_package():
    """The kernels are pure computation: no spec, store, Dask or I/O (DESIGN.md)."""
    graph = _graph()
    offenders = {m: sorted(d for d in deps if d.split(".")[0] == "sweep")
                 for m, deps in graph.items() if m.split(".")[0] == "kernels"}
    assert not {m: d for m, d in offenders.items() if d}


def test_the_store_does_not_import_execution_or_the_command_line():
    """The store is a layer below execution; the CLI is the top (DEVELOPERS.md, module map)."""
    graph = _graph()
    below = {"sweep.store": ("sweep.execute", "sweep.cli", "sweep.batch"),
             "sweep.spec": ("sweep.execute", "sweep.cli", "sweep.store", "sweep.batch"),
             "sweep.model": ("sweep.execute", "sweep.cli", "sweep.store", "sweep.batch"),
             "sweep.design": ("sweep.execute", "sweep.cli", "sweep.store", "sweep.batch")}
    # leaf modules of batch/ the lower layers may use: parsing [cluster], asking Slurm about a job
    allowed = ("sweep.batch.settings", "sweep.batch.jobs")
    wrong = []
    for module, deps in graph.items():
        for layer, forbidden in below.items():
            if module == layer or module.startswith(layer + "."):
                wrong += [f"{module} -> {d}" for d in deps if d.startswith(forbidden) and d not in allowed]
    assert not wrong, wrong


def test_sweep_has_few_top_level_modules():
    """A newcomer finds their room from the tree: subpackages, not a flat folder."""
    top = sorted(p.name for p in (ROOT / "sweep").glob("*.py"))
    assert top == ["__init__.py", "errors.py", "lazy.py"], top


def test_modules_stay_readable():
    long = {str(f.relative_to(ROOT)): n for f in _modules().values()
            if (n := len(f.read_text(encoding="utf-8").splitlines())) > MAX_MODULE_LINES
            and f.parent.name != "kernels"}
    assert not long, f"modules over {MAX_MODULE_LINES} lines: {long}"
