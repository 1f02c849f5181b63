"""The ``lowfold`` command: the typer app (commands, option parsing, error wording).

The rendering of result objects lives in :mod:`lowfold.cli.render`.

Every user error (a :class:`~lowfold.errors.LowfoldError`) becomes one line on stderr and
exit status 2.  ``--json`` prints exactly one JSON object on stdout; progress goes to stderr
and only on a terminal.
"""

from __future__ import annotations

import contextlib
import json
import os
import sys
from fractions import Fraction
from importlib import resources
from pathlib import Path
from typing import Optional

import typer
from rich.console import Console

from lowfold import __version__
from lowfold.errors import LowfoldError, ModelError
from lowfold.model.modelfile import load_model
from lowfold.model.sector import Sector
from lowfold.cli import render
from lowfold.jobs.tasks import parse_lambda_range, run_task
from lowfold.results.common import null_non_finite

# help texts are plain text (rich_markup_mode=None): "[perturbation]" is a table name, not
# markup, and on/off flags show no value type
app = typer.Typer(add_completion=False, no_args_is_help=True, pretty_exceptions_enable=False,
                  rich_markup_mode=None,
                  help="Effective low-energy models of lattice Hamiltonians, checked against "
                       "exact spectra.")
# user text reaches these consoles (titles, file names, labels): no emoji codes, no
# highlighting; markup only in the fixed wording, with user text escaped (render.user_text)
out = Console(highlight=False, emoji=False)
err = Console(stderr=True, highlight=False, emoji=False)


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
    """Print ``data`` as one line of strict JSON: a number that is not finite (an overflow)
    is written as null, and a warning in ``warnings`` says where."""
    data, where = null_non_finite(data)
    if where:
        shown = ", ".join(where[:4]) + (f" and {len(where) - 4} more" if len(where) > 4 else "")
        data["warnings"] = [*data.get("warnings", []),
                            f"{len(where)} number(s) not finite (overflow, or undefined) are "
                            f"written as null: {shown}"]
    sys.stdout.write(json.dumps(data, allow_nan=False) + "\n")


def _parse_size(size: str) -> list[int]:
    """``--size N[,M]`` as a list of integers."""
    try:
        return [int(n) for n in size.split(",")]
    except ValueError:
        raise ModelError(f"--size: give N or N,M (integers), got {size!r}") from None


def _sized(path: Path, size: Optional[str], boundary: Optional[str]):
    """Load a model file, on a lattice of ``--size N[,M]`` / ``--boundary`` when given
    (an infinite lattice given a size becomes periodic unless ``--boundary`` says otherwise;
    a sector that fixes the particle number keeps its filling, particles per site)."""
    m = load_model(path)
    if size is None and boundary is None:
        return m
    cells = None if size is None else _parse_size(size)
    if boundary is not None and boundary not in ("open", "periodic"):
        raise ModelError(f"--boundary: must be open or periodic, got {boundary!r}")
    if boundary is None and "infinite" in m.lattice.boundary:
        boundary = "periodic"
    try:
        resized = m.with_lattice(size=cells, boundary=boundary)
        if m.sector.particles is not None and resized.n_sites != m.n_sites:
            filling = Fraction(m.sector.particles, m.n_sites)
            resized = resized.with_sector(Sector.from_filling(filling, resized.n_sites,
                                                              sz=m.sector.sz))
        return resized
    except LowfoldError as exc:
        flag = "--size" if size is not None else "--boundary"
        raise type(exc)(f"{flag}: {exc}") from None


_SIZE_HELP = "lattice size N or N,M (overrides the model file's)"
_BOUNDARY_HELP = "open or periodic (overrides the model file's)"


def parse_sweep(text: str):
    """``--sweep lambda=START:STOP:COUNT`` -> the coupling factors (errors name the flag)."""
    try:
        return parse_lambda_range(text)
    except ModelError as exc:
        raise ModelError(f"--sweep: {exc}") from None


