"""The species-split product of an operator on a two-species basis.

Electrons at fixed N_up, N_dn have the basis ``(up part) + (down part) << n_up_slots``, in
the order ``index = index_b * size_a + index_a`` (species a: the low slots, spin up).
Strings acting on one species only become small matrices ``T_a`` (up) and ``T_b`` (down) on
the species bases, and

    H = diag + 1 (x) T_a + T_b (x) 1  (+ the strings that mix the species),

applied or assembled by the kernels of ``lowfold._kernels.species``.  Jordan-Wigner signs:
all up slots come before the down slots, so an up-only string never passes a down electron,
and a down-only string passes all N_up up electrons once per fermionic factor; ``T_b`` is
built on states that carry N_up up electrons, so that constant sign is in it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from lowfold._kernels import basis as basis_kernels
from lowfold._kernels import species as species_kernels
from lowfold.build.basis import Basis, fixed_sum_basis
from lowfold.build.compiled import CompiledOperator, kernel_threads
from lowfold.errors import ModelError

__all__ = ["SpeciesSplit", "species_split", "species_strings", "prefers_matrix_free",
           "is_two_species"]


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

    def csr_arrays(self, dtype=None) -> tuple:
        """``(a_ptr, a_idx, a_val, b_ptr, b_idx, b_val)`` as the species kernels take them
        (values cast to ``dtype`` if given)."""
        a_val, b_val = self.t_a.data, self.t_b.data
        if dtype is not None:
            a_val, b_val = a_val.astype(dtype, copy=False), b_val.astype(dtype, copy=False)
        return (self.t_a.indptr, self.t_a.indices, a_val,
                self.t_b.indptr, self.t_b.indices, b_val)

    def count_nonzeros(self, size: int) -> int:
        """Stored entries of the assembled matrix on ``size`` states (upper bound)."""
        size_b = size // self.size_a
        return (self.t_a.nnz * size_b + self.t_b.nnz * self.size_a
                + int(np.count_nonzero(self.diag)))

    def row_counts(self) -> np.ndarray:
        """Entries of each row of the assembled matrix (``split_counts`` kernel)."""
        with kernel_threads(self.diag.size):
            return species_kernels.split_counts(self.diag, self.t_a.indptr, self.t_b.indptr,
                                                self.size_a)

    def fill(self, indptr, indices, data) -> None:
        """Write the assembled CSR rows into preallocated ``indices`` and ``data``."""
        dtype = data.dtype
        with kernel_threads(self.diag.size):
            species_kernels.split_fill(self.diag.astype(dtype, copy=False),
                                       *self.csr_arrays(dtype), self.size_a, indptr, indices,
                                       data)

    def matvec(self, diag, x, y) -> None:
        """``y = diag x + (1 (x) T_a + T_b (x) 1) x`` (all of dtype ``y.dtype``)."""
        with kernel_threads(diag.size):
            species_kernels.split_matvec(diag, *self.csr_arrays(y.dtype), self.size_a, x, y)


def is_two_species(basis: Basis) -> bool:
    return basis.params[0] == basis_kernels.TWO_SPECIES


def _species_matrix(op: CompiledOperator, strings: np.ndarray, sub: Basis, shift: int,
                    other: int) -> sp.csr_matrix:
    """``T[u, c] = conj(<c|O|u>)`` of one-species ``strings`` on the species basis ``sub``,
    whose states sit at bit ``shift`` beside the fixed other-species bits ``other``."""
    full = (sub.states << shift) + other
    rows, new, amp = op.apply_to_states(full, strings)
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


def species_strings(op: CompiledOperator, n_a: int) -> dict:
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
    if not is_two_species(basis):
        return None
    params = [int(v) for v in basis.params]
    n_a, total_a, n_b, total_b = params[2], params[3], params[4], params[5]
    sub_a = fixed_sum_basis(n_a, 2, total_a)
    sub_b = fixed_sum_basis(n_b, 2, total_b)
    by_side = species_strings(op, n_a)
    # species-a strings see one fixed b part; species-b strings see N_a particles below them
    t_a, d_a = _without_diagonal(_species_matrix(op, by_side["a"], sub_a, 0,
                                                 int(sub_b.states[0]) << n_a))
    t_b, d_b = _without_diagonal(_species_matrix(op, by_side["b"], sub_b, n_a,
                                                 int(sub_a.states[0])))
    diag = op.diagonal(basis.states)
    if np.any(d_a) or np.any(d_b):
        grid = diag.reshape(sub_b.size, sub_a.size)
        grid += d_a[None, :].astype(diag.dtype) + d_b[:, None].astype(diag.dtype)
    return SpeciesSplit(t_a, t_b, diag, by_side["mixed"])


def prefers_matrix_free(op: CompiledOperator, basis: Basis) -> bool:
    """Whether the matrix-free product is the better choice at any size: a two-species
    basis whose strings all act on one species (the split product is about as fast as a
    CSR product and stores only the diagonal and the small species matrices)."""
    if not is_two_species(basis):
        return False
    return species_strings(op, int(basis.params[2]))["mixed"].size == 0
