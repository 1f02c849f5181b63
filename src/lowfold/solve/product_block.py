"""Preconditioned block eigensolver on product-basis wave functions: the lowest ``k`` levels.

LOBPCG (Knyazev, SIAM J. Sci. Comput. 23, 517 (2001)): ``k`` wave functions X are improved
in the span of X, the preconditioned residuals ``W = M (H X - X Theta)`` and the previous
step P by Rayleigh-Ritz.  A block method started from vectors that carry the multiplet
structure of the levels wanted (the effective eigenvectors of ``derive``) keeps every member
of a degenerate level, which a single-vector Krylov method can miss.

Written for memory: a block is an array of shape ``(k, size_dn, size_up)``, each entry a
C-contiguous wave function of :class:`~lowfold.build.product_basis.ProductHamiltonian`, and
four blocks are kept in all: X, P, W and H W.  H X is computed afresh each step into the
buffer that then holds W (the residual is formed and preconditioned in place); ``<P|H|X>``
is taken from H X before that, and ``<P|H|P>`` is carried by the Rayleigh-Ritz
coefficients.  That costs one product with H per vector and step more than keeping H X and
H P, and saves two blocks.  Linear combinations of blocks are matrix products over column
chunks (no temporary of a block's size).  W is made orthogonal to X before the
Rayleigh-Ritz step (a preconditioner close to ``(H - sigma)^-1`` gives W a large part along
X, which would swamp the rest in round-off; common practice, e.g. Duersch, Shao, Yang and Gu,
SIAM J. Sci. Comput. 40, C655 (2018)).

The Rayleigh-Ritz step scales the basis to unit norm and drops the directions whose overlap
eigenvalue falls below ``RR_DROP`` of the largest (SVQB, Stathopoulos and Wu, SIAM J. Sci.
Comput. 23, 2165 (2002)): near convergence P and W become nearly parallel, and dropping
their common direction is the usual cure (common practice).  The energies returned are the
Ritz values of the final X alone, whose residuals are all below ``tol``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.linalg as la

from lowfold.build import product_basis as waves
from lowfold.build.product_basis import ProductHamiltonian, product_threads
from lowfold.errors import ConvergenceError

__all__ = ["BlockResult", "block_lowest", "block_bytes", "BLOCKS_KEPT"]

BLOCKS_KEPT = 4                 # blocks of k wave functions: X, P, W and H W
RR_DROP = 1e-10                 # overlap eigenvalues below this (relative) are dropped
CHUNK = 1 << 15                 # columns of the flattened wave functions per matrix product


@dataclass(frozen=True, eq=False)
class BlockResult:
    """Lowest energies (ascending), the residual norm of each, steps and products with H."""

    energies: np.ndarray
    residuals: np.ndarray
    steps: int
    matvecs: int


def block_bytes(size: int, k: int, itemsize: int) -> int:
    """Bytes of the blocks of :func:`block_lowest` for ``k`` levels of ``size`` states."""
    return BLOCKS_KEPT * k * size * itemsize


def block_lowest(hamiltonian: ProductHamiltonian, start: np.ndarray,
                 precondition: Callable[[np.ndarray, np.ndarray], None], *, tol: float,
                 maxiter: int = 200,
                 progress: Callable[[str], None] | None = None) -> BlockResult:
    """The ``k`` lowest levels reached from ``start`` (shape ``(k, size_dn, size_up)``, used
    as the X block and overwritten).

    ``precondition(r, scratch)`` replaces the wave function ``r`` by ``M r`` in place
    (``scratch``: a wave function it may overwrite).  ``tol``: the largest residual norm
    ``||H x - E x||`` of a unit vector.  ``ConvergenceError`` after ``maxiter`` steps."""
    say = progress or (lambda message: None)
    with product_threads(hamiltonian.size):
        return _iterate(hamiltonian, start, precondition, tol, maxiter, say)


def _iterate(h, x, precondition, tol, maxiter, say) -> BlockResult:
    k = x.shape[0]
    a, b, p = np.empty_like(x), np.empty_like(x), np.empty_like(x)
    pp = None                           # <P|H|P>, carried from the previous step
    count = 0
    for j in range(k):
        waves.scale(x[j], 1.0 / np.sqrt(np.vdot(x[j], x[j]).real))
    for step in range(maxiter):
        for j in range(k):
            h.product_into(x[j], a[j])
        count += k
        hxx, sxx = _gram(x, a), _gram(x, x)
        theta = np.real(np.diag(hxx)) / np.real(np.diag(sxx))
        hpx = _gram(p, a) if pp is not None else None
        residual = np.empty(k)
        for j in range(k):
            waves.add_scaled(a[j], x[j], -theta[j])
            residual[j] = np.sqrt(np.vdot(a[j], a[j]).real / np.real(sxx[j, j]))
        if np.all(residual <= tol):
            energies = la.eigvalsh(_hermitian(hxx), _hermitian(sxx))
            return BlockResult(np.sort(energies), residual, step + 1, count)
        if step % 5 == 4:
            say(f"block step {step + 1}: largest residual {residual.max():.1e} (tol {tol:.1e})")
        active = [j for j in range(k) if residual[j] > tol]
        for i, j in enumerate(active):     # the residuals still to improve, first in the block
            if i != j:
                a[i][...] = a[j]
        na = len(active)
        w, hw = a[:na], b[:na]
        for i in range(na):
            precondition(w[i], hw[i])
        # W without its part along X: a preconditioner close to (H - sigma)^-1 amplifies
        # that part, and the useful rest would drown in the round-off of the Gram matrices
        _combine(w, [x], -np.linalg.solve(sxx, _gram(x, w)), add=w)
        for i in range(na):
            h.product_into(w[i], hw[i])
        count += 2 * na
        blocks_h = [[hxx, _gram(x, hw)], [None, _gram(w, hw)]]
        blocks_s = [[sxx, _gram(x, w)], [None, _gram(w, w)]]
        if pp is not None:
            blocks_h[0].append(hpx.conj().T)
            blocks_h[1].append(_gram(p, hw).conj().T)
            blocks_h.append([None, None, pp])
            blocks_s[0].append(_gram(x, p))
            blocks_s[1].append(_gram(w, p))
            blocks_s.append([None, None, _gram(p, p)])
        hm, sm = _assemble(blocks_h), _assemble(blocks_s)
        coefficients = _rayleigh_ritz(hm, sm, k)
        cx, rest = coefficients[:k], coefficients[k:]
        # P <- W C_w + P C_p (into the buffer of H W), X <- X C_x + P (into that of W)
        sources = [w] if pp is None else [w, p]
        _combine(b, sources, rest)
        pp = _hermitian(rest.conj().T @ hm[k:, k:] @ rest)
        _combine(a, [x], cx, add=b)
        x, a, p, b = a, x, b, p
    raise ConvergenceError(f"the block eigensolver did not converge in {maxiter} steps "
                           f"(largest residual {residual.max():.3g} > {tol:.1e})",
                           partial=np.sort(theta))


def _gram(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``<a_i|b_j>`` for the wave functions of two blocks, chunk by chunk."""
    a2, b2 = a.reshape(a.shape[0], -1), b.reshape(b.shape[0], -1)
    out = np.zeros((a2.shape[0], b2.shape[0]), dtype=np.result_type(a2, b2))
    complex_ = np.iscomplexobj(a2)
    for start in range(0, a2.shape[1], CHUNK):
        part = a2[:, start:start + CHUNK]
        out += (part.conj() if complex_ else part) @ b2[:, start:start + CHUNK].T
    return out