def check_writable(path: Path, flag: str) -> None:
    """Refuse, before any computation, an output file that cannot be written: its directory
    missing or not writable, or the path a directory or a read-only file."""
    parent = path.parent
    if path.is_dir():
        raise ModelError(f"{flag}: {str(path)!r} is a directory, not a file name")
    if not parent.is_dir():
        raise ModelError(f"{flag}: the directory {str(parent)!r} does not exist")
    target = path if path.exists() else parent
    if not os.access(target, os.W_OK):
        raise ModelError(f"{flag}: cannot write {str(path)!r} (permission denied or a "
                         "read-only file system)")


@app.command()
def spectrum(model: Path = typer.Argument(..., metavar="MODEL", help="model file (TOML)"),
             levels: int = typer.Option(4, "--levels", "-k", help="number of lowest levels"),
             json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
             size: Optional[str] = typer.Option(None, "--size", help=_SIZE_HELP),
             boundary: Optional[str] = typer.Option(None, "--boundary", help=_BOUNDARY_HELP)):
    """The lowest energies of MODEL in its sector (Lanczos, or dense for small spaces)."""
    m = _sized(model, size, boundary)
    if m.lattice.infinite:
        raise ModelError("the lattice is infinite: an exact spectrum needs a finite cluster; "
                         "give --size N[,M] (or a size in [lattice])")
    with _progress(not json_out) as progress:
        result = run_task("spectrum", m, {"levels": levels}, progress=progress)
    if json_out:
        return _emit_json(result.to_dict())
    render.print_spectrum(out, m.title, result)


def _check_scheduler(scheduler: Optional[str], m) -> None:
    if scheduler is not None and not m.lattice.infinite:
        raise ModelError("--scheduler sends the cluster graphs of an infinite lattice to Dask; "
                         "this lattice is finite (use lowfold scan for many finite clusters)")


@contextlib.contextmanager
def _graph_map(scheduler: Optional[str]):
    """The Dask graph map of ``--scheduler`` (None: the graphs are computed here)."""
    if scheduler is None:
        yield None
        return
    from lowfold.scans.graphs import scheduler_graph_map
    with scheduler_graph_map(scheduler) as graph_map:
        yield graph_map


def _parse_check_levels(text: Optional[str]):
    """``--check-levels all|K`` -> ``"all"``, an int, or None (the default)."""
    if text is None:
        return None
    if text.strip().lower() == "all":
        return "all"
    if text.strip().isdigit() and int(text) >= 1:
        return int(text)
    raise ModelError(f"--check-levels: give all or a positive whole number, got {text!r}")


@app.command()
def derive(model: Path = typer.Argument(..., metavar="MODEL",
                                         help="model file (TOML) with a [perturbation] table"),
           order: Optional[int] = typer.Option(None, "--order", "-n", help="highest order (default: the file's)"),
           json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
           latex: bool = typer.Option(False, "--latex", help="print the coupling table as LaTeX"),
           no_check: bool = typer.Option(False, "--no-check", help="skip the exact check"),
           check_scaling: bool = typer.Option(False, "--check-scaling",
                                              help="fit the power of the error at smaller couplings"),
           check_levels: Optional[str] = typer.Option(None, "--check-levels", metavar="all|K",
                                                      help="lowest levels of each S^z block the check compares (default 8)"),
           export: Optional[Path] = typer.Option(None, "--export",
                                                 help="write the effective spin model as a model file"),
           exact_couplings: bool = typer.Option(False, "--exact-couplings",
                                                help="also give each coupling its exact value on the "
                                                     "cluster (direct rotation of the exact states)"),
           size: Optional[str] = typer.Option(None, "--size", help=_SIZE_HELP),
           boundary: Optional[str] = typer.Option(None, "--boundary", help=_BOUNDARY_HELP),
           scheduler: Optional[str] = typer.Option(
               None, "--scheduler", metavar="ADDRESS",
               help="Dask scheduler (address or scheduler JSON file) for the cluster graphs of an infinite lattice")):
    """Effective low-energy model of MODEL, order by order, checked against exact spectra."""
    levels = _parse_check_levels(check_levels)
    m = _sized(model, size, boundary)
    _check_scheduler(scheduler, m)
    if export is not None:
        check_writable(export, "--export")
    options = {"order": order, "check": not no_check, "check_scaling": check_scaling,
               "exact_couplings": exact_couplings}
    if levels is not None:
        options["check_levels"] = levels
    with _progress(not (json_out or latex)) as progress, _graph_map(scheduler) as graph_map:
        result = run_task("derive", m, options, progress=progress, graph_map=graph_map)
    if export is not None:
        from lowfold.jobs.export import write_export
        try:
            write_export(result, export)
        except ModelError as exc:
            raise ModelError(f"--export: {exc}") from None
        if not (json_out or latex):
            err.print(f"effective model written to {render.one_line(export)}", markup=False)
    if json_out:
        return _emit_json(result.to_dict())
    if latex:
        return print(render.latex_couplings(result))
    render.print_derive(out, err, m.title, result)


