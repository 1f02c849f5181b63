"""A compiled operator on a basis: CSR assembly and the matrix-free product.

Three kernel routes apply the strings to the basis states; ``route="auto"`` takes the
fastest that applies (the route is a detail of this layer: the choice between dense, CSR
and matrix-free belongs to ``lowfold.solve``):

* ``"split"`` -- two-species bases (electrons at fixed N_up, N_dn): the species-split
  product of :mod:`lowfold.build.species`, plus the strings that mix the species through the
  mask kernels (matrix-free only; CSR with mixed strings takes the mask route).
* ``"mask"`` -- radix-2 sites (spin 1/2, fermions, electrons): bit-mask strings and
  chunk-table ranking.
* ``"general"`` -- any radix (the reference path; spins S > 1/2, bosons).

Kernels that build matrices write row ``i`` from the images ``O|state_i>``, so the stored
entry ``(i, j)`` is ``conj(<j|O|i>)``: the operator itself when it is Hermitian.
"""

from __future__ import annotations

import os

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

from lowfold._kernels import basis as basis_kernels
from lowfold._kernels import operators as kernels
from lowfold.build.basis import Basis
from lowfold.build.compiled import CompiledOperator, kernel_threads
from lowfold.build.species import SpeciesSplit, is_two_species, species_split, species_strings
from lowfold.errors import ModelError, SizeError

__all__ = ["ROUTES", "available_memory", "count_nonzeros", "operator_matrix",
           "operator_linear"]

ROUTES = ("auto", "split", "mask", "general")


