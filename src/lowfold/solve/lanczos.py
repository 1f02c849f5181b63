"""Low-memory Lanczos for the lowest eigenvalues of a Hermitian operator.

The textbook three-term recurrence (Lanczos, J. Res. Natl. Bur. Stand. 45, 255 (1950))
keeps three vectors.  The tridiagonal matrix ``T_m`` of the recurrence coefficients is
diagonalised after every step (``scipy.linalg.eigh_tridiagonal``, bisection for the one
eigenvalue wanted), and a level is converged when the residual of its Ritz pair,
``||H y - theta y|| = beta_m |s_m|`` (the last component of the Ritz vector of ``T_m``
times the next off-diagonal), is below ``tol`` times the estimated norm of ``H``.  By the
Kahan-Parlett bound a true eigenvalue then lies within that residual of ``theta`` (and
within ``residual**2 / gap`` once the gap is resolved).

Without reorthogonalisation the Lanczos vectors lose orthogonality as soon as a Ritz value
converges, and copies ("ghosts") of converged values appear; the lowest Ritz value itself
stays a faithful approximation of the lowest eigenvalue (Paige, IMA J. Appl. Math. 18, 341
(1976); Cullum and Willoughby, Lanczos Algorithms for Large Symmetric Eigenvalue
Computations, Birkhaeuser 1985).  So only the lowest Ritz value is ever taken from a run,
and the run stops when it converges.

Several levels are found one after the other by deflation ("locking", common practice):
level ``j`` is the lowest level of ``H`` on the orthogonal complement of the ``j`` vectors
already found, with every new Lanczos vector orthogonalised against them (so rounding
cannot bring them back).  Degenerate levels come out with their multiplicity, which a single
Krylov space cannot give.

Eigenvectors are rebuilt by a second pass that repeats the recurrence from the same start
vector with the stored coefficients and accumulates ``y = sum_j s_j v_j`` (two-pass
Lanczos, common practice), so a level costs about twice the products with vectors and
about the same without; the true residual of every rebuilt vector is checked with one more
product, and a run whose vector falls short is restarted from it.

Memory: four vectors of the space, plus one per level kept (the locked vectors), plus the
output of the operator's product.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.sparse as sp
from scipy.linalg import eigh_tridiagonal
from scipy.sparse.linalg import LinearOperator, aslinearoperator

from lowfold.errors import ConvergenceError, ModelError

__all__ = ["LanczosResult", "lanczos_lowest"]


@dataclass(frozen=True, eq=False)
class LanczosResult:
    """Lowest eigenvalues (ascending) of a Hermitian operator and, on request, eigenvectors.

    Attributes
    ----------
    energies : ndarray of float, shape (levels,)
    vectors : ndarray, shape (n, levels), or None
        Orthonormal eigenvectors as columns (only when asked for).
    residuals : ndarray of float, shape (levels,)
        ``||H y - E y||`` of each level: measured on the rebuilt vector where one was
        built, else the Lanczos estimate ``beta_m |s_m|``.
    steps : ndarray of int, shape (levels,)
        Lanczos steps (size of the tridiagonal matrix) of the run that gave each level.
    matvecs : int
        Products with the operator, in total.
    """

    energies: np.ndarray
    vectors: np.ndarray | None
    residuals: np.ndarray
    steps: np.ndarray
    matvecs: int


@dataclass
class _Run:
    """Outcome of the first pass of one level."""

    energy: float
    ritz: np.ndarray        # eigenvector of T_m for the lowest Ritz value
    alphas: np.ndarray
    betas: np.ndarray       # betas[j] couples v_j and v_{j+1}
    residual: float
    scale: float


def _product(operator) -> tuple[Callable[[np.ndarray], np.ndarray], int, np.dtype]:
    """``(matvec, n, dtype)`` of a sparse matrix, dense array or ``LinearOperator``."""
    if sp.issparse(operator):
        matrix = operator.tocsr() if operator.format not in ("csr", "csc") else operator
        matvec = matrix.dot
    elif isinstance(operator, LinearOperator):
        matvec = operator.matvec
    elif isinstance(operator, np.ndarray):
        linear = aslinearoperator(operator)
        matvec = linear.matvec
    else:
        raise ModelError("the operator must be a scipy sparse matrix, a NumPy array or a "
                         f"scipy LinearOperator, not {type(operator).__name__}")
    shape = operator.shape
    if len(shape) != 2 or shape[0] != shape[1]:
        raise ModelError(f"the operator must be square, got shape {shape}")
    return matvec, int(shape[0]), np.dtype(operator.dtype)


class _Space:
    """Vector operations of the iteration, in place, with the locked vectors.

    Level-1 operations are NumPy ufuncs and ``einsum`` over cache-sized chunks rather than
    BLAS calls: a multi-threaded BLAS ``dot``/``axpy`` on a long vector can be ten to a
    hundred times slower than one pass over memory when the cores are shared.
    """

    CHUNK = 1 << 15

    def __init__(self, matvec, n, dtype, locked):
        self.matvec = matvec
        self.n = n
        self.dtype = np.dtype(dtype)
        self.locked = locked
        self.scratch = np.empty(min(n, self.CHUNK), dtype=self.dtype)
        self.count = 0

    def apply(self, v: np.ndarray) -> np.ndarray:
        self.count += 1
        w = np.asarray(self.matvec(v)).reshape(-1)
        if w.dtype != self.dtype or not w.flags.c_contiguous or np.shares_memory(w, v):
            w = np.array(w, dtype=self.dtype, order="C")
        return w

    def _chunks(self):
        for start in range(0, self.n, self.CHUNK):
            stop = min(start + self.CHUNK, self.n)
            yield slice(start, stop), self.scratch[: stop - start]

    def add(self, x: np.ndarray, y: np.ndarray, a) -> None:
        """``y += a x`` in place."""
        for part, tmp in self._chunks():
            np.multiply(x[part], a, out=tmp)
            np.add(y[part], tmp, out=y[part])

    def dot(self, x: np.ndarray, y: np.ndarray):
        """``x^H y``."""
        if self.dtype.kind != "c":
            return float(np.einsum("i,i->", x, y))
        real = np.einsum("i,i->", x.real, y.real) + np.einsum("i,i->", x.imag, y.imag)
        imag = np.einsum("i,i->", x.real, y.imag) - np.einsum("i,i->", x.imag, y.real)
        return complex(real, imag)

    def norm(self, w: np.ndarray) -> float:
        return float(np.sqrt(max(np.real(self.dot(w, w)), 0.0)))

    def deflate(self, w: np.ndarray) -> None:
        """Remove the locked directions from ``w`` (twice is enough: Kahan's rule, in
        Parlett, The Symmetric Eigenvalue Problem, 1980)."""
        for _ in range(2 if self.locked else 0):
            for y in self.locked:
                self.add(y, w, -self.dot(y, w))

    def three_term(self, w, v, v_prev, beta_prev) -> tuple[float, float]:
        """``w <- w - beta_prev v_prev - alpha v`` with ``alpha = v^H (w - beta_prev v_prev)``,
        then deflated; returns ``(alpha, ||w||)``.  Two sweeps over memory, chunk by chunk."""
        alpha = 0.0
        for part, tmp in self._chunks():
            if v_prev is not None:
                np.multiply(v_prev[part], beta_prev, out=tmp)
                np.subtract(w[part], tmp, out=w[part])
            alpha += np.real(self.dot(v[part], w[part]))
        squared = 0.0
        for part, tmp in self._chunks():
            np.multiply(v[part], alpha, out=tmp)
            np.subtract(w[part], tmp, out=w[part])
            if not self.locked:
                squared += np.real(self.dot(w[part], w[part]))
        if self.locked:
            self.deflate(w)
            return float(alpha), self.norm(w)
        return float(alpha), float(np.sqrt(max(squared, 0.0)))

    def replay(self, w, v, v_prev, beta_prev, alpha, beta, y, coef) -> None:
        """Second-pass step with known coefficients: ``w <- (w - beta_prev v_prev - alpha v)
        / beta`` (deflated), then ``y += coef w``; one sweep without locked vectors."""
        for part, tmp in self._chunks():
            if v_prev is not None:
                np.multiply(v_prev[part], beta_prev, out=tmp)
                np.subtract(w[part], tmp, out=w[part])
            np.multiply(v[part], alpha, out=tmp)
            np.subtract(w[part], tmp, out=w[part])
            if not self.locked:
                np.multiply(w[part], 1.0 / beta, out=w[part])
                np.multiply(w[part], coef, out=tmp)
                np.add(y[part], tmp, out=y[part])
        if self.locked:
            self.deflate(w)
            w *= 1.0 / beta
            self.add(w, y, coef)


def _lowest_ritz(alphas, betas):
    """Lowest eigenvalue of the tridiagonal matrix, its eigenvector and the norm estimate."""
    m = len(alphas)
    if m == 1:
        return float(alphas[0]), np.ones(1), abs(float(alphas[0]))
    d = np.asarray(alphas)
    e = np.asarray(betas[: m - 1])
    theta, s = eigh_tridiagonal(d, e, select="i", select_range=(0, 0), check_finite=False)
    top = eigh_tridiagonal(d, e, eigvals_only=True, select="i", select_range=(m - 1, m - 1),
                           check_finite=False)
    return float(theta[0]), s[:, 0], max(abs(float(theta[0])), abs(float(top[0])))


def _first_pass(space: _Space, start: np.ndarray, *, tol: float, maxiter: int) -> _Run:
    """Plain Lanczos from ``start`` (unit norm, deflated) until the lowest Ritz pair has a
    residual below ``tol`` times the norm estimate, or ``maxiter`` steps."""
    alphas: list[float] = []
    betas: list[float] = []
    v_prev = None
    v = start
    scale = 0.0
    theta, ritz, residual = np.nan, np.ones(1), np.inf
    for _ in range(maxiter):
        w = space.apply(v)
        alpha, beta = space.three_term(w, v, v_prev, betas[-1] if betas else 0.0)
        alphas.append(alpha)
        betas.append(beta)
        theta, ritz, norm_t = _lowest_ritz(alphas, betas)
        scale = max(scale, norm_t, np.finfo(float).tiny)
        residual = beta * abs(ritz[-1])
        if residual <= tol * scale or beta <= 8 * np.finfo(float).eps * scale:
            return _Run(theta, ritz, np.array(alphas), np.array(betas), residual, scale)
        w *= 1.0 / beta
        v_prev, v = v, w
    raise ConvergenceError(
        f"Lanczos did not converge in {maxiter} steps (lowest Ritz value {theta:.12g}, "
        f"residual {residual:.3g} > {tol:.1e} x {scale:.3g}); raise maxiter or tol",
        partial=np.array([theta]))


def _second_pass(space: _Space, start: np.ndarray, run: _Run) -> np.ndarray:
    """Repeat the recurrence of ``run`` from ``start`` and return the normalised Ritz vector
    ``sum_j ritz[j] v_j`` (the stored coefficients are reused, so no dot products but the
    deflation's)."""
    m = run.alphas.size
    y = start * run.ritz[0]
    v_prev = None
    v = start
    for j in range(m - 1):
        w = space.apply(v)
        space.replay(w, v, v_prev, run.betas[j - 1] if j else 0.0, run.alphas[j],
                     run.betas[j], y, run.ritz[j + 1])
        v_prev, v = v, w
    space.deflate(y)
    y *= 1.0 / space.norm(y)
    return y


def _start_vector(n, dtype, seed, v0):
    if v0 is not None:
        return np.array(v0, dtype=dtype, order="C").reshape(-1)
    gen = np.random.default_rng(seed)
    v = gen.standard_normal(n)
    if np.issubdtype(dtype, np.complexfloating):
        v = v + 1j * gen.standard_normal(n)
    return v.astype(dtype, copy=False)


def _prepared(space: _Space, v: np.ndarray) -> np.ndarray:
    space.deflate(v)
    norm = space.norm(v)
    if norm == 0 or not np.isfinite(norm):
        raise ModelError("the start vector vanishes on the space still to be searched")
    v *= 1.0 / norm
    return v


def _level(space: _Space, make_start, *, want_vector: bool, tol: float, maxiter: int,
           restarts: int):
    """One level: ``(energy, vector or None, residual, steps)``."""
    start_of = make_start
    for attempt in range(restarts + 1):
        run = _first_pass(space, _prepared(space, start_of()), tol=tol, maxiter=maxiter)
        if not want_vector:
            return run.energy, None, run.residual, run.alphas.size
        y = _second_pass(space, _prepared(space, start_of()), run)
        r = space.apply(y)
        energy = float(np.real(space.dot(y, r)))     # Rayleigh quotient of the rebuilt vector
        space.add(y, r, -energy)
        space.deflate(r)
        residual = space.norm(r)
        del r
        if residual <= 10 * tol * run.scale:
            return energy, y, residual, run.alphas.size
        start_of = (lambda kept=y: kept.copy())      # restart from the rebuilt vector
    raise ConvergenceError(
        f"the Lanczos eigenvector keeps a residual {residual:.3g} above {tol:.1e} x "
        f"{run.scale:.3g} after {restarts} restarts", partial=np.array([run.energy]))


def lanczos_lowest(operator, levels: int = 1, *, vectors: bool = False, tol: float = 1e-10,
                   maxiter: int = 3000, restarts: int = 2, v0: np.ndarray | None = None,
                   rng: np.random.Generator | None = None,
                   exclude: np.ndarray | None = None) -> LanczosResult:
    """The ``levels`` lowest eigenvalues of a Hermitian operator, keeping few vectors.

    Parameters
    ----------
    operator : scipy sparse matrix, ndarray or LinearOperator
        Hermitian, shape ``(n, n)``.  Only products ``operator @ x`` are used.
    levels : int
        Number of lowest eigenvalues, counted with multiplicity.
    vectors : bool, keyword-only
        Also return the eigenvectors (costs a second Lanczos pass per level).
    tol : float, keyword-only
        Relative residual: a level is converged when ``||H y - E y|| <= tol * ||H||``
        (``||H||`` estimated by the extreme Ritz values).  The energy is then within that
        residual of an eigenvalue, and in practice within ``residual**2 / gap``.
    maxiter : int, keyword-only
        Lanczos steps allowed per level.
    restarts : int, keyword-only
        Restarts from the rebuilt vector if its measured residual exceeds ``10 * tol``.
    v0 : ndarray, keyword-only
        Start vector of the first level (default: random from ``rng``).
    rng : numpy.random.Generator, keyword-only
        Source of the random start vectors (default: a fixed seed, so runs repeat).
    exclude : ndarray, keyword-only
        Orthonormal columns ``(n, m)`` (eigenvectors already known): the levels are those of
        ``H`` on their orthogonal complement.

    Returns
    -------
    LanczosResult

    Raises
    ------
    ModelError
        For a non-square operator, ``levels`` outside ``1..n`` or a bad ``tol``.
    ConvergenceError
        If a level does not converge in ``maxiter`` steps; ``partial`` holds the energies
        found so far and the last Ritz value.

    Notes
    -----
    A level costs about ``m`` products (``2 m + 1`` with vectors, or when further levels
    need it for deflation), ``m`` the Lanczos steps to convergence.
    """
    matvec, n, op_dtype = _product(operator)
    if not 1 <= levels <= n:
        raise ModelError(f"levels must be between 1 and the dimension {n}, got {levels}")
    if not 0 < tol < 1:
        raise ModelError(f"tol must be between 0 and 1, got {tol}")
    if maxiter < 1:
        raise ModelError(f"maxiter must be at least 1, got {maxiter}")
    dtype = np.result_type(op_dtype, np.float64)
    if v0 is not None:
        v0 = np.asarray(v0)
        if v0.size != n:
            raise ModelError(f"v0 has {v0.size} entries, the operator acts on {n}")
        dtype = np.result_type(dtype, v0.dtype)
    rng = np.random.default_rng(20240611) if rng is None else rng
    locked: list[np.ndarray] = []
    if exclude is not None:
        exclude = np.asarray(exclude)
        if exclude.ndim != 2 or exclude.shape[0] != n or exclude.shape[1] + levels > n:
            raise ModelError(f"exclude must have shape (n, m) with m + levels <= n = {n}")
        dtype = np.result_type(dtype, exclude.dtype)
        locked.extend(np.array(exclude[:, j], dtype=dtype) for j in range(exclude.shape[1]))
    n_excluded = len(locked)
    space = _Space(matvec, n, dtype, locked)
    energies, residuals, steps = [], [], []
    for level in range(levels):
        seed = int(rng.integers(2**63))
        first = v0 if level == 0 else None

        def make_start(seed=seed, first=first):
            return _start_vector(n, dtype, seed, first)

        want_vector = vectors or level < levels - 1
        try:
            energy, y, residual, m = _level(space, make_start, want_vector=want_vector, tol=tol,
                                            maxiter=maxiter, restarts=restarts)
        except ConvergenceError as exc:
            raise ConvergenceError(f"level {level}: {exc}",
                                   partial=np.array(energies + list(exc.partial))) from None
        energies.append(energy)
        residuals.append(residual)
        steps.append(m)
        if y is not None:
            locked.append(y)
    order = np.argsort(energies, kind="stable")
    result_vectors = None
    if vectors:
        result_vectors = np.empty((n, levels), dtype=dtype)
        for column, index in enumerate(order):
            result_vectors[:, column] = locked[n_excluded + index]
    return LanczosResult(np.asarray(energies)[order], result_vectors,
                         np.asarray(residuals)[order], np.asarray(steps)[order], space.count)
