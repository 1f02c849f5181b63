"""Rayleigh-Schroedinger series for one state: exact results, dense twins, both routes."""

from fractions import Fraction
from math import comb

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from helpers.exact import binom_half
from lowfold._kernels.series import rs_state_update
from lowfold.errors import ModelError
from lowfold.perturbation.series import (
    SeriesResult,
    rayleigh_schrodinger,
    rayleigh_schrodinger_general,
)

# ---------------------------------------------------------------------------------------
# helpers


def _site_operator(op, site, n_sites):
    """``op`` on one site of a chain of spin-1/2, site 0 the leftmost Kronecker factor."""
    out = sp.identity(1, format="csr")
    for j in range(n_sites):
        out = sp.kron(out, op if j == site else sp.identity(2), format="csr")
    return out


def _ising_ring(n_sites):
    """``H0 = -sum_i Z_i`` (diagonal) and ``V = -sum_i X_i X_{i+1}`` on a periodic ring."""
    x = sp.csr_array(np.array([[0.0, 1.0], [1.0, 0.0]]))
    xs = [_site_operator(x, i, n_sites) for i in range(n_sites)]
    v = -sum(xs[i] @ xs[(i + 1) % n_sites] for i in range(n_sites))
    z = np.array([1.0, -1.0])
    h0 = np.zeros(2**n_sites)
    for i in range(n_sites):
        h0 -= _site_operator(sp.diags_array(z), i, n_sites).diagonal()
    return h0, sp.csr_array(v)


