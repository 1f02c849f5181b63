"""Schrieffer-Wolff effective Hamiltonian, order by order, on plain matrices.

Convention: H = H0 + V with H0 diagonal on the
working space, P a set of H0 eigenstates (degenerate or quasi-degenerate) and Q the rest.
``H_eff = P e^S H e^-S P`` with S anti-Hermitian and P-Q block-off-diagonal. With O(X) the
P-Q block part of X, ``L(X)_ij = O(X)_ij / (E_i - E_j)`` (so that ``[H0, L(X)] = O(X)``) and
``S^k_m(X) = sum_{n1+...+nk=m, ni>=1} [S_n1, [S_n2, ... [S_nk, X]]]``, the canonical
generator recursion of Bravyi, DiVincenzo and Loss, Ann. Phys. 326, 2793 (2011), Sec. 3, is

    S_1 = L(V_od)
    S_m = L([S_{m-1}, V_d]) + sum_{j>=1} a_2j L(S^2j_{m-1}(V_od))
    H_eff,m = sum_{j>=1} b_{2j-1} P S^{2j-1}_{m-1}(V_od) P
    a_2j = 2^2j B_2j / (2j)!,   b_{2j-1} = 2 (2^2j - 1) B_2j / (2j)!   (B: Bernoulli numbers)

with H_eff,0 = P H0 P and H_eff,1 = P V P (V_d, V_od: block-diagonal and block-off-diagonal
parts of V). It follows from the off-diagonal condition
``[H0, S] = [S, V_d] + ad_S coth(ad_S) V_od`` and ``H_eff = P (H0 + V_d + tanh(ad_S/2) V_od) P``.

Every entry of an order-m term is a sum over paths of m steps of V, so the order-n effective
Hamiltonian only sees the states reachable from P in at most floor(n/2) steps: the working
space may be truncated to them (see :func:`reachable_indices`) without changing the result.
"""

from fractions import Fraction
from math import comb, factorial

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from lowfold.build.numerics import second_order_product
from lowfold.perturbation.orders import MAX_SCHRIEFFER_WOLFF_ORDER, validate_order
from lowfold.perturbation.sparse_orders import DROP_TOL, distances, sparse_orders
from lowfold.errors import ManifoldError, ModelError

__all__ = [
    "effective_hamiltonian_orders",
    "effective_orders",
    "second_order_matrix_free",
    "exact_effective_hamiltonian",
    "reachable_indices",
    "generator_coefficients",
]


