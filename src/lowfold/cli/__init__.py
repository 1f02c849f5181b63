"""The ``lowfold`` command line: a typer app over the jobs, with rich rendering."""

from lowfold.cli.app import app, main

__all__ = ["app", "main"]
