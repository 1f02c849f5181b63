"""Compiled numerics the later layers need, behind validating wrappers.

``lowfold.build`` is the only caller of ``lowfold._kernels``: each wrapper here checks its
arguments, converts them to the contiguous arrays a kernel takes, calls it and wraps the
result.  The kernels stay plain numba functions of arrays, each with a slow twin in the
tests.

* :func:`second_order_product` -- the second-order effective Hamiltonian from V_PQ without
  forming V on Q x Q (``lowfold._kernels.second_order``), for the Schrieffer-Wolff layer.
* :func:`rs_state_update` -- one order of the Rayleigh-Schroedinger state recursion with a
  diagonal H0 (``lowfold._kernels.series``), for the series layer.
* :func:`pauli_strings` -- the Pauli-string coefficients of a qubit matrix
  (``lowfold._kernels.pauli``), for the readout layer.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from lowfold._kernels.pauli import pauli_transform
from lowfold._kernels.second_order import second_order_csr
from lowfold._kernels.series import rs_state_update as _rs_state_update

__all__ = ["second_order_product", "rs_state_update", "PauliStrings", "pauli_strings"]


def second_order_product(e_p, e_q, v_pq) -> sp.csr_matrix:
    """``(H2)_ab = 1/2 sum_m V_am V_mb [1/(E_a - E_m) + 1/(E_b - E_m)]`` (a, b in P, m in Q)
    with ``V_mb = conj(V_bm)``, in memory O(nnz(V_PQ) + nnz(H2)).

    Parameters
    ----------
    e_p, e_q : 1-d float arrays
        H0 energies of the P and the Q states (the caller checks the gap).
    v_pq : sparse or dense (dimP, dimQ) matrix
        The P-Q block of V.

    Returns
    -------
    scipy.sparse.csr_matrix
        H2, (dimP, dimP), sorted indices, of the dtype of ``v_pq`` (float or complex).
    """
    e_p = np.ascontiguousarray(e_p, dtype=np.float64)
    e_q = np.ascontiguousarray(e_q, dtype=np.float64)
    v_pq = sp.csr_matrix(v_pq)
    if e_p.ndim != 1 or e_q.ndim != 1 or v_pq.shape != (e_p.size, e_q.size):
        raise ValueError(f"second_order_product: v_pq has shape {v_pq.shape}, energies "
                         f"{e_p.shape} and {e_q.shape}")
    dtype = np.complex128 if np.iscomplexobj(v_pq.data) else np.float64
    v_pq = v_pq.astype(dtype)
    v_qp = v_pq.conj().T.tocsr()
    indptr, indices, data = second_order_csr(
        e_p, e_q, v_pq.indptr, v_pq.indices, v_pq.data, v_qp.indptr, v_qp.indices, v_qp.data)
    h2 = sp.csr_matrix((data, indices, indptr), shape=(e_p.size, e_p.size))
    h2.sort_indices()
    return h2


def rs_state_update(w, states, energies, k, inv_denominators, out) -> None:
    """Fill ``out`` with the order-``k`` state correction of the diagonal recursion,
    ``out[m] = inv_denominators[m] * (w[m] - sum_{j=1}^{k-1} energies[j] * states[k-j, m])``.

    ``states`` (K, N) holds ``|psi_0> .. |psi_{k-1}>`` in its first rows; ``energies``
    (float64) the energy coefficients; ``inv_denominators`` (float64) ``1 / (E0 - E_m)``,
    zero on the reference and its degenerate partners; ``out`` (N,) of the dtype of
    ``states`` (may be ``states[k]``).  ``ValueError`` on inconsistent shapes or dtypes.
    """
    n = w.shape[0]
    if (states.ndim != 2 or states.shape[1] != n or not 1 <= k <= states.shape[0]
            or energies.dtype != np.float64 or energies.shape[0] < k
            or inv_denominators.shape != (n,) or inv_denominators.dtype != np.float64
            or out.shape != (n,) or out.dtype != states.dtype):
        raise ValueError("rs_state_update: inconsistent shapes or dtypes")
    _rs_state_update(np.ascontiguousarray(w, dtype=states.dtype), states, energies, k,
                     inv_denominators, out)


class PauliStrings(NamedTuple):
    """Pauli strings as bit masks: qubit k carries X if only bit k of ``x`` is set, Z if
    only bit k of ``z``, Y if both (``lowfold._kernels.pauli``); ``coefficients`` are
    ``tr(sigma H) / 2^N``; ``complete`` is False if the scan stopped at ``max_terms``."""

    x: np.ndarray
    z: np.ndarray
    coefficients: np.ndarray
    complete: bool


def pauli_strings(rows, cols, values, n_sites: int, tol: float, max_terms: int) -> PauliStrings:
    """Pauli coefficients above ``tol`` of the ``2**n_sites`` square matrix given by COO
    triplets (duplicates summed), at most ``max_terms`` of them."""
    rows = np.ascontiguousarray(rows, dtype=np.int64)
    cols = np.ascontiguousarray(cols, dtype=np.int64)
    values = np.ascontiguousarray(values, dtype=np.complex128)
    dim = 1 << int(n_sites)
    if not rows.shape == cols.shape == values.shape or rows.ndim != 1:
        raise ValueError("pauli_strings: rows, cols and values must be 1-d of one length")
    if rows.size and (min(rows.min(), cols.min()) < 0 or max(rows.max(), cols.max()) >= dim):
        raise ValueError(f"pauli_strings: indices outside [0, {dim})")
    x, z, c, complete = pauli_transform(rows, cols, values, int(n_sites), float(tol),
                                        int(max_terms))
    return PauliStrings(x, z, c, bool(complete))
