"""Coupling classes: the couplings of a lattice grouped by symmetry (JSON key ``classes``).

On an infinite lattice (linked-cluster expansion) and on translation-invariant clusters,
equivalent couplings (all nearest-neighbour exchanges, all 4-cycle ring terms, ...) are one
class: its value per member, one member's Cartesian positions, and the number of members per
site of the lattice.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

from lowfold.results.common import orders_from_json, orders_to_json

__all__ = ["CouplingClass"]


def _plain(value) -> Any:
    """A float, or a list of floats for vector and tensor couplings."""
    if hasattr(value, "tolist"):
        value = value.tolist()
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return float(value)


def _total(values) -> Any:
    values = [_plain(v) for v in values]
    if not values:
        return 0.0
    if any(isinstance(v, list) for v in values):     # a complex string: [re, im] per order,
        values = [v if isinstance(v, list) else [v, 0.0] for v in values]   # or a real one
    if isinstance(values[0], list):
        return [_total(column) for column in zip(*values)]
    return float(sum(values))


@dataclass(frozen=True)
class CouplingClass:
    """One symmetry class of couplings.

    Attributes
    ----------
    kind : str
        The coupling kind (``exchange``, ``dm``, ``anisotropy``, ``ring``, ``chirality``,
        ``field``, ``constant``, or ``pauli`` for multi-spin strings without a name).
    name : str
        The class: ``nearest``, ``next-nearest``, ``third`` for two-site terms, ``triangle``
        and ``4-cycle`` for terms on 3- and 4-cycles of the nearest-neighbour graph, ``site``
        for one-site terms, otherwise a descriptive name.  JSON key ``class``.
    positions : tuple of tuples of float
        Cartesian coordinates of the sites of one member, in the order the coupling uses.
    multiplicity : float
        Members per site of the lattice.
    orders : mapping int -> float or list
        Each perturbative order's contribution at the model's parameter values.
    formula : str or None
        The value as a formula in the model's parameters (``4 t^2/U - 16 t^4/U^3``) when
        it has one energy ratio.
    operator : str or None
        For ``kind = "pauli"``: the Pauli letters on the member's sites (``"Z Z Z Z"``).
    members : tuple of tuples
        The positions of one member of every translation orbit the class holds, in the
        order each coupling uses its sites (``positions`` is the first); empty when not
        recorded.  Export writes a pattern per orbit; JSON key ``members`` when there are
        several.
    """

    kind: str
    name: str
    positions: tuple
    multiplicity: float
    orders: Mapping[int, Any] = field(default_factory=dict)
    formula: str | None = None
    operator: str | None = None
    members: tuple = field(default=(), compare=False, repr=False)

    @property
    def value(self) -> Any:
        return _total(self.orders.values())

    def to_dict(self) -> dict:
        out = {"kind": self.kind, "class": self.name,
               "positions": [[float(x) for x in p] for p in self.positions],
               "multiplicity": float(self.multiplicity), "value": self.value,
               "orders": orders_to_json({m: _plain(v) for m, v in self.orders.items()})}
        if self.formula is not None:
            out["formula"] = self.formula
        if self.operator is not None:
            out["operator"] = self.operator
        if len(self.members) > 1:
            out["members"] = [[[float(x) for x in p] for p in m] for m in self.members]
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "CouplingClass":
        return cls(data["kind"], data["class"], tuple(tuple(p) for p in data["positions"]),
                   float(data["multiplicity"]), orders_from_json(data.get("orders")),
                   data.get("formula"), data.get("operator"),
                   tuple(tuple(tuple(p) for p in m) for m in data.get("members", ())))
