"""The exact (direct-rotation) couplings of a derive: ``"exact": value`` beside the orders.

:class:`ExactCouplings` holds the readout of the exact effective Hamiltonian of the cluster
(``lowfold.jobs.exact_couplings``) with the same readout as the orders: Pauli strings by
operator, named couplings by ``(kind, sites)``.  In the derive JSON every term and coupling
gets ``"exact"`` (0 when the exact readout has nothing there above its tolerance), and the key
``"exact"`` says how well separated the exact states were and lists what the exact effective
Hamiltonian contains beyond the orders derived (e.g. a ring exchange at order 2)::

    "exact": {"gap": g, "smallest_singular_value": s, "energies": [...],
              "beyond_orders": {"terms": [{"operator", "exact"}],
                                "couplings": [{"kind", "sites", "exact"}]}}

A manifold with no named readout gets ``"effective": {..., "exact": matrix}`` instead.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from lowfold.results.common import finite

__all__ = ["ExactCouplings", "coupling_key"]

EXACT_TOL = 1e-12      # exact content beyond the orders is listed only above this


def _plain(value):
    if isinstance(value, (list, tuple, np.ndarray)):
        return np.asarray(value, dtype=float).tolist()
    return float(value)


def _zero_like(value):
    zeros = np.zeros_like(np.asarray(value, dtype=float))
    return float(zeros) if zeros.ndim == 0 else zeros.tolist()


def coupling_key(kind: str, sites, operator: str | None = None) -> tuple:
    """``(kind, sites)``, or ``(kind, sites, operator)`` for a coupling that names its
    operator string (several strings of one kind can share their sites)."""
    key = (kind, tuple(int(s) for s in sites))
    return key + (operator,) if operator else key


@dataclass(frozen=True, eq=False)
class ExactCouplings:
    """Readout of the exact effective Hamiltonian of the cluster.

    Attributes
    ----------
    terms : dict of str to float
        Pauli string -> exact coefficient.
    couplings : dict of (kind, sites) or (kind, sites, operator) to float or list
        Named coupling -> exact value (scalar, vector or 3x3 nested list); see
        :func:`coupling_key`.
    gap : float or None
        Smallest exact gap, over the blocks, between the manifold's exact levels and the rest.
    smallest_singular_value : float
        Smallest singular value of the overlap ``P psi`` over the blocks (1: exact states in P).
    energies : tuple of float
        The exact levels of the manifold (ascending, all blocks).
    matrix : sparse matrix or None
        The exact effective Hamiltonian in the order of the manifold's states (not in JSON for
        a named readout; ``effective.exact`` for a matrix readout).
    classes : dict of (kind, class, operator) to float or list
        Coupling classes of the exact readout (translation-invariant clusters): one member's
        exact value.
    """

    terms: Mapping[str, float] = field(default_factory=dict)
    couplings: Mapping[tuple, Any] = field(default_factory=dict)
    gap: float | None = None
    smallest_singular_value: float = 1.0
    energies: tuple[float, ...] = ()
    matrix: Any = None
    classes: Mapping[tuple, Any] = field(default_factory=dict)

    def term_value(self, operator: str) -> float:
        return float(self.terms.get(operator, 0.0))

    def coupling_value(self, kind: str, sites, like=0.0, operator: str | None = None):
        """Exact value of the coupling ``(kind, sites)`` (and ``operator``, for the named
        strings of a local readout); zeros shaped as ``like`` if absent."""
        key = coupling_key(kind, sites, operator)
        return _plain(self.couplings[key]) if key in self.couplings else _zero_like(like)

    def annotate(self, out: dict) -> None:
        """Add ``"exact"`` to the terms and couplings of a derive JSON ``out`` (in place) and
        the top-level ``"exact"`` summary."""
        seen_terms, seen_couplings = set(), set()
        for term in out.get("terms", []):
            term["exact"] = self.term_value(term["operator"])
            seen_terms.add(term["operator"])
        for coupling in out.get("couplings", []):
            coupling["exact"] = self.coupling_value(coupling["kind"], coupling["sites"],
                                                    coupling["value"], coupling.get("operator"))
            seen_couplings.add(coupling_key(coupling["kind"], coupling["sites"],
                                            coupling.get("operator")))
        for group in out.get("classes", []):
            key = (group["kind"], group["class"], group.get("operator"))
            group["exact"] = (_plain(self.classes[key]) if key in self.classes
                              else _zero_like(group["value"]))
        beyond_terms = [{"operator": op, "exact": float(c)} for op, c in self.terms.items()
                        if op not in seen_terms and abs(c) > EXACT_TOL]
        beyond_couplings = [{"kind": key[0], "sites": list(key[1]), "exact": _plain(v),
                             **({"operator": key[2]} if len(key) > 2 else {})}
                            for key, v in self.couplings.items()
                            if key not in seen_couplings and np.max(np.abs(v)) > EXACT_TOL]
        out["exact"] = {"gap": finite(self.gap),
                        "smallest_singular_value": float(self.smallest_singular_value),
                        "energies": [float(e) for e in self.energies],
                        "beyond_orders": {"terms": beyond_terms, "couplings": beyond_couplings}}

    @classmethod
    def from_dict(cls, data: Mapping) -> "ExactCouplings | None":
        """From a derive JSON (None when it has no ``"exact"``)."""
        summary = data.get("exact")
        if summary is None:
            return None
        beyond = summary.get("beyond_orders") or {}
        terms = {t["operator"]: float(t["exact"]) for t in data.get("terms", []) if "exact" in t}
        terms.update({t["operator"]: float(t["exact"]) for t in beyond.get("terms", [])})
        couplings = {coupling_key(c["kind"], c["sites"], c.get("operator")): c["exact"]
                     for c in [*data.get("couplings", []), *beyond.get("couplings", [])]
                     if "exact" in c}
        classes = {(c["kind"], c["class"], c.get("operator")): c["exact"]
                   for c in data.get("classes", []) if "exact" in c}
        return cls(terms, couplings, summary.get("gap"),
                   float(summary.get("smallest_singular_value", 1.0)),
                   tuple(float(e) for e in summary.get("energies", ())), classes=classes)
