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
import scipy.sparse.linalg

from lowfold.build.numerics import second_order_product
from lowfold.perturbation.orders import MAX_SCHRIEFFER_WOLFF_ORDER, validate_order
from lowfold.errors import LowfoldError, ManifoldError, ModelError

__all__ = [
    "effective_hamiltonian_orders",
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


def effective_hamiltonian_orders(h0_diag, v, p_index, order, *, gap_tol=1e-9, herm_tol=1e-8):
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

    Returns
    -------
    list of (dimP, dimP) ndarray
        ``H_eff_m`` for m = 0..order; Hermitian, real when V is real.

    Notes
    -----
    The working space may be the full space or the states reachable from P by at most
    floor(order/2) applications of V; both give the same result.
    """
    e, vmat, p_index, order = _validate(h0_diag, v, p_index, order, herm_tol)
    n_p = p_index.size
    gap = _check_gap(e[p_index], np.delete(e, p_index), gap_tol)
    vnorm = max(scipy.sparse.linalg.norm(vmat, 1), np.finfo(float).tiny)
    orders = [np.diag(e[p_index]).astype(vmat.dtype)]
    if order >= 1:
        v_pp = vmat[p_index][:, p_index].toarray()
        orders.append(_hermitian_part(v_pp, vnorm, herm_tol, 1))
    if order < 2:
        return orders

    space = _Space(e, vmat, p_index, order)
    v_d = space.restrict(space.select(space.v, offdiag=False), 1)
    v_od = space.restrict(space.select(space.v, offdiag=True), 1)
    a, b = generator_coefficients(order)
    gens = [None, space.solve_l(v_od, 1)]  # gens[m] = S_m
    nested = {(0, 0): v_od}  # nested[k, m] = S^k_m(V_od), an order-(m+1) quantity
    for m in range(1, order):
        last = m == order - 1
        for k in range(1, m + 1):
            if last and k % 2 == 0:
                continue  # only the odd ones enter H_eff, and there is no S_order
            nested[k, m] = sum(space.commutator(gens[n], nested[k - 1, m - n], m + 1)
                               for n in range(1, m - k + 2) if (k - 1, m - n) in nested)
        h_m = sum(b[k] * nested[k, m][:n_p, :n_p].toarray() for k in range(1, m + 1, 2))
        scale = vnorm * (vnorm / gap) ** m
        orders.append(_hermitian_part(h_m, scale, herm_tol, m + 1))
        if not last:
            rhs = space.commutator(gens[m], v_d, m + 1)
            for k in range(2, m + 1, 2):
                rhs = rhs + a[k] * nested[k, m]
            gens.append(space.solve_l(rhs, m + 1))
    return orders


class _Space:
    """The working space ordered by distance from P (P first), and the sparse operations.

    An order-m quantity X enters the order-n result only through products A X B with A, B
    of total order n - m; since A_ai != 0 needs dist(i) <= order(A), only the entries with
    dist(i) + dist(j) <= n - m matter (and then both distances are <= n/2). Each order-m
    matrix is stored as its leading block over the states with dist <= min(n - m, n/2),
    with the other entries dropped: intermediates stay small, truncated space or not.
    """

    def __init__(self, e, vmat, p_index, order):
        dist = _distances(vmat, p_index, order // 2)
        q_index = np.delete(np.arange(e.size), p_index)
        q_index = q_index[np.argsort(dist[q_index], kind="stable")]
        perm = np.concatenate([p_index, q_index])
        self.e, self.dist, self.order, self.n_p = e[perm], dist[perm], order, p_index.size
        self.v = vmat[perm][:, perm].tocsr()

    def size(self, m):
        """Number of states an order-m quantity can touch."""
        budget = min(self.order - m, self.order // 2)
        return int(np.searchsorted(self.dist, budget, side="right"))

    def restrict(self, x, m):
        """Leading block of an order-m quantity, without the entries that cannot contribute."""
        c = self.size(m)
        x = x[:c, :c].tocsr()
        row, col = _coordinates(x)
        return _keep(x, row, self.dist[row] + self.dist[col] <= self.order - m)

    def commutator(self, s, x, m):
        """[S, X], an order-m quantity (operands may be stored at different sizes)."""
        c = self.size(m)
        return self.restrict(_product(s, x, c) - _product(x, s, c), m)

    def select(self, x, *, offdiag):
        """Block-off-diagonal (P-Q) or block-diagonal part of x."""
        row, col = _coordinates(x)
        return _keep(x, row, ((row < self.n_p) != (col < self.n_p)) == offdiag)

    def solve_l(self, x, m):
        """S = L(X) for an order-m X: P-Q part of X divided by E_i - E_j, entry by entry."""
        x = self.restrict(self.select(x, offdiag=True), m)
        row, col = _coordinates(x)
        x.data /= self.e[row] - self.e[col]
        return x


def _product(a, b, c):
    """Leading c x c block of a @ b, for matrices stored as leading blocks of sizes."""
    inner = min(a.shape[1], b.shape[0])
    return a[:c, :inner] @ b[:inner, :c]


def _coordinates(x):
    """Row and column index of each stored entry of a CSR matrix."""
    return np.repeat(np.arange(x.shape[0]), np.diff(x.indptr)), x.indices


def _keep(x, row, keep):
    """The CSR matrix x with only the stored entries selected by a boolean mask."""
    indptr = np.zeros(x.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(row[keep], minlength=x.shape[0]), out=indptr[1:])
    return sp.csr_matrix((x.data[keep], x.indices[keep], indptr), shape=x.shape)


def _distances(vmat, p_index, steps):
    """Number of applications of V from P to each state; steps + 1 if more than steps."""
    pattern = abs(vmat).T.tocsr()  # (pattern @ x)_j > 0 iff V_ij x_i != 0 for some i
    dist = np.full(vmat.shape[0], steps + 1, dtype=np.int64)
    dist[p_index] = 0
    front = (dist == 0).astype(float)
    for step in range(1, steps + 1):
        new = (pattern @ front > 0) & (dist > step)
        if not new.any():
            break
        dist[new] = step
        front = new.astype(float)
    return dist


def _hermitian_part(h, scale, herm_tol, m):
    """Remove round-off from a Hermitian matrix after checking its anti-Hermitian part."""
    anti = np.max(np.abs(h - h.conj().T), initial=0.0) / 2
    if anti > herm_tol * max(scale, np.max(np.abs(h), initial=0.0)):
        raise LowfoldError(
            f"the order-{m} effective Hamiltonian has an anti-Hermitian part of size {anti:.3g} "
            f"(natural scale {scale:.3g}); the manifold is ill-conditioned, check the gap")
    return (h + h.conj().T) / 2


def _validate(h0_diag, v, p_index, order, herm_tol):
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
    vmat = vmat.astype(complex if np.iscomplexobj(vmat.data) else float)
    vmax = np.max(np.abs(vmat.data), initial=0.0)
    if not np.isfinite(vmax):
        raise ModelError("v contains inf or nan")
    if np.max(np.abs((vmat - vmat.conj().T).data), initial=0.0) > herm_tol * vmax:
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
    if np.unique(p).size != p.size:
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
    return np.flatnonzero(_distances(vmat, p, int(steps)) <= steps)
