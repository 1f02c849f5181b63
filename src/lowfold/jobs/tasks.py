"""The jobs lowfold does, by name, as functions returning result objects.

The command line, the scans and user scripts all call :func:`run_task`, so a scan point and
``lowfold TASK MODEL --json`` give the same numbers (``run_task(...).to_dict()`` is that JSON).
Task options come from scan files (``[task]`` table) and the command line; their names are
those of the scan-file format (docs/scans.md): ``levels``; ``order``, ``check``,
``check_scaling``, ``check_levels`` (an int or ``"all"``), ``exact_couplings`` (a boolean);
``order``, ``state``, ``sweep`` (an array, or the text
``"lambda=START:STOP:COUNT"``).
"""

from __future__ import annotations

import re
from typing import Callable

import numpy as np

from lowfold.errors import ModelError
from lowfold.jobs.check_levels import DEFAULT_CHECK_LEVELS
from lowfold.jobs.derive import derive
from lowfold.jobs.series import state_series
from lowfold.jobs.spectrum import spectrum
from lowfold.jobs.sweep import lambda_grid
from lowfold.model.model import Model
from lowfold.results import RESULT_TYPES, EffectiveModel, Spectrum, StateSeries

__all__ = ["TASKS", "RESULT_TYPES", "run_task", "parse_lambda_range"]


def parse_lambda_range(text: str) -> np.ndarray:
    """``"lambda=0:1:41"`` -> 41 coupling factors from 0 to 1 (``START:STOP:COUNT``)."""
    match = re.fullmatch(r"\s*lambda\s*=\s*([^:]+):([^:]+):(\d+)\s*", text or "")
    if not match:
        raise ModelError("a sweep is written lambda=START:STOP:COUNT (e.g. lambda=0:1:41), "
                         f"got {text!r}")
    try:
        start, stop = float(match.group(1)), float(match.group(2))
    except ValueError:
        raise ModelError(f"a sweep's START and STOP must be numbers, got {text!r}") from None
    return lambda_grid(start, stop, int(match.group(3)))


def _integer_option(options: dict, name: str, default: int) -> int:
    """The option ``name`` as an int; ModelError for anything but an integer (a scan file's
    ``levels = "2"``, ``2.5`` or ``true`` is refused, not converted)."""
    value = options.get(name, default)
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise ModelError(f"{name} must be an integer, got {value!r}")
    return int(value)


def _spectrum_task(model: Model, options: dict, progress, graph_map=None) -> Spectrum:
    return spectrum(model, _integer_option(options, "levels", 4), progress=progress)


def _derive_task(model: Model, options: dict, progress, graph_map=None) -> EffectiveModel:
    exact = options.get("exact_couplings", False)
    if not isinstance(exact, (bool, np.bool_)):
        raise ModelError(f"exact_couplings must be true or false, got {exact!r}")
    return derive(model, options.get("order"), compare_exact=options.get("check", True),
                  fit_scaling=options.get("check_scaling", False),
                  check_levels=options.get("check_levels", DEFAULT_CHECK_LEVELS), progress=progress,
                  exact_couplings=bool(exact), graph_map=graph_map)


def _series_task(model: Model, options: dict, progress, graph_map=None) -> StateSeries:
    sweep = options.get("sweep")
    return state_series(model, options.get("order"), state=options.get("state"),
                        sweep=parse_lambda_range(sweep) if isinstance(sweep, str) else sweep,
                        progress=progress, graph_map=graph_map)


TASKS: dict[str, Callable] = {"spectrum": _spectrum_task, "derive": _derive_task,
                              "series": _series_task}


def run_task(task: str, model: Model, options: dict | None = None, *,
             progress: Callable[[str], None] | None = None, graph_map: Callable | None = None):
    """Run ``task`` (``"spectrum"``, ``"derive"``, ``"series"``) on ``model``; the result is
    a :class:`~lowfold.results.Spectrum`, :class:`~lowfold.results.EffectiveModel` or
    :class:`~lowfold.results.StateSeries` (``RESULT_TYPES[task]``), whose ``to_dict()`` is
    what ``lowfold TASK MODEL --json`` prints.  ``graph_map``: how an infinite lattice's
    distinct cluster graphs are computed (:func:`lowfold.jobs.lattice.linked_cluster_sum`;
    :mod:`lowfold.scans.graphs` for Dask)."""
    if task not in TASKS:
        raise ModelError(f"unknown task {task!r} (known: {', '.join(TASKS)})")
    extra = {} if graph_map is None else {"graph_map": graph_map}
    return TASKS[task](model, dict(options or {}), progress, **extra)
