"""Publication-ready figures of scan results (matplotlib, no pyplot state).

Four kinds, each a function taking point records (:func:`lowfold.store.load_results`)
and returning a :class:`matplotlib.figure.Figure`; with ``output=`` the figure is also
saved, in the format given by the file extension (``.png``, ``.svg``, ``.pdf``):

* :func:`plot_couplings` - a coupling against a parameter, one curve per perturbative
  order (cumulative sums), plus the exact value where the scan has it;
* :func:`plot_errors` - error of each order against the expansion parameter on log-log
  axes, the fitted slope in the legend;
* :func:`plot_finite_size` - a quantity against 1/L (or 1/N) with the finite-size fit
  and the extrapolated value;
* :func:`plot_levels` - exact levels against a parameter with the series overlaid;
* :func:`plot_sweep` - exact levels against the coupling factor lambda of one model, with
  the series of one state (``lowfold series --sweep ... --plot FILE``).

Figures use the Okabe-Ito colour-blind-safe palette (Okabe and Ito, "Color Universal
Design" (2002); recommended by Wong, Nature Methods 8, 441 (2011)) together with
distinct markers and line styles, so they survive greyscale printing.  Energies can be
given in units of a model parameter (``unit="t"`` labels the axis ``J / t``).
"""

from __future__ import annotations

import functools
import itertools
import math
import os
from typing import Any, Callable, Iterable, Mapping, Sequence

import matplotlib
import numpy as np
from matplotlib.figure import Figure

from lowfold.errors import ModelError
from lowfold.scans.extrapolate import extrapolate_records
from lowfold.scans.store import axis_value, scalar

__all__ = [
    "PALETTE", "MARKERS", "LINESTYLES",
    "KINDS", "plot_couplings", "plot_errors", "plot_finite_size", "plot_levels", "exact_gap",
    "plot_results", "plot_sweep", "parse_where",
]

PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#F0E442")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
LINESTYLES = ("-", "--", ":", "-.", (0, (5, 1, 1, 1, 1, 1)), (0, (1, 3)), (0, (3, 1, 1, 1, 1, 1)),
              (0, (6, 2)))
STYLE = {
    "font.size": 12, "axes.labelsize": 13, "axes.titlesize": 13, "legend.fontsize": 10,
    "xtick.labelsize": 11, "ytick.labelsize": 11, "lines.linewidth": 1.6, "lines.markersize": 6,
}
FIGSIZE = (6.4, 4.4)
DPI = 150

_SYMBOLS = {
    "exchange": "J", "field": "h", "constant": "E_0", "dm": "D", "anisotropy": "\\Gamma",
    "ring": "K", "chirality": "\\chi",
}


def _styles():
    """Endless (colour, marker, linestyle) triples."""
    return itertools.cycle(zip(PALETTE, MARKERS, LINESTYLES))