def _combine(out: np.ndarray, sources: list, coefficients: np.ndarray, add=None) -> None:
    """``out_j = sum_i S_i c_ij`` over the wave functions of the ``sources`` stacked (rows of
    ``coefficients`` in that order), plus ``add_j`` when given; chunk by chunk (each chunk of
    ``out`` is written after it is computed, so ``add`` may be ``out`` itself)."""
    out2 = out.reshape(out.shape[0], -1)
    flat = [s.reshape(s.shape[0], -1) for s in sources]
    add2 = None if add is None else add.reshape(add.shape[0], -1)
    pieces, row = [], 0
    for s in flat:
        pieces.append((s, coefficients[row:row + s.shape[0]].T.copy()))
        row += s.shape[0]
    for start in range(0, out2.shape[1], CHUNK):
        stop = start + CHUNK
        total = add2[:, start:stop].copy() if add2 is not None else 0
        for s, c in pieces:
            total = total + c @ s[:, start:stop]
        out2[:, start:stop] = total


def _assemble(blocks: list) -> np.ndarray:
    """The Hermitian matrix from its upper block triangle."""
    n = len(blocks)
    rows = []
    for i in range(n):
        row = []
        for j in range(n):
            row.append(blocks[i][j] if j >= i else blocks[j][i].conj().T)
        rows.append(row)
    return _hermitian(np.block(rows))


def _hermitian(m: np.ndarray) -> np.ndarray:
    return 0.5 * (m + m.conj().T)


def _rayleigh_ritz(hm: np.ndarray, sm: np.ndarray, k: int) -> np.ndarray:
    """Coefficients (columns) of the ``k`` lowest Ritz vectors of ``(hm, sm)``, S-orthonormal,
    with nearly dependent directions of the basis dropped (SVQB)."""
    d = np.sqrt(np.maximum(np.real(np.diag(sm)), np.finfo(float).tiny))
    scale = np.outer(d, d)
    values, vectors = la.eigh(sm / scale)
    keep = values > RR_DROP * values.max()
    if keep.sum() < k:
        raise ConvergenceError("the block eigensolver's vectors became linearly dependent")
    t = vectors[:, keep] / np.sqrt(values[keep])
    _, y = la.eigh(_hermitian(t.conj().T @ (hm / scale) @ t), subset_by_index=[0, k - 1])
    return (t @ y) / d[:, None]
