"""The ``lowfold`` command.

Every user error (a :class:`~lowfold.errors.LowfoldError`) becomes one line on stderr and
exit status 2.  ``--json`` prints exactly one JSON object on stdout; progress goes to stderr
and only on a terminal.
"""

from __future__ import annotations

import contextlib
import json
import sys
from importlib import resources
from pathlib import Path
from typing import Optional

import numpy as np
import typer
from rich.console import Console
from rich.table import Table

from lowfold import __version__
from lowfold.errors import LowfoldError, ModelError
from lowfold.model.modelfile import load_model
from lowfold.jobs.state_series import parse_sweep
from lowfold.jobs.tasks import run_task

app = typer.Typer(add_completion=False, no_args_is_help=True, pretty_exceptions_enable=False,
                  help="Effective low-energy models of lattice Hamiltonians, checked against "
                       "exact spectra.")
out = Console(highlight=False)
err = Console(stderr=True, highlight=False)


def _version(value: bool):
    if value:
        print(f"lowfold {__version__}")
        raise typer.Exit()


@app.callback()
def _root(version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                       help="Show the version and exit.")):
    """lowfold: derive effective low-energy models order by order, and check them."""


@contextlib.contextmanager
def _progress(enabled: bool):
    """A status line on stderr (terminals only) fed by the callback this yields."""
    if not enabled or not err.is_terminal:
        yield None
        return
    with err.status("starting") as status:
        yield lambda message: status.update(message)


def _emit_json(data: dict) -> None:
    sys.stdout.write(json.dumps(data) + "\n")


@app.command()
def spectrum(model: Path = typer.Argument(..., help="model file (TOML)"),
             levels: int = typer.Option(4, "--levels", "-k", help="number of lowest levels"),
             json_out: bool = typer.Option(False, "--json", help="print one JSON object")):
    """The lowest energies of MODEL in its sector (Lanczos, or dense for small spaces)."""
    m = load_model(model)
    with _progress(not json_out) as progress:
        result = run_task("spectrum", m, {"levels": levels}, progress=progress)
    if json_out:
        return _emit_json(result)
    table = Table(title=f"{m.title}: {result['dimension']:,} states")
    table.add_column("level", justify="right")
    table.add_column("energy", justify="right")
    table.add_column("E - E0", justify="right")
    e0 = result["energies"][0]
    for n, e in enumerate(result["energies"]):
        table.add_row(str(n), f"{e:.12g}", f"{e - e0:.6g}")
    out.print(table)


def _fmt(value) -> str:
    if isinstance(value, list):
        flat = np.ravel(np.array(value, dtype=float))
        return "(" + ", ".join(f"{x:.6g}" for x in flat) + ")"
    return f"{value:.6g}"


def _coupling_rows(result: dict):
    orders = sorted({int(k) for c in result["couplings"] for k in c["orders"]})
    rows = []
    for c in result["couplings"]:
        sites = ",".join(str(s) for s in c["sites"]) or "-"
        cells = [_fmt(c["orders"][str(n)]) if str(n) in c["orders"] else "" for n in orders]
        hint = ""
        if "recognised" in c:
            hint = ", ".join(f"{n}: {q}" for n, q in c["recognised"]["coefficients"].items())
        rows.append((c["kind"], sites, cells, _fmt(c["value"]), hint))
    return orders, rows


