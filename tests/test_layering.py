"""The package tree is the pipeline: no module imports from a stage after its own (issue 11).

Stages in the order data flows (DEVELOPERS.md, "The pipeline"): shared pieces → configuration →
classical side → circuits → read-out → runs and reports → sweeps; the tools (CLI, benchmark,
catalogue regeneration) sit outside the library's import graph: nothing in the library imports
them. Every import is read from the source with `ast` (function-level imports too), so a lazy
import cannot hide a backward edge.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "qgp"

#: Stage rank of each top-level part of the package; a module may import ranks ≤ its own.
STAGES = {
    "errors": 0,
    "files": 0,
    "settings": 0,
    "environment": 0,
    "memory": 0,
    "progress": 0,
    "config": 1,
    "demo": 1,
    "classical": 2,
    "circuits": 3,
    "readout": 4,
    "scale": 4.5,  # κ growth and fault-tolerant cost: uses the classical side and the circuits' query models
    "reports": 5,
    "sweeps": 6,
    "tools": 7,
    "export": 7,  # the deprecated `python -m qgp.export` alias: a tool
}


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _stage(module: str) -> int | None:
    parts = module.split(".")
    if parts[0] != "qgp" or len(parts) == 1:
        return None  # the package facade (`qgp`, `from qgp import __version__`) is not a stage
    return STAGES.get(parts[1])


def _imports(path: Path) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(), filename=str(path))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            out.append((node.lineno, node.module))
            if node.module == "qgp":  # `from qgp import classical` names a subpackage
                out += [(node.lineno, f"qgp.{alias.name}") for alias in node.names]
        elif isinstance(node, ast.ImportFrom) and node.level:
            raise AssertionError(f"{path}:{node.lineno}: relative import; the tree uses absolute qgp.… imports")
    return out


MODULES = sorted(p for p in PACKAGE.rglob("*.py") if p.name != "__init__.py" or p.parent != PACKAGE)


def test_every_module_has_a_stage():
    unknown = sorted({_module_name(p) for p in MODULES if _stage(_module_name(p)) is None})
    assert not unknown, f"modules outside every stage (add them to STAGES and DEVELOPERS.md): {unknown}"


@pytest.mark.parametrize("path", MODULES, ids=lambda p: _module_name(p))
def test_no_import_runs_back_up_the_pipeline(path):
    own = _stage(_module_name(path))
    backward = [
        f"line {line}: {module} (stage {_stage(module)} > {own})"
        for line, module in _imports(path)
        if _stage(module) is not None and _stage(module) > own
    ]
    assert not backward, f"{_module_name(path)} imports a later stage: {backward}"


def test_the_package_facade_never_imports_the_tools():
    init = PACKAGE / "__init__.py"
    tools = [m for _, m in _imports(init) if (_stage(m) or 0) == STAGES["tools"]]
    assert not tools, f"qgp/__init__.py imports tools: {tools}"
