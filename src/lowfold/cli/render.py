"""Rich rendering of result objects for the terminal (and the LaTeX coupling table).

Reads :mod:`lowfold.results` objects, never their JSON; the typer app (:mod:`lowfold.cli.app`)
decides what to render.  Tables go to ``out`` (stdout), warnings to ``err`` (stderr).
"""

from __future__ import annotations

import re
from fractions import Fraction

import numpy as np
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from lowfold.readout.formulas import latex_hamiltonian
from lowfold.results import EffectiveModel, Recognised, Spectrum, StateSeries
from lowfold.results.effective import COUPLING_TOL
from lowfold.results.exact import coupling_key

__all__ = ["print_spectrum", "print_derive", "print_series", "latex_couplings", "one_line",
           "user_text"]


def one_line(text) -> str:
    """``text`` on one line: control characters (newline, tab, escape...) written as Python
    escapes (``\\n``), so that a file name or label with a newline still gives one line."""
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii")
                   for c in str(text))


def user_text(text) -> str:
    """Text that came from the user (a title, a file name, a label), ready for a rich markup
    string: on one line, and with its square brackets escaped so that rich prints them as
    they are (``"a [/bold] b"`` is text, not a closing tag)."""
    return escape(one_line(text))


def print_spectrum(out: Console, title: str, result: Spectrum) -> None:
    table = Table(title=f"{user_text(title)}: {result.dimension:,} states")
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
    """The orders shown, and per coupling (kind, sites, cells per order, total, Recognised
    or None)."""
    shown = lambda v: np.max(np.abs(v)) > COUPLING_TOL          # noqa: E731  as in the JSON
    orders = sorted({m for c in result.couplings for m, v in c.orders.items() if shown(v)})
    rows = []
    for c in result.couplings:
        sites = ",".join(str(s) for s in c.sites) or "-"
        cells = [_fmt(c.orders[n]) if n in c.orders and shown(c.orders[n]) else "" for n in orders]
        kind = f"{c.kind} {c.operator}" if getattr(c, "operator", "") else c.kind
        rows.append((kind, sites, cells, _fmt(c.value),
                     result.recognised.get((c.kind, tuple(c.sites)))))
    return orders, rows


SCALE = re.compile(r"(?P<small>.+)\^n/(?P<large>.+)\^\(n-1\)")


def rational_formula(recognised: Recognised | None, *, latex: bool = False) -> str:
    """A recognised coupling as a formula, e.g. ``4 t^2/U - 16 t^4/U^3`` or (``latex``)
    ``\\frac{4 t^{2}}{U} - \\frac{16 t^{4}}{U^{3}}``; "" when not recognised."""
    match = SCALE.fullmatch(recognised.scale) if recognised else None
    if match is None:
        return ""
    small, large = (_latex_name(match[k]) if latex else match[k] for k in ("small", "large"))
    power = (lambda x, k: f"{x}^{{{k}}}") if latex else (lambda x, k: f"{x}^{k}")
    parts = []
    for n, text in recognised.coefficients.items():          # q small^n / large^(n-1)
        q = Fraction(text)
        top = [str(abs(q.numerator))] if abs(q.numerator) != 1 else []
        top += [large] if n == 0 else [small if n == 1 else power(small, n)]
        bottom = [str(q.denominator)] if q.denominator != 1 else []
        bottom += [] if n < 2 else [large if n == 2 else power(large, n - 1)]
        numerator, denominator = " ".join(top), " ".join(bottom)
        if not denominator:
            term = numerator
        else:
            term = (f"\\frac{{{numerator}}}{{{denominator}}}" if latex
                    else f"{numerator}/({denominator})" if len(bottom) > 1
                    else f"{numerator}/{denominator}")
        parts.append(("-" if q < 0 else "+", term))
    head = ("-" if parts[0][0] == "-" else "") + parts[0][1]
    return " ".join([head, *(f"{sign} {term}" for sign, term in parts[1:])])


def _latex_name(name: str) -> str:
    """A parameter name in LaTeX math: one letter as it is, longer names upright."""
    return name if len(name) == 1 else "\\mathrm{" + name.replace("_", "\\_") + "}"