def _print_derive(m, result: dict) -> None:
    man = result["manifold"]
    gap = "none" if man["gap"] is None else f"{man['gap']:.6g}"
    out.print(f"[bold]{m.title}[/bold]: manifold of {man['dimension']:,} states at H0 energy "
              f"{man['energy']:.6g}, gap {gap}, readout {man['readout']}")
    orders, rows = _coupling_rows(result)
    if rows:
        table = Table(title=f"couplings to order {result['order']} (S = sigma/2)")
        for name in ("kind", "sites", *[f"order {n}" for n in orders], "total"):
            table.add_column(name, justify="left" if name in ("kind", "sites") else "right")
        recognised = any(r[4] for r in rows)
        if recognised:
            table.add_column("rational (recognised)", justify="left")
        for kind, sites, cells, total, hint in rows:
            table.add_row(kind, sites, *cells, total, *([hint] if recognised else []))
        out.print(table)
    elif "effective" in result:
        out.print(f"effective matrix on {len(result['effective']['basis'])} basis states "
                  "(use --json for its entries)")
    check = result.get("check")
    if check:
        table = Table(title="check against the exact low-lying spectrum")
        table.add_column("order", justify="right")
        table.add_column("max |E_eff - E_exact|", justify="right")
        for n, entry in check["by_order"].items():
            table.add_row(n, f"{entry['max_abs_error']:.3e}")
        out.print(table)
    if result.get("scaling"):
        powers = ", ".join(f"{n}: {v['power']:.2f}" if v["power"] is not None else f"{n}: -"
                           for n, v in result["scaling"].items())
        out.print(f"fitted power of the error per order (must be >= n+1): {powers}")
    diag = result["diagnostics"]
    ratio = diag["validity_ratio"]
    out.print(f"validity ratio |V_PQ|/gap = {ratio:.3g}" if ratio is not None else "validity ratio: -",
              f", smallest denominator {diag['smallest_denominator']:.6g}"
              if diag["smallest_denominator"] is not None else "",
              f" ({' -> '.join(diag['closest_states'])})" if diag["closest_states"] else "", sep="")
    for warning in result["warnings"]:
        err.print(f"warning: {warning}", markup=False)


def _latex(result: dict) -> str:
    orders, rows = _coupling_rows(result)
    head = " & ".join(["kind", "sites", *[f"order {n}" for n in orders], "total"])
    lines = [r"\begin{tabular}{ll" + "r" * (len(orders) + 1) + "}", r"\hline", head + r" \\", r"\hline"]
    for kind, sites, cells, total, _ in rows:
        lines.append(" & ".join([kind, f"${sites}$", *[f"${c}$" if c else "" for c in cells],
                                 f"${total}$"]) + r" \\")
    lines += [r"\hline", r"\end{tabular}"]
    return "\n".join(lines)


@app.command()
def derive(model: Path = typer.Argument(..., help="model file (TOML) with a [perturbation] table"),
           order: Optional[int] = typer.Option(None, "--order", "-n", help="highest order (default: the file's)"),
           json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
           latex: bool = typer.Option(False, "--latex", help="print the coupling table as LaTeX"),
           no_check: bool = typer.Option(False, "--no-check", help="skip the exact check"),
           check_scaling: bool = typer.Option(False, "--check-scaling",
                                              help="fit the power of the error at smaller couplings")):
    """Effective low-energy model of MODEL, order by order, checked against exact spectra."""
    m = load_model(model)
    options = {"order": order, "check": not no_check, "check_scaling": check_scaling}
    with _progress(not (json_out or latex)) as progress:
        result = run_task("derive", m, options, progress=progress)
    if json_out:
        return _emit_json(result)
    if latex:
        return print(_latex(result))
    _print_derive(m, result)


