"""The package's layers: data flows one way, so no module imports a module of a higher layer, and no
import circle exists anywhere in the package. The engine never imports Textual (checked in a fresh
interpreter, so an indirect import counts too).

Every ``import`` statement is read from the source (also those inside functions and under
``TYPE_CHECKING``), so a lazy import cannot hide a back-up arrow.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "app" / "holdfast"

#: lowest first; a module may import its own layer or any lower one
LAYERS: tuple[tuple[str, ...], ...] = (
    ("holdfast", "holdfast.errors", "holdfast.atomic", "holdfast.textsafe"),  # the shared ground
    ("holdfast.learners",),  # numpy-only model families behind one protocol
    ("holdfast.data",),  # reading, the spec (validates the learner table), preparing, the demo data
    ("holdfast.insight",),  # evidence: bounds, flags, score, neighbours, explanation, row detail
    ("holdfast.engine",),  # the scan: fit, exact LOO, findings, caches
    ("holdfast.review",),  # decisions: journal, sessions, applying them, the what-if refit
    ("holdfast.output",),  # files and text written for the user
    ("holdfast.cli", "holdfast.ui"),  # the two faces
)


def layer_of(module: str) -> int:
    """The layer index of a holdfast module: its longest matching layer prefix."""
    best, best_len = -1, -1
    for index, names in enumerate(LAYERS):
        for name in names:
            if (module == name or module.startswith(name + ".")) and len(name) > best_len:
                best, best_len = index, len(name)
    if best < 0:
        raise AssertionError(f"{module} is in no layer: add it to LAYERS")
    return best


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imports_of(path: Path) -> set[str]:
    """The holdfast modules a source file imports (absolute and relative, anywhere in the file)."""
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names if a.name.split(".")[0] == "holdfast")
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                target = ".".join([*base, node.module] if node.module else base)
            else:
                target = node.module or ""
            if target.split(".")[0] != "holdfast":
                continue
            found.add(target)
            for alias in node.names:  # `from holdfast.review import journal` imports a module
                candidate = PACKAGE.parent / (target + "." + alias.name).replace(".", "/")
                if candidate.with_suffix(".py").exists():
                    found.add(f"{target}.{alias.name}")
    return found


def import_graph(root: Path = PACKAGE) -> dict[str, set[str]]:
    return {module_name(p): imports_of(p) for p in sorted(root.rglob("*.py"))}


def back_up_imports(graph: dict[str, set[str]]) -> list[str]:
    """Every import that points to a higher layer, as 'importer -> imported'."""
    return sorted(
        f"{src} (layer {layer_of(src)}) -> {dst} (layer {layer_of(dst)})"
        for src, targets in graph.items()
        for dst in targets
        if layer_of(dst) > layer_of(src)
    )


def find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One import circle among the package's modules (a package's ``__init__`` excluded as a target,
    since importing ``a.b`` runs ``a/__init__`` only to reach ``b``), or None."""
    modules = set(graph)
    edges = {m: sorted(t for t in targets if t in modules and t != m) for m, targets in graph.items()}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> list[str] | None:
        state[m] = 1
        stack.append(m)
        for t in edges[m]:
            if m.startswith(t + "."):  # a submodule naming its own package (an __init__) is no circle
                continue
            if state.get(t) == 1:
                return [*stack[stack.index(t) :], t]
            if t not in state and (found := visit(t)):
                return found
        state[m] = 2
        stack.pop()
        return None

    for m in sorted(edges):
        if m not in state and (found := visit(m)):
            return found
    return None


def test_every_module_has_a_layer():
    for name in import_graph():
        layer_of(name)


def test_no_import_points_up_a_layer():
    assert back_up_imports(import_graph()) == []


def test_no_import_circle():
    assert find_cycle(import_graph()) is None


def test_checks_catch_a_back_up_import_and_a_circle(tmp_path: Path):
    """The checks themselves fail on a planted back-up import and on a planted circle."""
    graph = import_graph()
    graph["holdfast.insight.flags"] = graph["holdfast.insight.flags"] | {"holdfast.review.journal"}
    assert back_up_imports(graph) == ["holdfast.insight.flags (layer 3) -> holdfast.review.journal (layer 5)"]
    graph = import_graph()
    graph["holdfast.engine.loo"] = graph["holdfast.engine.loo"] | {"holdfast.engine.scan"}
    assert find_cycle(graph) is not None


@pytest.mark.parametrize(
    "modules",
    [
        "holdfast.cli, holdfast.engine.scan, holdfast.review.journal, holdfast.output.tables",
        "holdfast.engine.build, holdfast.engine.loo, holdfast.learners.svm, holdfast.data.prepare",
        "holdfast.review.whatif, holdfast.output.report, holdfast.output.export, holdfast.output.terminal",
    ],
)
def test_engine_does_not_import_textual(modules: str):
    code = (
        "import sys\n"
        f"import {modules}\n"
        "bad = sorted(m for m in sys.modules if m == 'textual' or m.startswith('textual.'))\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