def print_derive(out: Console, err: Console, title: str, result: EffectiveModel) -> None:
    man = result.manifold
    gap = "none" if man.gap is None else f"{man.gap:.6g}"
    out.print(f"[bold]{user_text(title)}[/bold]: manifold of {man.dimension:,} states at H0 energy "
              f"{man.energy:.6g}, gap {gap}, readout {man.readout}")
    orders, rows = _coupling_rows(result)
    if rows:
        units = "S = sigma/2" if result.spin_form else "local operators, see docs/local-readout.md"
        table = Table(title=f"couplings to order {result.order} ({units})")
        for name in ("kind", "sites", *[f"order {n}" for n in orders], "total"):
            table.add_column(name, justify="left" if name in ("kind", "sites") else "right")
        formulas = [rational_formula(r[4]) for r in rows]
        if any(formulas):
            table.add_column("rational (recognised)", justify="left")
        exact = _exact_cells(result)          # derive --exact-couplings: a last column
        if exact:
            table.add_column("exact", justify="right")
        for (kind, sites, cells, total, _), formula, cell in zip(rows, formulas, exact or rows):
            table.add_row(user_text(kind), sites, *cells, total,
                          *([user_text(formula)] if any(formulas) else []), *([cell] if exact else []))
        out.print(table)
        _print_exact_note(out, result)
        _print_classes(out, result)
    elif result.classes:             # an infinite lattice: classes only
        _print_classes(out, result)
    elif not result.spin_form:
        _print_matrices(out, result)
        _print_exact_note(out, result)      # its matrix: JSON effective.exact
    if result.check is not None:
        table = Table(title="check against the exact low-lying spectrum")
        table.add_column("order", justify="right")
        table.add_column("max |E_eff - E_exact|", justify="right")
        for n, error in result.check.max_abs_error.items():
            table.add_row(str(n), f"{error:.3e}")
        out.print(table)
        out.print(f"check: {result.check.describe()}", markup=False)
        if result.check.cluster is not None:
            out.print(f"check of the infinite lattice's couplings on the {result.check.cluster}",
                      markup=False)
    if result.scaling:
        powers = ", ".join(f"{n}: {fit.power:.2f}" if fit.power is not None else f"{n}: -"
                           for n, fit in result.scaling.items())
        out.print(f"fitted power of the error per order (must be >= n+1): {powers}")
    diag = result.diagnostics
    if diag is None:                 # an infinite lattice: no single manifold to diagnose
        return _warn(err, result.warnings)
    ratio = diag.validity_ratio
    out.print(f"validity ratio |V_PQ|/gap = {ratio:.3g}" if ratio is not None else "validity ratio: -",
              f", smallest denominator {diag.smallest_denominator:.6g}"
              if diag.smallest_denominator is not None else "",
              f" ({user_text(' -> '.join(diag.closest_states))})" if diag.closest_states else "", sep="")
    _warn(err, result.warnings)


def _exact_cells(result: EffectiveModel) -> list[str] | None:
    """The exact value of each coupling (``derive --exact-couplings``), or None."""
    if result.exact is None:
        return None
    return [_fmt(result.exact.coupling_value(c.kind, c.sites, c.value, getattr(c, "operator", None)))
            for c in result.couplings]


def _print_exact_note(out: Console, result: EffectiveModel) -> None:
    """How the exact column was obtained, and the named couplings it has beyond the orders."""
    exact = result.exact
    if exact is None:
        return
    gap = "-" if exact.gap is None else f"{exact.gap:.6g}"
    out.print(f"exact: direct rotation of the {len(exact.energies)} exact levels of the "
              f"manifold (exact gap {gap}, smallest overlap with P {exact.smallest_singular_value:.3g})",
              markup=False)
    named = {coupling_key(c.kind, c.sites, getattr(c, "operator", None)) for c in result.couplings}
    for key, value in exact.couplings.items():
        if key not in named and np.max(np.abs(value)) > COUPLING_TOL:
            what = " ".join([key[0], ",".join(map(str, key[1])) or "-", *key[2:]])
            out.print(f"exact only (beyond order {result.order}): {what} = {_fmt(value)}",
                      markup=False)


