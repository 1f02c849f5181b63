"""Typed results of lowfold's jobs, and their JSON form: the schema lives here and nowhere else.

Every job (:mod:`lowfold.jobs`) returns one of the frozen dataclasses below; the command line,
the scan store, the plots and the extrapolation read these objects, never the dictionaries.
``to_dict()`` gives the object that ``lowfold TASK MODEL --json`` prints (documented key by
key in ``docs/output.md``) and ``from_dict()`` rebuilds an equivalent object from it, so that
``Cls.from_dict(x.to_dict()).to_dict() == x.to_dict()``.

Conventions: in Python a perturbative order is an ``int`` key everywhere; JSON has string keys
only (``{"2": ...}``).  Fields that JSON cannot carry (the model, the manifold's integer
states, eigenvectors, the CSR orders of a spin-form result) are ``None`` or empty in an object
rebuilt by ``from_dict``.  Non-finite numbers appear as ``null`` in JSON and ``None`` here.
"""

from lowfold.results.classes import CouplingClass
from lowfold.results.common import Spectrum, orders_from_json, orders_to_json
from lowfold.results.effective import (CheckedBlock, DeriveCheck, EffectiveModel,
                                       ManifoldDiagnostics, ManifoldSummary, PauliTerm, PowerFit,
                                       Recognised)
from lowfold.results.series import (AvoidedCrossing, LevelCrossing, Pade, RatioTest,
                                    SecondOrderTerm, StateAmplitude, StateSeries, Sweep)

__all__ = ["Spectrum", "ManifoldSummary", "ManifoldDiagnostics", "PauliTerm", "Recognised",
           "DeriveCheck", "CheckedBlock", "PowerFit", "EffectiveModel", "CouplingClass", "Pade",
           "RatioTest", "StateAmplitude",
           "SecondOrderTerm", "AvoidedCrossing", "LevelCrossing", "Sweep", "StateSeries",
           "orders_to_json", "orders_from_json", "RESULT_TYPES", "result_from_dict"]

RESULT_TYPES = {"spectrum": Spectrum, "derive": EffectiveModel, "series": StateSeries}


def result_from_dict(task: str, data):
    """The result object of ``task`` (``spectrum | derive | series``) from its JSON, e.g. the
    ``result`` of a stored scan point; ``KeyError`` for an unknown task."""
    return RESULT_TYPES[task].from_dict(data)
