"""Figures of scan results: couplings, errors, finite-size fits, energy levels.

Each function takes point records (:func:`lowfold.scans.store.load_results`) and returns
a :class:`matplotlib.figure.Figure`; with ``output=`` the figure is also saved, in the
format given by the file extension (``.png``, ``.svg``, ``.pdf``):

* :func:`plot_couplings` - a coupling against a parameter, one curve per perturbative
  order (cumulative sums), plus the exact value where the scan has it;
* :func:`plot_errors` - error of each order against the expansion parameter on log-log
  axes, the fitted slope in the legend;
* :func:`plot_finite_size` - a quantity against 1/L (or 1/N) with the finite-size fit
  and the extrapolated value;
* :func:`plot_levels` - exact levels against a parameter with the series overlaid.

Energies can be given in units of a model parameter (``unit="t"`` labels the axis
``J / t``).  :func:`lowfold.plots.from_directory.plot_results` draws one of them from a
results directory.
"""

from __future__ import annotations

import itertools
import math
import os
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Mapping, Sequence

import numpy as np
from matplotlib.figure import Figure

from lowfold.errors import ModelError
from lowfold.plots.style import (
    axis_label,
    finish,
    legend,
    new_figure,
    quantity_symbol,
    styled,
    styles,
    value_label,
    visible_text,
)
from lowfold.results import EffectiveModel, StateSeries
from lowfold.scans.extrapolate import extrapolate_records
from lowfold.scans.select import axis_value, energy_levels, scalar
from lowfold.scans.store import point_result

__all__ = ["plot_couplings", "plot_errors", "plot_finite_size", "plot_levels", "exact_gap",
           "ExactGap", "successful_records", "select_where"]


def _title(records: Sequence[Mapping[str, Any]], title: str | None) -> str:
    if title is not None:
        return visible_text(title)
    titles = {r.get("model", {}).get("title", "") for r in records} - {""}
    return visible_text(titles.pop()) if len(titles) == 1 else ""


def _unit_value(record: Mapping[str, Any], unit: str | None) -> float:
    if unit is None:
        return 1.0
    try:
        return float(record["parameters"][unit])
    except KeyError:
        raise ModelError(f"unit {unit!r} is not a parameter of the model") from None


