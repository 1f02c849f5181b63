"""The one place that chooses how H is handed to the eigensolver: dense, CSR or matrix-free.

The kernel route that builds a product (species split, bit masks, general radix) is a detail
of ``lowfold.build``; which *form* of H to build is decided here, from the size of the basis,
the memory it may use and the facts the :class:`~lowfold.build.hamiltonian.Hamiltonian`
reports (its non-zero count, whether its matrix-free product is as cheap as a CSR product).

* ``"dense"``: ``eigh`` on the full matrix (every space of at most ``DENSE_LIMIT`` states is
  diagonalised densely whatever its form; larger ones only on request);
* ``"csr"``: Lanczos on the CSR matrix, when it fits in memory;
* ``"matrix-free"``: Lanczos on the ``LinearOperator``, which stores only the basis and the
  diagonal;
* ``"product"``: the product basis of electrons at fixed N_up, N_dn whose strings each act on
  one spin species (``lowfold.build.product_basis``): the wave function is a matrix
  Psi[down, up], no basis array is made, and the two-vector Lanczos of
  ``lowfold.solve.product_lanczos`` keeps two or three wave functions.  ``"auto"`` takes it
  above ``DENSE_LIMIT`` states wherever it applies (:func:`wants_product`), before any basis
  is built.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from lowfold.build.compiled import compile_operator
from lowfold.build.hamiltonian import Hamiltonian
from lowfold.build.product_basis import product_route_reason, product_size
from lowfold.errors import ModelError, SizeError
from lowfold.model.model import Model
from lowfold.solve.product_lanczos import product_lanczos_bytes

__all__ = ["METHODS", "DENSE_LIMIT", "lanczos_bytes", "choose_method", "operator_for",
           "wants_product", "check_product_memory"]

METHODS = ("auto", "csr", "matrix-free", "dense", "product")
DENSE_LIMIT = 1200          # below this many states, dense diagonalisation is fastest


def lanczos_bytes(levels: int, size: int, dtype) -> int:
    """Memory of the Krylov vectors the eigensolver keeps for ``levels`` levels: about four
    for the single-level Lanczos, ``ncv`` = max(2 levels + 1, 20) and a few more for ARPACK;
    at most ``size`` vectors (levels beyond ``size`` are all levels, as in
    ``lowest_eigenpairs``)."""
    levels = min(levels, size)
    kept = min(size, 6 if levels == 1 else max(2 * levels + 1, 20) + 4)
    return kept * size * np.dtype(dtype).itemsize


def wants_product(model: Model, method: str) -> bool:
    """Whether ``method`` (``"auto"`` or ``"product"``) takes the product basis for
    ``model``: ``"product"`` always (``ModelError`` saying why when it does not apply),
    ``"auto"`` where it applies and the sector has more than ``DENSE_LIMIT`` states."""
    if method not in ("auto", "product"):
        return False
    reason = product_route_reason(model, compile_operator(model))
    if method == "product":
        if reason is not None:
            raise ModelError(f"{model.source}: method \"product\" does not apply: {reason}")
        return True
    return reason is None and product_size(model) > DENSE_LIMIT


def check_product_memory(model: Model, levels: int, vectors: bool, limit: int) -> int:
    """Bytes of the product-basis Lanczos for ``levels`` levels of ``model``; ``SizeError``
    naming the estimate and ``limit`` when it would not fit (nothing is allocated)."""
    size = product_size(model)
    itemsize = np.dtype(compile_operator(model).dtype).itemsize
    levels = min(levels, size)
    need = product_lanczos_bytes(size, levels, vectors, itemsize)
    if need > limit:
        raise SizeError(f"{levels:,} level(s) of the {size:,} states of this sector need about "
                        f"{need / 2**30:.1f} GiB in the product basis (wave functions of "
                        f"{size * itemsize / 2**30:.2f} GiB each, and the diagonal), more than "
                        f"the {limit / 2**30:.1f} GiB available; use a smaller cluster"
                        + (" or fewer levels" if levels > 1 or vectors else ""))
    return need


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
    if method == "product":
        raise ModelError("method \"product\" is chosen before the basis is built "
                         "(lowfold.solve.exact.spectrum)")
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
