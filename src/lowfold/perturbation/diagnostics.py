"""Validity diagnostics of an expansion: coupling-to-gap ratio, small denominators, intruder
states, errors against an exact check that stop falling, and a series that continues a
different level than the exact one followed from the reference.

The Schrieffer-Wolff series is an expansion in ``|V_PQ| / Delta``, with ``Delta`` the energy
denominators between P and the states V reaches (common practice; Bravyi, DiVincenzo and
Loss, Ann. Phys. 326, 2793 (2011), Sec. 3.1 state convergence for ``||V|| < Delta / 2``
up to constants).  These numbers tell a user how far to trust the orders.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from lowfold.perturbation.convergence import VALIDITY_WARNING

__all__ = ["Diagnostics", "manifold_diagnostics", "merge_diagnostics", "check_divergence",
           "followed_level_warnings", "GROWTH_WARNING", "MISMATCH_FACTOR"]

RATIO_WARNING = VALIDITY_WARNING   # |V_PQ| / gap above this: the expansion is unreliable
INTRUDER_FRACTION = 0.1    # a Q state closer than this fraction of the typical denominator
GROWTH_WARNING = 2.0       # check error at the top order over the smallest one: diverging
ROUNDOFF_ERROR = 1e-9      # check errors below this times the largest one are rounding
MISMATCH_FACTOR = 3.0      # |series - exact| over the series' own error estimate: warn


@dataclass
class Diagnostics:
    """Validity numbers of one expansion (merged over S^z blocks)."""

    max_coupling_out: float = 0.0
    gap: float = np.inf
    smallest_denominator: float = np.inf
    closest_states: tuple[int, int] | None = None     # (P state, Q state), as integers
    typical_denominator: float = np.nan
    warnings: list[str] = field(default_factory=list)
    memory: list = field(default_factory=list)    # OrderCost of each order (sparse_orders)

    @property
    def validity_ratio(self) -> float:
        if not np.isfinite(self.gap) or self.gap <= 0:
            return 0.0 if self.max_coupling_out == 0 else np.inf
        return self.max_coupling_out / self.gap

    def to_dict(self, labels=None) -> dict:
        closest = None
        if self.closest_states is not None:
            p, q = self.closest_states
            closest = [labels(p), labels(q)] if labels else [int(p), int(q)]
        finite = lambda x: float(x) if np.isfinite(x) else None
        return {"validity_ratio": finite(self.validity_ratio),
                "max_coupling_out": float(self.max_coupling_out),
                "gap": finite(self.gap),
                "smallest_denominator": finite(self.smallest_denominator),
                "closest_states": closest,
                "memory": {str(c.order): c.to_dict() for c in self.memory}}


def manifold_diagnostics(h0_diag: np.ndarray, v: sp.spmatrix, p_index: np.ndarray,
                         states: np.ndarray) -> Diagnostics:
    """Diagnostics of one working space: ``h0_diag`` and ``v`` on it, P at ``p_index``,
    ``states`` the integers of the working space (for naming the closest pair)."""
    n = h0_diag.size
    in_p = np.zeros(n, dtype=bool)
    in_p[p_index] = True
    q_index = np.flatnonzero(~in_p)
    diag = Diagnostics()
    if q_index.size == 0:
        return diag
    coupling = sp.csr_matrix(v)[p_index][:, q_index].tocoo()
    if coupling.nnz == 0:
        return diag
    e_p, e_q = h0_diag[p_index], h0_diag[q_index]
    diag.max_coupling_out = float(np.abs(coupling.data).max())
    lo, hi = e_p.min(), e_p.max()
    distance = np.where(e_q > hi, e_q - hi, np.where(e_q < lo, lo - e_q, 0.0))
    reached = np.zeros(q_index.size, dtype=bool)
    reached[coupling.col] = True
    diag.gap = float(distance[reached].min())
    denominators = np.abs(e_p[coupling.row] - e_q[coupling.col])
    k = int(np.argmin(denominators))
    diag.smallest_denominator = float(denominators[k])
    diag.closest_states = (int(states[p_index[coupling.row[k]]]), int(states[q_index[coupling.col[k]]]))
    diag.typical_denominator = float(np.median(denominators))
    return diag


def merge_diagnostics(parts: list[Diagnostics], label_of=None) -> Diagnostics:
    """Combine the diagnostics of S^z blocks and write the warnings."""
    merged = Diagnostics()
    for part in parts:
        merged.max_coupling_out = max(merged.max_coupling_out, part.max_coupling_out)
        merged.gap = min(merged.gap, part.gap)
        if part.smallest_denominator < merged.smallest_denominator:
            merged.smallest_denominator = part.smallest_denominator
            merged.closest_states = part.closest_states
    typical = [p.typical_denominator for p in parts if np.isfinite(p.typical_denominator)]
    merged.typical_denominator = float(np.median(typical)) if typical else np.nan
    name = (lambda s: label_of(s)) if label_of else str
    ratio = merged.validity_ratio
    if ratio > RATIO_WARNING:
        merged.warnings.append(
            f"validity ratio |V_PQ|/gap = {ratio:.3g} is not small: the expansion may not "
            "converge; compare the orders with the exact check")
    if (np.isfinite(merged.typical_denominator) and merged.closest_states is not None
            and merged.smallest_denominator < INTRUDER_FRACTION * merged.typical_denominator):
        p, q = merged.closest_states
        merged.warnings.append(
            f"state {name(q)} outside the manifold lies only {merged.smallest_denominator:.3g} "
            f"from {name(p)} (typical denominator {merged.typical_denominator:.3g}); "
            "consider widening the window to include it")
    return merged


def check_divergence(errors_by_order) -> list[str]:
    """A warning when the errors of an exact check stop falling with the order.

    Parameters
    ----------
    errors_by_order : mapping or sequence
        ``{order: error}`` (int or str keys; a value may also be a dict with
        ``"max_abs_error"``, as in derive's ``check["by_order"]``), or errors indexed by
        order.

    Returns
    -------
    list of str
        One sentence when the error at the highest order exceeds ``GROWTH_WARNING`` times
        the smallest error of a lower order, errors at rounding level (``ROUNDOFF_ERROR``
        times the largest) aside; empty otherwise.
    """
    if isinstance(errors_by_order, dict):
        items = errors_by_order.items()
    else:
        items = enumerate(errors_by_order)
    pairs = []
    for order, error in items:
        if isinstance(error, dict):
            error = error.get("max_abs_error")
        if error is not None and np.isfinite(error):
            pairs.append((int(order), abs(float(error))))
    pairs.sort()
    if len(pairs) < 2:
        return []
    orders = np.array([p[0] for p in pairs])
    errors = np.array([p[1] for p in pairs])
    floor = ROUNDOFF_ERROR * errors.max()
    best = int(np.argmin(errors[:-1]))
    last = errors[-1]
    if last > floor and last > GROWTH_WARNING * max(errors[best], floor):
        return [(f"the error against the exact result stops falling with the order: smallest "
                 f"{errors[best]:.3g} at order {orders[best]}, {last:.3g} at order "
                 f"{orders[-1]}; the series has stopped converging, trust at most order "
                 f"{orders[best]}")]
    return []


def followed_level_warnings(resummed: float, error: float, exact: float, *,
                            lam: float = 1.0) -> list[str]:
    """A warning when the series' resummed value and the exact level followed from the
    reference differ by more than the series' own error estimate.

    Parameters
    ----------
    resummed : float
        The series' best value at ``lam`` (Pade value, or the partial sum).
    error : float
        The series' own error estimate (e.g. the Pade spread, or the last term); NaN or
        None counts as zero, and a floor of ``1e-10 * max(1, |exact|)`` applies.
    exact : float
        The exact eigenvalue followed adiabatically from the reference state to ``lam``.
    lam : float
        The coupling factor, for the wording.

    Returns
    -------
    list of str
        One sentence when ``|resummed - exact| > MISMATCH_FACTOR * error``: past an avoided
        crossing the series (and its Pade resummation) continues the diabatic level while
        the followed exact value is the adiabatic one, so they may describe different
        levels.  Empty otherwise.
    """
    error = 0.0 if error is None or not np.isfinite(error) else abs(float(error))
    allowed = MISMATCH_FACTOR * max(error, 1e-10 * max(1.0, abs(exact)))
    gap = abs(resummed - exact)
    if gap <= allowed:
        return []
    return [(f"the series gives {resummed:.6g} at lambda = {lam:g} but the exact level "
             f"followed from the reference state is {exact:.6g}, {gap:.3g} apart, more than "
             f"the series' own error estimate ({error:.2g}): they may describe different "
             "levels (an avoided crossing between lambda = 0 and here hands the followed level "
             "over to another state, while the series continues the original one)")]
