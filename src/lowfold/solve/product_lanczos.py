"""Two-vector Lanczos on product-basis wave functions: the lowest levels of a large sector.

The same method as :mod:`lowfold.solve.lanczos` (plain three-term recurrence, Lanczos,
J. Res. Natl. Bur. Stand. 45, 255 (1950); the lowest Ritz value taken from each run and
converged when its residual ``beta_m |s_m|`` is below ``tol`` times the norm estimate;
levels one after the other by deflation; eigenvectors by a second pass from the same start
vector), written for memory: the recurrence needs only two wave functions, because the
product kernel computes ``w <- H v - beta w`` in place (Paige's two-vector form, common
practice), the start vector is made again from its seed instead of being kept, and each
level kept for deflation is stored once, as a column of the array that is returned.

Memory, in wave functions of the sector (``size * itemsize`` bytes each): 2 for an energy,
3 while an eigenvector is rebuilt, plus one per level kept; the diagonal of H adds one
float64 array.  :func:`product_lanczos_bytes` gives the total before anything is allocated.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.linalg import eigh_tridiagonal

from lowfold.build import product_basis as waves
from lowfold.build.product_basis import ProductHamiltonian, product_threads
from lowfold.errors import ConvergenceError, ModelError

__all__ = ["ProductLanczosResult", "product_lowest", "product_lanczos_bytes"]


@dataclass(frozen=True, eq=False)
class ProductLanczosResult:
    """Lowest energies (ascending), eigenvectors on request (columns, two-species basis
    order), the Lanczos steps of each level and the products with H in all."""

    energies: np.ndarray
    vectors: np.ndarray | None
    steps: np.ndarray
    matvecs: int


def product_lanczos_bytes(size: int, levels: int, vectors: bool, itemsize: int) -> int:
    """Bytes of :func:`product_lowest` on ``size`` states: the working wave functions, the
    levels kept and the float64 diagonal of H."""
    kept = levels if vectors else levels - 1
    working = 3 if (vectors or levels > 1) else 2
    return (working + kept) * size * itemsize + 8 * size


class _Lanczos:
    """The recurrence on one :class:`ProductHamiltonian`, with the deflated levels."""

    def __init__(self, hamiltonian: ProductHamiltonian, locked: list[np.ndarray], say):
        self.h = hamiltonian
        self.locked = locked
        self.say = say
        self.count = 0

    def product(self, x, out, beta=0.0, x_scale=1.0) -> float:
        self.count += 1
        return self.h.product_into(x, out, beta, x_scale)

    def deflate(self, w) -> None:
        """Remove the locked levels from ``w`` (twice: Kahan's rule, Parlett 1980)."""
        for _ in range(2 if self.locked else 0):
            for y in self.locked:
                waves.add_scaled(w, y, -np.vdot(y.reshape(-1), w.reshape(-1)))

    def norm(self, w) -> float:
        return float(np.sqrt(max(waves.subtract_and_norm(w, w, 0.0), 0.0)))

    def start(self, seed: int, out: np.ndarray) -> float:
        """A random wave function (deflated) from ``seed``, written into ``out``; returns
        the factor that normalises it (the vector itself is not scaled)."""
        gen = np.random.default_rng(seed)
        gen.standard_normal(out=out.view(np.float64))
        self.deflate(out)
        norm = self.norm(out)
        if norm == 0 or not np.isfinite(norm):
            raise ModelError("the start vector vanishes on the space still to be searched")
        return 1.0 / norm

    def first_pass(self, v, v_scale, w, *, tol: float, maxiter: int):
        """Recurrence from ``v_scale * v`` until the lowest Ritz pair converges: ``(energy,
        ritz, alphas, betas, scale)``; ``v`` and ``w`` are overwritten.

        Vectors are kept unnormalised, each with its factor: the true Lanczos vector is
        ``v_scale * v`` and the previous one ``w_scale * w``; the product folds the factors
        in, so no sweep scales a vector."""
        alphas, betas = [], []
        beta, w_scale, scale, theta = 0.0, 0.0, np.finfo(float).tiny, np.nan
        residual = np.inf
        for step in range(maxiter):
            alpha = v_scale * self.product(v, w, beta * w_scale, v_scale)
            squared = waves.subtract_and_norm(w, v, alpha * v_scale)
            if self.locked:
                self.deflate(w)
                squared = waves.subtract_and_norm(w, w, 0.0)
            beta = float(np.sqrt(max(squared, 0.0)))
            alphas.append(float(alpha))
            betas.append(beta)
            theta, ritz, norm_t = _lowest_ritz(alphas, betas)
            scale = max(scale, norm_t)
            residual = beta * abs(ritz[-1])
            if step % 20 == 19:
                self.say(f"Lanczos step {step + 1}: E = {theta:.12g}, residual {residual:.1e}")
            if residual <= tol * scale or beta <= 8 * np.finfo(float).eps * scale:
                return theta, ritz, np.array(alphas), np.array(betas), scale
            v, w, v_scale, w_scale = w, v, 1.0 / beta, v_scale
        raise ConvergenceError(
            f"Lanczos did not converge in {maxiter} steps (lowest Ritz value {theta:.12g}, "
            f"residual {residual:.3g} > {tol:.1e} x {scale:.3g})", partial=np.array([theta]))

    def second_pass(self, v, v_scale, w, y, ritz, alphas, betas) -> None:
        """``y <- sum_j ritz[j] v_j`` by the recurrence from ``v_scale * v`` (the start)
        with the known coefficients, normalised; ``v`` and ``w`` are overwritten."""
        y[...] = v
        waves.scale(y, ritz[0] * v_scale)
        beta, w_scale = 0.0, 0.0
        for j in range(alphas.size - 1):
            self.product(v, w, beta * w_scale, v_scale)
            waves.subtract_and_norm(w, v, alphas[j] * v_scale)
            self.deflate(w)
            beta = betas[j]
            waves.add_scaled(y, w, ritz[j + 1] / beta)
            v, w, v_scale, w_scale = w, v, 1.0 / beta, v_scale
        self.deflate(y)
        waves.scale(y, 1.0 / self.norm(y))

    def residual(self, y, scratch) -> tuple[float, float]:
        """``(Rayleigh quotient, ||H y - E y||)`` of the unit wave function ``y``."""
        energy = self.product(y, scratch)
        self.deflate(scratch)
        return energy, float(np.sqrt(max(waves.subtract_and_norm(scratch, y, energy), 0.0)))


def _lowest_ritz(alphas, betas):
    """Lowest eigenvalue of the tridiagonal matrix, its eigenvector, the norm estimate."""
    m = len(alphas)
    if m == 1:
        return float(alphas[0]), np.ones(1), abs(float(alphas[0]))
    d, e = np.asarray(alphas), np.asarray(betas[: m - 1])
    theta, s = eigh_tridiagonal(d, e, select="i", select_range=(0, 0), check_finite=False)
    top = eigh_tridiagonal(d, e, eigvals_only=True, select="i", select_range=(m - 1, m - 1),
                           check_finite=False)
    return float(theta[0]), s[:, 0], max(abs(float(theta[0])), abs(float(top[0])))


def product_lowest(hamiltonian: ProductHamiltonian, levels: int = 1, *, vectors: bool = False,
                   tol: float = 1e-10, maxiter: int = 3000, seed: int = 20240611,
                   progress: Callable[[str], None] | None = None) -> ProductLanczosResult:
    """The ``levels`` lowest eigenvalues of a product-basis Hamiltonian (with multiplicity).

    ``vectors``: also the eigenvectors, as the columns of an ``(n, levels)`` array in the
    order of the two-species basis.  ``tol``: relative Ritz residual (as
    :func:`lowfold.solve.lanczos.lanczos_lowest`).  ``ConvergenceError`` if a level does not
    converge in ``maxiter`` steps or its rebuilt vector keeps a residual above ``10 tol``."""
    n = hamiltonian.size
    if not 1 <= levels <= n:
        raise ModelError(f"levels must be between 1 and the dimension {n}, got {levels}")
    with product_threads(n):
        return _lowest(hamiltonian, levels, vectors, tol, maxiter, seed,
                       progress or (lambda message: None))


def _lowest(hamiltonian, levels, vectors, tol, maxiter, seed, say) -> ProductLanczosResult:
    n = hamiltonian.size
    shape, dtype = hamiltonian.shape2d, hamiltonian.dtype
    kept = levels if vectors else levels - 1
    columns = np.empty((n, kept), dtype=dtype, order="F")
    locked: list[np.ndarray] = []
    solver = _Lanczos(hamiltonian, locked, say)
    rng = np.random.default_rng(seed)
    energies, steps = [], []
    for level in range(levels):
        level_seed = int(rng.integers(2**63))
        v, w = np.empty(shape, dtype=dtype), np.empty(shape, dtype=dtype)
        energy, ritz, alphas, betas, scale = solver.first_pass(
            v, solver.start(level_seed, v), w, tol=tol, maxiter=maxiter)
        if level < kept:
            y = columns[:, level].reshape(shape)
            solver.second_pass(v, solver.start(level_seed, v), w, y, ritz, alphas, betas)
            energy, residual = solver.residual(y, w)
            if residual > 10 * tol * scale:
                raise ConvergenceError(
                    f"level {level}: the Lanczos eigenvector keeps a residual {residual:.3g} "
                    f"above {10 * tol:.1e} x {scale:.3g}", partial=np.array(energies + [energy]))
            locked.append(y)
        del v, w
        energies.append(energy)
        steps.append(alphas.size)
        say(f"level {level + 1}/{levels}: E = {energy:.12g} after {alphas.size} Lanczos steps")
    order = np.argsort(energies, kind="stable")
    out = None
    if vectors:
        out = columns if np.array_equal(order, np.arange(levels)) else columns[:, order]
    return ProductLanczosResult(np.asarray(energies)[order], out, np.asarray(steps)[order],
                                solver.count)
