"""Sparse Hamiltonians: compiled operator strings, CSR build and matrix-free operator.

:func:`compile_operator` turns the terms of a model into *strings*: a coefficient times a
product of single-slot factors, with factors sorted by slot (Jordan-Wigner reordering sign
applied), factors on the same slot multiplied together, and equal strings summed, so that
sums such as ``X X + Y Y`` cancel their non-conserving parts exactly.  Conservation of the
sector's quantities is checked per term before anything is built.

The numba kernels in ``lowfold._kernels.operators`` apply the strings to basis states.
Three routes build the CSR matrix and the matrix-free product; ``route="auto"`` takes the
fastest that applies:

* ``"split"`` -- two-species bases (electrons at fixed N_up, N_dn): strings acting on one
  species only become small matrices ``T_a`` (up) and ``T_b`` (down) on the species bases,
  ``H = diag + 1 (x) T_a + T_b (x) 1`` (``lowfold._kernels.species``), plus the strings that
  mix the species through the mask kernels (matrix-free only; CSR with mixed strings takes
  the mask route).  Jordan-Wigner signs: all up slots come before the down slots, so an
  up-only string never passes a down electron, and a down-only string passes all N_up up
  electrons once per fermionic factor; ``T_b`` is built on states that carry N_up up
  electrons, so that constant sign is in it.
* ``"mask"`` -- radix-2 sites (spin 1/2, fermions, electrons): bit-mask strings and
  chunk-table ranking.
* ``"general"`` -- any radix (the reference path; spins S > 1/2, bosons).
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

from lowfold._kernels import basis as basis_kernels
from lowfold._kernels import operators as kernels
from lowfold._kernels import species as species_kernels
from lowfold.build.basis import Basis, fixed_sum_basis, sector_basis
from lowfold.errors import ModelError, SizeError
from lowfold.model.model import Model
from lowfold.model.sites import SlotOperator

PARALLEL_MIN_STATES = 20_000   # below this, thread start-up costs more than it saves

__all__ = ["kernel_threads", "CompiledOperator", "compile_operator", "build_basis", "hamiltonian_matrix",
           "hamiltonian_operator", "check_hermitian", "check_model_hermitian", "available_memory",
           "operator_matrix", "operator_linear", "count_nonzeros", "SpeciesSplit",
           "species_split", "prefers_matrix_free", "ROUTES"]

ROUTES = ("auto", "split", "mask", "general")


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


@dataclass(frozen=True, eq=False)
class SpeciesSplit:
    """The one-species parts of an operator on a two-species basis (see the module doc).

    ``t_a`` (``size_a`` square) and ``t_b`` (``size_b`` square): CSR matrices with int64
    indices, sorted rows, no diagonal; ``diag``: the full diagonal (with any diagonal part
    of the species matrices); ``mixed``: off-diagonal string indices acting on both species.
    """

    t_a: sp.csr_matrix
    t_b: sp.csr_matrix
    diag: np.ndarray
    mixed: np.ndarray

    @property
    def size_a(self) -> int:
        return int(self.t_a.shape[0])

    def csr_arrays(self) -> tuple:
        """``(a_ptr, a_idx, a_val, b_ptr, b_idx, b_val)`` as the species kernels take them."""
        return (self.t_a.indptr, self.t_a.indices, self.t_a.data,
                self.t_b.indptr, self.t_b.indices, self.t_b.data)


def _species_matrix(op: CompiledOperator, strings: np.ndarray, sub: Basis, shift: int,
                    other: int) -> sp.csr_matrix:
    """``T[u, c] = conj(<c|O|u>)`` of one-species ``strings`` on the species basis ``sub``,
    whose states sit at bit ``shift`` beside the fixed other-species bits ``other``."""
    full = (sub.states << shift) + other
    with kernel_threads(sub.size):
        rows, new, amp = kernels.images(full, strings, *op.arrays(), False)
    mask = (np.int64(1) << sub.n_slots) - 1
    cols = sub.index((new >> shift) & mask)
    if np.any(cols < 0) or np.any((new & ~(mask << shift)) != other):
        raise ModelError("the operator leads out of the basis (it does not conserve the sector)")
    t = sp.coo_matrix((np.conj(amp), (rows, cols)), shape=(sub.size, sub.size)).tocsr()
    t.sum_duplicates()
    t.eliminate_zeros()
    t.sort_indices()
    return t


def _without_diagonal(t: sp.csr_matrix) -> tuple[sp.csr_matrix, np.ndarray]:
    d = t.diagonal()
    if np.any(d):
        t = (t - sp.diags(d, format="csr")).tocsr()
        t.eliminate_zeros()
        t.sort_indices()
    t = sp.csr_matrix((t.data, t.indices.astype(np.int64), t.indptr.astype(np.int64)),
                      shape=t.shape)
    t.has_sorted_indices = True
    return t, d


def _species_strings(op: CompiledOperator, n_a: int) -> dict:
    """Off-diagonal string indices acting on species a only (slots below ``n_a``), on
    species b only, and on both (``"mixed"``)."""
    strings = {"a": [], "b": [], "mixed": []}
    for k in op.offdiagonal_strings:
        slots = op.slot[op.ptr[k]:op.ptr[k + 1]]
        side = "a" if np.all(slots < n_a) else "b" if np.all(slots >= n_a) else "mixed"
        strings[side].append(k)
    return {key: np.array(v, dtype=np.int64) for key, v in strings.items()}


def species_split(op: CompiledOperator, basis: Basis) -> SpeciesSplit | None:
    """The species split of ``op`` on a two-species ``basis`` (``None`` for other bases)."""
    params = [int(v) for v in basis.params]
    if params[0] != basis_kernels.TWO_SPECIES:
        return None
    n_a, total_a, n_b, total_b = params[2], params[3], params[4], params[5]
    sub_a = fixed_sum_basis(n_a, 2, total_a)
    sub_b = fixed_sum_basis(n_b, 2, total_b)
    as_array = _species_strings(op, n_a)
    # species-a strings see one fixed b part; species-b strings see N_a particles below them
    t_a, d_a = _without_diagonal(_species_matrix(op, as_array["a"], sub_a, 0,
                                                 int(sub_b.states[0]) << n_a))
    t_b, d_b = _without_diagonal(_species_matrix(op, as_array["b"], sub_b, n_a,
                                                 int(sub_a.states[0])))
    diag = _diagonal(op, basis)
    if np.any(d_a) or np.any(d_b):
        grid = diag.reshape(sub_b.size, sub_a.size)
        grid += d_a[None, :].astype(diag.dtype) + d_b[:, None].astype(diag.dtype)
    return SpeciesSplit(t_a, t_b, diag, as_array["mixed"])


def prefers_matrix_free(op: CompiledOperator, basis: Basis) -> bool:
    """Whether the matrix-free product is the better choice at any size: a two-species
    basis whose strings all act on one species (the split product is about as fast as a
    CSR product and stores only the diagonal and the small species matrices)."""
    if basis.params[0] != basis_kernels.TWO_SPECIES:
        return False
    return _species_strings(op, int(basis.params[2]))["mixed"].size == 0


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
    two_species = basis.params[0] == basis_kernels.TWO_SPECIES
    if csr and two_species and route == "auto":
        two_species = _species_strings(op, int(basis.params[2]))["mixed"].size == 0
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


def count_nonzeros(op: CompiledOperator, basis: Basis, *, route: str = "auto") -> int:
    """Upper bound of the stored entries of the CSR matrix (exact unless entries merge)."""
    chosen, prepared = _route(route, op, basis, csr=True)
    with kernel_threads(basis.size):
        if chosen == "split":
            split = prepared[0]
            size_b = basis.size // split.size_a
            return (split.t_a.nnz * size_b + split.t_b.nnz * split.size_a
                    + int(np.count_nonzero(split.diag)))
        if chosen == "mask":
            images = kernels.count_images_mask(basis.states, *prepared)
        else:
            images = kernels.count_images(basis.states, op.offdiagonal_strings, *op.arrays())
    return int(images.sum()) + basis.size


def hamiltonian_matrix(model: Model, basis: Basis | None = None, labels=None, *,
                       memory_limit: int | None = None, check: bool = True,
                       route: str = "auto") -> sp.csr_matrix:
    """Sparse CSR matrix of the terms ``labels`` (default: all) in ``basis``.

    Raises ``SizeError`` if the matrix would need more than ``memory_limit`` bytes
    (default: 80 % of the available memory) and ``ModelError`` if it is not Hermitian.
    ``route``: ``"auto"``, ``"split"``, ``"mask"`` or ``"general"`` (module docstring).
    """
    basis = build_basis(model) if basis is None else basis
    op = compile_operator(model, labels)
    matrix = operator_matrix(op, basis, memory_limit=memory_limit, route=route)
    if check:
        check_model_hermitian(model, basis, matrix, labels)
    return matrix


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


def operator_matrix(op: CompiledOperator, basis: Basis, *, memory_limit: int | None = None,
                    route: str = "auto") -> sp.csr_matrix:
    """CSR matrix of a compiled operator on a basis closed under it."""
    chosen, prepared = _route(route, op, basis, csr=True)
    if chosen == "split":
        return _split_matrix(prepared[0], basis, op.coef.dtype, memory_limit)
    diag = _diagonal(op, basis)
    with kernel_threads(basis.size):
        if chosen == "mask":
            counts = kernels.count_images_mask(basis.states, *prepared)
        else:
            counts = kernels.count_images(basis.states, op.offdiagonal_strings, *op.arrays())
    counts += diag != 0
    nnz = int(counts.sum())
    index_dtype = _reserve(nnz, basis, op.coef.dtype, memory_limit)
    indptr = np.zeros(basis.size + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    del counts
    indices = np.empty(nnz, dtype=index_dtype)
    data = np.empty(nnz, dtype=op.coef.dtype)
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
    with kernel_threads(basis.size):
        counts = species_kernels.split_counts(split.diag, split.t_a.indptr, split.t_b.indptr,
                                              split.size_a)
    indptr = np.zeros(basis.size + 1, dtype=np.int64)
    np.cumsum(counts, out=indptr[1:])
    del counts
    nnz = int(indptr[-1])
    index_dtype = _reserve(nnz, basis, dtype, memory_limit)
    indices = np.empty(nnz, dtype=index_dtype)
    data = np.empty(nnz, dtype=dtype)
    arrays = (split.t_a.indptr, split.t_a.indices, split.t_a.data.astype(dtype, copy=False),
              split.t_b.indptr, split.t_b.indices, split.t_b.data.astype(dtype, copy=False))
    with kernel_threads(basis.size):
        species_kernels.split_fill(split.diag.astype(dtype, copy=False), *arrays, split.size_a,
                                   indptr, indices, data)
    return _csr(data, indices, indptr.astype(index_dtype, copy=False), basis.size)


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
                         check: bool = True, route: str = "auto") -> LinearOperator:
    """Matrix-free ``LinearOperator`` of the terms ``labels`` (default: all): nothing but
    the basis and the diagonal is stored (and, on two-species bases, the small species
    matrices).  ``route``: ``"auto"``, ``"split"``, ``"mask"`` or ``"general"``."""
    basis = build_basis(model) if basis is None else basis
    op = compile_operator(model, labels)
    linear = operator_linear(op, basis, route=route)
    if check:
        check_model_hermitian(model, basis, linear, labels)
    return linear


def operator_linear(op: CompiledOperator, basis: Basis, *, route: str = "auto") -> LinearOperator:
    """Matrix-free ``LinearOperator`` of a compiled operator (Hermitian: ``rmatvec`` is
    ``matvec``)."""
    chosen, prepared = _route(route, op, basis, csr=False)
    if chosen == "split":
        split, mixed_masks = prepared
        diag = split.diag
        lookup = _fast_lookup(basis) if split.mixed.size else None
    else:
        diag = _diagonal(op, basis)
        lookup = _fast_lookup(basis) if chosen == "mask" else basis.lookup_arrays

    def matvec(x):
        x = np.ascontiguousarray(np.ravel(x))
        dtype = np.result_type(op.coef.dtype, x.dtype)
        x = x.astype(dtype, copy=False)
        y = np.empty(basis.size, dtype=dtype)
        d = diag.astype(dtype, copy=False)
        with kernel_threads(basis.size):
            if chosen == "split":
                a_ptr, a_idx, a_val, b_ptr, b_idx, b_val = split.csr_arrays()
                species_kernels.split_matvec(d, a_ptr, a_idx, a_val.astype(dtype, copy=False),
                                             b_ptr, b_idx, b_val.astype(dtype, copy=False),
                                             split.size_a, x, y)
                if split.mixed.size:
                    kernels.matvec_mask(basis.states, d, *mixed_masks, *lookup, x, y, True)
            elif chosen == "mask":
                kernels.matvec_mask(basis.states, d, *prepared, *lookup, x, y, False)
            else:
                kernels.matvec(basis.states, d, op.offdiagonal_strings, *op.arrays(), *lookup,
                               x, y)
        return y

    return LinearOperator((basis.size, basis.size), matvec=matvec, rmatvec=matvec,
                          dtype=op.coef.dtype)
