"""Energy-denominator sweeps over product-basis wave functions (``lowfold._kernels.gaps``):
the Q-Q part ``(D + T - sigma)^-1 ~ D^-1 - D^-1 T D^-1`` of the exact check's preconditioner
(``lowfold.jobs.check_product``), applied in place, one sweep each."""

from __future__ import annotations

import numpy as np

from lowfold._kernels import gaps as kernels
from lowfold.build.product_basis import product_threads

__all__ = ["divide_by_gap", "subtract_hopping_over_gap"]


def divide_by_gap(y: np.ndarray, diag: np.ndarray, sigma: float, floor: float) -> None:
    """``y <- y / max(D - sigma, floor)`` on a wave function (``D``: ``diag``, same shape)."""
    with product_threads(y.size):
        kernels.divide_by_gap(y, diag, float(sigma), float(floor))


def subtract_hopping_over_gap(y: np.ndarray, hy: np.ndarray, diag: np.ndarray, sigma: float,
                              floor: float) -> None:
    """``y <- y - (H y - D y) / max(D - sigma, floor)``, ``hy`` holding ``H y``."""
    with product_threads(y.size):
        kernels.subtract_hopping_over_gap(y, hy, diag, float(sigma), float(floor))
