"""Scan-store records made of real job results on tiny models, for the store and plot tests.

Each builder runs the job (:func:`lowfold.jobs.tasks.run_task`) and wraps its JSON in a point
record of the layout of :mod:`lowfold.scans.store`, so the readers are fed what a scan writes.
The models and their known values:

- ``spectrum``: the Hubbard dimer at half filling, S^z = 0, t = 1, U = 8: levels
  ``(U - sqrt(U^2 + 16 t^2)) / 2``, ``0``, ``U`` (exact diagonalisation of the 4x4 block;
  common practice);
- ``derive``: the same dimer with U as H0, t = 0.1, U = 1, to order 4: exchange
  ``4 t^2 / U - 16 t^4 / U^3`` (Takahashi, J. Phys. C 10, 1289 (1977));
- ``derive`` with a field ``h S^z`` on site 1 in V: the order-1 field on site 1 is ``h``
  (first-order degenerate perturbation theory, ``P V P``; common practice);
- ``series``: the transverse-field Ising ring of 4 sites (``helpers.series_models``), whose
  coefficients are :func:`helpers.exact.ring_coefficients` (Lieb, Schultz and Mattis 1961).
"""

from __future__ import annotations

import functools
import math

from helpers.modelfiles import hubbard_text, model_of, term_text
from helpers.series_models import TFIM_RING
from lowfold.jobs.tasks import run_task

SPECTRUM_T, SPECTRUM_U = 1.0, 8.0
DERIVE_T, DERIVE_U, FIELD_H = 0.1, 1.0, 0.02
SERIES_G, SERIES_L, SERIES_ORDER = 0.1, 4, 4


def key_of(n: int) -> str:
    """A well-formed point key (20 hex digits, like :func:`lowfold.scans.store.point_key`)."""
    return f"{n:020x}"


def record(key, *, task="spectrum", status="ok", result=None, error=None, U=8.0, size=(2,)):
    """A point record around ``result`` (a task's JSON) or ``error``."""
    return {
        "format": 1, "key": key, "status": status, "task": task, "options": {},
        "parameters": {"t": 1.0, "U": U}, "scanned": ["U"], "values": {"U": U, "size": list(size)},
        "size": list(size), "boundary": "open", "sector": {"particles": 2, "sz": 0.0},
        "n_sites": size[0], "model": {"path": "m.toml", "sha256": "0" * 64, "title": "dimer"},
        "lowfold_version": "0.1.0", "timing": None, "result": result, "error": error,
    }


def dimer_levels(t: float, U: float) -> list[float]:
    """The S^z = 0 levels of the half-filled Hubbard dimer, ascending (see module docstring)."""
    return sorted([(U - math.sqrt(U * U + 16 * t * t)) / 2, 0.0, U, (U + math.sqrt(U * U + 16 * t * t)) / 2])


def dimer_exchange(t: float, U: float) -> dict[int, float]:
    """Order-2 and order-4 exchange of the Hubbard dimer (Takahashi 1977)."""
    return {2: 4 * t**2 / U, 4: -16 * t**4 / U**3}


@functools.cache
def _results() -> dict:
    dimer = hubbard_text("chain", (2,), t=SPECTRUM_T, U=SPECTRUM_U, sz=0)
    derive = hubbard_text("chain", (2,), t=DERIVE_T, U=DERIVE_U, order=4)
    field = hubbard_text("chain", (2,), t=DERIVE_T, U=DERIVE_U, order=4,
                         terms=term_text("field", FIELD_H, axis="z", sites=[1]))
    ring = TFIM_RING.format(L=SERIES_L, minus_g=-SERIES_G, order=SERIES_ORDER)
    return {"spectrum": run_task("spectrum", model_of(dimer), {"levels": 3}).to_dict(),
            "derive": run_task("derive", model_of(derive), {}).to_dict(),
            "field": run_task("derive", model_of(field), {}).to_dict(),
            "series": run_task("series", model_of(ring), {}).to_dict()}


def real_result(name: str) -> dict:
    """The JSON of a real job: ``spectrum``, ``derive``, ``field`` (a derive) or ``series``
    (a fresh copy each time, so tests may edit it)."""
    import copy

    return copy.deepcopy(_results()[name])
