"""Tests of the Schrieffer-Wolff numerical core (lowfold.perturbation.schrieffer_wolff).

References used below:
- BDL: Bravyi, DiVincenzo, Loss, Ann. Phys. 326, 2793 (2011), Sec. 3 (generator recursion).
- Oracle: the exact effective Hamiltonian by direct rotation (polar factor of P psi),
  ``exact_effective_hamiltonian``; the series summed to order n differs from it by
  O(lambda^(n+1)) (BDL 2011, Sec. 3).
"""

from functools import cache

import numpy as np
import pytest
import scipy.sparse as sp

from lowfold.errors import ManifoldError, ModelError
from lowfold.perturbation.schrieffer_wolff import (
    effective_hamiltonian_orders,
    exact_effective_hamiltonian,
    generator_coefficients,
    reachable_indices,
    second_order_matrix_free,
)

# Taylor coefficients of x coth(x) and tanh(x/2) (Abramowitz & Stegun 4.5.67 and 4.5.64, from
# memory): x coth x = 1 + x^2/3 - x^4/45 + 2x^6/945 - x^8/4725 + ...,
# tanh(x/2) = x/2 - x^3/24 + x^5/240 - 17x^7/40320 + ...
A_SERIES = {2: 1 / 3, 4: -1 / 45, 6: 2 / 945, 8: -1 / 4725}
B_SERIES = {1: 1 / 2, 3: -1 / 24, 5: 1 / 240, 7: -17 / 40320}


# ----------------------------------------------------------------------------- models


def random_model(seed, *, quasi, dim=24, n_p=3, density=0.3):
    """Diagonal H0 with a low manifold (degenerate, or spread over [0, 0.3]) gapped from Q
    in [1, 2.5], and a random complex sparse Hermitian V of unit operator norm."""
    rng = np.random.default_rng(seed)
    e_p = rng.uniform(0.0, 0.3, n_p) if quasi else np.zeros(n_p)
    e = np.concatenate([e_p, rng.uniform(1.0, 2.5, dim - n_p)])
    a = sp.random(dim, dim, density=density, random_state=rng, format="csr", dtype=complex,
                  data_rvs=lambda k: rng.normal(size=k) + 1j * rng.normal(size=k))
    v = a + a.conj().T
    v = v / np.linalg.norm(v.toarray(), 2)
    perm = rng.permutation(dim)  # P scattered through the working space
    inv = np.argsort(perm)
    return e[perm], v[perm][:, perm].tocsr(), inv[:n_p]


