"""The reduced resolvent of a general H0: solve ``(E0 - H0) x = b`` on the complement of psi0.

The Rayleigh-Schroedinger recursion with a non-diagonal H0 (``series.py``) needs
``x = R b`` with ``R = Q / (E0 - H0)``, ``Q = 1 - |psi0><psi0|``, for right-hand sides ``b``
orthogonal to ``psi0``.  Two ways are offered:

* :class:`DenseResolvent` for small problems (``N <= DENSE_LIMIT``): H0 is diagonalised once
  (LAPACK ``eigh``) and ``R`` is applied from its spectral decomposition.  Exact up to
  rounding; levels of H0 degenerate with E0 (other than psi0) are named explicitly, so a
  right-hand side that reaches them is a real coupling to a degenerate partner, not noise.
* :class:`KrylovResolvent` for large ones: MINRES or GMRES on the projected operator
  ``Q (E0 - H0) Q``, refined on the true residual.  When the solve fails, a Lanczos search
  started from the residual decides whether a near-null level of ``E0 - H0`` carries the
  residual (a degenerate partner that V reaches) or whether the solver merely stalled.

Krylov solvers stall on tiny problems (a 4-state sector has no room for the Krylov space to
grow past rounding), and a null-vector search run on the residual's rounding noise finds the
projected-out direction psi0 itself, hence the dense route and the projections below.
"""

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lowfold.errors import ConvergenceError, ModelError

__all__ = ["DENSE_LIMIT", "DenseResolvent", "KrylovResolvent", "dense_matrix"]

DENSE_LIMIT = 64          # largest N the "auto" route solves by dense diagonalisation of H0
_REFINEMENTS = 6
_NOISE = 64.0             # rounding level of a right-hand side, in units of eps * its terms
_CARRIES = 0.5            # a near-null Ritz vector must carry this much of the residual
_COUPLED_MESSAGE = (
    "at order {k} the right-hand side has a component on a level of H0 within "
    "degeneracy_tol of the reference energy, so V couples the reference to a "
    "degenerate partner: a single-state series does not apply; treat the "
    "degenerate manifold with `lowfold derive`"
)


def dense_matrix(op, apply, n, dtype):
    """H0 as a dense ``(n, n)`` array (from an array, a sparse matrix or by products)."""
    if sp.issparse(op):
        return op.toarray()
    if isinstance(op, np.ndarray):
        return np.asarray(op)
    eye = np.eye(n, dtype=dtype)
    return np.column_stack([apply(eye[:, j]) for j in range(n)])


def _project(psi0, x):
    return x - psi0 * np.vdot(psi0, x)


class DenseResolvent:
    """``R b`` from the eigen-decomposition of a small dense H0.

    Parameters
    ----------
    h0 : (N, N) array
        Hermitian H0.
    psi0 : (N,) array
        Normalised reference eigenvector, eigenvalue ``e0``.
    degeneracy_tol : float
        Levels with ``|E - e0| <= degeneracy_tol * max(1, ||H0||)`` are degenerate with the
        reference; the one along psi0 is the reference itself, the others are its partners.
    coupling_tol : float
        A right-hand side whose component on the partners exceeds ``coupling_tol * ||b||``
        couples the reference to a degenerate partner (ModelError).
    """

    iterations = 0

    def __init__(self, h0, psi0, e0, *, degeneracy_tol, coupling_tol=1e-9):
        values, vectors = la.eigh((h0 + h0.conj().T) / 2)
        scale = max(1.0, float(np.max(np.abs(values))))
        degenerate = np.abs(values - e0) <= degeneracy_tol * scale
        self.psi0, self.coupling_tol = psi0, coupling_tol
        partners = np.zeros((psi0.size, 0), dtype=vectors.dtype)
        if degenerate.any():
            block = vectors[:, degenerate]
            block = block - np.outer(psi0, psi0.conj() @ block)
            # the degenerate block minus psi0: drop the one direction psi0 took away
            u, s, _ = la.svd(block, full_matrices=False)
            partners = u[:, s > 0.5]
        self.partners = partners
        keep = ~degenerate
        self.vectors = vectors[:, keep]
        self.inverse = 1.0 / (e0 - values[keep])

    def __call__(self, b, k, scale=0.0):
        """``x = R b`` at order ``k`` (``b`` orthogonal to psi0); ModelError on a coupling.

        ``scale`` (the size of the terms ``b`` came from) is accepted for symmetry with
        :class:`KrylovResolvent`; the dense solve needs no noise floor."""
        norm_b = np.linalg.norm(b)
        if norm_b == 0.0:
            return np.zeros_like(b)
        if self.partners.shape[1]:
            leak = np.linalg.norm(self.partners.conj().T @ b)
            if leak > self.coupling_tol * norm_b:
                raise ModelError(_COUPLED_MESSAGE.format(k=k))
        x = self.vectors @ (self.inverse * (self.vectors.conj().T @ b))
        return _project(self.psi0, x).astype(b.dtype, copy=False)


