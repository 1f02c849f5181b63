"""Sparse Hamiltonians: compiled operator strings, CSR build and matrix-free operator.

:func:`compile_operator` turns the terms of a model into *strings*: a coefficient times a
product of single-slot factors, with factors sorted by slot (Jordan-Wigner reordering sign
applied), factors on the same slot multiplied together, and equal strings summed, so that
sums such as ``X X + Y Y`` cancel their non-conserving parts exactly.  Conservation of the
sector's quantities is checked per term before anything is built.

The numba kernels in ``lowfold._kernels.operators`` apply the strings to basis states.
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass
from itertools import product as cartesian

import numba
import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

from ._kernels import operators as kernels
from .basis import Basis, sector_basis
from .errors import ModelError, SizeError
from .model import Model
from .sites import SlotOperator

PARALLEL_MIN_STATES = 20_000   # below this, thread start-up costs more than it saves

__all__ = ["kernel_threads", "CompiledOperator", "compile_operator", "build_basis", "hamiltonian_matrix",
           "hamiltonian_operator", "check_hermitian", "check_model_hermitian", "available_memory"]


@dataclass(frozen=True, eq=False)
class CompiledOperator:
    """An operator as arrays of strings, ready for the kernels (see the kernel module)."""

    coef: np.ndarray
    ptr: np.ndarray
    slot: np.ndarray
    table: np.ndarray
    odd: np.ndarray
    table_new: np.ndarray
    table_amp: np.ndarray
    radix: int
    powers: np.ndarray
    diagonal_strings: np.ndarray
    offdiagonal_strings: np.ndarray
    delta_particles: np.ndarray
    delta_twice_sz: np.ndarray

    @property
    def conserves_sz(self) -> bool:
        return not np.any(self.delta_twice_sz)

    @property
    def conserves_particles(self) -> bool:
        return not np.any(self.delta_particles)

    @property
    def n_strings(self) -> int:
        return int(self.coef.shape[0])

    @property
    def is_diagonal(self) -> bool:
        return self.offdiagonal_strings.size == 0

    def arrays(self) -> tuple:
        """The string arrays in the order the kernels take them (after the string list)."""
        return (self.ptr, self.slot, self.table, self.odd, self.table_new, self.table_amp,
                self.coef, self.radix, self.powers)


@contextlib.contextmanager
def kernel_threads(size: int):
    """Run the parallel numba kernels on one thread for inputs of fewer than
    ``PARALLEL_MIN_STATES`` states, where waking the thread pool dominates."""
    if size >= PARALLEL_MIN_STATES:
        yield
        return
    previous = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(previous)


def _canonical(factors):
    """Sort ``[(slot, SlotOperator), ...]`` by slot (stable), with the sign of reordering
    fermionic factors, and multiply factors on the same slot.  Returns (sign, factors) or
    ``(0, ())`` if the product vanishes."""
    items = list(factors)
    sign = 1
    for a in range(1, len(items)):          # insertion sort, counting odd-odd swaps
        b = a
        while b > 0 and items[b - 1][0] > items[b][0]:
            if items[b - 1][1].fermionic and items[b][1].fermionic:
                sign = -sign
            items[b - 1], items[b] = items[b], items[b - 1]
            b -= 1
    merged = []
    for slot, op in items:
        if merged and merged[-1][0] == slot:
            op = merged[-1][1].compose(op)
            merged[-1] = (slot, op)
        else:
            merged.append((slot, op))
    if any(op.is_zero() for _, op in merged):
        return 0, ()
    return sign, tuple(merged)


def _term_strings(model: Model, label: str, products) -> dict:
    """Collected strings ``{factors: coefficient}`` of one term."""
    site, n_sites = model.site, model.n_sites
    strings: dict = {}
    for coef, factors in products:
        expanded = [site.operator(name) for name, _ in factors]
        for choice in cartesian(*expanded):
            c = complex(coef)
            slot_factors = []
            for (name, site_index), (mono_coef, mono_factors) in zip(factors, choice):
                c *= mono_coef
                slot_factors += [(site_index + mode * n_sites, op) for mode, op in mono_factors]
            sign, key = _canonical(slot_factors)
            if sign:
                strings[key] = strings.get(key, 0) + sign * c
    scale = max((abs(c) for c in strings.values()), default=0.0)
    return {k: c for k, c in strings.items() if abs(c) > 1e-14 * scale}


def _deltas(model: Model, key) -> tuple[int, int]:
    """Changes of particle number and of 2 S^z made by one string."""
    site, n_sites = model.site, model.n_sites
    d_particles = sum(op.shift * site.slot_particles(slot // n_sites) for slot, op in key)
    d_twice_sz = sum(op.shift * site.slot_twice_sz(slot // n_sites) for slot, op in key)
    return d_particles, d_twice_sz


def _check_conservation(model: Model, label: str, strings: dict) -> None:
    sector = model.sector
    for key in strings:
        d_particles, d_twice_sz = _deltas(model, key)
        where = f"{model.source}: {model.term_key(label)}"
        if sector.particles is not None and d_particles != 0:
            raise ModelError(f"{where} changes the particle number, but the sector fixes it; "
                             "remove sector.particles or the term")
        if sector.sz is not None and d_twice_sz != 0:
            raise ModelError(f"{where} changes S^z, but the sector fixes it; remove sector.sz "
                             "or the term")


def compile_operator(model: Model, labels=None, *, check_sector: bool = True) -> CompiledOperator:
    """Compile the terms named by ``labels`` (default: all) into kernel arrays.

    The sector's conservation laws are checked on the collected strings, so terms that
    conserve only together (``X X`` and ``Y Y`` in an S^z sector) are accepted."""
    collected: dict = {}
    sources: dict = {}
    for label, products in model.products(labels):
        for key, c in _term_strings(model, label, products).items():
            collected[key] = collected.get(key, 0) + c
            sources.setdefault(key, label)
    scale = max((abs(c) for c in collected.values()), default=0.0)
    collected = {k: c for k, c in collected.items() if abs(c) > 1e-14 * scale}
    if check_sector:
        for key in collected:
            _check_conservation(model, sources[key], {key: collected[key]})
    deltas = np.array([_deltas(model, key) for key in collected], dtype=np.int64).reshape(-1, 2)
    return _to_arrays(collected, model.site.radix, model.n_sites * model.site.modes, deltas)


def _to_arrays(strings: dict, radix: int, n_slots: int, deltas: np.ndarray) -> CompiledOperator:
    tables: dict[SlotOperator, int] = {}
    ptr, slots, table_ids, odd, coef, is_diag = [0], [], [], [], [], []
    for key, c in strings.items():
        for slot, op in key:
            slots.append(slot)
            table_ids.append(tables.setdefault(op, len(tables)))
            odd.append(op.fermionic)
        ptr.append(len(slots))
        coef.append(c)
        is_diag.append(all(op.shift == 0 for _, op in key))
    ordered = sorted(tables, key=tables.get)
    table_new = np.full((max(len(ordered), 1), radix), -1, dtype=np.int64)
    table_amp = np.zeros((max(len(ordered), 1), radix), dtype=complex)
    for t, op in enumerate(ordered):
        table_new[t], table_amp[t] = op.table()
    coef = np.array(coef, dtype=complex) if coef else np.zeros(1, dtype=complex)
    real = not (np.any(coef.imag != 0) or np.any(table_amp.imag != 0))
    dtype = np.float64 if real else np.complex128
    is_diag = np.array(is_diag, dtype=bool)
    return CompiledOperator(
        coef=np.ascontiguousarray(coef.real if real else coef, dtype=dtype),
        ptr=np.array(ptr if len(ptr) > 1 else [0, 0], dtype=np.int64),
        slot=np.array(slots, dtype=np.int64),
        table=np.array(table_ids, dtype=np.int64),
        odd=np.array(odd, dtype=np.bool_),
        table_new=table_new,
        table_amp=np.ascontiguousarray(table_amp.real if real else table_amp, dtype=dtype),
        radix=radix,
        powers=np.array([radix**k for k in range(n_slots)], dtype=np.int64),
        diagonal_strings=np.flatnonzero(is_diag).astype(np.int64) if strings else np.zeros(0, np.int64),
        offdiagonal_strings=np.flatnonzero(~is_diag).astype(np.int64) if strings else np.zeros(0, np.int64),
        delta_particles=np.ascontiguousarray(deltas[:, 0]),
        delta_twice_sz=np.ascontiguousarray(deltas[:, 1]),
    )


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


def build_basis(model: Model, *, max_states: int | None = None) -> Basis:
    """The basis of the model's sector."""
    if max_states is None:
        max_states = available_memory() // 64        # states + a few vectors, at the least
    return sector_basis(model.site, model.n_sites, model.sector, max_states=max_states)