def _pfeuty_coefficients(max_order):
    """Taylor coefficients in g of -(1/pi) int_0^pi sqrt(1 + g^2 + 2 g cos k) dk.

    Exact rationals: sqrt(1 + x) = sum_j C(1/2, j) x^j with x = g^2 + 2 g cos k, the
    binomial expansion of x^j, and (1/pi) int_0^pi cos^i k dk = C(i, i/2) / 2^i for even i
    (zero for odd i) -- common practice (standard integrals).
    """
    coeffs = [Fraction(0)] * (max_order + 1)
    for j in range(max_order + 1):
        for i in range(0, j + 1, 2):  # i powers of (2 g cos k), j - i powers of g^2
            power = 2 * (j - i) + i
            if power <= max_order:
                mean_cos = Fraction(comb(i, i // 2), 2**i)
                coeffs[power] += binom_half(j) * comb(j, i) * 2**i * mean_cos
    return [-c for c in coeffs]


def _random_split(n, rng, *, scale=1.0, complex_=False, spread=10.0):
    """Random Hermitian matrix split into its diagonal H0 and off-diagonal V."""
    d = np.sort(rng.uniform(0.0, spread, n))
    a = rng.normal(size=(n, n))
    if complex_:
        a = a + 1j * rng.normal(size=(n, n))
    v = scale * (a + a.conj().T) / 2
    np.fill_diagonal(v, 0.0)
    return d, v


def _followed_eigenvalue(d, v, reference, lam, steps=400):
    """Exact eigenvalue of diag(d) + lam V followed from the basis state ``reference`` by
    maximal overlap along lam (numpy eigh; common practice)."""
    previous = np.zeros(d.size)
    previous[reference] = 1.0
    for t in np.linspace(0.0, lam, steps)[1:]:
        w, u = np.linalg.eigh(np.diag(d) + t * v)
        i = int(np.argmax(np.abs(u.conj().T @ previous)))
        previous = u[:, i]
    return w[i]


# ---------------------------------------------------------------------------------------
# kernel against its slow twin


def _slow_state_update(w, states, energies, k, inv):
    out = np.array(w, dtype=states.dtype)
    for j in range(1, k):
        out = out - energies[j] * states[k - j]
    return inv * out


@pytest.mark.parametrize("dtype", [np.float64, np.complex128])
def test_kernel_matches_slow_twin(dtype):
    rng = np.random.default_rng(0)
    n, k = 50, 5
    states = rng.normal(size=(k + 1, n)).astype(dtype)
    if dtype == np.complex128:
        states = states + 1j * rng.normal(size=(k + 1, n))
    w = states[0] * 0.3 + rng.normal(size=n)
    energies = rng.normal(size=k + 2)
    inv = rng.normal(size=n)
    inv[[3, 17]] = 0.0
    out = np.empty(n, dtype=dtype)
    rs_state_update(w.astype(dtype), states, energies, k, inv, out)
    np.testing.assert_allclose(out, _slow_state_update(w, states, energies, k, inv), rtol=1e-13)
    assert out[3] == 0 and out[17] == 0


# ---------------------------------------------------------------------------------------
# transverse-field Ising ring against the exact infinite-chain energy


def test_pfeuty_coefficients_two_ways():
    # Pfeuty, Ann. Phys. 57, 79 (1970): e(g) = -(1/pi) int_0^pi sqrt(1 + g^2 + 2g cos k) dk.
    # |1 + g e^{ik}| = (1 + g e^{ik})^{1/2} (1 + g e^{-ik})^{1/2} averages to
    # sum_n C(1/2, n)^2 g^{2n} (a second exact route); the first terms are the quoted
    # -1/4, -1/64, -1/256 (from memory).
    coeffs = _pfeuty_coefficients(12)
    for n in range(7):
        assert coeffs[2 * n] == -binom_half(n) ** 2
    assert all(c == 0 for c in coeffs[1::2])
    assert coeffs[:7] == [-1, 0, Fraction(-1, 4), 0, Fraction(-1, 64), 0, Fraction(-1, 256)]


def test_ising_ring_l12_matches_infinite_chain_to_order_10():
    # Finite periodic cluster of L sites reproduces the infinite-chain series below order L
    # (a V-chain must wind around the ring to feel its size: linked-cluster counting,
    # common practice).  Pfeuty, Ann. Phys. 57, 79 (1970) for the exact energy.
    n_sites = 12
    h0, v = _ising_ring(n_sites)
    reference = int(np.argmin(h0))
    result = rayleigh_schrodinger(h0, v, reference, 20)
    exact = np.array([float(c) for c in _pfeuty_coefficients(20)])
    per_site = result.energies / n_sites
    np.testing.assert_allclose(per_site[:11], exact[:11], rtol=0, atol=1e-9)
    np.testing.assert_allclose(per_site[:7], [-1, 0, -0.25, 0, -1 / 64, 0, -1 / 256], atol=1e-12)
    assert abs(per_site[12] - exact[12]) > 1e-6  # the ring is felt at order L
    assert np.all(np.abs(per_site[1::2]) < 1e-12)  # Z2 symmetry: odd orders vanish


def test_ising_ring_l6_exact_below_order_6_only():
    # Same sources as above, on a ring of 6 sites.
    h0, v = _ising_ring(6)
    result = rayleigh_schrodinger(h0, v, int(np.argmin(h0)), 8)
    exact = np.array([float(c) for c in _pfeuty_coefficients(8)])
    per_site = result.energies / 6
    np.testing.assert_allclose(per_site[:6], exact[:6], atol=1e-12)
    assert abs(per_site[6] - exact[6]) > 1e-3


def test_ising_ring_matches_lanczos_at_small_coupling():
    # Exact ground-state energy from scipy's Lanczos (eigsh) on the same ring.
    h0, v = _ising_ring(8)
    g = 0.3
    exact = spla.eigsh(sp.diags_array(h0) + g * v, k=1, which="SA")[0][0]
    result = rayleigh_schrodinger(h0, v, int(np.argmin(h0)), 16)
    assert abs(result.energy(g) - exact) < 1e-9


# ---------------------------------------------------------------------------------------
# dense twins: second order, first-order state, exact eigenvalues


@pytest.mark.parametrize("complex_", [False, True])
def test_second_order_and_first_order_state_match_dense_sums(complex_):
    # Textbook Rayleigh-Schroedinger formulas (common practice): E2 = sum |V_mn|^2/(E_n - E_m),
    # |psi_1> = sum V_mn/(E_n - E_m) |m>.
    rng = np.random.default_rng(3)
    d, v = _random_split(40, rng, scale=0.2, complex_=complex_)
    n_ref = 7
    result = rayleigh_schrodinger(d, v, n_ref, 4, keep_states=True)
    others = np.arange(40) != n_ref
    gaps = d[n_ref] - d[others]
    assert np.isclose(result.energies[1], v[n_ref, n_ref].real)
    assert np.isclose(result.energies[2], np.sum(np.abs(v[others, n_ref]) ** 2 / gaps))
    psi1 = np.zeros(40, dtype=v.dtype)
    psi1[others] = v[others, n_ref] / gaps
    np.testing.assert_allclose(result.states[0], psi1, rtol=1e-12, atol=1e-15)
    assert np.isclose(result.first_order_norm, np.linalg.norm(psi1))
    # the listed contributions are the largest terms of that sum, in order
    terms = np.abs(v[others, n_ref]) ** 2 / gaps
    listed = [c for (_, _, _, c) in result.second_order_contributions]
    np.testing.assert_allclose(sorted(np.abs(listed), reverse=True), np.abs(listed))
    np.testing.assert_allclose(np.abs(listed), np.sort(np.abs(terms))[::-1][:10])
    m, weight, gap, contribution = result.second_order_contributions[0]
    assert np.isclose(weight, abs(v[m, n_ref]) ** 2) and np.isclose(gap, d[n_ref] - d[m])
    assert np.isclose(contribution, weight / gap)


def test_states_satisfy_the_order_by_order_equations():
    # (E0 - H0)|psi_k> = Q [V|psi_{k-1}> - sum_j E_j |psi_{k-j}>], <psi0|psi_k> = 0
    # (definition of the recursion, common practice), checked densely.
    rng = np.random.default_rng(4)
    d, v = _random_split(30, rng, scale=0.3)
    ref = 12
    result = rayleigh_schrodinger(d, v, ref, 6, keep_states=True, method="direct")
    psi = [np.eye(30)[ref]] + result.states
    e = result.energies
    for k in range(1, 7):
        rhs = v @ psi[k - 1] - sum(e[j] * psi[k - j] for j in range(1, k + 1))
        np.testing.assert_allclose((d[ref] - d) * psi[k], rhs, atol=1e-10)
        assert abs(psi[k][ref]) < 1e-15


@pytest.mark.parametrize("reference", [0, 11])
def test_summed_series_matches_followed_eigenvalue(reference):
    # numpy eigh as the exact reference; the remainder after order n is E_{n+1} lam^(n+1)
    # to leading order (Taylor's theorem; common practice).
    rng = np.random.default_rng(5)
    d, v = _random_split(24, rng, scale=0.3)
    result = rayleigh_schrodinger(d, v, reference, 12)
    exact = _followed_eigenvalue(d, v, reference, 0.02)
    assert abs(result.energy(0.02) - exact) < 1e-12
    lam = 0.005
    exact = _followed_eigenvalue(d, v, reference, lam)
    remainder = exact - result.energy(lam, order=4)
    assert abs(remainder / (result.energies[5] * lam**5) - 1.0) < 0.2


# ---------------------------------------------------------------------------------------
# 2n+1 rule, general route, matrix-free input


@pytest.mark.parametrize("complex_", [False, True])
@pytest.mark.parametrize("order", [1, 2, 5, 10, 15])
def test_wigner_energies_equal_direct_recursion(order, complex_):
    # Wigner's 2n+1 rule against the direct formula E_k = <psi0|V|psi_{k-1}>.
    rng = np.random.default_rng(6)
    d, v = _random_split(60, rng, scale=0.15, complex_=complex_)
    wigner = rayleigh_schrodinger(d, v, 5, order)
    direct = rayleigh_schrodinger(d, v, 5, order, method="direct")
    scale = np.maximum(1.0, np.abs(direct.energies))
    np.testing.assert_allclose(wigner.energies / scale, direct.energies / scale, atol=1e-11)
    assert wigner.matvecs <= order // 2 + 1 <= direct.matvecs + 1


@pytest.mark.parametrize("reference", [0, 37])
def test_general_route_equals_diagonal_route_in_rotated_basis(reference):
    # Same problem in a basis rotated by a random orthogonal matrix (QR of a Gaussian matrix):
    # the spectrum-free MINRES route must reproduce the diagonal route.
    rng = np.random.default_rng(8)
    n = 80
    d, v = _random_split(n, rng, scale=0.06)
    rotation, _ = np.linalg.qr(rng.normal(size=(n, n)))
    h0_rot = rotation @ np.diag(d) @ rotation.T
    v_rot = rotation @ v @ rotation.T
    h0_rot, v_rot = (h0_rot + h0_rot.T) / 2, (v_rot + v_rot.T) / 2
    diagonal = rayleigh_schrodinger(d, v, reference, 10, keep_states=True)
    general = rayleigh_schrodinger_general(
        sp.csr_array(h0_rot), spla.aslinearoperator(v_rot), rotation[:, reference], d[reference],
        10, keep_states=True,
    )
    scale = np.maximum(1.0, np.abs(diagonal.energies))
    np.testing.assert_allclose(general.energies / scale, diagonal.energies / scale, atol=1e-8)
    for mine, theirs in zip(diagonal.states, general.states):
        np.testing.assert_allclose(rotation @ mine, theirs, atol=1e-8 * np.linalg.norm(mine))
    assert general.solver_iterations > 0 and general.second_order_contributions == []
    assert np.isclose(general.first_order_norm, diagonal.first_order_norm)


def test_general_route_with_gmres():
    rng = np.random.default_rng(9)
    n = 30
    d, v = _random_split(n, rng, scale=0.05)
    rotation, _ = np.linalg.qr(rng.normal(size=(n, n)))
    h0_rot = rotation @ np.diag(d) @ rotation.T
    v_rot = rotation @ v @ rotation.T
    h0_rot, v_rot = (h0_rot + h0_rot.T) / 2, (v_rot + v_rot.T) / 2
    diagonal = rayleigh_schrodinger(d, v, 0, 6)
    general = rayleigh_schrodinger_general(h0_rot, v_rot, rotation[:, 0], d[0], 6, solver="gmres")
    np.testing.assert_allclose(general.energies, diagonal.energies, atol=1e-9)


def test_linear_operator_and_sparse_inputs_agree():
    rng = np.random.default_rng(10)
    d, v = _random_split(40, rng, scale=0.2)
    dense = rayleigh_schrodinger(d, v, 3, 8)
    as_operator = rayleigh_schrodinger(d, spla.aslinearoperator(v), 3, 8)
    as_sparse = rayleigh_schrodinger(sp.diags_array(d), sp.csr_array(v), 3, 8)
    np.testing.assert_allclose(as_operator.energies, dense.energies, rtol=1e-13)
    np.testing.assert_allclose(as_sparse.energies, dense.energies, rtol=1e-13)
    assert isinstance(dense, SeriesResult) and dense.order == 8 and dense.warnings == ()
    assert np.isclose(dense.smallest_denominator, np.min(np.abs(np.delete(d - d[3], 3))))


# ---------------------------------------------------------------------------------------
# degenerate references


def _chain_coupling(n, strength=0.1):
    """Nearest-neighbour hopping on a line of basis states: V connects m and m + 1 only."""
    v = np.zeros((n, n))
    idx = np.arange(n - 1)
    v[idx, idx + 1] = v[idx + 1, idx] = strength
    return v


def test_degenerate_partner_coupled_at_first_order_is_refused():
    rng = np.random.default_rng(11)
    d, v = _random_split(20, rng, scale=0.1)
    d[9] = d[0]
    with pytest.raises(ModelError, match="lowfold derive"):
        rayleigh_schrodinger(d, v, 0, 4)


def test_degenerate_partner_coupled_within_order_is_refused():
    # V reaches basis state 4 from state 0 in 4 steps along the chain.
    d = np.linspace(0.0, 5.0, 10)
    d[4] = d[0]
    v = _chain_coupling(10)
    with pytest.raises(ModelError, match="order 4 <= the requested order 5"):
        rayleigh_schrodinger(d, v, 0, 5)


def test_degenerate_partner_beyond_order_proceeds_with_warning():
    # Partner 6 is first reached at order 6: a series to order 3 does not see it.  Its
    # energies are those of the same problem with the partner moved far away (paths that
    # reach state 6 have at least 12 steps) -- exact by construction.
    d = np.linspace(0.0, 5.0, 10)
    d[6] = d[0]
    v = _chain_coupling(10)
    result = rayleigh_schrodinger(d, v, 0, 3)
    assert len(result.warnings) == 1 and "order 6" in result.warnings[0]
    assert list(result.degenerate_partners) == [6]
    moved = d.copy()
    moved[6] = 100.0
    np.testing.assert_allclose(result.energies, rayleigh_schrodinger(moved, v, 0, 3).energies,
                               rtol=1e-14)


def test_symmetry_decoupled_partner_proceeds_and_matches_reduced_problem():
    # Partner decoupled from everything by V: the exact eigenvalue is that of the problem
    # without it (block structure), and no coupling is ever found.
    rng = np.random.default_rng(12)
    d, v = _random_split(25, rng, scale=0.1)
    d[10] = d[2]
    v[10, :] = v[:, 10] = 0.0
    result = rayleigh_schrodinger(d, v, 2, 8)
    assert "no coupling found up to order 16" in result.warnings[0]
    keep = np.arange(25) != 10
    reduced = rayleigh_schrodinger(d[keep], v[np.ix_(keep, keep)], 2, 8)
    np.testing.assert_allclose(result.energies, reduced.energies, rtol=1e-12)


def test_general_route_refuses_coupled_degenerate_level():
    rng = np.random.default_rng(13)
    n = 40
    d, v = _random_split(n, rng, scale=0.05)
    d[5] = d[0]
    rotation, _ = np.linalg.qr(rng.normal(size=(n, n)))
    h0_rot = rotation @ np.diag(d) @ rotation.T
    v_rot = rotation @ v @ rotation.T
    h0_rot, v_rot = (h0_rot + h0_rot.T) / 2, (v_rot + v_rot.T) / 2
    with pytest.raises(ModelError, match="lowfold derive"):
        rayleigh_schrodinger_general(h0_rot, v_rot, rotation[:, 0], d[0], 4)
    # decoupled partner: harmless on this route, equal to the diagonal route
    v[5, :] = v[:, 5] = 0.0
    v_rot = rotation @ v @ rotation.T
    v_rot = (v_rot + v_rot.T) / 2
    general = rayleigh_schrodinger_general(h0_rot, v_rot, rotation[:, 0], d[0], 8)
    diagonal = rayleigh_schrodinger(d, v, 0, 8)
    np.testing.assert_allclose(general.energies, diagonal.energies, atol=1e-9)


# ---------------------------------------------------------------------------------------
# input errors


def test_bad_inputs_raise_model_error():
    d = np.array([0.0, 1.0, 2.0])
    v = np.array([[0.0, 0.1, 0.0], [0.1, 0.0, 0.2], [0.0, 0.2, 0.0]])
    bad = [
        lambda: rayleigh_schrodinger(d, v, 0, 0),
        lambda: rayleigh_schrodinger(d, v, 3, 2),
        lambda: rayleigh_schrodinger(d, v, 0, 2, method="magic"),
        lambda: rayleigh_schrodinger(d, np.triu(v), 0, 2),
        lambda: rayleigh_schrodinger(d, v[:2, :2], 0, 2),
        lambda: rayleigh_schrodinger(np.diag(d) + v, v, 0, 2),
        lambda: rayleigh_schrodinger(sp.csr_array(np.diag(d) + v), v, 0, 2),
        lambda: rayleigh_schrodinger_general(np.diag(d), v, np.ones(3), 0.0, 2),
        lambda: rayleigh_schrodinger_general(np.diag(d), v, np.eye(3)[0], 0.0, 2, solver="lu"),
    ]
    for call in bad:
        with pytest.raises(ModelError):
            call()
    with pytest.raises(ModelError):
        rayleigh_schrodinger(d, v, 0, 2).energy(0.1, order=5)