@app.command()
def series(model: Path = typer.Argument(..., metavar="MODEL",
                                         help="model file (TOML) with a [perturbation] table"),
           order: Optional[int] = typer.Option(None, "--order", "-n", help="highest order (default: the file's)"),
           json_out: bool = typer.Option(False, "--json", help="print one JSON object"),
           state: Optional[str] = typer.Option(None, "--state",
                                               help="basis-state label (e.g. uudd) or level:K"),
           sweep: Optional[str] = typer.Option(None, "--sweep", help="lambda=START:STOP:COUNT"),
           plot: Optional[Path] = typer.Option(None, "--plot", help="figure of the sweep (.png/.svg/.pdf)"),
           size: Optional[str] = typer.Option(None, "--size", help=_SIZE_HELP),
           boundary: Optional[str] = typer.Option(None, "--boundary", help=_BOUNDARY_HELP),
           scheduler: Optional[str] = typer.Option(
               None, "--scheduler", metavar="ADDRESS",
               help="Dask scheduler (address or scheduler JSON file) for the cluster graphs of an infinite lattice")):
    """Perturbation series of one state of H0: energies by order, convergence, validity."""
    m = _sized(model, size, boundary)
    _check_scheduler(scheduler, m)
    if plot is not None and sweep is None:
        sweep = "lambda=0:1:41"
    if plot is not None and plot.suffix.lower() not in (".png", ".svg", ".pdf"):
        raise ModelError(f"--plot: use a .png, .svg or .pdf file name, got {plot.name!r}")
    if plot is not None:
        check_writable(plot, "--plot")
    options = {"order": order, "state": state, "sweep": parse_sweep(sweep) if sweep else None}
    try:
        with _progress(not json_out) as progress, _graph_map(scheduler) as graph_map:
            result = run_task("series", m, options, progress=progress, graph_map=graph_map)
    except ModelError as exc:
        if state is not None and str(exc).startswith("state "):
            raise ModelError(f"--{exc}") from None
        raise
    if plot is not None:
        from lowfold.plots.sweep_figure import plot_sweep
        try:
            plot_sweep(result.sweep.to_dict(), title=m.title, output=plot)
        except OSError as exc:          # checked before computing; a full disk remains
            raise ModelError(f"--plot: cannot write {str(plot)!r}: {exc.strerror or exc}") from None
    if json_out:
        return _emit_json(result.to_dict())
    render.print_series(out, err, m.title, result)
    if plot is not None:
        out.print(f"figure written to {render.user_text(plot)}")


