"""Package structure: the public API and the one-way flow of imports.

Imports are read from the source files (``ast``, every import statement, also those inside
functions), not by importing the modules.  The layers are those of the README ("Layout"); a module may
import only modules of earlier layers (or of its own layer, for the ``perturbation/``
package).  ``_kernels/`` imports nothing of lowfold outside ``_kernels/``.  Modules not
yet present are skipped.
"""

from __future__ import annotations

import ast
import importlib.metadata
from pathlib import Path

import pytest

import lowfold

PACKAGE = Path(lowfold.__file__).parent

# The folders of the layout (README "Layout"), lowest first: a module may import modules of
# its own folder and of the folders before it, never of a later one.
LAYERS = ("errors", "model", "build", "solve", "perturbation", "readout", "results", "jobs",
          "scans", "plots", "cli")


def source_files(folder: Path = PACKAGE):
    return sorted(p for p in folder.rglob("*.py") if "__pycache__" not in p.parts)


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imported_modules(path: Path) -> list[tuple[int, str]]:
    """``(line, absolute module)`` of every import in ``path`` that names lowfold.

    A name taken from the package root (``from lowfold import x``, ``from . import x`` in a
    top-level module) is reported as ``lowfold:x`` unless ``x`` is a submodule.
    """
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = []
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module
            for alias in node.names:       # from X import y: y may be a submodule
                candidate = f"{target}.{alias.name}"
                if target.startswith("lowfold") and _is_module(candidate):
                    found.append((node.lineno, candidate))
                elif target == "lowfold":
                    found.append((node.lineno, f"lowfold:{alias.name}"))
                else:
                    found.append((node.lineno, target))
    return [(line, mod) for line, mod in found
            if mod == "lowfold" or mod.startswith(("lowfold.", "lowfold:"))]


def _is_module(dotted: str) -> bool:
    relative = Path(*dotted.split(".")[1:])
    return ((PACKAGE / relative).with_suffix(".py").exists()
            or (PACKAGE / relative / "__init__.py").exists())


def layer_of(module: str) -> str | None:
    """The top-level part after ``lowfold.`` (``None`` for the package root)."""
    parts = module.split(":")[0].split(".")
    return parts[1] if len(parts) > 1 else None


# ---------------------------------------------------------------------------------------
# the public API (re-exported from lowfold/__init__.py with __all__)


def test_all_names_exist_once():
    names = lowfold.__all__
    assert len(names) == len(set(names)), sorted(n for n in names if names.count(n) > 1)
    missing = [n for n in names if not hasattr(lowfold, n)]
    assert not missing


def test_star_import_gives_all():
    namespace: dict = {}
    exec("from lowfold import *", namespace)
    assert set(lowfold.__all__) <= set(namespace)


def test_core_api_is_public():
    # the names that scripts are written against (README, docstrings)
    for name in ("load_model", "parse_model", "build_basis", "hamiltonian_matrix",
                 "hamiltonian_operator", "spectrum", "Model", "Basis", "Sector",
                 "SpectrumResult", "LowfoldError", "ModelError", "ManifoldError", "SizeError",
                 "ConvergenceError", "__version__"):
        assert name in lowfold.__all__


def test_version_matches_installed_metadata():
    assert lowfold.__version__ == importlib.metadata.version("lowfold")


# ---------------------------------------------------------------------------------------
# imports


def test_kernels_import_nothing_of_lowfold():
    kernels = PACKAGE / "_kernels"
    offending = [f"{path.name}:{line} imports {mod}"
                 for path in source_files(kernels)
                 for line, mod in imported_modules(path)
                 if not mod.startswith("lowfold._kernels")]
    assert not offending


def test_import_scanner_sees_relative_and_absolute_imports():
    # the scanner itself, on files whose imports are known
    model = PACKAGE / "model" / "model.py"
    mods = {mod for _, mod in imported_modules(model)}
    assert {"lowfold.errors", "lowfold.model.lattice", "lowfold.model.sites",
            "lowfold.model.terms", "lowfold.model.sector"} <= mods
    lattice = {mod for _, mod in imported_modules(PACKAGE / "model" / "lattice.py")}
    assert "lowfold.errors" in lattice


def layered_modules():
    """``(path, layer)`` of every present module that belongs to a layer of the list."""
    out = []
    for path in source_files():
        layer = layer_of(module_name(path))
        if layer in LAYERS:
            out.append(pytest.param(path, layer, id=module_name(path)))
    return out


def flow_violations(layer: str, imports) -> list[str]:
    """The imports of a module of ``layer`` that break the one-way flow."""
    rank = LAYERS.index(layer)
    offending = []
    for line, mod in imports:
        target = layer_of(mod)
        if target == "_kernels":
            continue                                   # the lowest layer
        if target is None:
            # The root is initialised before any submodule and defines __version__ first, so
            # taking __version__ from it adds no dependency; anything else is the whole API.
            if layer != "cli" and mod != "lowfold:__version__":
                offending.append(f"line {line}: imports the package root ({mod})")
            continue
        if target not in LAYERS:
            continue                                   # a module outside the list: skipped
        if LAYERS.index(target) > rank:
            offending.append(f"line {line}: imports {mod}")
    return offending


def test_flow_rule_on_known_cases():
    assert flow_violations("build", [(1, "lowfold.model.sector"), (2, "lowfold._kernels.basis")]) == []
    assert flow_violations("model", [(1, "lowfold.build.basis")]) == ["line 1: imports lowfold.build.basis"]
    assert flow_violations("perturbation", [(1, "lowfold.perturbation.manifold")]) == []
    assert flow_violations("solve", [(3, "lowfold.perturbation.series")]) != []
    assert flow_violations("readout", [(1, "lowfold:spectrum")]) != []
    assert flow_violations("scans", [(1, "lowfold:__version__")]) == []
    assert flow_violations("cli", [(1, "lowfold:__version__"), (2, "lowfold.jobs.tasks")]) == []
    assert flow_violations("model", [(1, "lowfold.somewhere_new")]) == []


@pytest.mark.parametrize("path,layer", layered_modules())
def test_imports_flow_one_way(path, layer):
    offending = flow_violations(layer, imported_modules(path))
    assert not offending, f"{module_name(path)} ({layer}): " + "; ".join(offending)
