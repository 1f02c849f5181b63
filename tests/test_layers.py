"""Kernels are reached through ``lowfold.build`` only (DESIGN.md "Layout": build/ is the only
user of _kernels/).

Imports are read from the source files with ``ast`` (every import statement, also those
inside functions), not by importing the modules.
"""

from __future__ import annotations

import ast
from pathlib import Path

import lowfold

PACKAGE = Path(lowfold.__file__).parent


def kernel_imports(path: Path, package: Path = PACKAGE) -> list[int]:
    """Lines of ``path`` (a module of ``package``) that import ``lowfold._kernels``,
    absolutely or relatively."""
    folder = path.parent.relative_to(package.parent).parts      # ('lowfold', 'jobs')
    lines = []
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = list(folder[:len(folder) - node.level + 1]) if node.level else []
            module = ".".join(base + ([node.module] if node.module else []))
            names = [module] + [f"{module}.{alias.name}" for alias in node.names]
        else:
            continue
        if any(n == "lowfold._kernels" or n.startswith("lowfold._kernels.") for n in names):
            lines.append(node.lineno)
    return lines


def test_scanner_sees_absolute_and_relative_kernel_imports(tmp_path):
    package = tmp_path / "lowfold"
    (package / "jobs").mkdir(parents=True)
    relative = package / "jobs" / "relative.py"
    relative.write_text("from .._kernels import operators\n")
    inside = package / "jobs" / "inside.py"
    inside.write_text("def f():\n    import lowfold._kernels.pauli as p\n")
    clean = package / "jobs" / "clean.py"
    clean.write_text("from lowfold.build import operator\nimport numpy\n")
    assert kernel_imports(relative, package) == [1]
    assert kernel_imports(inside, package) == [2]
    assert kernel_imports(clean, package) == []
    assert kernel_imports(PACKAGE / "build" / "sparse.py")          # known user
    assert kernel_imports(PACKAGE / "build" / "basis.py")
    assert not kernel_imports(PACKAGE / "errors.py")


def test_only_build_imports_kernels():
    offending = []
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE).parts
        if parts[0] in ("build", "_kernels"):
            continue
        offending += [f"{'/'.join(parts)}:{line}" for line in kernel_imports(path)]
    assert not offending, "kernels imported outside lowfold.build: " + ", ".join(offending)
