"""Rich rendering of result objects for the terminal (and the LaTeX coupling table).

Reads :mod:`lowfold.results` objects, never their JSON; the typer app (:mod:`lowfold.cli.app`)
decides what to render.  Tables go to ``out`` (stdout), warnings to ``err`` (stderr).
"""

from __future__ import annotations

import numpy as np
from rich.console import Console
from rich.table import Table

from lowfold.readout.formulas import latex_hamiltonian
from lowfold.results import EffectiveModel, Spectrum, StateSeries
from lowfold.results.effective import COUPLING_TOL

__all__ = ["print_spectrum", "print_derive", "print_series", "latex_couplings"]


def print_spectrum(out: Console, title: str, result: Spectrum) -> None:
    table = Table(title=f"{title}: {result.dimension:,} states")
    table.add_column("level", justify="right")
    table.add_column("energy", justify="right")
    table.add_column("E - E0", justify="right")
    e0 = float(result.energies[0])
    for n, e in enumerate(result.energies):
        table.add_row(str(n), f"{float(e):.12g}", f"{float(e) - e0:.6g}")
    out.print(table)


def _fmt(value) -> str:
    if isinstance(value, list):
        flat = np.ravel(np.array(value, dtype=float))
        return "(" + ", ".join(f"{x:.6g}" for x in flat) + ")"
    return f"{value:.6g}"


def _coupling_rows(result: EffectiveModel):
    """The orders shown, and per coupling (kind, sites, cells per order, total, rationals)."""
    shown = lambda v: np.max(np.abs(v)) > COUPLING_TOL          # noqa: E731  as in the JSON
    orders = sorted({m for c in result.couplings for m, v in c.orders.items() if shown(v)})
    rows = []
    for c in result.couplings:
        sites = ",".join(str(s) for s in c.sites) or "-"
        cells = [_fmt(c.orders[n]) if n in c.orders and shown(c.orders[n]) else "" for n in orders]
        recognised = result.recognised.get((c.kind, tuple(c.sites)))
        hint = ", ".join(f"{n}: {q}" for n, q in recognised.coefficients.items()) if recognised else ""
        rows.append((c.kind, sites, cells, _fmt(c.value), hint))
    return orders, rows


def print_derive(out: Console, err: Console, title: str, result: EffectiveModel) -> None:
    man = result.manifold
    gap = "none" if man.gap is None else f"{man.gap:.6g}"
    out.print(f"[bold]{title}[/bold]: manifold of {man.dimension:,} states at H0 energy "
              f"{man.energy:.6g}, gap {gap}, readout {man.readout}")
    orders, rows = _coupling_rows(result)
    if rows:
        table = Table(title=f"couplings to order {result.order} (S = sigma/2)")
        for name in ("kind", "sites", *[f"order {n}" for n in orders], "total"):
            table.add_column(name, justify="left" if name in ("kind", "sites") else "right")
        recognised = any(r[4] for r in rows)
        if recognised:
            table.add_column("rational (recognised)", justify="left")
        for kind, sites, cells, total, hint in rows:
            table.add_row(kind, sites, *cells, total, *([hint] if recognised else []))
        out.print(table)
        _print_classes(out, result)
    elif not result.spin_form:
        out.print(f"effective matrix on {man.dimension} basis states (use --json for its entries)")
    if result.check is not None:
        table = Table(title="check against the exact low-lying spectrum")
        table.add_column("order", justify="right")
        table.add_column("max |E_eff - E_exact|", justify="right")
        for n, error in result.check.max_abs_error.items():
            table.add_row(str(n), f"{error:.3e}")
        out.print(table)
    if result.scaling:
        powers = ", ".join(f"{n}: {fit.power:.2f}" if fit.power is not None else f"{n}: -"
                           for n, fit in result.scaling.items())
        out.print(f"fitted power of the error per order (must be >= n+1): {powers}")
    diag = result.diagnostics
    ratio = diag.validity_ratio
    out.print(f"validity ratio |V_PQ|/gap = {ratio:.3g}" if ratio is not None else "validity ratio: -",
              f", smallest denominator {diag.smallest_denominator:.6g}"
              if diag.smallest_denominator is not None else "",
              f" ({' -> '.join(diag.closest_states)})" if diag.closest_states else "", sep="")
    _warn(err, result.warnings)