def ring_model(seed, *, dim=200, n_p=4):
    """Sparse V on a ring with a few chords and a random diagonal: distances from P are long,
    so truncating to the reachable states removes most of the space."""
    rng = np.random.default_rng(seed)
    i = np.arange(dim)
    rows = np.concatenate([i, i, rng.integers(0, dim, 6)])
    cols = np.concatenate([i, (i + 1) % dim, rng.integers(0, dim, 6)])
    vals = rng.normal(size=rows.size) + 1j * rng.normal(size=rows.size)
    vals[:dim] = vals[:dim].real  # diagonal of V
    a = sp.csr_matrix((vals, (rows, cols)), shape=(dim, dim))
    v = (a + a.conj().T) / 2
    e = rng.uniform(1.0, 3.0, dim)
    p = np.array([0, 1, 3 * dim // 10, 2 * dim // 3])[:n_p]
    e[p] = rng.uniform(0.0, 0.2, n_p)
    return e, 0.1 * v.tocsr(), p


def ising_chain(n_sites, seed):
    """Open Ising chain H0 = sum_i J_i Z_i Z_(i+1) (J_i > 0) with V = sum_i h_i . sigma_i.

    P = the two Neel states. Pauli matrices act on bit i of the basis index
    (bit 0 -> Z = +1): X|b> = |1-b>, Y|0> = i|1>, Y|1> = -i|0>, Z|b> = (1-2b)|b>."""
    rng = np.random.default_rng(seed)
    dim = 2**n_sites
    states = np.arange(dim)
    z = 1 - 2 * ((states[:, None] >> np.arange(n_sites)) & 1)
    e = (z[:, :-1] * z[:, 1:] * rng.uniform(0.8, 1.2, n_sites - 1)).sum(axis=1).astype(float)
    h = rng.uniform(0.5, 1.0, (n_sites, 3))
    rows, cols, vals = [], [], []
    for i in range(n_sites):
        # <s ^ bit_i| (h_x X + h_y Y) |s> = h_x + i h_y z_i ;  <s|h_z Z|s> = h_z z_i
        rows += [states ^ (1 << i), states]
        cols += [states, states]
        vals += [h[i, 0] + 1j * h[i, 1] * z[:, i], h[i, 2] * z[:, i]]
    v = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(dim, dim))
    return e, v, np.flatnonzero(e == e.min())


def dense_recursion(e, v, p, order):
    """Slow twin: BDL 2011 Sec. 3 recursion (convention of the schrieffer_wolff module) on dense matrices, with
    the series coefficients typed in from A_SERIES / B_SERIES and no pruning or slicing."""
    v = np.asarray(v.toarray() if sp.issparse(v) else v)
    in_p = np.zeros(e.size, bool)
    in_p[p] = True
    od = in_p[:, None] != in_p[None, :]
    denom = np.where(od, e[:, None] - e[None, :], 1.0)
    solve_l = lambda x: np.where(od, x / denom, 0)  # noqa: E731
    comm = lambda s, x: s @ x - x @ s  # noqa: E731
    v_od = np.where(od, v, 0)
    v_d = v - v_od
    gens = {1: solve_l(v_od)}

    @cache
    def nested(k, m):  # S^k_m(V_od)
        if k == 0:
            return v_od if m == 0 else np.zeros_like(v)
        return sum(comm(gens[n], nested(k - 1, m - n)) for n in range(1, m - k + 2))

    out = [np.diag(e[p]).astype(v.dtype), v[np.ix_(p, p)]]
    for m in range(2, order + 1):
        out.append(sum(B_SERIES[k] * nested(k, m - 1)[np.ix_(p, p)] for k in range(1, m, 2)))
        rhs = comm(gens[m - 1], v_d) + sum(A_SERIES[k] * nested(k, m - 1) for k in range(2, m, 2))
        gens[m] = solve_l(rhs)
    return out[: order + 1]


def series_errors(e, v, p, order, lams):
    """Operator-norm distance of the series summed to n = 0..order from the oracle."""
    errs = []
    for lam in lams:
        orders = effective_hamiltonian_orders(e, lam * v, p, order)
        exact = exact_effective_hamiltonian(np.diag(e) + lam * v.toarray(), p)
        partial = np.cumsum(orders, axis=0)
        errs.append([np.linalg.norm(partial[n] - exact, 2) for n in range(order + 1)])
    return np.array(errs)


def fitted_slopes(lams, errs):
    return np.array([np.polyfit(np.log(lams), np.log(errs[:, n]), 1)[0]
                     for n in range(errs.shape[1])])


# ----------------------------------------------------------------------------- recursion


def test_generator_coefficients_match_series():
    # A & S 4.5.67 / 4.5.64 (from memory)
    a, b = generator_coefficients(8)
    assert a == pytest.approx(A_SERIES, rel=1e-15)
    assert b == pytest.approx(B_SERIES, rel=1e-15)


@pytest.mark.parametrize("quasi", [False, True], ids=["degenerate", "quasi-degenerate"])
def test_series_error_scales_as_next_power(quasi):
    # Oracle and BDL 2011: || sum_{m<=n} H_eff,m - H_eff,exact || = O(lambda^(n+1))
    e, v, p = random_model(1, quasi=quasi)
    lams = np.array([0.04, 0.06, 0.09])
    errs = series_errors(e, v, p, 6, lams)
    slopes = fitted_slopes(lams, errs)
    assert np.all(np.abs(slopes[1:] - np.arange(2, 8)) < 0.2), slopes


def test_largest_cluster_order_eight():
    # Oracle, BDL 2011: error of the order-n series is O(lambda^(n+1)), on a
    # 9-site Ising chain in a tilted complex field (D = 512), order 8. Some orders vanish
    # or are small here, so the error may fall faster: slope >= n + 1 - 0.2.
    e, v, p = ising_chain(9, 3)
    lams = np.array([0.05, 0.07, 0.1])
    errs = series_errors(e, v, p, 8, lams)
    slopes = fitted_slopes(lams, errs)
    assert np.all(slopes[1:] > np.arange(2, 10) - 0.2), slopes
    assert np.all(np.diff(errs[0]) < 0)  # each order improves at the smallest lambda


def test_matches_dense_twin_on_sparse_model():
    # slow twin (dense recursion above, BDL 2011 Sec. 3) on a model where the distance
    # pruning and the distance ordering of the working space are active
    e, v, p = ring_model(4, dim=120)
    fast = effective_hamiltonian_orders(e, v, p, 7)
    slow = dense_recursion(e, v, p, 7)
    for m, (x, y) in enumerate(zip(fast, slow)):
        assert np.allclose(x, y, rtol=0, atol=1e-13), m


def test_matches_dense_twin_on_random_model():
    # slow twin (dense recursion above), quasi-degenerate P scattered in the working space
    e, v, p = random_model(2, quasi=True)
    fast = effective_hamiltonian_orders(e, 0.2 * v, p, 6)
    slow = dense_recursion(e, 0.2 * v, p, 6)
    for m, (x, y) in enumerate(zip(fast, slow)):
        assert np.allclose(x, y, rtol=0, atol=1e-14), m
        assert np.array_equal(x, x.conj().T)


def two_site_hubbard(t, u):
    """Two-site Hubbard model, two electrons, S^z = 0, written by hand.

    Basis |1> = c+_0up c+_1dn |0>, |2> = c+_0dn c+_1up |0>, |3> = c+_0up c+_0dn |0>,
    |4> = c+_1up c+_1dn |0>; H = -t sum_s (c+_0s c_1s + h.c.) + U sum_i n_i,up n_i,dn.
    Working the anticommutators: <3|H|1> = <4|H|1> = -t, <3|H|2> = <4|H|2> = +t."""
    h0 = np.array([0.0, 0.0, u, u])
    v = np.array([[0, 0, -t, -t], [0, 0, t, t], [-t, t, 0, 0], [-t, t, 0, 0]], dtype=float)
    return h0, v


def test_two_site_hubbard_singlet_triplet_splitting():
    # Exact two-site spectrum: E_triplet = 0, E_singlet = (U - sqrt(U^2 + 16 t^2))/2
    # (textbook closed form, e.g. P. Fazekas, World Scientific, 1999, from memory);
    # its Taylor series gives the splitting 4t^2/U - 16t^4/U^3 + 128t^6/U^5 - 1280t^8/U^7.
    t, u = 1.0, 20.0
    h0, v = two_site_hubbard(t, u)
    orders = effective_hamiltonian_orders(h0, sp.csr_matrix(v), np.array([0, 1]), 8)
    singlet = np.array([1.0, -1.0]) / np.sqrt(2)
    triplet = np.array([1.0, 1.0]) / np.sqrt(2)
    expected = {2: 4 * t**2 / u, 4: -16 * t**4 / u**3, 6: 128 * t**6 / u**5,
                8: -1280 * t**8 / u**7}
    for m in range(1, 9):
        split = expected.get(m, 0.0)
        assert np.allclose(orders[m], -split * np.outer(singlet, singlet), rtol=0,
                           atol=1e-13 * abs(expected[2])), m
        assert np.allclose(orders[m] @ triplet, 0, atol=1e-15), m
    # the remainder after order 8 is the rest of the same series,
    # 14336 t^10/U^9 - 172032 t^12/U^11 + O(t^14/U^13)
    exact = (np.sqrt(u**2 + 16 * t**2) - u) / 2
    summed = sum(orders)
    remainder = exact - (triplet @ summed @ triplet - singlet @ summed @ singlet)
    assert remainder == pytest.approx(14336 * t**10 / u**9 - 172032 * t**12 / u**11, rel=5e-3)


def test_third_order_single_state_rayleigh_schroedinger():
    # Non-degenerate Rayleigh-Schroedinger series (e.g. Sakurai & Napolitano, Modern Quantum
    # Mechanics, 2nd ed. 2011, Sec. 5.1, from memory):
    # E3 = sum_{m,n} V0m Vmn Vn0 / ((E0-Em)(E0-En)) - V00 sum_m |V0m|^2 / (E0-Em)^2.
    # Diagonal V_mm and V00 make the V_d term of S_2 count: a sign slip there changes E3.
    rng = np.random.default_rng(7)
    e = np.array([0.0, 1.0, 1.7])
    a = rng.normal(size=(3, 3)) + 1j * rng.normal(size=(3, 3))
    v = (a + a.conj().T) / 2
    orders = effective_hamiltonian_orders(e, sp.csr_matrix(v), np.array([0]), 3)
    q = [1, 2]
    d = e[0] - e[q]
    e2 = np.sum(np.abs(v[0, q]) ** 2 / d)
    e3 = (v[0, q] / d) @ v[np.ix_(q, q)] @ (v[q, 0] / d) - v[0, 0] * np.sum(
        np.abs(v[0, q]) ** 2 / d**2)
    assert orders[1][0, 0] == pytest.approx(v[0, 0], abs=1e-15)
    assert orders[2][0, 0] == pytest.approx(e2, rel=1e-13)
    assert orders[3][0, 0] == pytest.approx(e3, rel=1e-13)
    assert abs(e3) > 1e-3


def test_third_order_degenerate_against_oracle():
    # Oracle: at lambda -> 0, (H_exact - sum_{m<=2} H_m) / lambda^3 -> H_3
    # (BDL 2011); degenerate P of two states, random complex V with a diagonal part.
    e, v, p = random_model(5, quasi=False, dim=8, n_p=2, density=0.8)
    orders = effective_hamiltonian_orders(e, v, p, 4)
    assert np.linalg.norm(orders[3], 2) > 0.01
    for lam in (1e-2, 5e-3):
        exact = exact_effective_hamiltonian(np.diag(e) + lam * v.toarray(), p)
        rest = (exact - orders[0] - lam * orders[1] - lam**2 * orders[2]) / lam**3
        assert np.linalg.norm(rest - orders[3], 2) < 10 * lam * np.linalg.norm(orders[4], 2)


@pytest.mark.parametrize("order", range(1, 7))
def test_truncated_space_gives_same_result(order):
    # Only states within floor(n/2) applications of V enter H_eff at order n
    # (every entry of an order-m term is a sum over m-step paths; common practice)
    e, v, p = ring_model(11)
    keep = reachable_indices(v, p, order // 2)
    assert keep.size < e.size
    p_small = np.searchsorted(keep, p)
    small = effective_hamiltonian_orders(e[keep], v[keep][:, keep], p_small, order)
    full = effective_hamiltonian_orders(e, v, p, order)
    for m in range(order + 1):
        assert np.allclose(small[m], full[m], rtol=0, atol=1e-10), m


def test_reachable_indices_against_boolean_powers():
    # slow twin: (1 + |V| > 0)^steps applied to the indicator of P, dense
    e, v, p = ring_model(3)
    adj = (np.abs(v.toarray()) > 0) | np.eye(e.size, dtype=bool)
    front = np.zeros(e.size, bool)
    front[p] = True
    for steps in range(5):
        assert np.array_equal(reachable_indices(v, p, steps), np.flatnonzero(front))
        front = (adj.astype(int) @ front.astype(int)) > 0


def test_orders_zero_and_one_and_real_dtype():
    # definitions (BDL 2011): H_eff,0 = P H0 P, H_eff,1 = P V P
    e, v, p = random_model(3, quasi=True)
    v = (v + v.conj()) / 2  # real symmetric
    orders = effective_hamiltonian_orders(e, v.real, p, 3)
    assert np.array_equal(orders[0], np.diag(e[p]))
    assert np.allclose(orders[1], v.real.toarray()[np.ix_(p, p)], atol=1e-15)
    assert all(x.dtype == float for x in orders)
    p_only = effective_hamiltonian_orders(e[p], v.real[p][:, p], np.arange(p.size), 4)
    assert all(not x.any() for x in p_only[2:])


# ----------------------------------------------------------------------------- second order


def dense_second_order(e_p, e_q, v_pq):
    """Slow twin of the matrix-free kernel: the BDL 2011 formula, term by term."""
    n_p = e_p.size
    h2 = np.zeros((n_p, n_p), dtype=complex)
    for a in range(n_p):
        for b in range(n_p):
            for m in range(e_q.size):
                h2[a, b] += 0.5 * v_pq[a, m] * np.conj(v_pq[b, m]) * (
                    1 / (e_p[a] - e_q[m]) + 1 / (e_p[b] - e_q[m]))
    return h2


@pytest.mark.parametrize("quasi", [False, True], ids=["degenerate", "quasi-degenerate"])
def test_matrix_free_second_order_matches_recursion_and_twin(quasi):
    # BDL 2011 second order = recursion's second order; slow dense twin
    e, v, p = random_model(6, quasi=quasi, dim=20, n_p=4)
    q = np.delete(np.arange(e.size), p)
    h2 = second_order_matrix_free(e[p], e[q], v[p][:, q])
    assert sp.issparse(h2) and h2.format == "csr" and h2.has_sorted_indices
    recursion = effective_hamiltonian_orders(e, v, p, 2)[2]
    assert np.allclose(h2.toarray(), recursion, rtol=0, atol=1e-14)
    twin = dense_second_order(e[p], e[q], v[p][:, q].toarray())
    assert np.allclose(h2.toarray(), twin, rtol=0, atol=1e-14)


def exchange_like_block(n_sites, seed):
    """V_PQ of a spin-like manifold: P = 2^n_sites configurations; each antiparallel
    neighbour pair of a configuration couples to one Q state shared with the configuration
    in which that pair is swapped (as in a half-filled Hubbard chain)."""
    rng = np.random.default_rng(seed)
    dim_p = 2**n_sites
    a = np.arange(dim_p)
    rows, cols = [], []
    for i in range(n_sites - 1):
        src = a[(((a >> i) ^ (a >> (i + 1))) & 1) == 1]
        rows.append(src)
        cols.append(np.minimum(src, src ^ (3 << i)) * (n_sites - 1) + i)
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    dim_q = dim_p * (n_sites - 1)
    vals = rng.normal(size=rows.size) + 1j * rng.normal(size=rows.size)
    v_pq = sp.csr_matrix((vals, (rows, cols)), shape=(dim_p, dim_q))
    return rng.uniform(0, 0.1, dim_p), rng.uniform(1, 2, dim_q), v_pq


def test_matrix_free_second_order_large_sparse():
    # dim P = 4096; twin by sparse algebra: H2 = (A + A^dagger)/2 with
    # A = W V_PQ^dagger, W_am = V_am / (E_a - E_m)  (BDL 2011 formula, rearranged)
    e_p, e_q, v_pq = exchange_like_block(12, 0)
    h2 = second_order_matrix_free(e_p, e_q, v_pq)
    coo = v_pq.tocoo()
    w = sp.csr_matrix((coo.data / (e_p[coo.row] - e_q[coo.col]), (coo.row, coo.col)),
                      shape=v_pq.shape)
    a = w @ v_pq.conj().T
    twin = ((a + a.conj().T) / 2).tocsr()
    assert h2.shape == (4096, 4096)
    assert h2.nnz == twin.nnz
    assert abs(h2 - twin).max() < 1e-13


# ----------------------------------------------------------------------------- errors, oracle


def test_oracle_is_exact_for_block_diagonal_h():
    # When V does not couple P and Q, H_eff,exact = P H P exactly (definition of the oracle)
    rng = np.random.default_rng(0)
    h = np.diag([0.0, 0.1, 2.0, 3.0]).astype(complex)
    h[0, 1] = 0.05 + 0.02j
    h[1, 0] = np.conj(h[0, 1])
    h[2, 3] = h[3, 2] = rng.normal()
    assert np.allclose(exact_effective_hamiltonian(h, np.array([1, 0])),
                       h[np.ix_([1, 0], [1, 0])], atol=1e-14)


def test_bad_input_raises():
    e, v, p = random_model(0, quasi=False, dim=10, n_p=2)
    with pytest.raises(ModelError):
        effective_hamiltonian_orders(e, v + sp.random(10, 10, density=0.2, random_state=1), p, 2)
    with pytest.raises(ModelError):
        effective_hamiltonian_orders(e, v, np.array([0, 0]), 2)
    with pytest.raises(ModelError):
        effective_hamiltonian_orders(e, v, np.ones(10, bool), 2)
    with pytest.raises(ModelError):
        effective_hamiltonian_orders(e, v, p, -1)
    with pytest.raises(ModelError):
        effective_hamiltonian_orders(e[:5], v, p, 2)
    q = np.delete(np.arange(10), p)
    e_bad = e.copy()
    e_bad[p[0]] = e[q[0]]  # a P state at a Q energy
    with pytest.raises(ManifoldError):
        effective_hamiltonian_orders(e_bad, v, p, 2)
    with pytest.raises(ManifoldError):
        second_order_matrix_free(e_bad[p], e[q], v[p][:, q])
    with pytest.raises(ManifoldError):  # three-fold degenerate ground level cut in two
        exact_effective_hamiltonian(np.diag([0.0, 0.0, 0.0, 1.0]), np.array([0, 1]))
