"""The jobs lowfold does, as functions returning JSON-ready dictionaries.

The command line, the scans and user scripts all call :func:`run_task`, so a scan point and
``lowfold TASK MODEL --json`` give the same numbers.
"""

from __future__ import annotations

from typing import Callable

from lowfold.jobs.derive import derive
from lowfold.errors import ModelError
from lowfold.solve.exact import spectrum
from lowfold.model.model import Model
from lowfold.jobs.state_series import parse_sweep, state_series

__all__ = ["TASKS", "run_task"]


def _spectrum_task(model: Model, options: dict, progress) -> dict:
    levels = int(options.get("levels", 4))
    return spectrum(model, levels, progress=progress).to_dict()


def _derive_task(model: Model, options: dict, progress) -> dict:
    result = derive(model, options.get("order"), check=options.get("check", True),
                    check_scaling=options.get("check_scaling", False), progress=progress)
    return result.to_dict()


def _series_task(model: Model, options: dict, progress) -> dict:
    sweep = options.get("sweep")
    result = state_series(model, options.get("order"), state=options.get("state"),
                          sweep=parse_sweep(sweep) if isinstance(sweep, str) else sweep,
                          progress=progress)
    return result.to_dict()


TASKS: dict[str, Callable] = {"spectrum": _spectrum_task, "derive": _derive_task,
                              "series": _series_task}


def run_task(task: str, model: Model, options: dict | None = None, *,
             progress: Callable[[str], None] | None = None) -> dict:
    """Run ``task`` (``"spectrum"``, ``"derive"``, ``"series"``) on ``model``; the result is
    the dictionary that ``lowfold TASK MODEL --json`` prints."""
    if task not in TASKS:
        raise ModelError(f"unknown task {task!r} (known: {', '.join(TASKS)})")
    return TASKS[task](model, dict(options or {}), progress)
