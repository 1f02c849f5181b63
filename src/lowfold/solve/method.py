"""The one place that chooses how H is handed to the eigensolver: dense, CSR or matrix-free.

The kernel route that builds a product (species split, bit masks, general radix) is a detail
of ``lowfold.build``; which *form* of H to build is decided here, from the size of the basis,
the memory it may use and the facts the :class:`~lowfold.build.hamiltonian.Hamiltonian`
reports (its non-zero count, whether its matrix-free product is as cheap as a CSR product).

* ``"dense"``: ``eigh`` on the full matrix (every space of at most ``DENSE_LIMIT`` states is
  diagonalised densely whatever its form; larger ones only on request);
* ``"csr"``: Lanczos on the CSR matrix, when it fits in memory;
* ``"matrix-free"``: Lanczos on the ``LinearOperator``, which stores only the basis and the
  diagonal (chosen at any size for electrons at fixed N_up, N_dn with one-species strings).
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from lowfold.build.hamiltonian import Hamiltonian
from lowfold.errors import ModelError, SizeError

__all__ = ["METHODS", "DENSE_LIMIT", "lanczos_bytes", "choose_method", "operator_for"]

METHODS = ("auto", "csr", "matrix-free", "dense")
DENSE_LIMIT = 1200          # below this many states, dense diagonalisation is fastest


def lanczos_bytes(levels: int, size: int, dtype) -> int:
    """Memory of the Krylov vectors the eigensolver keeps for ``levels`` levels: about four
    for the single-level Lanczos, ``ncv`` = max(2 levels + 1, 20) and a few more for ARPACK;
    at most ``size`` vectors (levels beyond ``size`` are all levels, as in
    ``lowest_eigenpairs``)."""
    levels = min(levels, size)
    kept = min(size, 6 if levels == 1 else max(2 * levels + 1, 20) + 4)
    return kept * size * np.dtype(dtype).itemsize


def choose_method(hamiltonian: Hamiltonian, method: str, budget: int,
                  say: Callable[[str], None] | None = None) -> str:
    """``"dense"``, ``"csr"`` or ``"matrix-free"`` for ``hamiltonian`` within ``budget`` bytes
    (what is left beside the eigensolver's vectors).

    ``method``: one of ``METHODS``; ``"auto"`` picks CSR for small spaces, the matrix-free
    product where it is as cheap as CSR, else CSR if its counted non-zeros fit, else
    matrix-free.  ``SizeError`` if nothing fits; ``ModelError`` for an unknown method."""
    say = say or (lambda message: None)
    if method not in METHODS:
        raise ModelError(f"unknown method {method!r}; choose from {', '.join(METHODS)}")
    size, itemsize = hamiltonian.size, np.dtype(hamiltonian.dtype).itemsize
    if method == "dense":
        need = size**2 * itemsize * 3
        if need > budget:
            raise SizeError(f"a dense matrix of {size:,} states needs {need / 2**30:.1f} GiB")
        return "dense"
    if method != "auto":
        return method
    if size <= DENSE_LIMIT:
        return "csr"
    if hamiltonian.prefers_matrix_free():
        return "matrix-free"          # electrons at fixed N_up, N_dn: species-split product
    say(f"counting non-zeros on {size:,} states")
    csr_bytes = hamiltonian.count_nonzeros() * (itemsize + 4) + 8 * size
    if csr_bytes <= budget:
        return "csr"
    if 3 * 8 * size <= budget:
        return "matrix-free"
    raise SizeError(f"{size:,} states do not fit in {budget / 2**30:.1f} GiB")


def operator_for(hamiltonian: Hamiltonian, chosen: str, budget: int):
    """The form of H the chosen method diagonalises: the ``LinearOperator`` for
    ``"matrix-free"``, else the CSR matrix (``SizeError`` above ``budget`` bytes)."""
    if chosen == "matrix-free":
        return hamiltonian.as_linear_operator()
    return hamiltonian.to_csr(memory_limit=budget)