def _diagonal(op: CompiledOperator, basis: Basis) -> np.ndarray:
    with kernel_threads(basis.size):
        return kernels.diagonal(basis.states, op.diagonal_strings, *op.arrays())


def count_nonzeros(op: CompiledOperator, basis: Basis) -> int:
    """Upper bound of the stored entries of the CSR matrix (exact unless entries merge)."""
    with kernel_threads(basis.size):
        images = kernels.count_images(basis.states, op.offdiagonal_strings, *op.arrays())
    return int(images.sum()) + basis.size


def hamiltonian_matrix(model: Model, basis: Basis | None = None, labels=None, *,
                       memory_limit: int | None = None, check: bool = True) -> sp.csr_matrix:
    """Sparse CSR matrix of the terms ``labels`` (default: all) in ``basis``.

    Raises ``SizeError`` if the matrix would need more than ``memory_limit`` bytes
    (default: 80 % of the available memory) and ``ModelError`` if it is not Hermitian.
    """
    basis = build_basis(model) if basis is None else basis
    op = compile_operator(model, labels)
    matrix = operator_matrix(op, basis, memory_limit=memory_limit)
    if check:
        check_model_hermitian(model, basis, matrix, labels)
    return matrix


def operator_matrix(op: CompiledOperator, basis: Basis, *, memory_limit: int | None = None) -> sp.csr_matrix:
    """CSR matrix of a compiled operator on a basis closed under it."""
    diag = _diagonal(op, basis)
    with kernel_threads(basis.size):
        counts = kernels.count_images(basis.states, op.offdiagonal_strings, *op.arrays())
    counts += diag != 0
    nnz = int(counts.sum())
    wide = nnz >= 2**31 or basis.size >= 2**31
    index_dtype = np.int64 if wide else np.int32
    itemsize = np.dtype(op.coef.dtype).itemsize + np.dtype(index_dtype).itemsize
    need = nnz * itemsize + 8 * basis.size
    limit = int(0.8 * available_memory()) if memory_limit is None else memory_limit
    if need > limit:
        raise SizeError(f"the Hamiltonian has {nnz:,} non-zeros on {basis.size:,} states "
                        f"({need / 2**30:.1f} GiB), more than the {limit / 2**30:.1f} GiB allowed")
    indptr = np.zeros(basis.size + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    indices = np.empty(nnz, dtype=index_dtype)
    data = np.empty(nnz, dtype=op.coef.dtype)
    with kernel_threads(basis.size):
        unique, missing = kernels.fill_rows(basis.states, diag, op.offdiagonal_strings,
                                            *op.arrays(), *basis.lookup_arrays, indptr, indices,
                                            data)
    if missing:
        raise ModelError("the operator leads out of the basis (it does not conserve the sector)")
    if int(unique.sum()) != nnz:
        indptr = kernels.compact_rows(indptr, unique, indices, data)
        nnz = int(indptr[-1])
        indices, data = indices[:nnz].copy(), data[:nnz].copy()
    matrix = sp.csr_matrix((data, indices, indptr.astype(index_dtype)),
                           shape=(basis.size, basis.size))
    matrix.has_sorted_indices = True
    return matrix


def _what(model: Model, labels) -> str:
    return "the Hamiltonian" if labels is None else f"the terms {', '.join(labels)}"


def check_model_hermitian(model: Model, basis: Basis, matrix, labels=None) -> None:
    """``check_hermitian`` for a model's operator; on failure, name the first term that is
    not Hermitian by itself (the usual culprit: a product without ``conjugate = true``)."""
    try:
        check_hermitian(matrix, what=_what(model, labels))
    except ModelError as exc:
        for label in (labels or [t.label for t in model.terms]):
            alone = operator_linear(compile_operator(model, [label]), basis)
            try:
                check_hermitian(alone)
            except ModelError:
                raise ModelError(f"{model.source}: {model.term_key(label)} is not Hermitian; add "
                                 "conjugate = true or its Hermitian partner") from None
        raise ModelError(f"{model.source}: {exc}") from None


def check_hermitian(matrix, *, what: str = "the Hamiltonian", rtol: float = 1e-10,
                    rng: np.random.Generator | None = None) -> None:
    """Raise ``ModelError`` unless ``matrix`` (sparse or LinearOperator) is Hermitian.

    Compares ``<u, A v>`` with ``<A u, v>`` for random vectors: exact for small matrices
    (a full comparison), and a random test, wrong with probability zero, for large ones.
    """
    if sp.issparse(matrix) and matrix.shape[0] <= 4000:
        diff = abs(matrix - matrix.conj().T)
        bad = diff.max() if diff.nnz else 0.0
        scale = abs(matrix).max() if matrix.nnz else 0.0
        if bad > rtol * max(scale, 1e-300):
            raise ModelError(f"{what} is not Hermitian (largest |H - H^dagger| = {bad:.3g}); "
                             "add conjugate = true to product terms or their Hermitian partners")
        return
    rng = np.random.default_rng(20240601) if rng is None else rng
    u = rng.standard_normal(matrix.shape[0])
    v = rng.standard_normal(matrix.shape[0])
    av, au = matrix @ v, matrix @ u
    left, right = np.vdot(u, av), np.vdot(au, v)
    scale = np.linalg.norm(au) * np.linalg.norm(v) + np.linalg.norm(av) * np.linalg.norm(u)
    if abs(left - right) > rtol * max(scale, 1e-300):
        raise ModelError(f"{what} is not Hermitian; add conjugate = true to product terms or "
                         "their Hermitian partners")


def hamiltonian_operator(model: Model, basis: Basis | None = None, labels=None, *,
                         check: bool = True) -> LinearOperator:
    """Matrix-free ``LinearOperator`` of the terms ``labels`` (default: all): nothing but
    the basis and the diagonal is stored."""
    basis = build_basis(model) if basis is None else basis
    op = compile_operator(model, labels)
    linear = operator_linear(op, basis)
    if check:
        check_model_hermitian(model, basis, linear, labels)
    return linear


def operator_linear(op: CompiledOperator, basis: Basis) -> LinearOperator:
    diag = _diagonal(op, basis)
    lookup = basis.lookup_arrays

    def matvec(x):
        x = np.ascontiguousarray(np.ravel(x))
        dtype = np.result_type(op.coef.dtype, x.dtype)
        y = np.empty(basis.size, dtype=dtype)
        with kernel_threads(basis.size):
            kernels.matvec(basis.states, diag.astype(dtype, copy=False),
                           op.offdiagonal_strings, *op.arrays(), *lookup,
                           x.astype(dtype, copy=False), y)
        return y

    return LinearOperator((basis.size, basis.size), matvec=matvec, rmatvec=matvec,
                          dtype=op.coef.dtype)
