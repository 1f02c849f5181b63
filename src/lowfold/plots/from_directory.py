"""One figure from a results directory, by kind: what ``lowfold plot`` calls.

:func:`plot_results` loads the records of a scan (:func:`lowfold.scans.store.load_results`)
and draws one of the figures of :mod:`lowfold.plots.scan_figures`; for a finite-size
figure it also returns the extrapolated values.
"""

from __future__ import annotations

import os
from typing import Any, Mapping, Sequence

from lowfold.errors import ModelError
from lowfold.plots.scan_figures import (exact_gap, plot_couplings, plot_errors, plot_finite_size,
                                        plot_levels, select_where)
from lowfold.scans.extrapolate import extrapolate_records
from lowfold.scans.store import load_results, open_results

__all__ = ["KINDS", "plot_results"]

KINDS = ("couplings", "errors", "finite-size", "levels", "exact-couplings")


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
    kind : {"couplings", "errors", "finite-size", "levels", "exact-couplings"}
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
        Slice of a scan with several grid axes; for finite-size, the points kept before
        fitting (each remaining combination of the other axes is fitted separately).
    Other parameters are those of the plot functions.

    Returns
    -------
    dict
        ``{"kind", "output", "points", "warnings"}`` (``warnings``: files of the results
        directory that were skipped) plus, for finite-size, ``"extrapolations"``: a list
        of ``{"group", "value", "error", "form", "warnings"}``.
    """
    if kind not in KINDS:
        raise ModelError(f"unknown plot kind {kind!r} (known: {', '.join(KINDS)})")
    if kind != "finite-size" and not x:
        raise ModelError(f"a {kind} plot needs an x axis (a parameter, e.g. 'U' or 't/U')")
    store = open_results(results)
    records = store.records()
    if isinstance(exact_levels, str):
        try:
            first, second = (int(v) for v in exact_levels.split(","))
        except ValueError:
            raise ModelError(f"--exact-gap: expected two level indices I,J, got {exact_levels!r}") from None
        exact_levels = (first, second)
    exact = exact_gap(*exact_levels) if exact_levels is not None else None
    summary: dict[str, Any] = {"kind": kind, "output": os.fspath(output), "points": len(records),
                               "warnings": store.warnings}
    if kind == "couplings":
        plot_couplings(records, x=x, quantity=quantity or "coupling:exchange", orders=orders,
                       exact=exact, unit=unit, where=where, title=title, output=output)
    elif kind == "errors":
        plot_errors(records, x=x, quantity=quantity or "error", exact=exact, orders=orders,
                    unit=unit, where=where, title=title, output=output)
    elif kind == "exact-couplings":
        from lowfold.plots.exact_figure import plot_exact_couplings
        plot_exact_couplings(records, x=x, quantity=quantity or "coupling:exchange",
                             orders=orders, unit=unit, where=where, title=title, output=output)
    elif kind == "levels":
        plot_levels(records, x=x, levels=levels, orders=orders, unit=unit, where=where, title=title,
                    series=None if series is None else load_results(series), output=output)
    else:
        quantity = quantity or "energy"
        plot_finite_size(records, quantity=quantity, variable=variable, degree=degree, power=power,
                         per_site=per_site, unit=unit, title=title, where=where, output=output)
        fits = extrapolate_records(select_where(records, where), quantity, variable=variable,
                                   degree=degree, power=power, per_site=per_site, unit=unit)
        summary["extrapolations"] = [
            {"group": e["group"], "value": None if e["fit"] is None else e["fit"].value,
             "error": None if e["fit"] is None else e["fit"].error,
             "form": None if e["fit"] is None else e["fit"].form, "warnings": e["warnings"]}
            for e in fits]
    return summary
