"""The derive job's result: :class:`EffectiveModel` and its parts."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np
import scipy.sparse as sp

from lowfold.readout.couplings import Coupling
from lowfold.results.classes import CouplingClass
from lowfold.results.common import finite, orders_from_json, orders_to_json
from lowfold.results.exact import ExactCouplings

__all__ = ["ManifoldSummary", "ManifoldDiagnostics", "PauliTerm", "Recognised", "DeriveCheck",
           "CheckedBlock",
           "PowerFit", "EffectiveModel", "TERM_TOL", "COUPLING_TOL"]

TERM_TOL = 1e-14        # order contributions of a Pauli term at or below this are not written
COUPLING_TOL = 1e-12    # order contributions of a coupling at or below this are not written



@dataclass(frozen=True, eq=False)
class ManifoldSummary:
    """The manifold P: size, lowest H0 energy, gap to the states V reaches, and readout.

    ``readout`` is ``"spin-1/2"`` or ``"matrix (<reason there is no spin form>)"``.
    ``states`` (integers of the basis states) and ``energies`` (their H0 energies) are kept
    by the derive job and are not in JSON.
    """

    dimension: int
    energy: float
    gap: float | None
    readout: str
    states: np.ndarray | None = None
    energies: np.ndarray | None = None

    @property
    def spin_form(self) -> bool:
        return self.readout == "spin-1/2" or self.readout.startswith("pseudo-spin-1/2")

    def to_dict(self) -> dict:
        return {"dimension": int(self.dimension), "energy": float(self.energy),
                "gap": finite(self.gap), "readout": self.readout}

    @classmethod
    def from_dict(cls, data: Mapping) -> "ManifoldSummary":
        return cls(int(data["dimension"]), float(data["energy"]), data["gap"], data["readout"])


@dataclass(frozen=True)
class ManifoldDiagnostics:
    """Validity numbers of a degenerate expansion (``None`` where not finite).

    ``closest_states`` names the manifold state and the outside state with the smallest
    energy denominator, by their basis labels.
    """

    validity_ratio: float | None
    max_coupling_out: float
    gap: float | None
    smallest_denominator: float | None
    closest_states: tuple[str, str] | None
    memory: dict | None = None    # "<n>" -> bytes kept and seconds of order n

    @classmethod
    def from_diagnostics(cls, diag, label_of) -> "ManifoldDiagnostics":
        """From :class:`lowfold.perturbation.diagnostics.Diagnostics`; ``label_of(int) -> str``."""
        data = diag.to_dict(label_of)
        return cls.from_dict(data)

    def to_dict(self) -> dict:
        return {"validity_ratio": self.validity_ratio, "max_coupling_out": self.max_coupling_out,
                "gap": self.gap, "smallest_denominator": self.smallest_denominator,
                "closest_states": list(self.closest_states) if self.closest_states else None,
                **({"memory": self.memory} if self.memory is not None else {})}

    @classmethod
    def from_dict(cls, data: Mapping) -> "ManifoldDiagnostics":
        closest = data.get("closest_states")
        memory = data.get("memory")
        return cls(data["validity_ratio"], float(data["max_coupling_out"]), data["gap"],
                   data["smallest_denominator"], tuple(closest) if closest else None,
                   {str(m): dict(c) for m, c in memory.items()} if memory is not None else None)


@dataclass(frozen=True)
class PauliTerm:
    """One Pauli string of a spin-form effective Hamiltonian and its coefficient per order.

    ``coefficient`` is the sum over all orders; ``orders`` omits contributions at or below
    ``TERM_TOL`` in JSON.
    """

    operator: str
    coefficient: float
    orders: Mapping[int, float]

    def to_dict(self) -> dict:
        return {"operator": self.operator, "coefficient": float(self.coefficient),
                "orders": {str(m): float(v) for m, v in self.orders.items() if abs(v) > TERM_TOL}}

    @classmethod
    def from_dict(cls, data: Mapping) -> "PauliTerm":
        return cls(data["operator"], float(data["coefficient"]), orders_from_json(data["orders"]))


@dataclass(frozen=True)
class Recognised:
    """Coefficients of a coupling recognised as rationals ``p/q`` times ``scale`` at each order
    (``scale`` such as ``"t^n/U^(n-1)"``, ``n`` being the order)."""

    scale: str
    coefficients: Mapping[int, str]

    def to_dict(self) -> dict:
        return {"scale": self.scale, "coefficients": orders_to_json(self.coefficients)}

    @classmethod
    def from_dict(cls, data: Mapping) -> "Recognised":
        return cls(data["scale"], orders_from_json(data["coefficients"]))


def _coupling_to_dict(coupling: Coupling, recognised: Recognised | None) -> dict:
    out = coupling.to_dict()
    out["orders"] = {k: v for k, v in out["orders"].items() if np.max(np.abs(v)) > COUPLING_TOL}
    if recognised is not None:
        out["recognised"] = recognised.to_dict()
    return out


def _coupling_from_dict(data: Mapping) -> Coupling:
    if "operator" in data:            # a string of the local-operator readout
        from lowfold.readout.local_names import LocalCoupling
        return LocalCoupling(data["kind"], tuple(int(s) for s in data["sites"]), data["value"],
                             orders_from_json(data["orders"]), data["operator"])
    return Coupling(data["kind"], tuple(int(s) for s in data["sites"]), data["value"],
                    orders_from_json(data["orders"]))


@dataclass(frozen=True)
class CheckedBlock:
    """Which levels of one S^z block the exact check compared: the lowest ``compared`` of
    its ``manifold_states`` levels (``sz`` as text such as ``"1/2"``; None: no S^z blocks),
    and how the exact ones were found (``method``: ``"dense"``, ``"lobpcg"`` or
    ``"lanczos"`` on the sparse matrix, ``"product-block"`` or ``"product-lanczos"`` in the
    product basis, ``"mirror"`` from the spin-reversed block; None: not recorded)."""

    sz: str | None
    compared: int
    manifold_states: int
    method: str | None = None

    def to_dict(self) -> dict:
        out = {"sz": self.sz, "compared": int(self.compared),
               "manifold_states": int(self.manifold_states)}
        if self.method is not None:
            out["method"] = self.method
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "CheckedBlock":
        return cls(data["sz"], int(data["compared"]), int(data["manifold_states"]),
                   data.get("method"))


@dataclass(frozen=True)
class DeriveCheck:
    """The exact check of a derive: the exact levels compared (ascending, all S^z blocks),
    the largest ``|E_eff - E_exact|`` of the sum to each order over them, and which levels
    those are.

    ``requested`` is the number of lowest levels asked for per block (or ``"all"``);
    ``blocks`` says per block how many were compared; ``ground_state_error`` is the error
    of the lowest level of the whole manifold at each order (it is always compared).
    ``cluster`` names the periodic cluster of the check of an infinite lattice's couplings
    (``lowfold.jobs.lattice_check``; None for a finite cluster, and then not in the JSON);
    ``winding_loop`` is the number of bonds of the shortest loop around that cluster (orders
    from it on are not compared).
    """

    exact: tuple[float, ...]
    max_abs_error: Mapping[int, float]
    requested: int | str = "all"
    blocks: tuple[CheckedBlock, ...] = ()
    ground_state_error: Mapping[int, float] = field(default_factory=dict)
    cluster: str | None = None
    winding_loop: int | None = None

    @property
    def compared(self) -> int:
        """Number of levels compared, over all blocks."""
        return len(self.exact)

    def describe(self) -> str:
        """One line for the screen: which levels were compared."""
        total = sum(b.manifold_states for b in self.blocks)
        every = all(b.compared == b.manifold_states for b in self.blocks)
        if every:
            return f"all {total} levels of the manifold compared"
        per = "all" if self.requested == "all" else f"the lowest {self.requested}"
        return (f"{self.compared} of {total} levels compared: {per} of each S^z block "
                "(all in blocks with fewer), the ground state among them")

    def to_dict(self) -> dict:
        out = {"exact": [float(e) for e in self.exact],
               "by_order": {str(m): {"max_abs_error": float(e)}
                            for m, e in self.max_abs_error.items()},
               "ground_state_error": {str(m): float(e)
                                      for m, e in self.ground_state_error.items()},
               "levels": {"requested": self.requested,
                          "blocks": [b.to_dict() for b in self.blocks]}}
        if self.cluster is not None:
            out["cluster"] = self.cluster
            out["winding_loop"] = None if self.winding_loop is None else int(self.winding_loop)
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "DeriveCheck":
        by_order = orders_from_json(data["by_order"])
        levels = data.get("levels") or {}
        return cls(tuple(float(e) for e in data["exact"]),
                   {m: float(v["max_abs_error"]) for m, v in by_order.items()},
                   levels.get("requested", "all"),
                   tuple(CheckedBlock.from_dict(b) for b in levels.get("blocks", ())),
                   {m: float(v) for m, v in
                    orders_from_json(data.get("ground_state_error") or {}).items()},
                   data.get("cluster"), data.get("winding_loop"))


@dataclass(frozen=True)
class PowerFit:
    """Fitted power of the error of one order against the coupling scale factor.

    ``power`` is None when the errors are at round-off (``note`` says so); else ``ok`` tells
    whether it reaches ``expected_at_least`` (order + 1) within 0.2.
    """

    power: float | None
    expected_at_least: int
    ok: bool | None = None
    note: str | None = None

    def to_dict(self) -> dict:
        out = {"power": self.power, "expected_at_least": self.expected_at_least}
        if self.note is not None:
            out["note"] = self.note
        if self.ok is not None:
            out["ok"] = self.ok
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "PowerFit":
        return cls(data["power"], int(data["expected_at_least"]), data.get("ok"), data.get("note"))


def matrix_to_json(h) -> dict:
    """A sparse matrix as ``{"rows", "cols", "values"}`` (complex values as ``[re, im]``)."""
    h = sp.coo_matrix(h)
    keep = np.abs(h.data) > 1e-14
    real = not np.iscomplexobj(h.data) or not np.any(h.data.imag[keep])
    values = h.data[keep].real if real else h.data[keep]
    return {"rows": h.row[keep].tolist(), "cols": h.col[keep].tolist(),
            "values": [float(v) for v in values] if real else [[v.real, v.imag] for v in values]}


def matrix_from_json(data: Mapping, dimension: int) -> sp.csr_matrix:
    values = [complex(*v) if isinstance(v, list) else float(v) for v in data["values"]]
    dtype = complex if any(isinstance(v, complex) for v in values) else float
    return sp.csr_matrix((np.array(values, dtype=dtype), (data["rows"], data["cols"])),
                         shape=(dimension, dimension))


@dataclass(frozen=True, eq=False)
class EffectiveModel:
    """Result of the derive job: the effective Hamiltonian on the manifold, order by order.

    Attributes
    ----------
    order : int
        Highest order.
    manifold : ManifoldSummary
    orders : tuple of scipy.sparse.csr_matrix
        ``H_eff,m`` for m = 0..order on the manifold, in the order of ``manifold.states``
        (empty in an object rebuilt from the JSON of a spin-form result).
    labels : tuple of str
        Basis labels of the manifold states (empty above 4096 states).
    terms : tuple of PauliTerm
        Pauli strings (spin form only).
    couplings : tuple of readout.Coupling
        Named couplings, ``orders`` keyed by int (spin form only).
    recognised : dict
        ``(kind, sites) -> Recognised`` for couplings whose orders are rational multiples of
        the model's single energy ratio.
    check : DeriveCheck or None
        The exact check (None when not run or skipped; ``warnings`` says why).
    scaling : dict of int to PowerFit, or None
        Fitted power of each order's error (only when asked for).
    diagnostics : ManifoldDiagnostics
    warnings : tuple of str
    residual : dict
        Pauli content not named by any coupling (not in JSON).
    model : Model or None
        The model derived (not in JSON).
    """

    order: int
    manifold: ManifoldSummary
    orders: tuple = ()
    labels: tuple[str, ...] = ()
    terms: tuple[PauliTerm, ...] = ()
    couplings: tuple[Coupling, ...] = ()
    recognised: Mapping[tuple, Recognised] = field(default_factory=dict)
    check: DeriveCheck | None = None
    scaling: Mapping[int, PowerFit] | None = None
    diagnostics: ManifoldDiagnostics | None = None
    warnings: tuple[str, ...] = ()
    residual: Mapping = field(default_factory=dict)
    model: Any = None
    classes: tuple[CouplingClass, ...] = ()
    exact: ExactCouplings | None = None     # direct-rotation couplings (results/exact.py)

    @property
    def spin_form(self) -> bool:
        """True when P is one spin-1/2 per site and ``terms`` / ``couplings`` are filled."""
        return self.manifold.spin_form

    @property
    def readout_note(self) -> str:
        """Why there is no spin form ("" when there is one)."""
        text = self.manifold.readout
        return text[len("matrix ("):-1] if text.startswith("matrix (") else ""

    @property
    def gap(self) -> float | None:
        return self.manifold.gap

    def matrix(self, up_to: int | None = None) -> np.ndarray:
        """The effective Hamiltonian summed to order ``up_to`` (default: all), dense."""
        up_to = self.order if up_to is None else up_to
        if not self.orders:
            raise ValueError("the orders of a spin-form result are not in its JSON; "
                             "rebuild them from `terms`")
        return sum(self.orders[m] for m in range(up_to + 1)).toarray()

    def to_dict(self) -> dict:
        out = {"order": int(self.order), "manifold": self.manifold.to_dict(),
               "terms": [t.to_dict() for t in self.terms],
               "couplings": [_coupling_to_dict(c, self.recognised.get((c.kind, tuple(c.sites))))
                             for c in self.couplings],
               "check": self.check.to_dict() if self.check is not None else None,
               "diagnostics": self.diagnostics.to_dict() if self.diagnostics else None,
               "warnings": list(self.warnings)}
        if self.scaling is not None:
            out["scaling"] = {str(m): fit.to_dict() for m, fit in self.scaling.items()}
        if self.classes:
            out["classes"] = [c.to_dict() for c in self.classes]
        if not self.spin_form:
            out["effective"] = {"basis": list(self.labels),
                                "orders": {str(m): matrix_to_json(h) for m, h in enumerate(self.orders)}}
        if self.exact is not None:
            self.exact.annotate(out)
            if "effective" in out and self.exact.matrix is not None:
                out["effective"]["exact"] = matrix_to_json(self.exact.matrix)
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "EffectiveModel":
        manifold = ManifoldSummary.from_dict(data["manifold"])
        couplings = tuple(_coupling_from_dict(c) for c in data.get("couplings", []))
        recognised = {(c["kind"], tuple(c["sites"])): Recognised.from_dict(c["recognised"])
                      for c in data.get("couplings", []) if "recognised" in c}
        effective = data.get("effective") or {}
        orders = tuple(matrix_from_json(h, manifold.dimension)
                       for h in orders_from_json(effective.get("orders")).values())
        scaling = data.get("scaling")
        return cls(int(data["order"]), manifold, orders, tuple(effective.get("basis", ())),
                   tuple(PauliTerm.from_dict(t) for t in data.get("terms", [])), couplings,
                   recognised,
                   DeriveCheck.from_dict(data["check"]) if data.get("check") else None,
                   {m: PowerFit.from_dict(v) for m, v in orders_from_json(scaling).items()}
                   if scaling is not None else None,
                   ManifoldDiagnostics.from_dict(data["diagnostics"]) if data.get("diagnostics") else None,
                   tuple(data.get("warnings", ())),
                   classes=tuple(CouplingClass.from_dict(c) for c in data.get("classes", ())),
                   exact=_exact_from_dict(data, manifold.dimension))


def _exact_from_dict(data: Mapping, dimension: int) -> ExactCouplings | None:
    exact = ExactCouplings.from_dict(data)
    matrix = (data.get("effective") or {}).get("exact")
    if exact is not None and matrix is not None:
        exact = dataclasses.replace(exact, matrix=matrix_from_json(matrix, dimension))
    return exact
