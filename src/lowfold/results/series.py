"""The series job's result: :class:`StateSeries`, and the :class:`Sweep` of exact levels."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from lowfold.perturbation.convergence import partial_sums
from lowfold.results.common import finite, orders_from_json, orders_to_json

__all__ = ["Pade", "RatioTest", "StateAmplitude", "SecondOrderTerm", "AvoidedCrossing",
           "LevelCrossing", "Sweep", "StateSeries"]



@dataclass(frozen=True)
class Pade:
    """Pade estimate of the summed series: value, spread over neighbouring approximants,
    and the approximant ``[L, M]`` used."""

    value: float
    spread: float | None
    approximant: tuple[int, int]

    def to_dict(self) -> dict:
        return {"value": float(self.value), "spread": finite(self.spread),
                "approximant": list(self.approximant)}

    @classmethod
    def from_dict(cls, data: Mapping) -> "Pade":
        return cls(float(data["value"]), data["spread"], tuple(data["approximant"]))


@dataclass(frozen=True)
class RatioTest:
    """Domb-Sykes ratio test: radius of convergence in ``variable`` (``lambda`` or
    ``lambda^2``; None = no finite singularity seen), the singularity's position, its
    ``side`` of the axis, the fitted exponent and the residual of the fit; ``structure`` of
    the coefficients (``all``, ``even``, ``odd``, ``pairs``), the residual relative to the
    fitted intercept, whether the estimate is ``reliable`` and the ``reason`` if not."""

    variable: str
    radius: float | None
    singularity: float | None
    side: str
    exponent: float | None
    fit_residual: Any
    structure: str = "all"
    relative_residual: float | None = None
    reliable: bool = True
    reason: str | None = None

    def to_dict(self) -> dict:
        return {"variable": self.variable, "radius": finite(self.radius),
                "singularity": finite(self.singularity), "side": self.side,
                "exponent": finite(self.exponent), "fit_residual": self.fit_residual,
                "structure": self.structure, "relative_residual": finite(self.relative_residual),
                "reliable": bool(self.reliable), "reason": self.reason}

    @classmethod
    def from_dict(cls, data: Mapping) -> "RatioTest":
        return cls(data["variable"], data["radius"], data["singularity"], data["side"],
                   data["exponent"], data["fit_residual"], data.get("structure", "all"),
                   data.get("relative_residual"), data.get("reliable", True), data.get("reason"))


@dataclass(frozen=True)
class StateAmplitude:
    """A basis state of the first-order correction and its amplitude ``V_mn / (E_n - E_m)``."""

    state: str
    amplitude: float

    def to_dict(self) -> dict:
        return {"state": self.state, "amplitude": float(self.amplitude)}

    @classmethod
    def from_dict(cls, data: Mapping) -> "StateAmplitude":
        return cls(data["state"], float(data["amplitude"]))


@dataclass(frozen=True)
class SecondOrderTerm:
    """One intermediate state's contribution ``|V_mn|^2 / (E_n - E_m)`` to ``E_2``."""

    state: str
    coupling_squared: float
    denominator: float
    contribution: float

    def to_dict(self) -> dict:
        return {"state": self.state, "coupling_squared": float(self.coupling_squared),
                "denominator": float(self.denominator), "contribution": float(self.contribution)}

    @classmethod
    def from_dict(cls, data: Mapping) -> "SecondOrderTerm":
        return cls(data["state"], float(data["coupling_squared"]), float(data["denominator"]),
                   float(data["contribution"]))


@dataclass(frozen=True)
class AvoidedCrossing:
    """A pronounced minimum, at ``lambda_``, of the gap between level ``levels[0]`` and the
    nearest higher level ``levels[1]`` that V couples to it, in symmetry sector ``sector``."""

    lambda_: float
    gap: float
    levels: tuple[int, int]
    sector: str

    def to_dict(self) -> dict:
        return {"lambda": float(self.lambda_), "gap": float(self.gap),
                "levels": [int(k) for k in self.levels], "sector": self.sector}

    @classmethod
    def from_dict(cls, data: Mapping) -> "AvoidedCrossing":
        return cls(float(data["lambda"]), float(data["gap"]), tuple(data["levels"]), data["sector"])


@dataclass(frozen=True)
class LevelCrossing:
    """The lowest levels of two symmetry sectors changing order near ``lambda_``."""

    lambda_: float
    sectors: tuple[str, str]

    def to_dict(self) -> dict:
        return {"lambda": float(self.lambda_), "sectors": list(self.sectors)}

    @classmethod
    def from_dict(cls, data: Mapping) -> "LevelCrossing":
        return cls(float(data["lambda"]), tuple(data["sectors"]))