def _print_series(m, result: dict, order_shown: int) -> None:
    diag = result["diagnostics"]
    out.print(f"[bold]{m.title}[/bold]: series of the state {diag['reference']}")
    table = Table(title="energy by order")
    for name in ("order", "E_n", "partial sum", "|error| vs exact"):
        table.add_column(name, justify="right")
    errors = diag["error_by_order"] or {}
    for (n, e), s in zip(result["orders"].items(), diag["partial_sums"]):
        table.add_row(n, f"{e:.12g}", f"{s:.12g}", f"{errors[n]:.3e}" if n in errors else "")
    out.print(table)
    if diag["exact"] is not None:
        out.print(f"exact eigenvalue (followed from lambda = 0): {diag['exact']:.12g}")
    if diag["pade"]:
        p = diag["pade"]
        spread = f" +- {p['spread']:.2g}" if p["spread"] is not None else ""
        out.print(f"Pade [{p['approximant'][0]}/{p['approximant'][1]}]: {p['value']:.12g}{spread}")
    if diag["ratio_test"]:
        r = diag["ratio_test"]
        radius = "infinite" if r["radius"] is None else f"{r['radius']:.4g}"
        out.print(f"radius of convergence (Domb-Sykes, in {r['variable']}): {radius}, "
                  f"nearest singularity on the {r['side']} axis")
    if diag["validity_ratio"] is not None:
        out.print(f"validity ratio |V_mn| / |E_n - E_m|: {diag['validity_ratio']:.3g}")
    if diag["second_order_contributions"]:
        table = Table(title="largest second-order contributions")
        for name in ("intermediate state", "|V_mn|^2", "E_n - E_m", "contribution"):
            table.add_column(name, justify="right")
        for c in diag["second_order_contributions"]:
            table.add_row(c["state"], f"{c['coupling_squared']:.6g}", f"{c['denominator']:.6g}",
                          f"{c['contribution']:.6g}")
        out.print(table)
    sweep = result.get("sweep")
    if sweep:
        for c in sweep["avoided_crossings"]:
            out.print(f"avoided crossing at lambda = {c['lambda']:.4g}: gap {c['gap']:.4g} "
                      f"(levels {c['levels'][0]}, {c['levels'][1]}, {c['sector']})")
        for c in sweep["crossings"]:
            out.print(f"true crossing near lambda = {c['lambda']:.4g} ({c['sectors'][0]} / {c['sectors'][1]})")
        useful = ", ".join(f"order {n}: {'-' if v is None else f'{v:.3g}'}"
                           for n, v in sweep["useful_up_to"].items())
        out.print(f"series within 1% of the smallest denominator up to lambda = {useful}")
    for warning in result["warnings"]:
        err.print(f"warning: {warning}", markup=False)


@app.command()
def series(model: Path = typer.Argument(..., help="model file (TOML) with a [perturbation] table"),
           order: Optional[int] = typer.Option(None, "--order", "-n", help="highest order (default: the file's)"),
           json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
           state: Optional[str] = typer.Option(None, "--state",
                                               help="basis-state label (e.g. uudd) or level:K"),
           sweep: Optional[str] = typer.Option(None, "--sweep", help="lambda=START:STOP:COUNT"),
           plot: Optional[Path] = typer.Option(None, "--plot", help="figure of the sweep (.png/.svg/.pdf)")):
    """Perturbation series of one state of H0: energies by order, convergence, validity."""
    m = load_model(model)
    if plot is not None and sweep is None:
        sweep = "lambda=0:1:41"
    if plot is not None and plot.suffix.lower() not in (".png", ".svg", ".pdf"):
        raise ModelError(f"--plot: use a .png, .svg or .pdf file name, got {plot.name!r}")
    options = {"order": order, "state": state, "sweep": parse_sweep(sweep) if sweep else None}
    with _progress(not json_out) as progress:
        result = run_task("series", m, options, progress=progress)
    if plot is not None:
        from lowfold.plots.sweep_figure import plot_sweep
        plot_sweep(result["sweep"], title=m.title, output=plot)
    if json_out:
        return _emit_json(result)
    _print_series(m, result, order)
    if plot is not None:
        out.print(f"figure written to {plot}")


