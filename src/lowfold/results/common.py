"""Shared pieces of the JSON schema: order keys, non-finite numbers, the spectrum result."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

__all__ = ["Spectrum", "orders_to_json", "orders_from_json", "finite", "null_non_finite"]


def orders_to_json(values: Mapping[int, Any]) -> dict[str, Any]:
    """``{2: x}`` -> ``{"2": x}`` (JSON keys are strings)."""
    return {str(int(m)): v for m, v in values.items()}


def orders_from_json(values: Mapping[str, Any] | None) -> dict[int, Any]:
    """``{"2": x}`` -> ``{2: x}``, sorted by order."""
    return {int(m): v for m, v in sorted((values or {}).items(), key=lambda kv: int(kv[0]))}


def finite(x) -> float | None:
    return float(x) if x is not None and np.isfinite(x) else None


def null_non_finite(data: Any, path: str = "") -> tuple[Any, list[str]]:
    """A copy of the JSON-ready ``data`` (dicts, lists, numbers, strings) with every NaN or
    infinite float replaced by None (JSON has no such numbers; strict parsers reject them),
    and the paths of those replaced, e.g. ``["sweep.series.2[1]"]``."""
    if isinstance(data, dict):
        out, where = {}, []
        for key, value in data.items():
            out[key], found = null_non_finite(value, f"{path}.{key}" if path else str(key))
            where += found
        return out, where
    if isinstance(data, (list, tuple)):
        out, where = [], []
        for k, value in enumerate(data):
            item, found = null_non_finite(value, f"{path}[{k}]")
            out.append(item)
            where += found
        return out, where
    if isinstance(data, float) and not np.isfinite(data):
        return None, [path]
    return data, []



# ----------------------------------------------------------- spectrum

@dataclass(frozen=True, eq=False)
class Spectrum:
    """Result of the spectrum job: the lowest energies of the model in its sector.

    Attributes
    ----------
    dimension : int
        Number of basis states of the sector.
    energies : float array
        The lowest energies, ascending.
    vectors : array or None
        Eigenvectors as columns, when asked for (not in JSON).
    method : str
        ``dense | csr | matrix-free`` (not in JSON).
    """

    dimension: int
    energies: np.ndarray
    vectors: np.ndarray | None = None
    method: str = "dense"

    def to_dict(self) -> dict:
        return {"dimension": int(self.dimension), "energies": [float(e) for e in self.energies]}

    @classmethod
    def from_dict(cls, data: Mapping) -> "Spectrum":
        return cls(int(data["dimension"]), np.asarray(data["energies"], dtype=float), None, "")