@app.command()
def scan(scan_file: Path = typer.Argument(..., metavar="SCAN", help="scan file (TOML)"),
         scheduler: Optional[str] = typer.Option(None, "--scheduler",
                                                 help="address (or scheduler JSON file) of a running Dask scheduler"),
         out: Optional[Path] = typer.Option(None, "--out", help="results directory (default: next to the scan file)"),
         workers: Optional[int] = typer.Option(None, "--workers", help="local workers (default: one per core)"),
         retry_failed: bool = typer.Option(False, "--retry-failed", help="recompute points stored as errors"),
         json_out: bool = typer.Option(False, "--json", help="print one JSON summary"),
         size: Optional[str] = typer.Option(None, "--size", help=_SIZE_HELP + ", at every point"),
         boundary: Optional[str] = typer.Option(None, "--boundary", help=_BOUNDARY_HELP + ", at every point")):
    """Run a parameter / size scan on Dask, storing every finished point as it completes."""
    from lowfold.scans.run import ScanInterrupted, format_summary, run_scan
    spec = scan_file
    if size is not None or boundary is not None:
        from lowfold.scans.scanfile import load_scan, with_lattice
        cells = _parse_size(size) if size is not None else None
        spec = load_scan(scan_file)
        try:
            spec = with_lattice(spec, cells, boundary)
        except ModelError as exc:
            raise ModelError(f"{'--size' if size is not None else '--boundary'}: {exc}") from None
    try:
        summary = run_scan(spec, out=out, scheduler=scheduler, workers=workers,
                           retry_failed=retry_failed, progress=False if json_out else None)
    except ScanInterrupted as exc:      # typer turns Ctrl-C into a silent exit 130
        err.print(f"lowfold: interrupted: {exc.stored} of {exc.total} points are stored in "
                  f"{exc.out}; run the same command again to resume", markup=False, soft_wrap=True)
        raise typer.Exit(130) from None
    if json_out:
        _emit_json(summary.to_dict())
    else:
        print(format_summary(summary))
    if not summary.ok:
        raise typer.Exit(1)


@app.command()
def plot(results: Path = typer.Argument(..., metavar="RESULTS", help="results directory of a scan"),
         kind: str = typer.Option(..., "--kind", help="couplings | errors | finite-size | levels | exact-couplings"),
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
    check_writable(output, "--output")
    info = plot_results(results, kind=kind, output=output, x=x, quantity=quantity,
                        orders=order or None, unit=unit, where=parse_where(where or []),
                        exact_levels=exact_gap, series=series_dir, levels=levels,
                        variable=variable, degree=degree, power=power, per_site=per_site,
                        title=title)
    for note in info.get("warnings", []):
        err.print(f"lowfold: warning: {note}", markup=False, soft_wrap=True)
    if json_out:
        return _emit_json(info)
    print(f"figure written to {output}")


@app.command()
def demo(json_out: bool = typer.Option(False, "--json", help="print one JSON object")):
    """Run the main job on a built-in example: four quantum dots in a row."""
    path = resources.files("lowfold") / "data" / "quantum_dots.toml"
    with resources.as_file(path) as file:
        if not json_out:
            out.print(f"[bold]lowfold demo[/bold]: {render.user_text(file.name)} "
                      "(built-in example)\n")
        derive(file, order=None, json_out=json_out, latex=False, no_check=False,
               check_scaling=False, check_levels=None, export=None, exact_couplings=False,
               size=None, boundary=None, scheduler=None)


def main() -> None:
    """Console-script entry point: run the app, turning lowfold errors into one line."""
    try:
        app()
    except LowfoldError as exc:
        err.print(f"lowfold: error: {render.one_line(exc)}", markup=False, soft_wrap=True)
        sys.exit(2)
    except MemoryError:
        err.print("lowfold: error: out of memory; use a smaller cluster, sector or order",
                  markup=False)
        sys.exit(2)
    except KeyboardInterrupt:
        err.print("lowfold: interrupted", markup=False)
        sys.exit(130)
