"""Species-split (Kronecker-sum) products and CSR rows for two-species bases (numba).

A TWO_SPECIES state has index ``i = r * size_a + u`` (``u`` the rank of the species-a part,
``r`` of the species-b part).  An operator made of strings acting on one species only is
``H = diag + 1 (x) T_a + T_b (x) 1``: ``T_a`` (``size_a`` square) and ``T_b`` (``size_b``
square) are CSR matrices with sorted rows and no diagonal entries, so

    (H x)[r, u] = diag[i] x[r, u] + sum_c T_a[u, c] x[r, c] + sum_c T_b[r, c] x[c, u].

Rows follow the convention of ``operators``: entry ``(i, j)`` is ``conj(<j|O|i>)``.
"""

import numpy as np
from numba import njit, prange


@njit(cache=True, parallel=True)
def split_matvec(diag, a_ptr, a_idx, a_val, b_ptr, b_idx, b_val, size_a, x, y):
    """``y = diag x + (1 (x) T_a) x + (T_b (x) 1) x`` (row-parallel over species b)."""
    size_b = b_ptr.shape[0] - 1
    for r in prange(size_b):
        base = r * size_a
        for u in range(size_a):
            acc = diag[base + u] * x[base + u]
            for p in range(a_ptr[u], a_ptr[u + 1]):
                acc += a_val[p] * x[base + a_idx[p]]
            y[base + u] = acc
        for p in range(b_ptr[r], b_ptr[r + 1]):
            value = b_val[p]
            source = b_idx[p] * size_a
            for u in range(size_a):
                y[base + u] += value * x[source + u]


@njit(cache=True, parallel=True)
def split_counts(diag, a_ptr, b_ptr, size_a):
    """Stored entries per row of the split operator's CSR matrix."""
    size_b = b_ptr.shape[0] - 1
    counts = np.empty(size_a * size_b, dtype=np.int64)
    for r in prange(size_b):
        for u in range(size_a):
            i = r * size_a + u
            counts[i] = (a_ptr[u + 1] - a_ptr[u]) + (b_ptr[r + 1] - b_ptr[r]) + (diag[i] != 0)
    return counts


@njit(cache=True, parallel=True)
def split_fill(diag, a_ptr, a_idx, a_val, b_ptr, b_idx, b_val, size_a, indptr, indices, data):
    """Fill the CSR rows of the split operator, columns ascending: species-b entries below
    the row's block, then the block (T_a entries and the diagonal), then those above."""
    size_b = b_ptr.shape[0] - 1
    for r in prange(size_b):
        base = r * size_a
        for u in range(size_a):
            i = base + u
            pos = indptr[i]
            p = b_ptr[r]
            while p < b_ptr[r + 1] and b_idx[p] < r:
                indices[pos] = b_idx[p] * size_a + u
                data[pos] = b_val[p]
                pos += 1
                p += 1
            placed = diag[i] == 0
            for q in range(a_ptr[u], a_ptr[u + 1]):
                c = a_idx[q]
                if not placed and c > u:
                    indices[pos] = i
                    data[pos] = diag[i]
                    pos += 1
                    placed = True
                indices[pos] = base + c
                data[pos] = a_val[q]
                pos += 1
            if not placed:
                indices[pos] = i
                data[pos] = diag[i]
                pos += 1
            while p < b_ptr[r + 1]:
                indices[pos] = b_idx[p] * size_a + u
                data[pos] = b_val[p]
                pos += 1
                p += 1
