"""Numba kernel of the second-order effective Hamiltonian, built without forming V on Q x Q.

    (H2)_ab = 1/2 sum_m V_am V_mb [1/(E_a - E_m) + 1/(E_b - E_m)],   a, b in P, m in Q.

The kernel is a Gustavson row-by-row sparse product: for each row a it walks the
intermediate states m of row a of V_PQ, then the row m of V_QP (= V_PQ^dagger in CSR form),
and accumulates the pairs (a, b) in a dense accumulator of length dim(P) with a marker.
A first pass counts the distinct b of each row, so the output is allocated once at its
exact size: memory is O(nnz(V) + nnz(H2) + dim(P)), never O(sum_m deg(m)^2).
"""

import numpy as np
from numba import njit

__all__ = ["second_order_csr"]


@njit(cache=True)
def _row_counts(n_p, pq_indptr, pq_indices, qp_indptr, qp_indices):
    """Number of distinct columns b in each row a of H2 (symbolic pass)."""
    counts = np.zeros(n_p, dtype=np.int64)
    marker = np.full(n_p, -1, dtype=np.int64)
    for a in range(n_p):
        n = 0
        for i in range(pq_indptr[a], pq_indptr[a + 1]):
            m = pq_indices[i]
            for j in range(qp_indptr[m], qp_indptr[m + 1]):
                b = qp_indices[j]
                if marker[b] != a:
                    marker[b] = a
                    n += 1
        counts[a] = n
    return counts


@njit(cache=True)
def second_order_csr(e_p, e_q, pq_indptr, pq_indices, pq_data, qp_indptr, qp_indices, qp_data):
    """CSR triplet (indptr, indices, data) of the second-order effective Hamiltonian.

    Parameters
    ----------
    e_p, e_q : float64 arrays
        Unperturbed energies of the P and Q states.
    pq_indptr, pq_indices, pq_data : arrays
        V_PQ in CSR form (dim(P) rows, dim(Q) columns).
    qp_indptr, qp_indices, qp_data : arrays
        V_QP = V_PQ^dagger in CSR form (dim(Q) rows, dim(P) columns).

    Returns
    -------
    indptr, indices, data : arrays
        H2 in CSR form, columns unsorted within a row.
    """
    n_p = e_p.shape[0]
    counts = _row_counts(n_p, pq_indptr, pq_indices, qp_indptr, qp_indices)
    indptr = np.zeros(n_p + 1, dtype=np.int64)
    for a in range(n_p):
        indptr[a + 1] = indptr[a] + counts[a]
    indices = np.empty(indptr[n_p], dtype=np.int64)
    data = np.zeros(indptr[n_p], dtype=pq_data.dtype)
    slot = np.full(n_p, -1, dtype=np.int64)  # position of column b in the current row
    for a in range(n_p):
        start = indptr[a]
        n = 0
        for i in range(pq_indptr[a], pq_indptr[a + 1]):
            m = pq_indices[i]
            v_am = pq_data[i]
            inv_a = 1.0 / (e_p[a] - e_q[m])
            for j in range(qp_indptr[m], qp_indptr[m + 1]):
                b = qp_indices[j]
                term = 0.5 * v_am * qp_data[j] * (inv_a + 1.0 / (e_p[b] - e_q[m]))
                k = slot[b]
                if k < start:  # first time b is met in this row
                    k = start + n
                    slot[b] = k
                    indices[k] = b
                    n += 1
                data[k] += term
    return indptr, indices, data
