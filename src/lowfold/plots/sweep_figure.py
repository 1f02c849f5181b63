"""The figure of a series sweep: exact levels against lambda, with the series of one state.

:func:`plot_sweep` draws the :class:`~lowfold.results.Sweep` of a series result (``lowfold
series --sweep ... --plot FILE``), in the style of :mod:`lowfold.plots.style`.
"""

from __future__ import annotations

import itertools
import os
from typing import Any, Mapping, Sequence

import numpy as np
from matplotlib.figure import Figure

from lowfold.plots.style import finish, legend, new_figure, styled, styles, visible_text
from lowfold.results import Sweep

__all__ = ["plot_sweep"]


def _pick_orders(orders: Sequence[int], most: int) -> list[int]:
    """At most ``most`` orders, evenly spread, always with the lowest and the highest."""
    orders = sorted(orders)
    if len(orders) <= most:
        return orders
    picks = {orders[round(k * (len(orders) - 1) / (most - 1))] for k in range(most)}
    return sorted(picks)


@styled
def plot_sweep(
    sweep: Sweep | Mapping[str, Any],
    *,
    title: str = "",
    orders: Sequence[int] | None = None,
    most: int = 6,
    output: str | os.PathLike | None = None,
) -> Figure:
    """Exact levels against the coupling factor lambda, with the series of one state.

    Parameters
    ----------
    sweep : Sweep or dict
        The sweep of a series result (``result.sweep``): ``lambdas``, ``levels``
        (n_lambda x k), ``followed`` (the exact level grown from the reference state),
        ``series`` (order -> partial sums), ``avoided``, ``crossings``; or its JSON
        (the ``"sweep"`` object of ``lowfold series --json``), read by ``Sweep.from_dict``.
    title : str
        Figure title (the model's title).
    orders : sequence of int, optional
        Series orders to draw (default: at most ``most`` of them, spread evenly).
    output : path, optional
        Image file (.png, .svg, .pdf).
    """
    if not isinstance(sweep, Sweep):
        sweep = Sweep.from_dict(sweep)
    lam = np.asarray(sweep.lambdas, dtype=float)
    levels = np.asarray(sweep.levels, dtype=float).reshape(len(lam), -1)
    fig = new_figure()
    ax = fig.axes[0]
    for k in range(levels.shape[1]):
        ax.plot(lam, levels[:, k], color="0.6", linewidth=1.0, label="exact levels" if k == 0 else None)
    ax.plot(lam, np.asarray(sweep.followed, dtype=float), color="black", linewidth=2.2,
            label="followed level")
    series = {int(k): np.asarray(v, dtype=float) for k, v in sweep.series.items()}
    if orders is None:       # orders >= 1 that change the partial sum, at most `most` of them
        useful = [n for n in sorted(series) if n >= 1
                  and not np.array_equal(series[n], series.get(n - 1, np.full_like(lam, np.nan)))]
        orders = _pick_orders(useful, most)
    chosen = list(orders)
    dashed = itertools.islice(styles(), 1, None)
    for order, (colour, marker, ls) in zip(chosen, dashed):
        ax.plot(lam, series[order], color=colour, linestyle=ls, marker=marker,
                markevery=max(1, len(lam) // 8), markerfacecolor="none",
                label=f"series through order {order}")
    for crossing in sweep.avoided:
        ax.axvline(crossing.lambda_, color="0.3", linestyle=":", linewidth=1.0)
    for crossing in sweep.crossings:
        ax.axvline(crossing.lambda_, color="0.3", linestyle="-.", linewidth=1.0)
    low, high = float(np.min(levels)), float(np.max(levels))
    margin = 0.1 * (high - low or 1.0)
    ax.set_ylim(low - margin, high + margin)      # divergent partial sums leave the frame
    ax.set_xlabel("$\\lambda$  ($H = H_0 + \\lambda V$)")
    ax.set_ylabel("$E$")
    ax.set_title(visible_text(title))
    legend(ax, frameon=False, fontsize=9)
    ax.grid(alpha=0.3)
    return finish(fig, output)