def successful_records(records: Iterable[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """The records with ``status == "ok"``; ModelError if there is none."""
    records = list(records)
    good = [r for r in records if r.get("status") == "ok"]
    if not good:
        raise ModelError("no successful points to plot")
    return good


def _matches(record: Mapping[str, Any], name: str, wanted: Any) -> bool:
    values = record.get("values", {})
    if name not in values:
        raise ModelError(f"where: {name!r} is not a grid axis of the scan "
                         f"(axes: {', '.join(values) or 'none'})")
    have = values[name]
    if name == "size":
        wanted = [wanted] if isinstance(wanted, int) else list(wanted)
        return list(have) == wanted
    if isinstance(have, (int, float)) and isinstance(wanted, (int, float)):
        return math.isclose(float(have), float(wanted), rel_tol=1e-9, abs_tol=1e-12)
    return have == wanted


def select_where(records: Iterable[Mapping[str, Any]], where: Mapping[str, Any] | None):
    """The successful records whose grid values match ``where`` (all of them without it)."""
    good = successful_records(records)
    if where:
        good = [r for r in good if all(_matches(r, k, v) for k, v in where.items())]
        if not good:
            raise ModelError(f"no successful point matches where={dict(where)}")
    return good


def _slice(records: Iterable[Mapping[str, Any]], x: str, where: Mapping[str, Any] | None):
    """Successful records matching ``where``, which must leave one point per x value."""
    good = select_where(records, where)
    seen: dict[float, Mapping[str, Any]] = {}
    for r in good:
        value = axis_value(r, x)
        if value in seen:
            other = seen[value].get("values", {})
            differ = sorted(k for k, v in r.get("values", {}).items() if other.get(k) != v)
            raise ModelError(
                f"several points have {x} = {value:g} (they differ in {', '.join(differ)}); "
                f"pick one slice with where, e.g. where={{{differ[0]!r}: ...}}")
        seen[value] = r
    return good


def _orders_present(records, quantity: str) -> list[int]:
    head, *rest = quantity.split(":")
    orders: set[int] = set()
    for r in records:
        result = point_result(r)
        if head == "series" and isinstance(result, StateSeries):
            orders.update(range(len(result.energies)))
        elif head == "coupling" and isinstance(result, EffectiveModel):
            for c in result.couplings:
                if c.kind == rest[0]:
                    orders.update(c.orders)
        elif head == "error" and isinstance(result, EffectiveModel) and result.check is not None:
            previous = None
            for k, error in sorted(result.check.max_abs_error.items()):   # orders that change it
                if previous is None or error != previous:
                    orders.add(k)
                previous = error
    return sorted(orders)


@dataclass(frozen=True)
class ExactGap:
    """An ``exact=`` reference: ``factor * (E_j - E_i)`` of a record's exact levels.

    Its legend label names the gap (``exact E_1 - E_0``), not the quantity it is drawn
    beside: the gap equals the exchange only where the physics makes it so (the Hubbard
    dimer's singlet-triplet gap is its J; on a ring of four sites it is not).
    """

    i: int
    j: int
    factor: float = 1.0

    @property
    def label(self) -> str:
        scale = "" if self.factor == 1 else f"{self.factor:g} "
        return f"exact {scale}$(E_{{{self.j}}} - E_{{{self.i}}})$"

    def __call__(self, record: Mapping[str, Any]) -> float:
        return self.factor * scalar(record, f"gap:{self.i}:{self.j}")


def exact_gap(i: int, j: int, *, factor: float = 1.0) -> ExactGap:
    """An ``exact=`` callable: ``factor * (E_j - E_i)`` of the record's exact levels.

    For the Hubbard dimer the exchange is the singlet-triplet gap, ``exact_gap(0, 1)``; the
    legend says "exact (E_1 - E_0)", for that is what is drawn.
    """
    return ExactGap(i, j, factor)


def _series_by_x(records, x, quantity, *, order=None, unit=None):
    pts = sorted((axis_value(r, x), scalar(r, quantity, order=order) / _unit_value(r, unit)) for r in records)
    return np.array([p[0] for p in pts]), np.array([p[1] for p in pts])


@styled
def plot_couplings(
    records: Iterable[Mapping[str, Any]],
    *,
    x: str,
    quantity: str = "coupling:exchange",
    orders: Sequence[int] | None = None,
    exact: Callable[[Mapping[str, Any]], float] | None = None,
    unit: str | None = None,
    title: str | None = None,
    where: Mapping[str, Any] | None = None,
    output: str | os.PathLike | None = None,
) -> Figure:
    """A coupling (or series energy) against a parameter, one curve per order.

    Parameters
    ----------
    records : iterable of dict
        Derive (or series) point records.
    x : str
        Axis selector (``"U"``, ``"t/U"``, ...).
    quantity : str
        ``"coupling:KIND[:SITES[:COMPONENT]]"`` or ``"series"``.
    orders : sequence of int, optional
        Orders to draw (default: every order present); each curve is the sum through it.
    exact : callable, optional
        ``record -> exact value`` (same units as the stored result, e.g.
        :func:`exact_gap`); drawn as black points.
    unit : str, optional
        Model parameter the values are divided by (axis label ``J / t``).
    where : dict, optional
        Grid values selecting one slice of a scan with several axes, e.g.
        ``{"size": 4}`` or ``{"size": [4], "boundary": "open"}``; required when several
        points share an x value.
    """
    good = _slice(records, x, where)
    orders = list(orders) if orders is not None else _orders_present(good, quantity)
    fig = new_figure()
    ax = fig.axes[0]
    symbol = quantity_symbol(quantity)
    for order, (colour, marker, ls) in zip(orders, styles()):
        xs, ys = _series_by_x(good, x, quantity, order=order, unit=unit)
        ax.plot(xs, ys, color=colour, marker=marker, linestyle=ls, label=f"through order {order}")
    if exact is not None:
        pts = sorted((axis_value(r, x), exact(r) / _unit_value(r, unit)) for r in good)
        ax.plot([p[0] for p in pts], [p[1] for p in pts], linestyle="none", marker="*",
                markersize=11, color="black", label=getattr(exact, "label", "exact"))
    ax.set_xlabel(axis_label(x))
    ax.set_ylabel(value_label(symbol, unit))
    ax.set_title(_title(good, title))
    legend(ax, frameon=False)
    ax.grid(alpha=0.3)
    return finish(fig, output)


def _slope(xs: np.ndarray, errs: np.ndarray, floor: float) -> float:
    keep = (errs > floor) & (xs > 0)
    if keep.sum() < 2:
        return math.nan
    return float(np.polyfit(np.log(xs[keep]), np.log(errs[keep]), 1)[0])


@styled
def plot_errors(
    records: Iterable[Mapping[str, Any]],
    *,
    x: str,
    quantity: str = "error",
    exact: Callable[[Mapping[str, Any]], float] | None = None,
    orders: Sequence[int] | None = None,
    unit: str | None = None,
    floor: float = 1e-13,
    title: str | None = None,
    where: Mapping[str, Any] | None = None,
    output: str | os.PathLike | None = None,
) -> Figure:
    """Error of each perturbative order against the expansion parameter, log-log.

    With ``quantity="error"`` (default) the error is the derive check's maximum absolute
    deviation of the effective spectrum from the exact one at each order.  With a
    coupling or ``"series"`` quantity and ``exact=``, it is ``|sum through order n -
    exact|``.  Each legend entry gives the slope of a straight-line fit of log(error)
    against log(x), over the points above ``floor`` (round-off level).  ``where`` selects
    a slice as in :func:`plot_couplings`; by default only orders that change the error
    are drawn.
    """
    good = _slice(records, x, where)
    if quantity != "error" and exact is None:
        raise ModelError(f"errors of {quantity!r} need an exact value (exact=...)")
    orders = list(orders) if orders is not None else _orders_present(good, quantity)
    fig = new_figure()
    ax = fig.axes[0]
    for order, (colour, marker, ls) in zip(orders, styles()):
        pts = []
        for r in good:
            if quantity == "error":
                err = scalar(r, "error", order=order)
            else:
                err = abs(scalar(r, quantity, order=order) - exact(r))
            pts.append((axis_value(r, x), err / _unit_value(r, unit)))
        pts.sort()
        xs, errs = np.array([p[0] for p in pts]), np.array([p[1] for p in pts])
        slope = _slope(xs, errs, floor)
        shown = errs > 0
        label = f"order {order}" + ("" if math.isnan(slope) else f" (slope {slope:.2f})")
        ax.loglog(xs[shown], errs[shown], color=colour, marker=marker, linestyle=ls, label=label)
    ax.set_xlabel(axis_label(x))
    what = "\\delta E" if quantity == "error" else "\\delta " + quantity_symbol(quantity)
    ax.set_ylabel(value_label(what, unit))
    ax.set_title(_title(good, title))
    legend(ax, frameon=False)
    ax.grid(alpha=0.3, which="both")
    return finish(fig, output)


@styled
def plot_finite_size(
    records: Iterable[Mapping[str, Any]],
    *,
    quantity: str = "energy",
    variable: str = "L",
    degree: int = 1,
    power: float = 1.0,
    per_site: bool = False,
    unit: str | None = None,
    order: int | None = None,
    title: str | None = None,
    where: Mapping[str, Any] | None = None,
    output: str | os.PathLike | None = None,
) -> Figure:
    """A quantity against ``(1/L)^power`` with its polynomial fit and extrapolated value.

    One curve per parameter point (scanned parameters other than the size, and the
    boundary); the extrapolated value with its uncertainty is drawn at x = 0 and quoted
    in the legend.  ``where`` keeps only the points of some grid values (e.g.
    ``{"boundary": "periodic"}`` or ``{"U": 8}``) before fitting.  See
    :func:`lowfold.scans.extrapolate.extrapolate_records`.
    """
    good = select_where(records, where)
    fits = extrapolate_records(good, quantity, variable=variable, degree=degree, power=power,
                               per_site=per_site, unit=unit, order=order)
    fig = new_figure()
    ax = fig.axes[0]
    for entry, (colour, marker, ls) in zip(fits, styles()):
        fit = entry["fit"]
        group = ", ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}"
                          for k, v in entry["group"].items() if v is not None)
        if fit is None:
            continue
        ax.plot(fit.x, fit.y, linestyle="none", marker=marker, color=colour)
        grid = np.linspace(0.0, fit.x.max() * 1.05, 200)
        estimate = f"{fit.value:.6g}" + ("" if math.isnan(fit.error) else f" ± {fit.error:.2g}")
        ax.plot(grid, fit.curve(grid), color=colour, linestyle=ls,
                label=(group + ": " if group else "") + "limit " + estimate)
        ax.errorbar([0.0], [fit.value], yerr=[0.0 if math.isnan(fit.error) else fit.error],
                    marker=marker, color=colour, markerfacecolor="white", capsize=4)
    power_txt = "" if power == 1 else f"^{{{power:g}}}"
    ax.set_xlabel(f"$1 / {variable}{power_txt}$")
    ax.set_ylabel(value_label(quantity_symbol(quantity), unit, per_site))
    ax.set_xlim(left=0.0)
    ax.set_title(_title(good, title))
    legend(ax, frameon=False)
    ax.grid(alpha=0.3)
    return finish(fig, output)


def _match_key(record: Mapping[str, Any]) -> tuple:
    params = tuple(sorted((k, round(float(v), 12)) for k, v in record.get("parameters", {}).items()))
    size = tuple(record.get("size") or ())
    boundary = record.get("boundary")
    return params, size, tuple(boundary) if isinstance(boundary, list) else boundary


@styled
def plot_levels(
    records: Iterable[Mapping[str, Any]],
    *,
    x: str,
    levels: int | None = None,
    series: Iterable[Mapping[str, Any]] | None = None,
    orders: Sequence[int] | None = None,
    unit: str | None = None,
    title: str | None = None,
    where: Mapping[str, Any] | None = None,
    output: str | os.PathLike | None = None,
) -> Figure:
    """Exact energy levels against a parameter, with the perturbation series overlaid.

    Parameters
    ----------
    records : iterable of dict
        Spectrum point records (or derive records, whose check holds exact levels).
    x : str
        Axis selector.
    levels : int, optional
        Number of lowest levels drawn (default: all stored).
    series : iterable of dict, optional
        Series point records at the same parameter values (matched by parameters, size
        and boundary); their sums through each order are drawn as dashed curves.
    orders : sequence of int, optional
        Series orders to draw (default: all present).
    where : dict, optional
        Slice of the spectrum scan, as in :func:`plot_couplings`.
    """
    good = _slice(records, x, where)
    fig = new_figure()
    ax = fig.axes[0]
    n_stored = min(len(energy_levels(point_result(r)) or []) for r in good)
    n_levels = n_stored if levels is None else min(levels, n_stored)
    for k in range(n_levels):
        xs, ys = _series_by_x(good, x, f"energy:{k}", unit=unit)
        ax.plot(xs, ys, color="black", linestyle="-", marker=".", alpha=0.85,
                label="exact levels" if k == 0 else None)
    if series is not None:
        wanted = {_match_key(r) for r in good}
        matched = [r for r in successful_records(series) if _match_key(r) in wanted]
        if not matched:
            raise ModelError("no series point matches the parameters of the spectrum points")
        chosen = list(orders) if orders is not None else _orders_present(matched, "series")
        dashed = itertools.islice(styles(), 1, None)         # solid lines are the exact levels
        for order, (colour, marker, ls) in zip(chosen, dashed):
            xs, ys = _series_by_x(matched, x, "series", order=order, unit=unit)
            ax.plot(xs, ys, color=colour, marker=marker, linestyle=ls, markerfacecolor="none",
                    label=f"series through order {order}")
    ax.set_xlabel(axis_label(x))
    ax.set_ylabel(value_label("E", unit))
    ax.set_title(_title(good, title))
    legend(ax, frameon=False)
    ax.grid(alpha=0.3)
    return finish(fig, output)