class KrylovResolvent:
    """``R b`` by MINRES or GMRES on ``Q (E0 - H0) Q``, only products of H0 with vectors.

    ``degeneracy_tol`` is relative to ``max(1, |E0 - H0|)`` estimated on the Krylov space.
    """

    def __init__(self, apply_h0, psi0, e0, dtype, *, solver, rtol, maxiter, preconditioner,
                 degeneracy_tol):
        n = psi0.size
        self.psi0, self.e0, self.apply_h0 = psi0, e0, apply_h0
        self.operator = spla.LinearOperator((n, n), matvec=self._apply, dtype=dtype)
        self.solver, self.rtol, self.maxiter = solver, rtol, maxiter
        self.preconditioner, self.degeneracy_tol = preconditioner, degeneracy_tol
        self.iterations = 0
        self.accept = max(1e3 * rtol, 1e-13)

    def _apply(self, x):
        x = _project(self.psi0, np.ravel(x))
        return _project(self.psi0, self.e0 * x - self.apply_h0(x))

    def _count(self, *_):
        self.iterations += 1

    def _krylov(self, b):
        if self.solver == "minres":
            x, info = spla.minres(self.operator, b, rtol=self.rtol, maxiter=self.maxiter,
                                  M=self.preconditioner, callback=self._count)
        else:
            x, info = spla.gmres(self.operator, b, rtol=self.rtol, atol=0.0,
                                 maxiter=self.maxiter, M=self.preconditioner,
                                 callback=self._count, callback_type="pr_norm")
        return _project(self.psi0, x), info

    def _near_null(self, r, steps=40):
        """True if a level of ``E0 - H0`` within ``degeneracy_tol`` of zero carries the
        residual ``r``: a Lanczos Ritz pair ``(theta, y)`` from ``r`` with ``|theta| +
        ||A y - theta y|| <= tol`` proves a near-null level (Kahan's residual bound), and
        ``|<y|r>| >= 0.5 ||r||`` says it is what the solver could not remove.

        The start vector and every Lanczos vector are projected off psi0 (``A psi0 = 0`` by
        construction, so rounding noise along psi0 would otherwise show a spurious zero
        Ritz value), and ``tol`` scales with the largest Ritz value (the operator's scale).
        """
        start = _project(self.psi0, r)
        norm_r = np.linalg.norm(start)
        if norm_r == 0.0:
            return False
        basis = [start / norm_r]
        for _ in range(min(steps, r.size - 2)):
            q = self._apply(basis[-1])
            for _twice in range(2):  # full reorthogonalisation, twice
                for u in basis:
                    q = q - u * np.vdot(u, q)
                q = _project(self.psi0, q)
            norm_q = np.linalg.norm(q)
            if norm_q <= 1e-14 * max(1.0, abs(self.e0)):
                break
            basis.append(q / norm_q)
        vectors = np.array(basis)
        images = np.array([self._apply(u) for u in vectors])
        theta, coef = np.linalg.eigh(vectors.conj() @ images.T)
        tol = self.degeneracy_tol * max(1.0, float(np.max(np.abs(theta))))
        for t, c in zip(theta, coef.T):
            y = c @ vectors
            if (abs(t) + np.linalg.norm(c @ images - t * y) <= tol
                    and abs(np.vdot(y, start)) >= _CARRIES * norm_r):
                return True
        return False

    def __call__(self, b, k, scale=0.0):
        """Solve at order ``k``, refining on the true residual (rounding drifts the
        recurrence residual of the Krylov solvers away from it).

        ``scale`` is the size of the terms ``b`` was formed from (``||V psi_{k-1}||`` plus
        the subtracted energies times their states): a residual below the rounding level of
        those terms is accepted, since ``b`` itself is known no better (an order that
        vanishes by symmetry leaves ``b`` as pure rounding noise)."""
        norm_b = np.linalg.norm(b)
        if norm_b == 0.0:
            return np.zeros_like(b)
        floor = _NOISE * np.finfo(float).eps * scale
        x = np.zeros_like(b)
        residual, rel, info = b, 1.0, 0
        for _ in range(_REFINEMENTS):
            dx, info = self._krylov(residual)
            x = x + dx
            new_residual = b - self._apply(x)
            new_rel = np.linalg.norm(new_residual) / norm_b
            stalled = new_rel > 0.5 * rel
            residual, rel = new_residual, new_rel
            if rel <= self.accept or rel * norm_b <= floor or stalled:
                break
        if rel <= self.accept or rel * norm_b <= floor:
            return x
        if self._near_null(residual):
            raise ModelError(_COUPLED_MESSAGE.format(k=k))
        raise ConvergenceError(
            f"{self.solver} did not reach relative residual {self.rtol:g} at order {k} "
            f"(got {rel:.3g}, info={info}); raise maxiter or pass a preconditioner",
            partial={"order": k, "relative_residual": rel},
        )