def _print_classes(out: Console, result: EffectiveModel) -> None:
    """The coupling classes of a translation-invariant cluster (none: nothing printed), then
    their formulas one per line (a formula column would not fit a narrow terminal)."""
    if not result.classes:
        return
    orders = sorted({m for c in result.classes for m in c.orders})
    table = Table(title="coupling classes (value of one member; members per site)")
    exact = result.exact.classes if result.exact is not None else None
    for name in ("kind", "class", "per site", "value", *[f"order {n}" for n in orders],
                 *(["exact"] if exact is not None else [])):
        table.add_column(name, justify="left" if name in ("kind", "class") else "right", no_wrap=True)
    for c in result.classes:
        kind = f"{c.kind} {c.operator}" if c.operator else c.kind
        cell = [] if exact is None else [_fmt(exact.get((c.kind, c.name, c.operator), 0.0))]
        table.add_row(kind, c.name, f"{c.multiplicity:.4g}", _fmt(c.value),
                      *[_fmt(c.orders[n]) if n in c.orders else "" for n in orders], *cell)
    out.print(table)
    for c in result.classes:
        if c.formula:
            out.print(f"{c.kind} {c.name}: {c.formula}", markup=False, soft_wrap=True)


MATRIX_LIMIT = 16      # effective matrices up to this dimension are printed entry by entry


def label_legend(site) -> str:
    """What the basis labels of ``site`` mean (one symbol per site, site 0 first)."""
    if site.type == "electron":
        return "one symbol per site, site 0 first: 0 empty, u spin up, d spin down, 2 both"
    if site.type == "spin" and site.radix == 2:
        return "one letter per site, site 0 first: u is S^z = +1/2, d is S^z = -1/2"
    if site.type == "spin":
        spin = Fraction(site.radix - 1, 2)
        digits = ", ".join(f"{k} is S^z = {'+' if spin - k > 0 else ''}{spin - k}"
                           for k in range(min(site.radix, 3)))
        more = ", ..." if site.radix > 3 else ""
        return f"one digit k per site, site 0 first, S^z = S - k with S = {spin}: {digits}{more}"
    separator = " (separated by spaces)" if site.radix > 10 else ""
    return f"the occupation of each site{separator}, site 0 first"


def _entry(x) -> str:
    x = complex(x)
    if x == 0:
        return "0"
    return f"{x.real:.6g}" if x.imag == 0 else f"{x.real:.4g}{x.imag:+.4g}j"


def _print_matrices(out: Console, result: EffectiveModel) -> None:
    """The effective matrices order by order, rows and columns named by basis labels (small
    manifolds only; else a pointer to the JSON)."""
    dimension, labels = result.manifold.dimension, [user_text(x) for x in result.labels]
    if not result.orders or dimension > MATRIX_LIMIT or len(labels) != dimension:
        out.print(f"effective matrix on {dimension:,} basis states (use --json for its entries)")
        return
    legend = label_legend(result.model.site) if result.model is not None else ""
    out.print(f"effective Hamiltonian on {dimension} basis states, order by order"
              + (f"\nbasis labels: {legend}" if legend else ""))
    for m, h in enumerate(result.orders):
        dense = h.toarray()
        if not np.any(np.abs(dense) > COUPLING_TOL):
            continue
        table = Table(title=f"order {m}", title_justify="left")
        table.add_column("")
        for label in labels:
            table.add_column(label, justify="right")
        for label, row in zip(labels, dense):
            table.add_row(label, *[_entry(x) if abs(x) > COUPLING_TOL else "0" for x in row])
        width = 4 + sum(3 + max(len(label), *(len(_entry(x)) for x in dense[:, j]))
                        for j, label in enumerate(labels)) + max(map(len, labels)) + 3
        out.print(table, width=max(out.width, width))


def latex_couplings(result: EffectiveModel) -> str:
    """The coupling table as a LaTeX ``tabular``, with the recognised rationals as fractions
    (``\\frac{4 t^{2}}{U} - \\frac{16 t^{4}}{U^{3}}``) in a last column when there are any;
    with coupling classes, then the effective Hamiltonian in equations
    (:func:`lowfold.readout.formulas.latex_hamiltonian`)."""
    if result.classes and not result.couplings:         # an infinite lattice: its classes
        return "\n".join([_latex_classes(result.classes), "",
                          latex_hamiltonian(result.model, result.classes)])
    orders, rows = _coupling_rows(result)
    formulas = [rational_formula(r[4], latex=True) for r in rows]
    extra = ["rational (recognised)"] if any(formulas) else []
    head = " & ".join(["kind", "sites", *[f"order {n}" for n in orders], "total", *extra])
    columns = "ll" + "r" * (len(orders) + 1) + "l" * len(extra)
    lines = [r"\begin{tabular}{" + columns + "}", r"\hline", head + r" \\", r"\hline"]
    for (kind, sites, cells, total, _), formula in zip(rows, formulas):
        cells = [_latex_kind(kind), f"${sites}$", *[f"${c}$" if c else "" for c in cells], f"${total}$"]
        cells += [f"${formula}$" if formula else ""] if extra else []
        lines.append(" & ".join(cells) + r" \\")
    lines += [r"\hline", r"\end{tabular}"]
    if result.classes:
        lines += ["", latex_hamiltonian(result.model, result.classes)]
    return "\n".join(lines)