@dataclass(frozen=True, eq=False)
class Sweep:
    """Exact levels against the coupling factor lambda (``H = H0 + lambda V``).

    Attributes
    ----------
    lambdas : (n_lambda,) array
    levels : (n_lambda, k) array
        Lowest levels, ascending at each lambda.
    sectors : tuple of str
        Symmetry sectors (``"Sz=1/2"``..., or ``"all"``).
    level_sectors : (n_lambda, k) int array
        Index into ``sectors`` of each level.
    followed : (n_lambda,) array
        The exact level grown from the reference state.
    series : dict of int to array
        Partial sums of the series to each order, at each lambda.
    avoided : tuple of AvoidedCrossing
    crossings : tuple of LevelCrossing
    useful_up_to : dict of int to float or None
        Largest lambda up to which the order's partial sum stays within 1 % of the smallest
        denominator of the followed level (None: not even at the first lambda).
    """

    lambdas: np.ndarray
    levels: np.ndarray
    sectors: tuple[str, ...]
    level_sectors: np.ndarray
    followed: np.ndarray
    series: Mapping[int, np.ndarray]
    avoided: tuple[AvoidedCrossing, ...] = ()
    crossings: tuple[LevelCrossing, ...] = ()
    useful_up_to: Mapping[int, float | None] = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"lambda": np.asarray(self.lambdas).tolist(), "levels": np.asarray(self.levels).tolist(),
                "sectors": list(self.sectors), "level_sectors": np.asarray(self.level_sectors).tolist(),
                "followed": np.asarray(self.followed).tolist(),
                "series": {str(n): np.asarray(v).tolist() for n, v in self.series.items()},
                "avoided_crossings": [c.to_dict() for c in self.avoided],
                "crossings": [c.to_dict() for c in self.crossings],
                "useful_up_to": orders_to_json(self.useful_up_to)}

    @classmethod
    def from_dict(cls, data: Mapping) -> "Sweep":
        return cls(np.asarray(data["lambda"], dtype=float), np.asarray(data["levels"], dtype=float),
                   tuple(data["sectors"]), np.asarray(data["level_sectors"], dtype=np.int64),
                   np.asarray(data["followed"], dtype=float),
                   {n: np.asarray(v, dtype=float) for n, v in orders_from_json(data["series"]).items()},
                   tuple(AvoidedCrossing.from_dict(c) for c in data.get("avoided_crossings", [])),
                   tuple(LevelCrossing.from_dict(c) for c in data.get("crossings", [])),
                   orders_from_json(data.get("useful_up_to")))


@dataclass(frozen=True, eq=False)
class StateSeries:
    """Result of the series job: the Rayleigh-Schroedinger series of one state.

    Attributes
    ----------
    energies : (order + 1,) array
        ``E_0 .. E_n`` (coefficients of ``lambda^k``); their sum is ``energy``.
    reference : str
        Label of the H0 state (or ``level:K``) the series grows from.
    exact : float or None
        The exact eigenvalue followed adiabatically from the reference (None if skipped).
    pade : Pade or None
    ratio_test : RatioTest or None
    validity_ratio : float or None
        ``max |V_mn| / min |E_n - E_m|`` over the states V couples to the reference.
    first_order_norm : float
    first_order : tuple of StateAmplitude
        Largest amplitudes of the first-order state.
    second_order : tuple of SecondOrderTerm
        Largest contributions to ``E_2``.
    smallest_denominator : float or None
    warnings : tuple of str
    sweep : Sweep or None
    series : SeriesResult or None
        The full series object (not in JSON).
    """

    energies: np.ndarray
    reference: str
    exact: float | None
    pade: Pade | None
    ratio_test: RatioTest | None
    validity_ratio: float | None
    first_order_norm: float
    first_order: tuple[StateAmplitude, ...] = ()
    second_order: tuple[SecondOrderTerm, ...] = ()
    smallest_denominator: float | None = None
    warnings: tuple[str, ...] = ()
    sweep: Sweep | None = None
    series: Any = None

    @property
    def partial_sums(self) -> np.ndarray:
        return partial_sums(self.energies)

    @property
    def energy(self) -> float:
        return float(self.partial_sums[-1])

    @property
    def error_by_order(self) -> dict[int, float] | None:
        """``|partial sum to order n - exact|`` per order (None without the exact value)."""
        if self.exact is None:
            return None
        return {n: float(abs(s - self.exact)) for n, s in enumerate(self.partial_sums)}

    def scalar_diagnostics(self) -> dict[str, float]:
        """The diagnostics that are single numbers, by their JSON names (absent when None)."""
        values = {"exact": self.exact, "validity_ratio": self.validity_ratio,
                  "first_order_norm": self.first_order_norm,
                  "smallest_denominator": self.smallest_denominator}
        return {name: float(v) for name, v in values.items() if v is not None}

    def to_dict(self) -> dict:
        errors = self.error_by_order
        out = {
            "orders": {str(n): float(e) for n, e in enumerate(self.energies)},
            "energy": self.energy,
            "diagnostics": {
                "reference": self.reference,
                "partial_sums": [float(s) for s in self.partial_sums],
                "exact": self.exact,
                "error_by_order": orders_to_json(errors) if errors is not None else None,
                "pade": self.pade.to_dict() if self.pade else None,
                "ratio_test": self.ratio_test.to_dict() if self.ratio_test else None,
                "validity_ratio": self.validity_ratio,
                "first_order_norm": float(self.first_order_norm),
                "first_order_state": [a.to_dict() for a in self.first_order],
                "second_order_contributions": [c.to_dict() for c in self.second_order],
                "smallest_denominator": finite(self.smallest_denominator),
            },
            "warnings": list(self.warnings),
        }
        if self.sweep is not None:
            out["sweep"] = self.sweep.to_dict()
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "StateSeries":
        diag = data["diagnostics"]
        energies = np.array(list(orders_from_json(data["orders"]).values()), dtype=float)
        return cls(energies, diag["reference"], diag["exact"],
                   Pade.from_dict(diag["pade"]) if diag.get("pade") else None,
                   RatioTest.from_dict(diag["ratio_test"]) if diag.get("ratio_test") else None,
                   diag["validity_ratio"], float(diag["first_order_norm"]),
                   tuple(StateAmplitude.from_dict(a) for a in diag.get("first_order_state", [])),
                   tuple(SecondOrderTerm.from_dict(c) for c in diag.get("second_order_contributions", [])),
                   diag.get("smallest_denominator"), tuple(data.get("warnings", ())),
                   Sweep.from_dict(data["sweep"]) if data.get("sweep") else None)
