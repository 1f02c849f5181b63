"""Selectors: one number out of a point record, by a short text.

The plots and the finite-size fits read records through these selectors:

* axis values (:func:`axis_value`): a parameter name ``"U"``, a ratio ``"t/U"``, an inverse
  ``"1/U"``, the lattice length ``"L"`` (first size entry) or the number of sites ``"N"``;
* quantities (:func:`scalar`): ``"energy"`` / ``"energy:k"`` (level k of a spectrum, or of a
  derive check's exact spectrum), ``"gap:i:j"`` (``E_j - E_i``), ``"series"`` (the summed
  series energy), ``"coupling:KIND[:SITES[:COMPONENT]]"`` (e.g. ``"coupling:exchange:0-1"``,
  ``"coupling:field:2:z"``) and ``"error"`` (a derive check's max_abs_error); ``order=n``
  sums a series or a coupling through order n.  A spin-1/2 coupling the readout left out
  (it lists those above its tolerance only) is zero, when the selector names its kind and
  the right number of distinct sites of the point (``coupling:chirality:0-1-2`` of a flux
  scan at Phi = 0); any other selector that matches nothing is an error.

A record's ``result`` is read through its typed result object (:func:`lowfold.scans.store.point_result`,
:mod:`lowfold.results`), never by its JSON keys.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np

from lowfold.errors import ModelError
from lowfold.readout.couplings import Coupling
from lowfold.results import EffectiveModel, Spectrum, StateSeries
from lowfold.scans.store import point_result
from lowfold.scans.table import flatten_components, sites_label

__all__ = ["axis_value", "scalar", "energy_levels"]


def axis_value(record: Mapping[str, Any], spec: str) -> float:
    """Value of an axis selector (``"U"``, ``"t/U"``, ``"1/U"``, ``"L"``, ``"N"``, ``"1/L"``).

    ``L`` is the first entry of the lattice size and ``N`` the number of sites; a model
    parameter of the same name takes precedence.
    """
    spec = spec.replace(" ", "")
    if "/" in spec:
        num, den = spec.split("/", 1)
        numerator = 1.0 if num == "1" else axis_value(record, num)
        return numerator / axis_value(record, den)
    parameters = record.get("parameters", {})
    if spec in parameters:
        return float(parameters[spec])
    if spec == "L" and record.get("size"):
        return float(record["size"][0])
    if spec == "N" and record.get("n_sites") is not None:
        return float(record["n_sites"])
    raise ModelError(
        f"axis {spec!r}: not a parameter ({', '.join(parameters) or 'none'}), 'L' or 'N' "
        f"of point {record.get('key', '?')}")


def _component(value: Any, component: str | None, what: str) -> float:
    if component is None or component == "":
        if isinstance(value, (list, tuple)):
            raise ModelError(f"{what} is a vector or matrix; name a component (x, y, z, xy, ...)")
        return float(value)
    for name, number in flatten_components(value):
        if name == component:
            return float(number)
    raise ModelError(f"{what}: no component {component!r}")


# spin-1/2 coupling kinds: number of sites and shape of the value (docs/output.md)
_SPIN_KINDS = {"constant": (0, ()), "field": (1, (3,)), "exchange": (2, ()), "dm": (2, (3,)),
               "anisotropy": (2, (3, 3)), "chirality": (3, ()), "ring": (4, ())}


def _absent(result: EffectiveModel, kind: str, sites: str | None, n_sites) -> Coupling | None:
    """The zero coupling that a spin-form readout leaves out (it lists couplings above its
    tolerance only: the chirality of a flux scan at Phi = 0), when ``kind`` is a spin-1/2
    kind and ``sites`` names the right number of distinct sites of the point."""
    if not result.spin_form or kind not in _SPIN_KINDS:
        return None
    arity, shape = _SPIN_KINDS[kind]
    labels = [] if not sites else sites.split("-")
    if len(labels) != arity or not all(x.isdigit() for x in labels):
        return None
    numbers = tuple(int(x) for x in labels)
    if len(set(numbers)) != arity or (n_sites is not None and max(numbers, default=-1) >= n_sites):
        return None
    zero = np.zeros(shape).tolist() if shape else 0.0
    return Coupling(kind, numbers, zero, {})


def _coupling(result: EffectiveModel, kind: str, sites: str | None, n_sites=None) -> Coupling:
    matches = [c for c in result.couplings if c.kind == kind
               and (sites is None or sites_label(c.sites) == sites)]
    if len(matches) == 1:
        return matches[0]
    zero = _absent(result, kind, sites, n_sites) if not matches else None
    if zero is not None:
        return zero
    available = sorted({f"{c.kind}:{sites_label(c.sites)}" for c in result.couplings})
    reason = "no" if not matches else "more than one"
    raise ModelError(f"{reason} coupling {kind}{':' + sites if sites else ''}; "
                     f"available: {', '.join(available) or 'none'}")


def energy_levels(result) -> list[float] | None:
    """The energy levels a result holds: a spectrum's, or a derive's exact check (else None)."""
    if isinstance(result, Spectrum):
        return [float(e) for e in result.energies]
    if isinstance(result, EffectiveModel) and result.check is not None:
        return list(result.check.exact)
    return None


def scalar(record: Mapping[str, Any], quantity: str, *, order: int | None = None) -> float:
    """One number out of a successful record, by quantity selector (module docstring).

    Parameters
    ----------
    record : dict
        A point record with ``status == "ok"``.
    quantity : str
        ``energy[:k]``, ``gap:i:j``, ``series``, ``coupling:KIND[:SITES[:COMPONENT]]``,
        ``error``.
    order : int, optional
        Sum a series or a coupling through this order only (for ``error``: the check at
        this order, default the highest).
    """
    if record.get("status") != "ok":
        raise ModelError(f"point {record.get('key', '?')} failed; it has no {quantity}")
    task = record.get("task", "")
    result = point_result(record)
    head, *rest = quantity.split(":")
    if head in ("energy", "gap"):
        levels = energy_levels(result)
        if levels is None:
            raise ModelError(f"{quantity}: the {task} result holds no energy levels")
        if not all(i.isdigit() for i in rest) or len(rest) > (1 if head == "energy" else 2):
            raise ModelError(f"{quantity}: level indices are integers from 0 "
                             "(energy[:k], gap:i:j)")
        idx = [int(i) for i in rest] or ([0] if head == "energy" else [0, 1])
        if head == "gap" and len(idx) != 2:
            raise ModelError(f"{quantity}: a gap needs two levels (gap:i:j)")
        if max(idx) >= len(levels):
            raise ModelError(f"{quantity}: only {len(levels)} levels stored (raise 'levels')")
        return float(levels[idx[0]]) if head == "energy" else float(levels[idx[1]]) - float(levels[idx[0]])
    if head == "series":
        if not isinstance(result, StateSeries):
            raise ModelError(f"{quantity}: the {task} result holds no series")
        if order is None:
            return result.energy
        return math.fsum(float(e) for m, e in enumerate(result.energies) if m <= order)
    if head == "coupling":
        if not rest:
            raise ModelError("coupling selector needs a kind: coupling:KIND[:SITES[:COMPONENT]]")
        if not isinstance(result, EffectiveModel):
            raise ModelError(f"{quantity}: the {task} result holds no couplings")
        kind = rest[0]
        sites = rest[1] if len(rest) > 1 and rest[1] else None
        component = rest[2] if len(rest) > 2 else None
        coupling = _coupling(result, kind, sites, record.get("n_sites"))
        what = f"coupling {kind}"
        if order is None:
            return _component(coupling.value, component, what)
        return math.fsum(_component(v, component, what)
                         for k, v in coupling.orders.items() if k <= order)
    if head == "error":
        check = result.check if isinstance(result, EffectiveModel) else None
        if check is None or not check.max_abs_error:
            raise ModelError(f"{quantity}: the result holds no check (run derive with check)")
        key = order if order is not None else max(check.max_abs_error)
        if key not in check.max_abs_error:
            raise ModelError(f"{quantity}: no check at order {key}")
        return float(check.max_abs_error[key])
    raise ModelError(f"unknown quantity {quantity!r}: use energy[:k], gap:i:j, series, "
                     "coupling:KIND[:SITES[:COMPONENT]] or error")