def generator_coefficients(order):
    """Series coefficients ``a[2j] = 2^2j B_2j/(2j)!`` and ``b[2j-1] = 2(2^2j-1) B_2j/(2j)!``.

    ``sum_j a[2j] x^2j = x coth(x)`` and ``sum_j b[2j-1] x^(2j-1) = tanh(x/2)``; computed
    from exact rational Bernoulli numbers.

    Parameters
    ----------
    order : int
        Largest power needed (entries with index > order are not returned).

    Returns
    -------
    a, b : dict[int, float]
        ``a[k]`` for even k >= 2 and ``b[k]`` for odd k >= 1, k <= order.
    """
    bern = _bernoulli(order + 1)
    a, b = {}, {}
    for j in range(1, (order + 1) // 2 + 1):
        scale = bern[2 * j] / factorial(2 * j)
        if 2 * j <= order:
            a[2 * j] = float(4**j * scale)
        b[2 * j - 1] = float(2 * (4**j - 1) * scale)
    return a, b


def _bernoulli(n):
    """Exact Bernoulli numbers B_0..B_n (B_1 = -1/2) from sum_k C(m+1, k) B_k = 0."""
    bern = [Fraction(1)]
    for m in range(1, n + 1):
        bern.append(-sum(comb(m + 1, k) * bern[k] for k in range(m)) / (m + 1))
    return bern


def effective_hamiltonian_orders(h0_diag, v, p_index, order, *, gap_tol=1e-9, herm_tol=1e-8,
                                 sparse=False):
    """Schrieffer-Wolff effective Hamiltonian of each order, ``[H_eff_0, ..., H_eff_order]``.

    Parameters
    ----------
    h0_diag : (D,) real array
        Diagonal of H0 on the working space.
    v : (D, D) sparse or dense Hermitian matrix
        The perturbation V on the working space, real or complex.
    p_index : (dimP,) int array
        Indices of the manifold P in the working space; the output follows this order.
        H0 need not be constant on P: each state keeps its own energy in the denominators.
    order : int
        Highest order n, 0 .. ``MAX_SCHRIEFFER_WOLFF_ORDER`` (40).
    gap_tol : float, keyword-only
        ManifoldError if some ``|E_a - E_m|`` (a in P, m in Q) is below
        ``gap_tol * max(1, max|H0|)``.
    herm_tol : float, keyword-only
        Relative tolerance of the Hermiticity checks on V (ModelError) and on each
        ``H_eff,m`` (LowfoldError), relative to its natural scale ``|V| (|V|/gap)^(m-1)``.
    sparse : bool, keyword-only
        Return CSR matrices (the computation is sparse either way; see
        :func:`effective_orders` for the cost of each order).

    Returns
    -------
    list of (dimP, dimP) ndarray (CSR matrices with ``sparse=True``)
        ``H_eff_m`` for m = 0..order; Hermitian, real when V is real.

    Notes
    -----
    The working space may be the full space or the states reachable from P by at most
    floor(order/2) applications of V; both give the same result.
    """
    orders, _ = effective_orders(h0_diag, v, p_index, order, gap_tol=gap_tol, herm_tol=herm_tol)
    return orders if sparse else [h.toarray() for h in orders]


def effective_orders(h0_diag, v, p_index, order, *, gap_tol=1e-9, herm_tol=1e-8,
                     drop_tol=DROP_TOL, dense=False, check_v=True, distance=None):
    """The orders as CSR matrices and what each order kept in memory.

    Parameters are those of :func:`effective_hamiltonian_orders`, and

    drop_tol : float, keyword-only
        Entries at or below ``drop_tol`` times the largest entry of their matrix (each
        order's natural scale) are round-off and dropped.
    dense : bool, keyword-only
        The slow twin (tests, benchmarks): no entry dropped, each order's P-P block made a
        dense array (the orders come back as ndarrays).
    check_v : bool, keyword-only
        Check that V is Hermitian (a caller whose V is Hermitian by construction, such as
        ``derive``, skips the copy of V that the check takes).
    distance : 1-d int array, keyword-only
        Steps of V from P to each state, when the caller knows them (e.g. from
        ``manifold.working_operator``); a value may be smaller than the true distance (more
        entries are then kept), never larger.  Default: found from the pattern of V.

    Returns
    -------
    (list of CSR matrices, list of :class:`lowfold.perturbation.sparse_orders.OrderCost`)
    """
    e, vmat, p_index, order = _validate(h0_diag, v, p_index, order, herm_tol, check_v)
    gap = _check_gap(e[p_index], np.delete(e, p_index), gap_tol)
    return sparse_orders(e, vmat, p_index, order, gap, generator_coefficients(order),
                         herm_tol=herm_tol, drop_tol=drop_tol, dense=dense, distance=distance)


def _validate(h0_diag, v, p_index, order, herm_tol, check_v=True):
    """Checked arrays (energies, CSR V, P indices, order) or ModelError."""
    e = np.asarray(h0_diag)
    if e.ndim != 1 or e.size == 0:
        raise ModelError("h0_diag must be a non-empty 1-d array (the diagonal of H0)")
    if np.iscomplexobj(e):
        if np.any(e.imag != 0):
            raise ModelError("h0_diag must be real: H0 is Hermitian and diagonal")
        e = e.real
    e = e.astype(float)
    if not np.all(np.isfinite(e)):
        raise ModelError("h0_diag contains inf or nan")
    vmat = sp.csr_matrix(v)
    if vmat.shape != (e.size, e.size):
        raise ModelError(f"v has shape {vmat.shape}; expected ({e.size}, {e.size}) like h0_diag")
    # scipy sorts indices in place: share the caller's arrays only when they are canonical
    shared = vmat.has_canonical_format and vmat.data.flags.c_contiguous
    vmat = vmat.astype(complex if np.iscomplexobj(vmat.data) else float, copy=not shared)
    vmax = np.max(np.abs(vmat.data), initial=0.0)
    if not np.isfinite(vmax):
        raise ModelError("v contains inf or nan")
    if check_v and np.max(np.abs((vmat - vmat.conj().T).data), initial=0.0) > herm_tol * vmax:
        raise ModelError("v is not Hermitian; pass the full Hermitian matrix, both triangles")
    p_index = _check_indices(p_index, e.size)
    return e, vmat, p_index, validate_order(order, minimum=0, maximum=MAX_SCHRIEFFER_WOLFF_ORDER)


def _check_indices(p_index, dim):
    """P indices as a 1-d int64 array, unique and inside range(dim), or ModelError."""
    p = np.asarray(p_index)
    if p.dtype == bool or not np.issubdtype(p.dtype, np.integer) or p.ndim != 1 or p.size == 0:
        raise ModelError("p_index must be a non-empty 1-d integer array "
                         "(for a boolean mask pass np.flatnonzero(mask))")
    if p.min() < 0 or p.max() >= dim:
        raise ModelError(f"p_index must lie in [0, {dim}), got [{p.min()}, {p.max()}]")
    if p.size > 1 and np.any(np.diff(np.sort(p)) == 0):
        raise ModelError("p_index contains repeated states")
    return p.astype(np.int64)


def _check_gap(e_p, e_q, gap_tol):
    """Smallest |E_a - E_m| over P x Q (inf if Q is empty), or ManifoldError."""
    if e_q.size == 0:
        return np.inf
    sorted_q = np.sort(e_q)
    pos = np.clip(np.searchsorted(sorted_q, e_p), 1, sorted_q.size)
    left = np.abs(e_p - sorted_q[pos - 1])
    right = np.abs(e_p - sorted_q[np.minimum(pos, sorted_q.size - 1)])
    gap = float(min(left.min(), right.min()))
    scale = max(1.0, np.max(np.abs(e_p)), np.max(np.abs(e_q)))
    if gap <= gap_tol * scale:
        raise ManifoldError(f"a state of P and a state of Q have H0 energies {gap:.3g} apart; "
                            "choose a manifold separated from the rest by a gap")
    return gap


def second_order_matrix_free(h0_p, h0_q, v_pq, *, gap_tol=1e-9):
    """Second-order effective Hamiltonian as a sparse matrix, without V on Q x Q.

    ``(H2)_ab = 1/2 sum_m V_am V_mb [1/(E_a - E_m) + 1/(E_b - E_m)]`` with ``V_mb =
    conj(V_bm)``, computed by a numba kernel whose memory is O(nnz(V_PQ) + nnz(H2)).

    Parameters
    ----------
    h0_p, h0_q : 1-d real arrays
        H0 energies of the P states and of the Q states.
    v_pq : (dimP, dimQ) sparse or dense matrix
        The P-Q block of V.
    gap_tol : float, keyword-only
        ManifoldError if some ``|E_a - E_m|`` is below ``gap_tol * max(1, max|H0|)``.

    Returns
    -------
    scipy.sparse.csr_matrix
        H2, (dimP, dimP), sorted indices, real when V is real.
    """
    e_p = _real_vector(h0_p, "h0_p")
    e_q = _real_vector(h0_q, "h0_q")
    v_pq = sp.csr_matrix(v_pq)
    if v_pq.shape != (e_p.size, e_q.size):
        raise ModelError(f"v_pq has shape {v_pq.shape}; expected ({e_p.size}, {e_q.size})")
    v_pq = v_pq.astype(complex if np.iscomplexobj(v_pq.data) else float)
    if not np.all(np.isfinite(v_pq.data)):
        raise ModelError("v_pq contains inf or nan")
    if e_q.size:
        _check_gap(e_p, e_q, gap_tol)
    return second_order_product(e_p, e_q, v_pq)


def _real_vector(x, name):
    """1-d finite float array or ModelError."""
    x = np.asarray(x)
    if x.ndim != 1 or np.iscomplexobj(x) or not np.all(np.isfinite(x)):
        raise ModelError(f"{name} must be a 1-d array of finite real energies")
    return x.astype(float)


def exact_effective_hamiltonian(h_dense, p_index, *, degeneracy_tol=1e-10, overlap_tol=1e-8):
    """Exact effective Hamiltonian on P by direct rotation (the test oracle of the series).

    Take the dim(P) lowest eigenpairs (E, psi) of H, ``A = P psi``, its polar factor
    ``W = X Y^dagger`` from ``A = X Sigma Y^dagger``; return ``W diag(E) W^dagger``.
    P must be the manifold that becomes the dim(P) lowest states of H.

    Parameters
    ----------
    h_dense : (D, D) Hermitian ndarray
        The full Hamiltonian H0 + V.
    p_index : (dimP,) int array
        Indices of P; the output follows this order.
    degeneracy_tol : float, keyword-only
        ManifoldError if ``E[dimP] - E[dimP-1]`` is below this times ``max(1, max|E|)``.
    overlap_tol : float, keyword-only
        ManifoldError if the smallest singular value of A is below this.

    Returns
    -------
    (dimP, dimP) ndarray
    """
    h = np.asarray(h_dense)
    if h.ndim != 2 or h.shape[0] != h.shape[1]:
        raise ModelError(f"h_dense must be a square matrix, got shape {h.shape}")
    if not np.allclose(h, h.conj().T, rtol=0, atol=1e-12 * max(1.0, np.max(np.abs(h)))):
        raise ModelError("h_dense is not Hermitian")
    p = _check_indices(p_index, h.shape[0])
    n_p = p.size
    energies, vecs = scipy.linalg.eigh(h, subset_by_index=[0, min(n_p, h.shape[0] - 1)])
    scale = max(1.0, np.max(np.abs(energies)), np.max(np.abs(h)))
    if n_p < energies.size and energies[n_p] - energies[n_p - 1] < degeneracy_tol * scale:
        raise ManifoldError(f"the exact level {n_p - 1} is degenerate with the next one; "
                            "the lowest dim(P) states are not well defined")
    from lowfold.perturbation.direct_rotation import direct_rotation    # W diag(E) W^dagger
    return direct_rotation(energies[:n_p], vecs[p, :n_p], overlap_tol=overlap_tol).matrix


def reachable_indices(v, p_index, steps):
    """Sorted basis indices of the states reachable from the indices ``p_index`` by at most
    ``steps`` applications of the matrix ``v`` (compare
    ``lowfold.perturbation.manifold.reachable_from_states``, the same search on encoded
    states with a compiled operator).

    Pure linear algebra on the sparsity pattern of V (no cancellation is assumed). To use the
    result as a working space: ``keep = reachable_indices(v, p, n // 2)``,
    ``p_new = np.searchsorted(keep, p)``, ``v_new = v[keep][:, keep]``.

    Parameters
    ----------
    v : (D, D) sparse or dense matrix
    p_index : 1-d int array
    steps : int >= 0

    Returns
    -------
    1-d int64 array
    """
    vmat = sp.csr_matrix(v)
    if vmat.ndim != 2 or vmat.shape[0] != vmat.shape[1]:
        raise ModelError(f"v must be a square matrix, got shape {vmat.shape}")
    p = _check_indices(p_index, vmat.shape[0])
    if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) or steps < 0:
        raise ModelError(f"steps must be an integer >= 0, got {steps!r}")
    return np.flatnonzero(distances(vmat, p, int(steps)) <= steps)
