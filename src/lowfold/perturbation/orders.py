"""The highest perturbative order each route accepts, and the one function that checks it.

Bounds, one per route (documented so that a user knows why a large order is refused):

- ``MAX_SCHRIEFFER_WOLFF_ORDER = 40``: the Schrieffer-Wolff recursion keeps nested
  commutators for every pair (k, m) with k <= m < n, O(n^2) matrices on a working space that
  grows with floor(n/2) applications of V; beyond 40 orders the memory and round-off of the
  nested commutators make the result meaningless on any cluster it fits.  Used by
  :func:`lowfold.perturbation.schrieffer_wolff.effective_hamiltonian_orders` (which also
  accepts order 0) and by the derive job.
- ``MAX_SERIES_ORDER = 200``: Wigner's 2n+1 rule keeps n/2 state vectors; the coefficients
  of a convergent series fall below double precision long before order 200.
"""

from __future__ import annotations

import numpy as np

from lowfold.errors import ModelError

__all__ = ["MAX_SCHRIEFFER_WOLFF_ORDER", "MAX_SERIES_ORDER", "validate_order"]

MAX_SCHRIEFFER_WOLFF_ORDER = 40
MAX_SERIES_ORDER = 200


def validate_order(order, *, maximum: int, minimum: int = 1) -> int:
    """``order`` as a plain int, or ``ModelError`` unless it is an integer in
    ``minimum .. maximum`` (booleans are refused)."""
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) \
            or not minimum <= order <= maximum:
        raise ModelError(f"order must be an integer from {minimum} to {maximum}, got {order!r}")
    return int(order)
