"""The exact coupling of a derive scan against its perturbative partial sums.

:func:`plot_exact_couplings` draws, for the scan points of a derive task run with
``exact_couplings = true``, one coupling's exact value on the cluster (direct rotation,
``lowfold.jobs.exact_couplings``) as a black line, and its partial sums through each order
(J_2, J_2 + J_4, J_2 + J_4 + J_6, ...) as coloured curves (upper panel); the lower panel
shows ``|J_exact - partial sum|`` on log-log axes, whose slope is the order of the first
missing term.  ``lowfold plot RESULTS --kind exact-couplings --x t/U`` draws it.
"""

from __future__ import annotations

import math
import os
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
from matplotlib.figure import Figure

from lowfold.errors import ModelError
from lowfold.plots.scan_figures import select_where
from lowfold.plots.style import (FIGSIZE, DPI, axis_label, finish, legend, quantity_symbol,
                                 styled, styles, value_label, visible_text)
from lowfold.results import EffectiveModel
from lowfold.scans.select import axis_value, scalar
from lowfold.scans.store import point_result
from lowfold.scans.table import flatten_components, sites_label

__all__ = ["exact_value", "plot_exact_couplings"]


def _parse(quantity: str) -> tuple[str, str | None, str | None]:
    head, *rest = quantity.split(":")
    if head != "coupling" or not rest or not rest[0]:
        raise ModelError(f"an exact-couplings plot draws a coupling: "
                         f"coupling:KIND[:SITES[:COMPONENT]], got {quantity!r}")
    sites = rest[1] if len(rest) > 1 and rest[1] else None
    return rest[0], sites, rest[2] if len(rest) > 2 else None


def exact_value(record: Mapping[str, Any], quantity: str) -> float:
    """The exact value of the coupling ``quantity`` (``coupling:KIND[:SITES[:COMPONENT]]``)
    of a derive record computed with exact couplings."""
    result = point_result(record)
    if not isinstance(result, EffectiveModel) or result.exact is None:
        raise ModelError(f"point {record.get('key', '?')} has no exact couplings; run the derive "
                         "task with exact_couplings = true")
    kind, sites, component = _parse(quantity)
    matches = [c for c in result.couplings
               if c.kind == kind and (sites is None or sites_label(c.sites) == sites)]
    if len(matches) != 1:
        scalar(record, quantity)               # the ModelError that lists what there is
    c = matches[0]
    value = result.exact.coupling_value(c.kind, c.sites, c.value, getattr(c, "operator", None))
    if component in (None, ""):
        if isinstance(value, list):
            raise ModelError(f"coupling {kind} is a vector or matrix; name a component")
        return float(value)
    for name, number in flatten_components(value):
        if name == component:
            return float(number)
    raise ModelError(f"coupling {kind}: no component {component!r}")


def _orders(records, quantity: str) -> list[int]:
    kind, sites, _ = _parse(quantity)
    found: set[int] = set()
    for r in records:
        for c in point_result(r).couplings:
            if c.kind == kind and (sites is None or sites_label(c.sites) == sites):
                found.update(m for m, v in c.orders.items() if np.max(np.abs(v)) > 0)
    return sorted(found)


@styled
def plot_exact_couplings(
    records: Iterable[Mapping[str, Any]],
    *,
    x: str,
    quantity: str = "coupling:exchange",
    orders: Sequence[int] | None = None,
    unit: str | None = None,
    floor: float = 1e-13,
    title: str | None = None,
    where: Mapping[str, Any] | None = None,
    output: str | os.PathLike | None = None,
) -> Figure:
    """A coupling's exact value against its partial sums, and their differences.

    Parameters are those of :func:`lowfold.plots.scan_figures.plot_couplings`; ``orders``
    defaults to the orders that contribute; ``floor`` hides differences at round-off level
    from the lower panel and its slope fits.
    """
    good = select_where(records, where)
    seen: set[float] = set()
    for r in good:
        value = axis_value(r, x)
        if value in seen:
            raise ModelError(f"several points have {x} = {value:g}; pick one slice with where")
        seen.add(value)
    good.sort(key=lambda r: axis_value(r, x))
    orders = list(orders) if orders is not None else _orders(good, quantity)
    xs = np.array([axis_value(r, x) for r in good])
    scale = np.array([1.0 if unit is None else float(r["parameters"][unit]) for r in good])
    exact = np.array([exact_value(r, quantity) for r in good]) / scale
    fig = Figure(figsize=(FIGSIZE[0], FIGSIZE[1] * 1.6), dpi=DPI, layout="constrained")
    top, bottom = fig.add_subplot(2, 1, 1), fig.add_subplot(2, 1, 2)
    symbol = quantity_symbol(quantity)
    for order, (colour, marker, ls) in zip(orders, styles()):
        partial = np.array([scalar(r, quantity, order=order) for r in good]) / scale
        top.plot(xs, partial, color=colour, marker=marker, linestyle=ls,
                 label=f"through order {order}")
        diff = np.abs(exact - partial)
        keep = (diff > floor) & (xs > 0)
        slope = (float(np.polyfit(np.log(xs[keep]), np.log(diff[keep]), 1)[0])
                 if keep.sum() >= 2 else math.nan)
        bottom.loglog(xs[keep], diff[keep], color=colour, marker=marker, linestyle=ls,
                      label=f"order {order}" + ("" if math.isnan(slope) else f" (slope {slope:.2f})"))
    top.plot(xs, exact, color="black", marker="*", markersize=10, label="exact (direct rotation)")
    top.set_ylabel(value_label(symbol, unit))
    bottom.set_ylabel(value_label("|\\delta " + symbol + "|", unit))   # exact - partial sum
    for ax in (top, bottom):
        ax.set_xlabel(axis_label(x))
        legend(ax, frameon=False)
        ax.grid(alpha=0.3, which="both")
    titles = {r.get("model", {}).get("title", "") for r in good} - {""}
    top.set_title(visible_text(title if title is not None else
                               (titles.pop() if len(titles) == 1 else "")))
    return finish(fig, output)