def _latex_classes(classes) -> str:
    """The coupling classes as a LaTeX ``tabular``: kind, class, members per site, each
    order and the value of one member, and the formula when there is one."""
    orders = sorted({m for c in classes for m in c.orders})
    extra = ["formula"] if any(c.formula for c in classes) else []
    head = " & ".join(["kind", "class", "per site", *[f"order {n}" for n in orders], "value",
                       *extra])
    lines = [r"\begin{tabular}{ll" + "r" * (len(orders) + 2) + "l" * len(extra) + "}",
             r"\hline", head + r" \\", r"\hline"]
    for c in classes:
        kind = _latex_kind(f"{c.kind} {c.operator}" if c.operator else c.kind)
        cells = [kind, c.name, f"${c.multiplicity:.4g}$",
                 *[f"${_fmt(c.orders[n])}$" if n in c.orders else "" for n in orders],
                 f"${_fmt(c.value)}$"]
        cells += [f"${c.formula}$" if c.formula else ""] if extra else []
        lines.append(" & ".join(cells) + r" \\")
    return "\n".join(lines + [r"\hline", r"\end{tabular}"])


X_OPERATOR = re.compile(r"\|([^|<>]+)><([^|<>]+)\|_(\d+)")


def _latex_kind(kind: str) -> str:
    r"""A coupling kind for LaTeX: X-operators ``|a><b|_i`` of a string as
    ``$|a\rangle\langle b|_{i}$``."""
    head, _, operator = kind.partition(" ")
    if not operator:
        return kind
    factors = X_OPERATOR.sub(lambda m: f"|{m[1]}\\rangle\\langle {m[2]}|_{{{m[3]}}}", operator)
    return f"{head} ${factors}$"


def print_series(out: Console, err: Console, title: str, result: StateSeries) -> None:
    out.print(f"[bold]{user_text(title)}[/bold]: series of the state "
              f"{user_text(result.reference)}")
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
        if r.fit_residual is not None:
            relative = "" if r.relative_residual is None else \
                f" ({r.relative_residual:.2g} of the intercept)"
            out.print(f"fit residual {r.fit_residual:.3g}{relative}")
        if not r.reliable:
            out.print(f"estimate unreliable: {user_text(r.reason or 'see warnings')}")
    if result.validity_ratio is not None:
        out.print(f"validity ratio |V_mn| / |E_n - E_m|: {result.validity_ratio:.3g}")
    if result.second_order:
        table = Table(title="largest second-order contributions")
        for name in ("intermediate state", "|V_mn|^2", "E_n - E_m", "contribution"):
            table.add_column(name, justify="right")
        for c in result.second_order:
            table.add_row(user_text(c.state), f"{c.coupling_squared:.6g}", f"{c.denominator:.6g}",
                          f"{c.contribution:.6g}")
        out.print(table)
    sweep = result.sweep
    if sweep is not None:
        for c in sweep.avoided:
            out.print(f"avoided crossing at lambda = {c.lambda_:.4g}: gap {c.gap:.4g} "
                      f"(levels {c.levels[0]}, {c.levels[1]}, {c.sector})")
        for c in sweep.crossings:
            out.print(f"true crossing near lambda = {c.lambda_:.4g} ({c.sectors[0]} / {c.sectors[1]})")
        useful = "; ".join(f"order {n} up to lambda = {v:.3g}" if v is not None
                           else f"order {n} not even at lambda = {sweep.lambdas[0]:.3g}"
                           for n, v in sweep.useful_up_to.items())
        out.print("the partial sums stay within 1% of the smallest denominator of the exact "
                  f"level: {useful}")
    _warn(err, result.warnings)


def _warn(err: Console, warnings) -> None:
    for warning in warnings:
        err.print(f"warning: {one_line(warning)}", markup=False, soft_wrap=True)  # one line each
