"""Planning a scan: the grid's points, each with its model, sector, key and cost.

:func:`plan_scan` expands the grid of a :class:`~lowfold.scans.scanfile.ScanSpec` (product
or zip of its axes) into :class:`ScanPoint` objects in grid order; each point carries the
base model with its lattice, parameters and sector applied, its store key
(:func:`lowfold.scans.store.point_key`) and its cost (the basis dimension), by which
:func:`order_by_cost` sorts the points biggest first for the scheduler.

Grid axes are real parameters.  A model may hold complex ones: a complex parameter written
with parameter names as parts (``tc = {abs = "t", phase = "phi"}``) follows the real
parameters it names, so a scan over ``t`` or ``phi`` scans ``tc``; keys, records and tables
store every complex parameter as its two real parts ``tc.re`` and ``tc.im``
(:func:`stored_parameters`).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from fractions import Fraction
from typing import Any, Iterable, Mapping

from lowfold.build.basis import sector_size
from lowfold.errors import LowfoldError, ModelError, SizeError
from lowfold.model.sector import Sector
from lowfold.scans.scanfile import SECTOR_AXES, ScanSpec, scan_error
from lowfold.scans.store import point_key

__all__ = ["ScanPoint", "plan_scan", "order_by_cost", "stored_parameters"]


@dataclass(frozen=True)
class ScanPoint:
    """One point of a scan, ready to run.

    ``model`` is the base model with the point's lattice, sector and parameters applied;
    ``error`` is set instead when the point is impossible before anything runs (e.g. a
    filling that gives a fractional particle number).
    """

    key: str
    values: Mapping[str, Any]
    parameters: Mapping[str, float]
    size: tuple[int, ...] | None
    boundary: Any
    sector: Mapping[str, Any]
    n_sites: int
    cost: float
    model: Any = None
    error: Mapping[str, Any] | None = None


def _combinations(spec: ScanSpec):
    names = [n for n, _ in spec.axes]
    values = [v for _, v in spec.axes]
    if not names:
        return [{}]
    if spec.combine == "product":
        return [dict(zip(names, combo)) for combo in itertools.product(*values)]
    length = max(len(v) for v in values)
    return [{n: (v[i] if len(v) > 1 else v[0]) for n, v in zip(names, values)} for i in range(length)]


def _point_sector(base: Sector, fixed: Mapping[str, Any], values: Mapping[str, Any], n_sites: int):
    """The sector of a point, or an error message when it cannot be formed."""
    wanted = {**fixed, **{k: v for k, v in values.items() if k in SECTOR_AXES}}
    sz = Fraction(wanted["sz"]).limit_denominator(2) if "sz" in wanted else base.sz
    if "filling" in wanted:
        try:
            return Sector.from_filling(wanted["filling"], n_sites, sz=sz), None
        except ModelError as exc:
            return None, str(exc)
    particles = int(wanted["particles"]) if "particles" in wanted else base.particles
    return Sector(particles, sz), None


def _with_grid_parameters(spec: ScanSpec, model, params: Mapping[str, float]):
    """``model`` with the point's parameter values; a value the model refuses is an error of
    the scan file naming its grid key (``grid.U``)."""
    try:
        return model.with_parameters(params)
    except ModelError as exc:
        for name, value in params.items():          # which value: try them one by one
            try:
                model.with_parameters({name: value})
            except ModelError as one:
                text = str(one).removeprefix(f"parameters.{name}: ")
                raise scan_error(spec.source, f"grid.{name}", text) from None
        raise scan_error(spec.source, "grid", str(exc)) from None


def _check_real_axes(spec: ScanSpec, model) -> None:
    """A grid axis must be a real parameter: a complex one is scanned through the real
    parameters its parts name."""
    for name, _ in spec.axes:
        if name in model.forms:
            names = ", ".join(model.forms[name].names)
            raise scan_error(spec.source, f"grid.{name}", f"{name} = {model.forms[name]} is "
                             f"complex; scan the parameters it names ({names}) instead")
        if isinstance(model.parameters.get(name), complex):
            raise scan_error(spec.source, f"grid.{name}", f"parameter {name!r} of "
                             f"{spec.model_name} is complex; a scan varies real parameters: "
                             f"write it with parameter names as parts, e.g. {name} = "
                             '{abs = "a", phase = "phi"}, and scan those')


def stored_parameters(model) -> dict[str, float]:
    """The parameters of a point as stored in its key, record and table: real numbers only.
    A complex parameter ``tc``, and one computed from others (which may be real at some
    points and complex at others), is stored as its two parts ``tc.re`` and ``tc.im``."""
    out = {}
    for name, value in model.parameters.items():
        if isinstance(value, complex) or name in model.forms:
            value = complex(value)
            parts = {f"{name}.re": value.real, f"{name}.im": value.imag}
            clash = [k for k in parts if k in model.parameters]
            if clash:
                raise ModelError(f"parameters: {clash[0]!r} is also the stored name of a part "
                                 f"of the complex parameter {name!r}; rename one of them")
            out.update(parts)
        else:
            out[name] = float(value)
    return out


def _cost(model) -> float:
    """Estimated cost of a point: its basis dimension (0 if it cannot be formed)."""
    try:
        return float(sector_size(model.site, model.n_sites, model.sector))
    except (LowfoldError, ValueError, TypeError):
        return 0.0


def _sector_dict(sector: Sector) -> dict:
    return {"particles": sector.particles, "sz": None if sector.sz is None else float(sector.sz)}


def plan_scan(spec: ScanSpec, model=None) -> list[ScanPoint]:
    """Expand the grid into points (in grid order), each with its model, key and cost.

    Parameters
    ----------
    spec : ScanSpec
    model : Model, optional
        The base model (default: :meth:`ScanSpec.base_model`, the spec's model object or
        its model file).

    Raises
    ------
    ModelError
        A grid parameter the model does not define, a complex one (scan the real parameters
        its parts name), or a value the model refuses (``grid.U``), or
        a lattice size / boundary the model's lattice cannot take, too large ones included
        (``grid.size``); the message names the scan file and the key.
    """
    model = spec.base_model() if model is None else model
    for name, _ in spec.axes:
        if name not in ("size", "boundary", *SECTOR_AXES) and name not in model.parameters:
            raise scan_error(spec.source, f"grid.{name}",
                             f"not a parameter of {spec.model_name} "
                             f"(parameters: {', '.join(model.parameters) or 'none'})")
    _check_real_axes(spec, model)
    lattices: dict = {}
    points = []
    for values in _combinations(spec):
        size, boundary = values.get("size"), values.get("boundary")
        if (size, boundary) not in lattices:
            try:
                lattices[size, boundary] = (model if size is None and boundary is None
                                            else model.with_lattice(size=size, boundary=boundary))
            except (ModelError, SizeError) as exc:
                key = "grid.size" if size is not None else "grid.boundary"
                where = " ".join(str(v) for v in (size, boundary) if v is not None)
                raise scan_error(spec.source, key, f"{where}: {exc}") from None
        point_model = lattices[size, boundary]
        params = {k: v for k, v in values.items() if k in model.parameters}
        point_model = _with_grid_parameters(spec, point_model, params)
        sector, problem = _point_sector(model.sector, spec.sector, values, point_model.n_sites)
        try:
            parameters = stored_parameters(point_model)
        except ModelError as exc:
            raise scan_error(spec.source, "model", str(exc)) from None
        sector_dict = _sector_dict(sector) if sector is not None else {"error": problem}
        key = point_key(parameters=parameters, size=size,
                        boundary=list(boundary) if isinstance(boundary, tuple) else boundary,
                        task=spec.task, options=spec.options, sector=sector_dict)
        if sector is not None:
            point_model = point_model.with_sector(sector)
        points.append(ScanPoint(
            key=key, values=values, parameters=parameters, size=size,
            boundary=list(boundary) if isinstance(boundary, tuple) else boundary,
            sector=sector_dict, n_sites=point_model.n_sites,
            cost=_cost(point_model) if sector is not None else 0.0, model=point_model,
            error=None if problem is None else {"type": "ModelError", "message": problem,
                                                "deterministic": True}))
    keys = [p.key for p in points]
    if len(set(keys)) != len(keys):
        raise scan_error(spec.source, "grid", "the grid lists the same point more than once")
    return points


def order_by_cost(points: Iterable[ScanPoint]) -> list[ScanPoint]:
    """The points sorted by cost, biggest basis first (so the longest points start first)."""
    return sorted(points, key=lambda p: p.cost, reverse=True)
