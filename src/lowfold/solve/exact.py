"""Exact low-lying spectra: Lanczos (``eigsh``) on CSR or matrix-free, dense for small spaces."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from scipy.sparse.linalg import ArpackNoConvergence, LinearOperator, eigsh

from lowfold.build.hamiltonian import Hamiltonian
from lowfold.build.product_basis import ProductHamiltonian, check_product_hermitian
from lowfold.build.sparse import available_memory
from lowfold.errors import ConvergenceError, ModelError, SizeError
from lowfold.model.model import Model
from lowfold.solve.lanczos import lanczos_lowest
from lowfold.solve.method import (DENSE_LIMIT, METHODS, check_product_memory, choose_method,
                                  lanczos_bytes, operator_for, wants_product)
from lowfold.solve.product_lanczos import product_lowest

__all__ = ["SpectrumResult", "lowest_eigenpairs", "spectrum"]


@dataclass(frozen=True, eq=False)
class SpectrumResult:
    """The lowest energies (ascending) and, on request, their eigenvectors (columns)."""

    dimension: int
    energies: np.ndarray
    vectors: np.ndarray | None = None
    method: str = "dense"

    def to_dict(self) -> dict:
        return {"dimension": self.dimension, "energies": [float(e) for e in self.energies]}


def lowest_eigenpairs(matrix, k: int, *, vectors: bool = False, tol: float = 0.0,
                      rng: np.random.Generator | None = None):
    """The ``k`` lowest eigenvalues (and vectors) of a Hermitian sparse matrix, dense array or
    ``LinearOperator``.  Dense ``eigh`` below ``DENSE_LIMIT`` states; above it the low-memory
    Lanczos of ``lowfold.lanczos`` for one level and ARPACK (``eigsh``) for several."""
    n = matrix.shape[0]
    k = min(k, n)
    if k < 1:
        raise ModelError("the number of levels must be at least 1")
    if n <= DENSE_LIMIT or k >= n - 1:
        if isinstance(matrix, LinearOperator):
            dense = matrix @ np.eye(n, dtype=matrix.dtype)
        else:
            dense = matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix)
        values, vecs = la.eigh(dense, subset_by_index=[0, k - 1], driver="evr")
        return (values, vecs) if vectors else (values, None)
    rng = np.random.default_rng(7) if rng is None else rng
    if k == 1:
        # one level: a plain Lanczos keeping ~4 vectors is several times faster than ARPACK
        result = lanczos_lowest(matrix, 1, vectors=vectors, rng=rng)
        return result.energies, (result.vectors if vectors else None)
    v0 = rng.standard_normal(n)
    ncv = min(n, max(2 * k + 1, 20))
    try:
        values, vecs = eigsh(matrix, k=k, which="SA", v0=v0, ncv=ncv, tol=tol,
                             return_eigenvectors=True)
    except ArpackNoConvergence as exc:
        raise ConvergenceError(f"Lanczos did not converge for the {k} lowest levels "
                               f"({len(exc.eigenvalues)} converged)", partial=exc.eigenvalues) from None
    values, vecs = _recover_missed_levels(matrix, values, vecs, rng)
    return values, (vecs if vectors else None)


def _recover_missed_levels(matrix, values, vecs, rng, *, max_rounds: int = 8):
    """Complete the levels of a single-vector Krylov method, which can miss members of a
    degenerate multiplet: the lowest level of ``H`` on the complement of the vectors found
    must not lie below the highest value kept; if it does, it replaces it (and we look
    again).  Costs one deflated Lanczos run when nothing was missed."""
    order = np.argsort(values)
    values, vecs = values[order], vecs[:, order]
    k, n = values.size, matrix.shape[0]
    scale = max(1.0, float(np.max(np.abs(values))))
    for _ in range(max_rounds):
        if k >= n:
            break
        below = lanczos_lowest(matrix, 1, vectors=True, exclude=vecs, rng=rng)
        energy = float(below.energies[0])
        if energy >= values[-1] - 1e-9 * scale:
            break
        values = np.append(values[:-1], energy)
        vecs = np.column_stack([vecs[:, :-1], below.vectors[:, 0]])
        order = np.argsort(values, kind="stable")
        values, vecs = values[order], vecs[:, order]
    return values, vecs


def spectrum(model: Model, levels: int = 4, *, vectors: bool = False, method: str = "auto",
             memory_limit: int | None = None,
             progress: Callable[[str], None] | None = None) -> SpectrumResult:
    """The ``levels`` lowest energies of the model in its sector.

    ``method``: ``"auto"`` (dense for small spaces; the product basis for electrons at
    fixed N_up, N_dn whose terms each act on one spin species; else Lanczos on a CSR matrix
    if it fits in memory, else matrix-free Lanczos), ``"csr"``, ``"matrix-free"``,
    ``"dense"`` or ``"product"`` (see ``lowfold.solve.method``).
    Raises ``SizeError`` before building anything that would not fit in ``memory_limit`` bytes
    (default: 80 % of the available memory).
    """
    if levels < 1:
        raise ModelError(f"levels must be at least 1, got {levels}")
    if method not in METHODS:
        raise ModelError(f"unknown method {method!r}")
    say = progress or (lambda message: None)
    limit = int(0.8 * available_memory()) if memory_limit is None else memory_limit
    if wants_product(model, method):
        return _product_spectrum(model, levels, vectors, limit, say)
    hamiltonian = Hamiltonian.of(model, max_states=max(limit // 96, 1))
    vectors_bytes = lanczos_bytes(levels, hamiltonian.size, hamiltonian.dtype)
    if vectors_bytes >= limit:
        raise SizeError(f"{levels:,} levels of a sector of {hamiltonian.size:,} states need "
                        f"{vectors_bytes / 2**30:.1f} GiB of eigensolver vectors, more than the "
                        f"{limit / 2**30:.1f} GiB available; ask for fewer levels")
    budget = limit - vectors_bytes
    chosen = choose_method(hamiltonian, method, budget, say)
    say(f"building the Hamiltonian on {hamiltonian.size:,} states ({chosen})")
    matrix = operator_for(hamiltonian, chosen, budget)
    hamiltonian.check_hermitian(matrix)
    say(f"diagonalising ({hamiltonian.size:,} states, {levels} levels)")
    if chosen == "dense" and hamiltonian.size > DENSE_LIMIT:
        energies, vecs = _dense(matrix, levels, vectors)
    else:
        energies, vecs = lowest_eigenpairs(matrix, levels, vectors=vectors)
    return SpectrumResult(hamiltonian.size, energies, vecs, chosen)


def _product_spectrum(model: Model, levels: int, vectors: bool, limit: int,
                      say: Callable[[str], None]) -> SpectrumResult:
    """The lowest levels in the product basis (memory checked before anything is built)."""
    check_product_memory(model, levels, vectors, limit)
    check_product_hermitian(model)
    hamiltonian = ProductHamiltonian.of(model)
    size = hamiltonian.size
    say(f"diagonalising ({size:,} states as {hamiltonian.shape2d[0]:,} x "
        f"{hamiltonian.shape2d[1]:,} product wave functions, {min(levels, size)} levels)")
    found = product_lowest(hamiltonian, min(levels, size), vectors=vectors, progress=say)
    return SpectrumResult(size, found.energies, found.vectors, "product")


def _dense(matrix, levels, vectors):
    k = min(levels, matrix.shape[0])
    values, vecs = la.eigh(matrix.toarray(), subset_by_index=[0, k - 1])
    return values, (vecs if vectors else None)

