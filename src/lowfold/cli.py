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

import typer
from rich.console import Console
from rich.table import Table

from . import __version__
from .errors import LowfoldError
from .modelfile import load_model
from .tasks import run_task

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


@app.command()
def demo(json_out: bool = typer.Option(False, "--json", help="print one JSON object")):
    """Run the main job on a built-in example: four quantum dots in a row."""
    path = resources.files("lowfold") / "data" / "quantum_dots.toml"
    with resources.as_file(path) as file:
        if not json_out:
            out.print(f"[bold]lowfold demo[/bold]: {file.name} (built-in example)\n")
        spectrum(file, levels=6, json_out=json_out)


def main() -> None:
    """Console-script entry point: run the app, turning lowfold errors into one line."""
    try:
        app()
    except LowfoldError as exc:
        err.print(f"lowfold: error: {exc}", markup=False, soft_wrap=True)
        sys.exit(2)
    except KeyboardInterrupt:
        err.print("lowfold: interrupted", markup=False)
        sys.exit(130)
