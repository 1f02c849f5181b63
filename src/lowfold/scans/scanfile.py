"""Scan files (TOML): a model, a task and a grid of parameters, sizes and sectors.

A scan file names a model file, a task and a grid::

    model = "dot_chain.toml"          # relative to the scan file
    title = "exchange of a dot chain" # optional (default: the model's title)

    [task]
    name = "derive"                   # spectrum | derive | series
    order = 4                         # every other key is an option of the task

    [grid]
    U = {start = 8, stop = 40, num = 9}   # inclusive; spacing = "log" for geometric steps
    t = [1.0]                             # or a list of values
    size = [[4], [6], [8]]                # lattice sizes (an int stands for [n])
    boundary = ["open"]                   # or ["open", "periodic"], or per-direction lists
    combine = "product"                   # all combinations (default) or "zip"

    [sector]                              # optional: the sector at every point
    filling = 1                           # particles per site (or particles = 6)
    sz = 0

``particles``, ``filling`` and ``sz`` may also be grid axes.  With ``combine = "zip"``
the axes are walked together (lists of length 1 are repeated).

From Python the model may also be given as a :class:`~lowfold.model.model.Model` object
(``parse_scan(data, model=...)``, ``run_scan(..., model=...)``); the ``model`` key may then
be left out, and the object is used instead of any file it names.

Every problem is a :class:`~lowfold.errors.ModelError` whose message names the file and
the key, e.g. ``scan.toml: grid.U: range needs num``.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from fractions import Fraction
from pathlib import Path
from typing import Any, Mapping

from lowfold.errors import ModelError
from lowfold.model.model import Model
from lowfold.model.modelfile import load_model, read_toml

__all__ = ["TASK_NAMES", "SECTOR_AXES", "ScanSpec", "parse_scan", "load_scan", "scan_error",
           "with_lattice"]

TASK_NAMES = ("spectrum", "derive", "series")
SECTOR_AXES = ("particles", "filling", "sz")
_TOP_KEYS = {"model", "title", "task", "grid", "sector"}
MAX_POINTS = 100_000   # points of one scan (each is a job and a file in the store)


@dataclass(frozen=True)
class ScanSpec:
    """A parsed scan file.

    Attributes
    ----------
    source : str
        Where it came from (for messages).
    model_path : Path or None
        The model file (absolute, or relative to the working directory); None when the
        model is given as an object only.
    task : str
    options : Mapping
        The task's options (``[task]`` minus ``name``).
    axes : tuple of (name, tuple of values)
        Grid axes in file order: parameters, ``size``, ``boundary``, sector axes.
    combine : str
        ``"product"`` or ``"zip"``.
    sector : Mapping
        Fixed ``[sector]`` entries (``particles``, ``filling``, ``sz``).
    title : str
    model : Model, optional
        The model itself, when given as an object; used instead of ``model_path``.

    Raises
    ------
    ModelError
        Neither a model file nor a model, or a ``model`` that is not a :class:`Model`.
    """

    source: str
    model_path: Path | None
    task: str
    options: Mapping[str, Any]
    axes: tuple[tuple[str, tuple], ...]
    combine: str = "product"
    sector: Mapping[str, Any] = field(default_factory=dict)
    title: str = ""
    model: Model | None = None

    def __post_init__(self):
        if self.model is not None and not isinstance(self.model, Model):
            raise ModelError(f"{self.source}: model must be a lowfold Model, got {type(self.model).__name__}")
        if self.model is None and self.model_path is None:
            raise ModelError(f"{self.source}: a scan needs a model file or a Model")

    @property
    def model_name(self) -> str:
        """The model, for messages: its file, or the title (or source) of the given model."""
        if self.model is None:
            return str(self.model_path)
        return self.model.title or self.model.source

    def base_model(self) -> Model:
        """The model given as an object, or else the one read from ``model_path``."""
        return self.model if self.model is not None else load_model(self.model_path)


def scan_error(source: str, key: str, message: str) -> ModelError:
    return ModelError(f"{source}: {key}: {message}")


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _values(source: str, key: str, spec) -> tuple[float, ...]:
    """Parameter values from a number, a list, or ``{start, stop, num[, spacing]}``."""
    if _is_number(spec):
        return (float(spec),)
    if isinstance(spec, list):
        if not spec or not all(_is_number(v) for v in spec):
            raise scan_error(source, key, "must be a non-empty list of numbers")
        return tuple(float(v) for v in spec)
    if isinstance(spec, dict):
        unknown = set(spec) - {"start", "stop", "num", "spacing"}
        if unknown:
            raise scan_error(source, key, f"unknown range key(s) {', '.join(sorted(unknown))} "
                        "(a range is {start = a, stop = b, num = n, spacing = 'linear'|'log'})")
        missing = {"start", "stop", "num"} - set(spec)
        if missing:
            raise scan_error(source, key, f"range needs {', '.join(sorted(missing))} "
                        "(a range is {start = a, stop = b, num = n}, both ends included)")
        start, stop, num = spec["start"], spec["stop"], spec["num"]
        if not (_is_number(start) and _is_number(stop)):
            raise scan_error(source, key, "start and stop must be numbers")
        if not isinstance(num, int) or isinstance(num, bool) or num < 1:
            raise scan_error(source, key, f"num must be an integer >= 1, got {num!r}")
        if num > MAX_POINTS:
            raise scan_error(source, key, f"num = {num:,} is more than the {MAX_POINTS:,} points "
                             "a scan may plan; split it into several scans")
        spacing = spec.get("spacing", "linear")
        if spacing not in ("linear", "log"):
            raise scan_error(source, key, f"spacing must be 'linear' or 'log', got {spacing!r}")
        if spacing == "log" and not (start > 0 and stop > 0 or start < 0 and stop < 0):
            raise scan_error(source, key, "a log range needs start and stop of the same sign, not 0")
        if num == 1:
            raw = [float(start)]
        elif spacing == "linear":
            raw = [start + (stop - start) * k / (num - 1) for k in range(num)]
        else:
            ratio = stop / start
            raw = [start * ratio ** (k / (num - 1)) for k in range(num)]
        return tuple(float(f"{v:.12g}") for v in raw)   # stable keys: no 5.999999999
    raise scan_error(source, key, "must be a number, a list of numbers or {start, stop, num}")


def _sizes(source: str, spec) -> tuple[tuple[int, ...], ...]:
    if isinstance(spec, int) and not isinstance(spec, bool):
        spec = [spec]
    if not isinstance(spec, list) or not spec:
        raise scan_error(source, "grid.size", "must be a list of sizes, e.g. [[4], [6]] or [4, 6]")
    out = []
    for entry in spec:
        entry = [entry] if isinstance(entry, int) and not isinstance(entry, bool) else entry
        if (not isinstance(entry, list) or not entry
                or not all(isinstance(n, int) and not isinstance(n, bool) and n >= 1 for n in entry)):
            raise scan_error(source, "grid.size", f"entries must be lists of integers >= 1, got {entry!r}")
        out.append(tuple(entry))
    return tuple(out)


def _boundaries(source: str, spec) -> tuple:
    spec = [spec] if isinstance(spec, str) else spec
    if not isinstance(spec, list) or not spec:
        raise scan_error(source, "grid.boundary", "must be a list such as ['open', 'periodic']")
    out = []
    for entry in spec:
        items = [entry] if isinstance(entry, str) else entry
        if not isinstance(items, list) or not all(b in ("open", "periodic") for b in items):
            raise scan_error(source, "grid.boundary",
                        f"entries must be 'open' or 'periodic' (or a list of them), got {entry!r}")
        out.append(entry if isinstance(entry, str) else tuple(entry))
    return tuple(out)


def _sector_value(source: str, key: str, name: str, value):
    if name == "particles":
        if not isinstance(value, int) or isinstance(value, bool) or value < 0:
            raise scan_error(source, key, f"particles must be a non-negative integer, got {value!r}")
        return value
    if not _is_number(value):
        raise scan_error(source, key, f"{name} must be a number, got {value!r}")
    if name == "sz" and (2 * value) % 1:
        raise scan_error(source, key, f"sz must be a multiple of 1/2, got {value!r}")
    if name == "filling" and value < 0:
        raise scan_error(source, key, f"filling must be >= 0, got {value!r}")
    return float(value)


def _task(source: str, table) -> tuple[str, dict]:
    if not isinstance(table, dict) or "name" not in table:
        raise scan_error(source, "task", "needs a [task] table with name = 'spectrum' | 'derive' | 'series'")
    name = table["name"]
    if name not in TASK_NAMES:
        raise scan_error(source, "task.name", f"unknown task {name!r} (known: {', '.join(TASK_NAMES)})")
    options = {k: v for k, v in table.items() if k != "name"}
    for key, value in options.items():
        if isinstance(value, dict):
            raise scan_error(source, f"task.{key}", "options must be numbers, strings, booleans or lists")
    return name, options


def parse_scan(data: Mapping[str, Any], *, source: str = "<scan>", base_dir: str | os.PathLike = ".",
               model: Model | None = None) -> ScanSpec:
    """Validate a parsed scan document (see the module docstring for the format).

    Parameters
    ----------
    data : dict
        The parsed TOML.
    source : str, keyword-only
        Name used in error messages.
    base_dir : path, keyword-only
        Directory the model path is relative to.
    model : Model, keyword-only, optional
        The model as an object: the document's ``model`` key may then be left out, and
        the object is used instead of the file it names.

    Raises
    ------
    ModelError
        Naming the file and the key.
    """
    unknown = set(data) - _TOP_KEYS
    if unknown:
        raise scan_error(source, ", ".join(sorted(unknown)),
                    f"unknown key (allowed: {', '.join(sorted(_TOP_KEYS))})")
    model_file = data.get("model")
    if (model is None or model_file is not None) and (not isinstance(model_file, str) or not model_file):
        raise scan_error(source, "model", "needs model = 'path/to/model.toml' (relative to the scan file)")
    if model_file is not None and not model_file.isprintable():
        raise scan_error(source, "model", f"the path {model_file!r} holds control characters")
    title = data.get("title", "")
    if not isinstance(title, str):
        raise scan_error(source, "title", "must be a string")
    task, options = _task(source, data.get("task"))
    grid = data.get("grid", {})
    if not isinstance(grid, dict):
        raise scan_error(source, "grid", "must be a table")
    combine = grid.get("combine", "product")
    if combine not in ("product", "zip"):
        raise scan_error(source, "grid.combine", f"must be 'product' or 'zip', got {combine!r}")
    axes = []
    for name, spec in grid.items():
        key = f"grid.{name}"
        if name == "combine":
            continue
        if name == "size":
            axes.append((name, _sizes(source, spec)))
        elif name == "boundary":
            axes.append((name, _boundaries(source, spec)))
        elif name in SECTOR_AXES:
            spec = spec if isinstance(spec, list) else [spec]
            axes.append((name, tuple(_sector_value(source, key, name, v) for v in spec)))
        else:
            axes.append((name, _values(source, key, spec)))
    names = [n for n, _ in axes]
    _check_point_count(source, axes, combine)
    if "particles" in names and "filling" in names:
        raise scan_error(source, "grid.filling", "give particles or filling, not both")
    if combine == "zip":
        lengths = {len(v) for _, v in axes if len(v) > 1}
        if len(lengths) > 1:
            raise scan_error(source, "grid.combine", "with combine = 'zip' every axis needs the same "
                        "number of values (or just one), got lengths "
                        + ", ".join(f"{n}: {len(v)}" for n, v in axes))
    sector = data.get("sector", {})
    if not isinstance(sector, dict):
        raise scan_error(source, "sector", "must be a table")
    extra = set(sector) - set(SECTOR_AXES)
    if extra:
        raise scan_error(source, f"sector.{sorted(extra)[0]}", f"unknown key (allowed: {', '.join(SECTOR_AXES)})")
    if "particles" in sector and "filling" in sector:
        raise scan_error(source, "sector.filling", "give particles or filling, not both")
    sector = {k: _sector_value(source, f"sector.{k}", k, v) for k, v in sector.items()}
    for name in sector:
        if name in names:
            raise scan_error(source, f"sector.{name}", "is also a grid axis; give it in one place")
    return ScanSpec(source=source, model_path=None if model_file is None else Path(base_dir) / model_file,
                    task=task, options=options, axes=tuple(axes), combine=combine, sector=sector,
                    title=title, model=model)


def _check_point_count(source: str, axes, combine: str) -> None:
    """Refuse a grid of more than :data:`MAX_POINTS` points before anything is planned."""
    lengths = [len(values) for _, values in axes]
    count = max(lengths, default=1) if combine == "zip" else math.prod(lengths)
    if count > MAX_POINTS:
        raise scan_error(source, "grid", f"has {count:,} points, more than the {MAX_POINTS:,} "
                         "a scan may plan; split it into several scans")


def load_scan(path: str | os.PathLike) -> ScanSpec:
    """Read and validate a scan file (the model path is taken relative to it)."""
    path = Path(path)
    return parse_scan(read_toml(path), source=str(path), base_dir=path.parent)


def with_lattice(spec: ScanSpec, size: tuple[int, ...] | None = None,
                 boundary: str | None = None) -> ScanSpec:
    """The scan with one lattice size and/or boundary at every point, replacing the model
    file's (``lowfold scan --size/--boundary``, as for the other commands).

    They become grid axes of one value, so the records carry them.  An infinite lattice
    given a size becomes periodic unless a boundary is given; when the model's sector fixes
    the particle number and the scan sets no sector of its own, the filling (particles per
    site) is kept.  A :class:`~lowfold.errors.ModelError` if the grid already scans the
    size or the boundary, or for a boundary other than ``open`` / ``periodic``.
    """
    names = [n for n, _ in spec.axes]
    for name, value in (("size", size), ("boundary", boundary)):
        if value is not None and name in names:
            raise scan_error(spec.source, f"grid.{name}", f"the grid already scans the {name}; "
                             "one value for the whole scan cannot replace it")
    if boundary is not None and boundary not in ("open", "periodic"):
        raise ModelError(f"a boundary is open or periodic, got {boundary!r}")
    if size is None and boundary is None:
        return spec
    model = spec.base_model()
    if size is not None and boundary is None and "boundary" not in names and model.lattice.infinite:
        boundary = "periodic"
    axes = list(spec.axes)
    if size is not None:
        axes.append(("size", (tuple(size),)))
    if boundary is not None and "boundary" not in names:
        axes.append(("boundary", (boundary,)))
    sector = dict(spec.sector)
    own = set(sector) | (set(names) & set(SECTOR_AXES))
    if size is not None and model.sector.particles is not None and not own & {"particles", "filling"}:
        sector["filling"] = float(Fraction(model.sector.particles, model.n_sites))
    return replace(spec, axes=tuple(axes), sector=sector)