def _styled(function):
    """Run a plotting function under the module's rc settings (fonts, line widths)."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return function(*args, **kwargs)

    return wrapper


def _new_figure() -> Figure:
    fig = Figure(figsize=FIGSIZE, dpi=DPI, layout="constrained")
    fig.add_subplot()
    return fig


def _finish(fig: Figure, output: str | os.PathLike | None) -> Figure:
    if output is not None:
        ext = os.path.splitext(os.fspath(output))[1].lower()
        if ext not in (".png", ".svg", ".pdf"):
            raise ModelError(f"{output}: unknown image format {ext!r}; use .png, .svg or .pdf")
        fig.savefig(output, dpi=DPI)
    return fig


def _axis_label(spec: str) -> str:
    """Axis selector to a mathtext label: ``t/U`` -> ``$t / U$``."""
    pretty = {"L": "L", "N": "N"}
    parts = [pretty.get(p, p) for p in spec.replace(" ", "").split("/")]
    return "$" + " / ".join(parts) + "$"


def _quantity_symbol(quantity: str) -> str:
    head, *rest = quantity.split(":")
    if head == "coupling" and rest:
        symbol = _SYMBOLS.get(rest[0], rest[0])
        sub = ",".join(p for p in rest[1:] if p)
        if sub and "_" not in symbol:
            symbol += "_{" + sub + "}"
        return symbol
    if head == "energy":
        return "E_{" + (rest[0] if rest else "0") + "}"
    if head == "gap":
        i, j = (rest + ["0", "1"])[:2] if len(rest) < 2 else rest[:2]
        return f"E_{{{j}}} - E_{{{i}}}"
    if head == "series":
        return "E"
    return head


def _value_label(symbol: str, unit: str | None, per_site: bool = False) -> str:
    """``J / t``, or per site ``E_0 / (N t)``."""
    if per_site:
        return f"${symbol} / (N\\,{unit})$" if unit else f"${symbol} / N$"
    return f"${symbol} / {unit}$" if unit else f"${symbol}$"


def _title(records: Sequence[Mapping[str, Any]], title: str | None) -> str:
    if title is not None:
        return title
    titles = {r.get("model", {}).get("title", "") for r in records} - {""}
    return titles.pop() if len(titles) == 1 else ""


def _unit_value(record: Mapping[str, Any], unit: str | None) -> float:
    if unit is None:
        return 1.0
    try:
        return float(record["parameters"][unit])
    except KeyError:
        raise ModelError(f"unit {unit!r} is not a parameter of the model") from None


def _ok(records: Iterable[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
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


def _slice(records: Iterable[Mapping[str, Any]], x: str, where: Mapping[str, Any] | None):
    """Successful records matching ``where``, which must leave one point per x value."""
    good = _ok(records)
    if where:
        good = [r for r in good if all(_matches(r, k, v) for k, v in where.items())]
        if not good:
            raise ModelError(f"no successful point matches where={dict(where)}")
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
        result = r["result"]
        if head == "series":
            orders.update(int(k) for k in result.get("orders", {}))
        elif head == "coupling":
            for c in result.get("couplings", []):
                if c.get("kind") == rest[0]:
                    orders.update(int(k) for k in c.get("orders", {}))
        elif head == "error":
            by_order = (result.get("check") or {}).get("by_order", {})
            previous = None
            for k in sorted(by_order, key=int):   # orders that change the error
                error = by_order[k]["max_abs_error"]
                if previous is None or error != previous:
                    orders.add(int(k))
                previous = error
    return sorted(orders)


def exact_gap(i: int, j: int, *, factor: float = 1.0) -> Callable[[Mapping[str, Any]], float]:
    """An ``exact=`` callable: ``factor * (E_j - E_i)`` of the record's exact levels.

    For the Hubbard dimer the exchange is the singlet-triplet gap, ``exact_gap(0, 1)``.
    """
    return lambda record: factor * scalar(record, f"gap:{i}:{j}")


def _series_by_x(records, x, quantity, *, order=None, unit=None):
    pts = sorted((axis_value(r, x), scalar(r, quantity, order=order) / _unit_value(r, unit)) for r in records)
    return np.array([p[0] for p in pts]), np.array([p[1] for p in pts])


@_styled
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
    fig = _new_figure()
    ax = fig.axes[0]
    symbol = _quantity_symbol(quantity)
    for order, (colour, marker, ls) in zip(orders, _styles()):
        xs, ys = _series_by_x(good, x, quantity, order=order, unit=unit)
        ax.plot(xs, ys, color=colour, marker=marker, linestyle=ls, label=f"through order {order}")
    if exact is not None:
        pts = sorted((axis_value(r, x), exact(r) / _unit_value(r, unit)) for r in good)
        ax.plot([p[0] for p in pts], [p[1] for p in pts], linestyle="none", marker="*",
                markersize=11, color="black", label="exact")
    ax.set_xlabel(_axis_label(x))
    ax.set_ylabel(_value_label(symbol, unit))
    ax.set_title(_title(good, title))
    ax.legend(frameon=False)
    ax.grid(alpha=0.3)
    return _finish(fig, output)


def _slope(xs: np.ndarray, errs: np.ndarray, floor: float) -> float:
    keep = (errs > floor) & (xs > 0)
    if keep.sum() < 2:
        return math.nan
    return float(np.polyfit(np.log(xs[keep]), np.log(errs[keep]), 1)[0])


@_styled
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
    fig = _new_figure()
    ax = fig.axes[0]
    for order, (colour, marker, ls) in zip(orders, _styles()):
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
    ax.set_xlabel(_axis_label(x))
    what = "\\delta E" if quantity == "error" else "\\delta " + _quantity_symbol(quantity)
    ax.set_ylabel(_value_label(what, unit))
    ax.set_title(_title(good, title))
    ax.legend(frameon=False)
    ax.grid(alpha=0.3, which="both")
    return _finish(fig, output)


@_styled
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
    output: str | os.PathLike | None = None,
) -> Figure:
    """A quantity against ``(1/L)^power`` with its polynomial fit and extrapolated value.

    One curve per parameter point (scanned parameters other than the size, and the
    boundary); the extrapolated value with its uncertainty is drawn at x = 0 and quoted
    in the legend.  See :func:`lowfold.extrapolate.extrapolate_records`.
    """
    good = _ok(records)
    fits = extrapolate_records(good, quantity, variable=variable, degree=degree, power=power,
                               per_site=per_site, unit=unit, order=order)
    fig = _new_figure()
    ax = fig.axes[0]
    for entry, (colour, marker, ls) in zip(fits, _styles()):
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
    ax.set_ylabel(_value_label(_quantity_symbol(quantity), unit, per_site))
    ax.set_xlim(left=0.0)
    ax.set_title(_title(good, title))
    ax.legend(frameon=False)
    ax.grid(alpha=0.3)
    return _finish(fig, output)


def _match_key(record: Mapping[str, Any]) -> tuple:
    params = tuple(sorted((k, round(float(v), 12)) for k, v in record.get("parameters", {}).items()))
    size = tuple(record.get("size") or ())
    boundary = record.get("boundary")
    return params, size, tuple(boundary) if isinstance(boundary, list) else boundary


@_styled
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
    fig = _new_figure()
    ax = fig.axes[0]
    n_stored = min(len(r["result"].get("energies") or (r["result"].get("check") or {}).get("exact") or [])
                   for r in good)
    n_levels = n_stored if levels is None else min(levels, n_stored)
    for k in range(n_levels):
        xs, ys = _series_by_x(good, x, f"energy:{k}", unit=unit)
        ax.plot(xs, ys, color="black", linestyle="-", marker=".", alpha=0.85,
                label="exact levels" if k == 0 else None)
    if series is not None:
        wanted = {_match_key(r) for r in good}
        matched = [r for r in _ok(series) if _match_key(r) in wanted]
        if not matched:
            raise ModelError("no series point matches the parameters of the spectrum points")
        chosen = list(orders) if orders is not None else _orders_present(matched, "series")
        dashed = itertools.islice(_styles(), 1, None)         # solid lines are the exact levels
        for order, (colour, marker, ls) in zip(chosen, dashed):
            xs, ys = _series_by_x(matched, x, "series", order=order, unit=unit)
            ax.plot(xs, ys, color=colour, marker=marker, linestyle=ls, markerfacecolor="none",
                    label=f"series through order {order}")
    ax.set_xlabel(_axis_label(x))
    ax.set_ylabel(_value_label("E", unit))
    ax.set_title(_title(good, title))
    ax.legend(frameon=False)
    ax.grid(alpha=0.3)
    return _finish(fig, output)



def _pick_orders(orders: Sequence[int], most: int) -> list[int]:
    """At most ``most`` orders, evenly spread, always with the lowest and the highest."""
    orders = sorted(orders)
    if len(orders) <= most:
        return orders
    picks = {orders[round(k * (len(orders) - 1) / (most - 1))] for k in range(most)}
    return sorted(picks)


@_styled
def plot_sweep(
    sweep: Mapping[str, Any],
    *,
    title: str = "",
    orders: Sequence[int] | None = None,
    most: int = 6,
    output: str | os.PathLike | None = None,
) -> Figure:
    """Exact levels against the coupling factor lambda, with the series of one state.

    Parameters
    ----------
    sweep : dict
        The ``"sweep"`` object of ``lowfold series --json``: ``lambda``, ``levels``
        (n_lambda x k), ``followed`` (the exact level grown from the reference state),
        ``series`` (order -> partial sums), ``avoided_crossings``, ``crossings``.
    title : str
        Figure title (the model's title).
    orders : sequence of int, optional
        Series orders to draw (default: at most ``most`` of them, spread evenly).
    output : path, optional
        Image file (.png, .svg, .pdf).
    """
    lam = np.asarray(sweep["lambda"], dtype=float)
    levels = np.asarray(sweep["levels"], dtype=float).reshape(len(lam), -1)
    fig = _new_figure()
    ax = fig.axes[0]
    for k in range(levels.shape[1]):
        ax.plot(lam, levels[:, k], color="0.6", linewidth=1.0, label="exact levels" if k == 0 else None)
    followed = np.asarray(sweep["followed"], dtype=float)
    ax.plot(lam, followed, color="black", linewidth=2.2, label="followed level")
    series = {int(k): np.asarray(v, dtype=float) for k, v in sweep.get("series", {}).items()}
    if orders is None:       # orders >= 1 that change the partial sum, at most `most` of them
        useful = [n for n in sorted(series) if n >= 1
                  and not np.array_equal(series[n], series.get(n - 1, np.full_like(lam, np.nan)))]
        orders = _pick_orders(useful, most)
    chosen = list(orders)
    dashed = itertools.islice(_styles(), 1, None)
    for order, (colour, marker, ls) in zip(chosen, dashed):
        ax.plot(lam, series[order], color=colour, linestyle=ls, marker=marker,
                markevery=max(1, len(lam) // 8), markerfacecolor="none",
                label=f"series through order {order}")
    for crossing in sweep.get("avoided_crossings", []):
        ax.axvline(crossing["lambda"], color="0.3", linestyle=":", linewidth=1.0)
    for crossing in sweep.get("crossings", []):
        ax.axvline(crossing["lambda"], color="0.3", linestyle="-.", linewidth=1.0)
    low, high = float(np.min(levels)), float(np.max(levels))
    margin = 0.1 * (high - low or 1.0)
    ax.set_ylim(low - margin, high + margin)      # divergent partial sums leave the frame
    ax.set_xlabel("$\\lambda$  ($H = H_0 + \\lambda V$)")
    ax.set_ylabel("$E$")
    ax.set_title(title)
    ax.legend(frameon=False, fontsize=9)
    ax.grid(alpha=0.3)
    return _finish(fig, output)

def parse_where(items: Iterable[str]) -> dict[str, Any]:
    """``["size=4", "U=20", "boundary=open", "size=4x2"]`` -> a ``where`` dict (for the CLI)."""
    where: dict[str, Any] = {}
    for item in items:
        name, sep, text = item.partition("=")
        name, text = name.strip(), text.strip()
        if not sep or not name or not text:
            raise ModelError(f"--where: expected AXIS=VALUE, got {item!r}")
        if name == "size":
            try:
                where[name] = [int(n) for n in text.lower().split("x")]
            except ValueError:
                raise ModelError(f"--where: size must look like 6 or 4x2, got {text!r}") from None
            continue
        try:
            where[name] = float(text)
        except ValueError:
            where[name] = text
    return where


KINDS = ("couplings", "errors", "finite-size", "levels")


def plot_results(
    results: str | os.PathLike,
    *,
    kind: str,
    output: str | os.PathLike,
    x: str | None = None,
    quantity: str | None = None,
    orders: Sequence[int] | None = None,
    unit: str | None = None,
    exact_levels: tuple[int, int] | str | None = None,
    series: str | os.PathLike | None = None,
    levels: int | None = None,
    variable: str = "L",
    degree: int = 1,
    power: float = 1.0,
    per_site: bool = False,
    where: Mapping[str, Any] | None = None,
    title: str | None = None,
) -> dict[str, Any]:
    """Draw one figure from a results directory (what ``lowfold plot`` calls).

    Parameters
    ----------
    results : path
        Results directory of a scan.
    kind : {"couplings", "errors", "finite-size", "levels"}
    output : path
        Image file; the format follows the extension (.png, .svg, .pdf).
    x : str
        Axis selector for couplings, errors and levels (``"U"``, ``"t/U"``, ...).
    quantity : str, optional
        Quantity selector (defaults: ``coupling:exchange`` for couplings, ``error`` for
        errors, ``energy`` for finite-size).
    exact_levels : (i, j) or "i,j", optional
        Exact reference ``E_j - E_i`` for couplings and errors.
    series : path, optional
        Results directory of a series scan to overlay on a levels plot.
    where : dict, optional
        Slice of a scan with several grid axes (not for finite-size, which fits each
        combination of the other axes separately).
    Other parameters are those of the plot functions.

    Returns
    -------
    dict
        ``{"kind", "output", "points"}`` plus, for finite-size, ``"extrapolations"``: a list
        of ``{"group", "value", "error", "form", "warnings"}``.
    """
    from lowfold.scans.store import load_results

    if kind not in KINDS:
        raise ModelError(f"unknown plot kind {kind!r} (known: {', '.join(KINDS)})")
    if kind != "finite-size" and not x:
        raise ModelError(f"a {kind} plot needs an x axis (a parameter, e.g. 'U' or 't/U')")
    records = load_results(results)
    if isinstance(exact_levels, str):
        try:
            first, second = (int(v) for v in exact_levels.split(","))
        except ValueError:
            raise ModelError(f"--exact-gap: expected two level indices I,J, got {exact_levels!r}") from None
        exact_levels = (first, second)
    exact = exact_gap(*exact_levels) if exact_levels is not None else None
    summary: dict[str, Any] = {"kind": kind, "output": os.fspath(output), "points": len(records)}
    if kind == "couplings":
        plot_couplings(records, x=x, quantity=quantity or "coupling:exchange", orders=orders,
                       exact=exact, unit=unit, where=where, title=title, output=output)
    elif kind == "errors":
        plot_errors(records, x=x, quantity=quantity or "error", exact=exact, orders=orders,
                    unit=unit, where=where, title=title, output=output)
    elif kind == "levels":
        plot_levels(records, x=x, levels=levels, orders=orders, unit=unit, where=where, title=title,
                    series=None if series is None else load_results(series), output=output)
    else:
        quantity = quantity or "energy"
        plot_finite_size(records, quantity=quantity, variable=variable, degree=degree, power=power,
                         per_site=per_site, unit=unit, title=title, output=output)
        fits = extrapolate_records(_ok(records), quantity, variable=variable, degree=degree,
                                   power=power, per_site=per_site, unit=unit)
        summary["extrapolations"] = [
            {"group": e["group"], "value": None if e["fit"] is None else e["fit"].value,
             "error": None if e["fit"] is None else e["fit"].error,
             "form": None if e["fit"] is None else e["fit"].form, "warnings": e["warnings"]}
            for e in fits]
    return summary
