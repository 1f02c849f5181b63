"""The exact effective Hamiltonian on a manifold P by direct rotation.

des Cloizeaux, Nucl. Phys. 20, 321 (1960): let ``psi`` be the dim(P) exact eigenvectors of H
that grow out of P (the lowest ones when P is at the bottom of the spectrum), with energies
``E``; the overlap ``A = P psi`` (dim(P) x dim(P)) has the polar factor ``W = X Y^dagger``
from its singular value decomposition ``A = X Sigma Y^dagger``; then

    H_eff_exact = W diag(E) W^dagger

acts on P, has exactly the energies ``E`` and is the unique effective Hamiltonian reached by
the "minimal" rotation from the exact states to P.  The perturbation series summed to order
n differs from it, as an operator, by O(lambda^(n+1)) (DESIGN.md, "Perturbation theory
used"): it is the test oracle of the series and the ``exact`` value of each coupling.

The construction is only meaningful while the exact states stay separated from the rest of
the spectrum and keep weight on P; :func:`direct_rotation` refuses otherwise (a
:class:`~lowfold.errors.ManifoldError` that says which condition failed and by how much).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lowfold.errors import ManifoldError, ModelError

__all__ = ["DirectRotation", "direct_rotation", "GAP_TOL", "OVERLAP_TOL"]

GAP_TOL = 1e-8        # relative gap (to max(1, |E|)) below which the levels are one multiplet
OVERLAP_TOL = 1e-2    # smallest singular value of A below which the exact states have left P


@dataclass(frozen=True, eq=False)
class DirectRotation:
    """The exact effective Hamiltonian of one block and the numbers that justify it.

    Attributes
    ----------
    matrix : (dimP, dimP) ndarray
        ``W diag(E) W^dagger`` in the order of the P rows given.
    energies : (dimP,) ndarray
        The exact energies used (ascending).
    gap : float or None
        Exact gap between the highest level used and the next one (None when there is none).
    smallest_singular_value : float
        Smallest singular value of ``A = P psi`` (1 when the exact states lie in P).
    """

    matrix: np.ndarray
    energies: np.ndarray
    gap: float | None
    smallest_singular_value: float


def direct_rotation(energies, overlap, *, next_energy: float | None = None,
                    previous_energy: float | None = None, gap_tol: float = GAP_TOL,
                    overlap_tol: float = OVERLAP_TOL, where: str = "") -> DirectRotation:
    """Exact effective Hamiltonian from the exact states' energies and their overlap with P.

    Parameters
    ----------
    energies : (k,) real array
        Exact energies of the k = dim(P) states that grow out of P, ascending.
    overlap : (k, k) array
        ``A = P psi``: row a = manifold state a, column i = exact state i.
    next_energy : float, optional
        The exact level just above the k used (the gap above them is checked).
    previous_energy : float, optional
        The exact level just below them (for a manifold that is not at the bottom).
    gap_tol, overlap_tol : float, keyword-only
        ManifoldError when a gap is below ``gap_tol * max(1, max|E|)``, or when the smallest
        singular value of ``A`` is below ``overlap_tol``.
    where : str
        Words naming the block / coupling for the error message (e.g. ``" at U = 2"``).

    Returns
    -------
    DirectRotation
    """
    e = np.asarray(energies, dtype=float)
    a = np.asarray(overlap)
    k = e.size
    if e.ndim != 1 or k == 0 or a.shape != (k, k):
        raise ModelError(f"direct rotation needs k energies and a k x k overlap, got "
                         f"{e.shape} and {a.shape}")
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(a))):
        raise ModelError("direct rotation: the energies or the overlap are not finite")
    scale = max(1.0, float(np.max(np.abs(e))))
    gaps = []
    for other, side in ((next_energy, "above"), (previous_energy, "below")):
        if other is None:
            continue
        gap = float(other - e[-1]) if side == "above" else float(e[0] - other)
        if gap < gap_tol * scale:
            raise ManifoldError(
                f"no exact gap {side} the {k} states of the manifold{where}: level {k - 1 if side == 'above' else 0} "
                f"({e[-1] if side == 'above' else e[0]:.10g}) and the next level "
                f"({other:.10g}) are degenerate, so the states that grow out of P are not "
                "defined")
        gaps.append(gap)
    x, sigma, yh = np.linalg.svd(a)
    smallest = float(sigma.min())
    if smallest < overlap_tol:
        raise ManifoldError(
            f"the exact states have left the manifold{where}: the smallest singular value of "
            f"the overlap P psi is {smallest:.3g} (below {overlap_tol:g}); an exact state with "
            "almost no weight on P has come down among the lowest levels, so no effective "
            "Hamiltonian on P describes them")
    w = x @ yh
    h = (w * e) @ w.conj().T
    h = (h + h.conj().T) / 2
    if np.iscomplexobj(h) and np.max(np.abs(h.imag), initial=0.0) <= 1e-14 * scale:
        h = h.real
    return DirectRotation(h, e, min(gaps) if gaps else None, smallest)
