"""The look of lowfold's figures: palette, markers, line styles, sizes, labels, saving.

Figures use the Okabe-Ito colour-blind-safe palette (Okabe and Ito, "Color Universal
Design" (2002); recommended by Wong, Nature Methods 8, 441 (2011)) together with
distinct markers and line styles, so they survive greyscale printing.  Figures are made
without pyplot state (:func:`new_figure`), drawn under the rc settings :data:`STYLE`
(:func:`styled`) and saved by :func:`finish` in the format of the file extension.
"""

from __future__ import annotations

import functools
import itertools
import os
import unicodedata

import matplotlib
from matplotlib.figure import Figure

from lowfold.errors import ModelError

__all__ = ["PALETTE", "MARKERS", "LINESTYLES", "STYLE", "FIGSIZE", "DPI", "styles", "styled",
           "new_figure", "finish", "axis_label", "quantity_symbol", "value_label", "visible_text",
           "legend"]

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


def styles():
    """Endless (colour, marker, linestyle) triples."""
    return itertools.cycle(zip(PALETTE, MARKERS, LINESTYLES))


def styled(function):
    """Run a plotting function under the module's rc settings (fonts, line widths)."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return function(*args, **kwargs)

    return wrapper


def new_figure() -> Figure:
    fig = Figure(figsize=FIGSIZE, dpi=DPI, layout="constrained")
    fig.add_subplot()
    return fig


def finish(fig: Figure, output: str | os.PathLike | None) -> Figure:
    if output is not None:
        ext = os.path.splitext(os.fspath(output))[1].lower()
        if ext not in (".png", ".svg", ".pdf"):
            raise ModelError(f"{output}: unknown image format {ext!r}; use .png, .svg or .pdf")
        fig.savefig(output, dpi=DPI)
    return fig


_ESCAPES = {"\t": "\\t", "\r": "\\r", "\a": "\\a", "\b": "\\b", "\f": "\\f", "\v": "\\v",
            "\x00": "\\0"}


def visible_text(text: str) -> str:
    """User text (a title) with its control characters written as visible escapes.

    Fonts have no glyph for control characters (tab, bell...), so they are shown as
    Python-style escapes (``\\t``, ``\\a``, ``\\x1b``); a newline stays a line break.
    """
    out = []
    for char in text:
        if char != "\n" and unicodedata.category(char) == "Cc":
            out.append(_ESCAPES.get(char, f"\\x{ord(char):02x}" if ord(char) < 0x100
                                    else f"\\u{ord(char):04x}"))
        else:
            out.append(char)
    return "".join(out)


def legend(ax, **kwargs) -> None:
    """Draw the legend of ``ax`` only when some artist has a label (none is drawn otherwise)."""
    handles, _ = ax.get_legend_handles_labels()
    if handles:
        ax.legend(**kwargs)


def axis_label(spec: str) -> str:
    """Axis selector to a mathtext label: ``t/U`` -> ``$t / U$``."""
    pretty = {"L": "L", "N": "N"}
    parts = [pretty.get(p, p) for p in spec.replace(" ", "").split("/")]
    return "$" + " / ".join(parts) + "$"


def quantity_symbol(quantity: str) -> str:
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


def value_label(symbol: str, unit: str | None, per_site: bool = False) -> str:
    """``J / t``, or per site ``E_0 / (N t)``."""
    if per_site:
        return f"${symbol} / (N\\,{unit})$" if unit else f"${symbol} / N$"
    return f"${symbol} / {unit}$" if unit else f"${symbol}$"