def _print_classes(out: Console, result: EffectiveModel) -> None:
    """The coupling classes of a translation-invariant cluster (none: nothing printed), then
    their formulas one per line (a formula column would not fit a narrow terminal)."""
    if not result.classes:
        return
    orders = sorted({m for c in result.classes for m in c.orders})
    table = Table(title="coupling classes (value of one member; members per site)")
    for name in ("kind", "class", "per site", "value", *[f"order {n}" for n in orders]):
        table.add_column(name, justify="left" if name in ("kind", "class") else "right", no_wrap=True)
    for c in result.classes:
        kind = f"{c.kind} {c.operator}" if c.operator else c.kind
        table.add_row(kind, c.name, f"{c.multiplicity:.4g}", _fmt(c.value),
                      *[_fmt(c.orders[n]) if n in c.orders else "" for n in orders])
    out.print(table)
    for c in result.classes:
        if c.formula:
            out.print(f"{c.kind} {c.name}: {c.formula}", markup=False, soft_wrap=True)


def latex_couplings(result: EffectiveModel) -> str:
    """The coupling table as a LaTeX ``tabular``; with coupling classes, then the effective
    Hamiltonian in equations (:func:`lowfold.readout.formulas.latex_hamiltonian`)."""
    orders, rows = _coupling_rows(result)
    head = " & ".join(["kind", "sites", *[f"order {n}" for n in orders], "total"])
    lines = [r"\begin{tabular}{ll" + "r" * (len(orders) + 1) + "}", r"\hline", head + r" \\", r"\hline"]
    for kind, sites, cells, total, _ in rows:
        lines.append(" & ".join([kind, f"${sites}$", *[f"${c}$" if c else "" for c in cells],
                                 f"${total}$"]) + r" \\")
    lines += [r"\hline", r"\end{tabular}"]
    if result.classes:
        lines += ["", latex_hamiltonian(result.model, result.classes)]
    return "\n".join(lines)


def print_series(out: Console, err: Console, title: str, result: StateSeries) -> None:
    out.print(f"[bold]{title}[/bold]: series of the state {result.reference}")
    table = Table(title="energy by order")
    for name in ("order", "E_n", "partial sum", "|error| vs exact"):
        table.add_column(name, justify="right")
    errors = result.error_by_order or {}
    for n, (e, s) in enumerate(zip(result.energies, result.partial_sums)):
        table.add_row(str(n), f"{float(e):.12g}", f"{float(s):.12g}",
                      f"{errors[n]:.3e}" if n in errors else "")
    out.print(table)
    if result.exact is not None:
        out.print(f"exact eigenvalue (followed from lambda = 0): {result.exact:.12g}")
    if result.pade:
        p = result.pade
        spread = f" +- {p.spread:.2g}" if p.spread is not None else ""
        out.print(f"Pade [{p.approximant[0]}/{p.approximant[1]}]: {p.value:.12g}{spread}")
    if result.ratio_test:
        r = result.ratio_test
        radius = "infinite" if r.radius is None else f"{r.radius:.4g}"
        out.print(f"radius of convergence (Domb-Sykes, in {r.variable}): {radius}, "
                  f"nearest singularity on the {r.side} axis")
    if result.validity_ratio is not None:
        out.print(f"validity ratio |V_mn| / |E_n - E_m|: {result.validity_ratio:.3g}")
    if result.second_order:
        table = Table(title="largest second-order contributions")
        for name in ("intermediate state", "|V_mn|^2", "E_n - E_m", "contribution"):
            table.add_column(name, justify="right")
        for c in result.second_order:
            table.add_row(c.state, f"{c.coupling_squared:.6g}", f"{c.denominator:.6g}",
                          f"{c.contribution:.6g}")
        out.print(table)
    sweep = result.sweep
    if sweep is not None:
        for c in sweep.avoided:
            out.print(f"avoided crossing at lambda = {c.lambda_:.4g}: gap {c.gap:.4g} "
                      f"(levels {c.levels[0]}, {c.levels[1]}, {c.sector})")
        for c in sweep.crossings:
            out.print(f"true crossing near lambda = {c.lambda_:.4g} ({c.sectors[0]} / {c.sectors[1]})")
        useful = ", ".join(f"order {n}: {'-' if v is None else f'{v:.3g}'}"
                           for n, v in sweep.useful_up_to.items())
        out.print(f"series within 1% of the smallest denominator up to lambda = {useful}")
    _warn(err, result.warnings)


def _warn(err: Console, warnings) -> None:
    for warning in warnings:
        err.print(f"warning: {warning}", markup=False)
