"""The exact levels of a large check block in the product basis of electrons.

A check block whose sector is electrons at fixed N_up, N_dn with terms that each act on one
spin species (``lowfold.build.product_basis``; the route ``"auto"`` of ``lowfold.spectrum``
takes it too, ``lowfold.solve.method.wants_product``) and that has more than
``PRODUCT_CHECK_MIN_STATES`` states is not built as a CSR matrix: H is applied to wave
functions stored as matrices Psi[down, up], and its lowest ``k`` levels are found by the
block eigensolver of ``lowfold.solve.product_block`` started from the effective eigenvectors
embedded in P and corrected to first order in Q, with the preconditioner of
``lowfold.jobs.check_levels`` written matrix-free: the block inverse of ``H - sigma`` over P
and Q with ``H_eff - sigma`` as the Schur complement on P, the P-Q coupling B (the few
entries of the rows of P, built from the one-species matrices) kept exactly, and the Q-Q
part inverted to first order in its hopping (``D^-1 - D^-1 T D^-1``: one product with H
and two sweeps of ``lowfold.build.product_gaps``; the Schur complement's own
``B D^-1 B^+`` term uses the diagonal only).  With that Q-Q term the 10-site ring takes
10 steps for its lowest 8 levels per block, without it 15.  Should the block
method not converge, the deflated two-vector Lanczos of ``lowfold.solve.product_lanczos``
finds the levels one after the other.

Memory (:func:`product_check_bytes`, checked before anything is built): four blocks of
``k`` wave functions, the diagonal of H (three with ``--check-scaling``: H0, V and their
scaled sum) and the diagonals of the previous block, kept for its spin-reversed partner.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp

from lowfold.build.basis import fixed_sum_basis
from lowfold.build.compiled import compile_operator
from lowfold.build.product_gaps import divide_by_gap, subtract_hopping_over_gap
from lowfold.build.product_basis import (ProductHamiltonian, product_route_reason,
                                         product_species)
from lowfold.errors import ConvergenceError, ModelError
from lowfold.jobs.check_levels import RESIDUAL_TOL
from lowfold.model.model import Model
from lowfold.solve.method import DENSE_LIMIT
from lowfold.solve.exact import lowest_eigenpairs
from lowfold.solve.product_block import block_bytes, block_lowest
from lowfold.solve.product_lanczos import product_lowest

__all__ = ["PRODUCT_CHECK_MIN_STATES", "uses_product", "product_check_bytes",
           "product_at_bottom", "product_hamiltonians", "product_levels", "product_mirror"]

PRODUCT_CHECK_MIN_STATES = DENSE_LIMIT  # above this, a block that allows it is not built as CSR
MIRROR_TOL = 1e-13                     # entries equal within this times the largest one
_ROWS = 1 << 20                        # entries of a wave function handled at once by numpy


def uses_product(block_model: Model, size: int, min_states: int | None = None) -> bool:
    """Whether the check finds the levels of this block in the product basis: the product
    route applies (``product_route_reason``, as for ``spectrum``) and the block has more
    than ``min_states`` states (default ``PRODUCT_CHECK_MIN_STATES``, the ``DENSE_LIMIT``
    from which ``spectrum`` takes it; on the 12-site Hubbard ring the check takes 0.7 of the
    time and a quarter of the memory of the sparse route, ``benchmarks/bench_orders.py``)."""
    limit = PRODUCT_CHECK_MIN_STATES if min_states is None else min_states
    return size > limit and product_route_reason(block_model) is None


def product_check_bytes(block_model: Model, size: int, k: int, fit_scaling: bool,
                        previous: int = 0) -> int:
    """Bytes the product route needs for one block of ``size`` states and ``k`` levels;
    ``previous``: states of the block checked before it (its diagonals are kept)."""
    itemsize = np.dtype(compile_operator(block_model).dtype).itemsize
    itemsize = max(itemsize, 8)
    diagonals = 3 if fit_scaling else 1
    kept = 2 if fit_scaling else 1
    return block_bytes(size, k, itemsize) + 8 * (diagonals * size + kept * previous)


def product_at_bottom(block_model: Model, lowest_p: float) -> bool:
    """Whether no state of the sector has an H0 energy below the manifold's lowest (the
    diagonal of H0, a block of rows at a time: nothing of the sector's size is kept)."""
    n_up, n_dn = product_species(block_model)
    n = block_model.n_sites
    up = fixed_sum_basis(n, 2, n_up).states
    dn = fixed_sum_basis(n, 2, n_dn).states
    h0 = compile_operator(block_model, tuple(block_model.unperturbed_labels), check_sector=False)
    rows = max(1, _ROWS // max(up.size, 1))
    for start in range(0, dn.size, rows):
        states = (up[None, :] + (dn[start:start + rows, None] << n)).reshape(-1)
        if h0.diagonal(states).real.min() < lowest_p - 1e-9:
            return False
    return True


def product_hamiltonians(block_model: Model, fit_scaling: bool) -> tuple:
    """H of the block in the product basis, or H0 and V apart when the check is repeated at
    scaled couplings."""
    if fit_scaling:
        return (ProductHamiltonian.of(block_model, block_model.unperturbed_labels),
                ProductHamiltonian.of(block_model, block_model.perturbation_labels))
    return (ProductHamiltonian.of(block_model),)


def product_levels(hams: tuple, p_states: np.ndarray, effectives: dict, k: int,
                   say: Callable[[str], None]):
    """The lowest ``k`` exact levels of the block at each coupling factor.

    Parameters
    ----------
    hams : tuple of ProductHamiltonian
        From :func:`product_hamiltonians`: H, or H0 and V.
    p_states : ndarray of int64
        The block's manifold states (encoded), in the order of the effective matrices.
    effectives : dict of float to ndarray
        Coupling factor -> the effective Hamiltonian of the block (summed over orders).

    Returns
    -------
    (dict of float to ndarray, str)
        The levels by factor, and the route: ``"product-block"``, or ``"product-lanczos"``
        when the block method fell back to the deflated Lanczos.
    """
    p_rows = _rows_of(hams[0], p_states)
    exact, route = {}, "product-block"
    for factor, effective in effectives.items():
        h = hams[0] if len(hams) == 1 else hams[0].plus(hams[1], factor)
        levels, fell_back = _lowest(h, p_rows, effective, k, say)
        exact[factor] = levels
        route = "product-lanczos" if fell_back else route
        del h
    return exact, route


def product_mirror(a: tuple, b: tuple) -> bool:
    """True when each Hamiltonian of ``b`` is the one of ``a`` with every spin reversed:
    ``Psi_b = Psi_a^T`` (up and down configurations exchanged, one sign for the whole block,
    ``lowfold.jobs.check_mirror``) maps one onto the other when ``T_up`` of b is ``T_dn`` of
    a, ``T_dn`` of b is ``T_up`` of a, and ``D_b = D_a^T`` (checked entry by entry)."""
    if len(a) != len(b):
        return False
    for ha, hb in zip(a, b):
        if (hb.shape2d != ha.shape2d[::-1] or not np.array_equal(hb.up_states, ha.dn_states)
                or not np.array_equal(hb.dn_states, ha.up_states)):
            return False
        scale = max(1.0, _largest(ha.t_up), _largest(ha.t_dn))
        if _differ(hb.t_up, ha.t_dn, scale) or _differ(hb.t_dn, ha.t_up, scale):
            return False
        dscale = max(1.0, float(np.abs(ha.diag).max()))
        rows = max(1, _ROWS // max(hb.shape2d[1], 1))
        for start in range(0, hb.shape2d[0], rows):
            part = hb.diag[start:start + rows] - ha.diag[:, start:start + rows].T
            if part.size and np.abs(part).max() > MIRROR_TOL * dscale:
                return False
    return True


def _largest(t) -> float:
    return float(np.abs(t.data).max()) if t.nnz else 0.0


def _differ(x, y, scale) -> bool:
    difference = (x - y).tocsr()
    return bool(difference.nnz and np.abs(difference.data).max() > MIRROR_TOL * scale)


def _rows_of(h: ProductHamiltonian, states: np.ndarray) -> np.ndarray:
    """Flat positions ``rank_dn * size_up + rank_up`` of encoded states in the wave function."""
    n = h.n_sites
    states = np.asarray(states, dtype=np.int64)
    up, dn = states & ((1 << n) - 1), states >> n
    u, r = np.searchsorted(h.up_states, up), np.searchsorted(h.dn_states, dn)
    u, r = np.minimum(u, h.up_states.size - 1), np.minimum(r, h.dn_states.size - 1)
    if not (np.array_equal(h.up_states[u], up) and np.array_equal(h.dn_states[r], dn)):
        raise ModelError("a manifold state lies outside its S^z block's sector")
    return r * h.shape2d[1] + u


def _lowest(h, p_rows, effective, k, say):
    """``(levels, fell_back)``: the block method from the effective eigenvectors, else the
    deflated Lanczos."""
    if sp.issparse(effective):
        levels, vectors = lowest_eigenpairs(effective, min(k + 1, effective.shape[0]),
                                            vectors=True)
    else:
        levels, vectors = la.eigh(effective)
    # sigma below the lowest level by the spread of the levels wanted, or by the gap to the
    # next effective level (one level wanted), at least 1e-3 (relative)
    upper = levels[k - 1] if k > 1 or levels.size < 2 else levels[1]
    spread = max(upper - levels[0], 1e-3 * max(1.0, abs(levels[0])))
    tol = RESIDUAL_TOL * max(1.0, float(np.abs(levels[:k]).max()))
    sigma = levels[0] - spread
    solve_p = _inverse_on_p(effective, sigma, spread, levels[:k], vectors[:, :k])
    precondition = _Preconditioner(h, p_rows, solve_p, sigma, spread)
    start = precondition.start(vectors[:, :k], levels[:k])
    try:
        found = block_lowest(h, start, precondition, tol=tol, progress=say)
        say(f"block method: {k} levels in {found.steps} steps, {found.matvecs} products")
        return found.energies, False
    except ConvergenceError as exc:
        say(f"block method failed ({exc}); deflated Lanczos")
    del start
    return product_lowest(h, k, tol=1e-10, progress=say).energies, True


class _Preconditioner:
    """An approximate ``(H - sigma)^-1`` on wave functions (see the module doc), in place."""

    def __init__(self, h: ProductHamiltonian, p_rows, solve_p, sigma: float, spread: float):
        self.h, self.p_rows, self.sigma, self.spread = h, p_rows, sigma, spread
        m = p_rows.size
        rows, cols, values = _p_row_entries(h, p_rows)
        off_p = ~np.isin(cols, p_rows)
        self.q_cols, position = np.unique(cols[off_p], return_inverse=True)
        self.b = sp.csr_matrix((values[off_p], (rows[off_p], position)),
                               shape=(m, self.q_cols.size))
        self.b_adjoint = self.b.conj().T.tocsr()
        self.q_inverse = self._inverse(h.diag.reshape(-1)[self.q_cols])
        self.solve_p = solve_p

    def _inverse(self, diagonal):
        return 1.0 / np.maximum(diagonal - self.sigma, self.spread)

    def start(self, guess: np.ndarray, energies: np.ndarray) -> np.ndarray:
        """The effective eigenvectors embedded in P, with their first-order part in Q
        ``x_Q = -(H x)_Q / (D_Q - E)``."""
        k = guess.shape[1]
        if np.iscomplexobj(guess) and not np.iscomplexobj(np.empty(0, self.h.dtype)):
            guess = _real_columns(guess)         # a real H: the effective vectors are real
        out = np.zeros((k,) + self.h.shape2d, dtype=self.h.dtype)
        diagonal = self.h.diag.reshape(-1)[self.q_cols]
        for j in range(k):
            flat = out[j].reshape(-1)
            flat[self.p_rows] = guess[:, j]
            gap = np.maximum(diagonal - energies[j], self.spread)
            flat[self.q_cols] -= (self.b_adjoint @ guess[:, j]) / gap
        return out

    def __call__(self, r: np.ndarray, scratch: np.ndarray) -> None:
        flat = r.reshape(-1)
        x_p = self.solve_p(flat[self.p_rows] - self.b @ (self.q_inverse * flat[self.q_cols]))
        flat[self.q_cols] -= self.b_adjoint @ x_p
        flat[self.p_rows] = 0
        self._solve_q(r, scratch)
        flat[self.p_rows] = x_p

    def _solve_q(self, y: np.ndarray, scratch: np.ndarray) -> None:
        """``y <- D^-1 y - D^-1 T D^-1 y`` on Q (``y`` zero on P; T: H without its diagonal)."""
        divide_by_gap(y, self.h.diag, self.sigma, self.spread)
        self.h.product_into(y, scratch)
        subtract_hopping_over_gap(y, scratch, self.h.diag, self.sigma, self.spread)


def _inverse_on_p(effective, sigma: float, spread: float, levels, vectors):
    """``x -> (H_eff - sigma)^-1 x`` on P: the dense inverse, or for a sparse ``H_eff`` (a
    large manifold block) exact on the ``k`` lowest effective vectors V and the diagonal of
    ``H_eff`` on the rest, ``V (L - sigma)^-1 V^+ + Q D^-1 Q`` with ``Q = 1 - V V^+``."""
    if not sp.issparse(effective):
        inverse = la.inv(effective - sigma * np.eye(effective.shape[0]))
        return lambda x: inverse @ x
    weights = 1.0 / (np.asarray(levels) - sigma)
    diagonal = 1.0 / np.maximum(effective.diagonal().real - sigma, spread)
    adjoint = vectors.conj().T

    def apply(x):
        c = adjoint @ x
        rest = diagonal * (x - vectors @ c)
        return vectors @ (weights * c) + rest - vectors @ (adjoint @ rest)

    return apply


def _real_columns(vectors: np.ndarray) -> np.ndarray:
    """Each column times the phase that makes its largest entry real, real part kept."""
    top = vectors[np.argmax(np.abs(vectors), axis=0), np.arange(vectors.shape[1])]
    return (vectors * (np.abs(top) / top)[None, :]).real


def _p_row_entries(h: ProductHamiltonian, p_rows: np.ndarray):
    """``(row, flat column, value)`` of the off-diagonal entries of H in the rows of P:
    ``H[(r, u), (r, u')] = T_up[u, u']`` and ``H[(r, u), (r', u)] = T_dn[r, r']``."""
    size_up = h.shape2d[1]
    r, u = np.divmod(p_rows, size_up)
    up = h.t_up[u].tocoo()
    dn = h.t_dn[r].tocoo()
    rows = np.concatenate([up.row, dn.row]).astype(np.int64)
    cols = np.concatenate([r[up.row] * size_up + up.col, dn.col.astype(np.int64) * size_up
                           + u[dn.row]])
    return rows, cols, np.concatenate([up.data, dn.data])