def available_memory() -> int:
    """Bytes of memory available to this process (MemAvailable, else physical memory)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")


def _masks(op: CompiledOperator, strings: np.ndarray):
    """Mask form of ``strings`` of ``op`` (``None`` unless the sites have radix 2)."""
    if op.radix != 2:
        return None
    return kernels.string_masks(strings, op.ptr, op.slot, op.table, op.odd, op.table_new,
                                op.table_amp, op.coef)


def _fast_lookup(basis: Basis) -> tuple:
    """``(params, table_a, table_b, weights, sorted_states)`` for ``lookup_fast``."""
    params = basis.params
    tables = []
    for n_bits, total in ((params[2], params[3]), (params[4], params[5])):
        usable = (params[1] == 2 and params[0] in (basis_kernels.FIXED_SUM,
                                                   basis_kernels.TWO_SPECIES) and n_bits > 0)
        tables.append(basis_kernels.rank_tables(int(n_bits), int(total)) if usable
                      else np.zeros((1, 1, 1), dtype=np.int64))
    return (params, tables[0], tables[1], basis.weights, basis.states)


def _route(route: str, op: CompiledOperator, basis: Basis, *, csr: bool):
    """The route taken and its prepared data (a ``SpeciesSplit``, masks or ``None``)."""
    if route not in ROUTES:
        raise ModelError(f"unknown route {route!r}; choose from {', '.join(ROUTES)}")
    two_species = is_two_species(basis)
    if csr and two_species and route == "auto":
        two_species = species_strings(op, int(basis.params[2]))["mixed"].size == 0
    if route == "split" or (route == "auto" and two_species):
        split = species_split(op, basis)
        mixed_masks = None if split is None else _masks(op, split.mixed)
        if split is not None and mixed_masks is not None and not (csr and split.mixed.size):
            return "split", (split, mixed_masks)
        if route == "split":
            raise ModelError("the species split needs a two-species basis"
                             + (" and no strings mixing the species" if csr else ""))
    if route in ("auto", "mask"):
        masks = _masks(op, op.offdiagonal_strings)
        if masks is not None:
            return "mask", masks
        if route == "mask":
            raise ModelError("the mask route needs radix-2 sites")
    return "general", None


def _image_counts(op: CompiledOperator, basis: Basis, chosen: str, masks) -> np.ndarray:
    """Off-diagonal images of each basis state (the mask or general route)."""
    with kernel_threads(basis.size):
        if chosen == "mask":
            return kernels.count_images_mask(basis.states, *masks)
        return kernels.count_images(basis.states, op.offdiagonal_strings, *op.arrays())


def count_nonzeros(op: CompiledOperator, basis: Basis, *, route: str = "auto") -> int:
    """Upper bound of the stored entries of the CSR matrix (exact unless entries merge)."""
    chosen, prepared = _route(route, op, basis, csr=True)
    if chosen == "split":
        return prepared[0].count_nonzeros(basis.size)
    return int(_image_counts(op, basis, chosen, prepared).sum()) + basis.size


def _reserve(nnz: int, basis: Basis, dtype, memory_limit: int | None):
    """Index dtype of a CSR matrix with ``nnz`` entries; ``SizeError`` if it will not fit."""
    wide = nnz >= 2**31 or basis.size >= 2**31
    index_dtype = np.int64 if wide else np.int32
    itemsize = np.dtype(dtype).itemsize + np.dtype(index_dtype).itemsize
    need = nnz * itemsize + 8 * basis.size
    limit = int(0.8 * available_memory()) if memory_limit is None else memory_limit
    if need > limit:
        raise SizeError(f"the Hamiltonian has {nnz:,} non-zeros on {basis.size:,} states "
                        f"({need / 2**30:.1f} GiB), more than the {limit / 2**30:.1f} GiB allowed")
    return index_dtype


def _allocate(counts: np.ndarray, basis: Basis, dtype, memory_limit):
    """``(indptr, indices, data, index_dtype)`` for rows of ``counts`` entries."""
    indptr = np.zeros(basis.size + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    nnz = int(indptr[-1])
    index_dtype = _reserve(nnz, basis, dtype, memory_limit)
    return indptr, np.empty(nnz, dtype=index_dtype), np.empty(nnz, dtype=dtype), index_dtype


def operator_matrix(op: CompiledOperator, basis: Basis, *, memory_limit: int | None = None,
                    route: str = "auto") -> sp.csr_matrix:
    """CSR matrix of a compiled operator on a basis closed under it.

    ``SizeError`` if it would need more than ``memory_limit`` bytes (default: 80 % of the
    available memory); ``ModelError`` if the operator leads out of the basis."""
    chosen, prepared = _route(route, op, basis, csr=True)
    if chosen == "split":
        return _split_matrix(prepared[0], basis, op.dtype, memory_limit)
    diag = op.diagonal(basis.states)
    counts = _image_counts(op, basis, chosen, prepared)
    counts += diag != 0
    indptr, indices, data, index_dtype = _allocate(counts, basis, op.dtype, memory_limit)
    del counts
    nnz = indices.size
    with kernel_threads(basis.size):
        if chosen == "mask":
            unique, missing = kernels.fill_rows_mask(basis.states, diag, *prepared,
                                                     *_fast_lookup(basis), indptr, indices,
                                                     data)
        else:
            unique, missing = kernels.fill_rows(basis.states, diag, op.offdiagonal_strings,
                                                *op.arrays(), *basis.lookup_arrays, indptr,
                                                indices, data)
    if missing:
        raise ModelError("the operator leads out of the basis (it does not conserve the sector)")
    if int(unique.sum()) != nnz:
        indptr = kernels.compact_rows(indptr, unique, indices, data)
        nnz = int(indptr[-1])
        indices, data = indices[:nnz].copy(), data[:nnz].copy()
    return _csr(data, indices, indptr.astype(index_dtype, copy=False), basis.size)


def _csr(data, indices, indptr, n) -> sp.csr_matrix:
    matrix = sp.csr_matrix((data, indices, indptr), shape=(n, n), copy=False)
    matrix.has_sorted_indices = True
    return matrix


def _split_matrix(split: SpeciesSplit, basis: Basis, dtype, memory_limit) -> sp.csr_matrix:
    indptr, indices, data, index_dtype = _allocate(split.row_counts(), basis, dtype,
                                                   memory_limit)
    split.fill(indptr, indices, data)
    return _csr(data, indices, indptr.astype(index_dtype, copy=False), basis.size)


def operator_linear(op: CompiledOperator, basis: Basis, *, route: str = "auto") -> LinearOperator:
    """Matrix-free ``LinearOperator`` of a compiled operator (Hermitian: ``rmatvec`` is
    ``matvec``): only the basis, the diagonal and, on the split route, the small species
    matrices are stored."""
    chosen, prepared = _route(route, op, basis, csr=False)
    if chosen == "split":
        split, mixed_masks = prepared
        diag = split.diag
        lookup = _fast_lookup(basis) if split.mixed.size else None
    else:
        diag = op.diagonal(basis.states)
        lookup = _fast_lookup(basis) if chosen == "mask" else basis.lookup_arrays

    def matvec(x):
        x = np.ascontiguousarray(np.ravel(x))
        dtype = np.result_type(op.dtype, x.dtype)
        x = x.astype(dtype, copy=False)
        y = np.empty(basis.size, dtype=dtype)
        d = diag.astype(dtype, copy=False)
        if chosen == "split":
            split.matvec(d, x, y)
        with kernel_threads(basis.size):
            if chosen == "split" and split.mixed.size:
                kernels.matvec_mask(basis.states, d, *mixed_masks, *lookup, x, y, True)
            elif chosen == "mask":
                kernels.matvec_mask(basis.states, d, *prepared, *lookup, x, y, False)
            elif chosen == "general":
                kernels.matvec(basis.states, d, op.offdiagonal_strings, *op.arrays(), *lookup,
                               x, y)
        return y

    return LinearOperator((basis.size, basis.size), matvec=matvec, rmatvec=matvec,
                          dtype=op.dtype)