@app.command()
def scan(scan_file: Path = typer.Argument(..., metavar="SCAN", help="scan file (TOML)"),
         scheduler: Optional[str] = typer.Option(None, "--scheduler",
                                                 help="address (or scheduler JSON file) of a running Dask scheduler"),
         out: Optional[Path] = typer.Option(None, "--out", help="results directory (default: next to the scan file)"),
         workers: Optional[int] = typer.Option(None, "--workers", help="local workers (default: one per core)"),
         retry_failed: bool = typer.Option(False, "--retry-failed", help="recompute points stored as errors"),
         json_out: bool = typer.Option(False, "--json", help="print one JSON summary")):
    """Run a parameter / size scan on Dask, storing every finished point as it completes."""
    from lowfold.scans.run import format_summary, run_scan
    summary = run_scan(scan_file, out=out, scheduler=scheduler, workers=workers,
                       retry_failed=retry_failed, progress=False if json_out else None)
    if json_out:
        _emit_json(summary.to_dict())
    else:
        print(format_summary(summary))
    if not summary.ok:
        raise typer.Exit(1)


@app.command()
def plot(results: Path = typer.Argument(..., help="results directory of a scan"),
         kind: str = typer.Option(..., "--kind", help="couplings | errors | finite-size | levels"),
         output: Path = typer.Option(..., "--output", "-o", help="image file (.png, .svg, .pdf)"),
         x: Optional[str] = typer.Option(None, "--x", help="x axis: a parameter or ratio such as t/U"),
         quantity: Optional[str] = typer.Option(None, "--quantity", help="e.g. coupling:exchange:0-1"),
         order: Optional[list[int]] = typer.Option(None, "--order", help="orders to draw (repeatable)"),
         unit: Optional[str] = typer.Option(None, "--unit", help="parameter used as the energy unit"),
         where: Optional[list[str]] = typer.Option(None, "--where", help="AXIS=VALUE slice (repeatable)"),
         exact_gap: Optional[str] = typer.Option(None, "--exact-gap", help="exact reference E_J - E_I as I,J"),
         series_dir: Optional[Path] = typer.Option(None, "--series", help="series results to overlay (levels)"),
         levels: Optional[int] = typer.Option(None, "--levels", help="number of exact levels (levels)"),
         variable: str = typer.Option("L", "--variable", help="finite size variable: L or N"),
         degree: int = typer.Option(1, "--degree", help="polynomial degree of the finite-size fit"),
         power: float = typer.Option(1.0, "--power", help="fit in 1/L^power"),
         per_site: bool = typer.Option(False, "--per-site", help="divide by the number of sites"),
         title: Optional[str] = typer.Option(None, "--title", help="figure title"),
         json_out: bool = typer.Option(False, "--json", help="print one JSON object")):
    """Draw a figure from scan results (see docs/scans.md)."""
    from lowfold.plots.from_directory import plot_results
    from lowfold.plots.where import parse_where
    info = plot_results(results, kind=kind, output=output, x=x, quantity=quantity,
                        orders=order or None, unit=unit, where=parse_where(where or []),
                        exact_levels=exact_gap, series=series_dir, levels=levels,
                        variable=variable, degree=degree, power=power, per_site=per_site,
                        title=title)
    if json_out:
        return _emit_json(info)
    print(f"figure written to {output}")


@app.command()
def demo(json_out: bool = typer.Option(False, "--json", help="print one JSON object")):
    """Run the main job on a built-in example: four quantum dots in a row."""
    path = resources.files("lowfold") / "data" / "quantum_dots.toml"
    with resources.as_file(path) as file:
        if not json_out:
            out.print(f"[bold]lowfold demo[/bold]: {file.name} (built-in example)\n")
        derive(file, order=None, json_out=json_out, latex=False, no_check=False,
               check_scaling=False)


def main() -> None:
    """Console-script entry point: run the app, turning lowfold errors into one line."""
    try:
        app()
    except LowfoldError as exc:
        err.print(f"lowfold: error: {exc}", markup=False, soft_wrap=True)
        sys.exit(2)
    except MemoryError:
        err.print("lowfold: error: out of memory; use a smaller cluster, sector or order",
                  markup=False)
        sys.exit(2)
    except KeyboardInterrupt:
        err.print("lowfold: interrupted", markup=False)
        sys.exit(130)
