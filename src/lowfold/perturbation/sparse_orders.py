"""The Schrieffer-Wolff recursion on sparse (CSR) matrices, and what each order keeps.

The recursion and its coefficients are those of :mod:`lowfold.perturbation.schrieffer_wolff`
(Bravyi, DiVincenzo and Loss, Ann. Phys. 326, 2793 (2011), Sec. 3).  Every quantity is a
CSR matrix over the working space ordered by distance from P: the effective Hamiltonian of
each order ``H_eff,m`` (its P-P block), the generators ``S_m`` and the memoised nested
commutators ``S^k_m(V_od)``.  The effective Hamiltonian of a local perturbation is very
sparse in the occupation basis (an order-m entry needs a closed path of m steps of V), so
nothing here is ever dense.

Round-off: cancellations leave entries at rounding level where the exact value is zero
(commutator terms that cancel by symmetry).  Each matrix drops the entries with
``|x| <= DROP_TOL * max|x|`` (the order's natural scale is that of its own largest entry:
rounding errors of a sum of products are relative to its terms), which keeps the fill-in
of the next products down and changes no entry by more than ``DROP_TOL`` of its order.

``dense=True`` is the slow twin kept for tests and benchmarks: the same recursion with no
entry dropped and each order's P-P block made a dense array, as the code was before the
orders became sparse.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg

from lowfold.errors import LowfoldError

__all__ = ["DROP_TOL", "OrderCost", "sparse_orders", "distances", "matrix_bytes"]

DROP_TOL = 1e-14    # entries below this times the largest one of their matrix are round-off


@dataclass(frozen=True)
class OrderCost:
    """Memory and time of one order: bytes of the matrices that order keeps.

    Attributes
    ----------
    order : int
    effective_bytes : int
        The order's effective Hamiltonian ``H_eff,m`` (CSR data, indices and row pointers).
    generator_bytes : int
        The generator ``S_m`` (0 where there is none: m = 0, 1 and the top order).
    commutator_bytes : int
        The memoised nested commutators ``S^k_{m-1}(V_od)`` of order m (for m = 1: V_od).
    seconds : float
        Wall time spent on the order.
    """

    order: int
    effective_bytes: int
    generator_bytes: int = 0
    commutator_bytes: int = 0
    seconds: float = 0.0

    @property
    def total_bytes(self) -> int:
        return self.effective_bytes + self.generator_bytes + self.commutator_bytes

    def to_dict(self) -> dict:
        return {"effective_bytes": int(self.effective_bytes),
                "generator_bytes": int(self.generator_bytes),
                "commutator_bytes": int(self.commutator_bytes),
                "total_bytes": int(self.total_bytes), "seconds": float(self.seconds)}


def matrix_bytes(x) -> int:
    """Bytes held by a CSR matrix (data, indices, row pointers) or a dense array."""
    if x is None:
        return 0
    if sp.issparse(x):
        x = x.tocsr()
        return int(x.data.nbytes + x.indices.nbytes + x.indptr.nbytes)
    return int(np.asarray(x).nbytes)


def sparse_orders(e, vmat, p_index, order, gap, coefficients, *, herm_tol=1e-8,
                  drop_tol=DROP_TOL, dense=False, distance=None):
    """``[H_eff,0 .. H_eff,order]`` on P and the cost of each order.

    Parameters
    ----------
    e : (D,) float array
        H0 on the working space.
    vmat : (D, D) CSR matrix
        V on the working space (its dtype, real or complex, is kept throughout).
    p_index : (dimP,) int array
        P in the working space; the output follows this order.
    order : int
    gap : float
        Smallest P-Q distance of H0 (for the natural scale of the Hermiticity check).
    coefficients : (dict, dict)
        ``a[2j]``, ``b[2j-1]`` of :func:`lowfold.perturbation.schrieffer_wolff.generator_coefficients`.
    herm_tol : float
        Relative tolerance of the Hermiticity check of each order (LowfoldError).
    drop_tol : float
        Entries at or below ``drop_tol`` times their matrix's largest entry are dropped.
    dense : bool
        The slow twin: no entry dropped, dense P-P blocks (ndarrays) out.
    distance : (D,) int array or None
        Steps of V from P to each state (at most the true ones; capped at order // 2 + 1),
        when known; else found from the pattern of V.

    Returns
    -------
    (list of CSR matrices or ndarrays, list of OrderCost)
    """
    drop_tol = 0.0 if dense else drop_tol
    n_p = p_index.size
    vnorm = max(scipy.sparse.linalg.norm(vmat, 1), np.finfo(float).tiny)
    start = time.perf_counter()
    h_0 = sp.diags(e[p_index]).astype(vmat.dtype).tocsr()
    orders = [h_0.toarray() if dense else h_0]
    costs = [OrderCost(0, matrix_bytes(orders[0]), seconds=time.perf_counter() - start)]
    if order >= 1:
        start = time.perf_counter()
        v_pp = vmat[p_index][:, p_index]
        orders.append(_hermitian_part(v_pp, vnorm, herm_tol, 1, drop_tol, dense))
        costs.append(OrderCost(1, matrix_bytes(orders[1]), seconds=time.perf_counter() - start))
    if order < 2:
        return orders, costs

    start = time.perf_counter()
    a, b = coefficients
    space = _Space(e, vmat, p_index, order, drop_tol, distance)
    v_d, v_od = space.v_parts()
    gens = [None, space.solve_l(v_od, 1)]  # gens[m] = S_m
    nested = {(0, 0): v_od}  # nested[k, m] = S^k_m(V_od), an order-(m+1) quantity
    costs[1] = OrderCost(1, costs[1].effective_bytes, matrix_bytes(gens[1]), matrix_bytes(v_od),
                         costs[1].seconds + time.perf_counter() - start)
    start = time.perf_counter()
    for m in range(1, order):
        last = m == order - 1
        for k in range(1, m + 1):
            if last and k % 2 == 0:
                continue  # only the odd ones enter H_eff, and there is no S_order
            nested[k, m] = sum(space.commutator(gens[n], nested[k - 1, m - n], m + 1)
                               for n in range(1, m - k + 2) if (k - 1, m - n) in nested)
        blocks = [b[k] * nested[k, m][:n_p, :n_p] for k in range(1, m + 1, 2)]
        h_m = sum(x.toarray() for x in blocks) if dense else sum(blocks[1:], blocks[0])
        scale = vnorm * (vnorm / gap) ** m
        orders.append(_hermitian_part(h_m, scale, herm_tol, m + 1, drop_tol, dense))
        if not last:
            # only the P-Q part of the right-hand side enters L(.)
            rhs = space.select(space.commutator(gens[m], v_d, m + 1), offdiag=True)
            for k in range(2, m + 1, 2):
                term = space.select(nested[k, m], offdiag=True)     # a fresh copy
                term.data *= a[k]
                rhs = rhs + term
                del term
            gens.append(space.solve_l(rhs, m + 1, selected=True))
            del rhs
        kept = sum(matrix_bytes(x) for (k, j), x in nested.items() if j == m)
        generator = 0 if last else matrix_bytes(gens[m + 1])
        costs.append(OrderCost(m + 1, matrix_bytes(orders[-1]), generator, kept,
                               time.perf_counter() - start))
        start = time.perf_counter()
        nested_later, gens_later = _needed_later(m, order)
        for key in [key for key in nested if key not in nested_later]:
            del nested[key]
        gens = [g if n in gens_later else None for n, g in enumerate(gens)]
        if m + 1 >= order - 1:
            v_d = None            # the last iteration forms no generator
    return orders, costs


def _needed_later(m, order):
    """Keys of the nested commutators and indices of the generators that the iterations
    after ``m`` of the loop in :func:`sparse_orders` read (the others may be freed)."""
    last = order - 1
    exists = lambda k, j: (k, j) == (0, 0) or (1 <= k <= j < last) \
        or (1 <= k <= j == last and k % 2 == 1)                        # noqa: E731
    nested, gens = set(), set()
    for later in range(m + 1, order):
        for k in range(1, later + 1):
            if later == last and k % 2 == 0:
                continue
            for n in range(1, later - k + 2):
                if exists(k - 1, later - n):
                    nested.add((k - 1, later - n))
                    gens.add(n)
        if later != last:
            gens.add(later)
    return nested, gens


class _Space:
    """The working space ordered by distance from P (P first), and the sparse operations.

    An order-m quantity X enters the order-n result only through products A X B with A, B
    of total order n - m; since A_ai != 0 needs dist(i) <= order(A), only the entries with
    dist(i) + dist(j) <= n - m matter (and then both distances are <= n/2). Each order-m
    matrix is stored as its leading block over the states with dist <= min(n - m, n/2),
    with the other entries dropped: intermediates stay small, truncated space or not.
    """

    def __init__(self, e, vmat, p_index, order, drop_tol, distance=None):
        if distance is None:
            dist = distances(vmat, p_index, order // 2)
        else:
            dist = np.minimum(np.asarray(distance, dtype=np.int64), order // 2 + 1)
        q_index = np.delete(np.arange(e.size), p_index)
        q_index = q_index[np.argsort(dist[q_index], kind="stable")]
        perm = np.concatenate([p_index, q_index])
        self.e, self.order, self.n_p = e[perm], order, p_index.size
        self.dist = dist[perm].astype(np.int8)       # at most order // 2 + 1
        self.drop_tol = drop_tol
        if not np.array_equal(perm, np.arange(perm.size)):    # a caller may order it so
            vmat = vmat[perm][:, perm]
        self.vmat = vmat.tocsr()

    def v_parts(self):
        """V_d and V_od (order 1), after which the space no longer holds V."""
        v, self.vmat = self.vmat, None
        return (self.restrict(self.select(v, offdiag=False), 1),
                self.restrict(self.select(v, offdiag=True), 1))

    def size(self, m):
        """Number of states an order-m quantity can touch."""
        budget = min(self.order - m, self.order // 2)
        return int(np.searchsorted(self.dist, budget, side="right"))

    def restrict(self, x, m):
        """Leading block of an order-m quantity, without the entries that cannot contribute
        and those at round-off level."""
        c = self.size(m)
        x = x.tocsr() if x.shape == (c, c) else x[:c, :c].tocsr()
        row, col = _coordinates(x)
        keep = self.dist[row] + self.dist[col] <= self.order - m
        if self.drop_tol and x.nnz:
            cut = self.drop_tol * np.abs(x.data).max()
            keep &= np.abs(x.data) > cut
        if keep.all():
            return x
        return _keep(x, row, keep)

    def commutator(self, s, x, m):
        """[S, X], an order-m quantity (operands may be stored at different sizes)."""
        c = self.size(m)
        return self.restrict(_product(s, x, c) - _product(x, s, c), m)

    def select(self, x, *, offdiag):
        """Block-off-diagonal (P-Q) or block-diagonal part of x."""
        row, col = _coordinates(x)
        return _keep(x, row, ((row < self.n_p) != (col < self.n_p)) == offdiag)

    def solve_l(self, x, m, selected=False):
        """S = L(X) for an order-m X: P-Q part of X divided by E_i - E_j, entry by entry
        (``selected``: x holds only its P-Q part already, and may be overwritten)."""
        x = self.restrict(x if selected else self.select(x, offdiag=True), m)
        row, col = _coordinates(x)
        x.data /= self.e[row] - self.e[col]
        return x


def _product(a, b, c):
    """Leading c x c block of a @ b, for matrices stored as leading blocks of sizes."""
    inner = min(a.shape[1], b.shape[0])
    a = a if a.shape == (c, inner) else a[:c, :inner]
    b = b if b.shape == (inner, c) else b[:inner, :c]
    return a @ b


def _coordinates(x):
    """Row and column index of each stored entry of a CSR matrix."""
    rows = np.arange(x.shape[0], dtype=np.int32 if x.shape[0] < 2**31 else np.int64)
    return np.repeat(rows, np.diff(x.indptr)), x.indices


def _keep(x, row, keep):
    """The CSR matrix x with only the stored entries selected by a boolean mask."""
    indptr = np.zeros(x.shape[0] + 1, dtype=np.int64)
    np.cumsum(np.bincount(row[keep], minlength=x.shape[0]), out=indptr[1:])
    return sp.csr_matrix((x.data[keep], x.indices[keep], indptr), shape=x.shape)


def _drop_small(x, drop_tol):
    """CSR x without explicit zeros and entries at or below ``drop_tol * max|x|``."""
    x = sp.csr_matrix(x)
    x.sum_duplicates()
    if x.nnz:
        size = np.abs(x.data)
        x = _keep(x, _coordinates(x)[0], size > drop_tol * size.max())
    x.sort_indices()
    return x


def distances(vmat, p_index, steps):
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


def _hermitian_part(h, scale, herm_tol, m, drop_tol, dense):
    """Remove round-off from a Hermitian matrix after checking its anti-Hermitian part
    (LowfoldError when it exceeds ``herm_tol`` of the order's scale)."""
    if dense:
        h = h.toarray() if sp.issparse(h) else np.asarray(h)
        anti = np.max(np.abs(h - h.conj().T), initial=0.0) / 2
        biggest = np.max(np.abs(h), initial=0.0)
    else:
        h = sp.csr_matrix(h)
        adjoint = h.conj().T.tocsr()
        difference = (h - adjoint).tocsr()
        anti = np.max(np.abs(difference.data), initial=0.0) / 2
        biggest = np.max(np.abs(h.data), initial=0.0)
    if anti > herm_tol * max(scale, biggest):
        raise LowfoldError(
            f"the order-{m} effective Hamiltonian has an anti-Hermitian part of size {anti:.3g} "
            f"(natural scale {scale:.3g}); the manifold is ill-conditioned, check the gap")
    if dense:
        return (h + h.conj().T) / 2
    return _drop_small((h + adjoint) * 0.5, drop_tol)
