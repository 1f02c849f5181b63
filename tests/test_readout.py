"""Tests of the spin-1/2 readout: Pauli coefficients, named couplings, rational recognition.

Every operator here is built independently of lowfold, by Kronecker products in the qubit
convention of lowfold.readout.pauli (bit k of a basis index = site k, bit 0 = spin up = Pauli Z +1), so
site 0 is the *last* Kronecker factor.
"""

import json
import math
from fractions import Fraction
from itertools import product

import numpy as np
import pytest
import scipy.sparse as sp

from lowfold.errors import ModelError, SizeError
from lowfold.readout.couplings import Coupling, spin_couplings
from lowfold.readout.pauli import parse_pauli_string, pauli_coefficients, pauli_coefficients_by_order
from lowfold.readout.rationals import recognise_rational

PAULI = {
    "I": np.eye(2, dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]]),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


# ----------------------------------------------------------------- independent builders

def site_op(op, site, n, sparse=False):
    """``op`` on ``site`` of ``n`` qubits; site 0 is the least significant bit."""
    if sparse:
        return sp.kron(sp.kron(sp.identity(2 ** (n - 1 - site), format="csr"),
                               sp.csr_matrix(op)), sp.identity(2 ** site), format="csr")
    return np.kron(np.kron(np.eye(2 ** (n - 1 - site)), op), np.eye(2 ** site))


def spins(n, sparse=False):
    """spins(n)[site][a] = S^a_site = sigma^a / 2."""
    return [[site_op(PAULI[a] / 2, s, n, sparse) for a in "XYZ"] for s in range(n)]


def dot(s, i, j):
    return sum(s[i][a] @ s[j][a] for a in range(3))


def cross_dot(s, vec, i, j):
    """vec . (S_i x S_j)."""
    ex, ey, ez = ((1, 2), (2, 0), (0, 1))
    return sum(v * (s[i][b] @ s[j][c] - s[i][c] @ s[j][b]) for v, (b, c) in zip(vec, (ex, ey, ez)))


def ring(s, i, j, k, l):
    """(S_i.S_j)(S_k.S_l) + (S_i.S_l)(S_j.S_k) - (S_i.S_k)(S_j.S_l) (lowfold.readout.couplings)."""
    return dot(s, i, j) @ dot(s, k, l) + dot(s, i, l) @ dot(s, j, k) - dot(s, i, k) @ dot(s, j, l)


def chirality(s, i, j, k):
    """S_i . (S_j x S_k)."""
    return sum(s[i][a] @ cross_dot(s, np.eye(3)[a], j, k) for a in range(3))


def brute_force_pauli(h, n):
    """Slow twin: c_s = tr(sigma_s H) / 2^N over all 4^N strings (common practice)."""
    out = {}
    for letters in product("IXYZ", repeat=n):  # letters[k] acts on site k
        sigma = np.eye(1)
        for letter in reversed(letters):
            sigma = np.kron(sigma, PAULI[letter])
        c = np.trace(sigma @ h) / 2 ** n
        label = " ".join(f"{a}{k}" for k, a in enumerate(letters) if a != "I") or "I"
        out[label] = c
    return out


def random_hermitian(n, rng, density=None):
    dim = 2 ** n
    if density is None:
        a = rng.normal(size=(dim, dim)) + 1j * rng.normal(size=(dim, dim))
        return a + a.conj().T
    a = sp.random(dim, dim, density=density, random_state=rng, format="csr", dtype=float)
    b = sp.random(dim, dim, density=density, random_state=rng, format="csr", dtype=float)
    a = (a + 1j * b).tocsr()
    return (a + a.conj().T).tocsr()


def by_kind(couplings):
    return {(c.kind, c.sites): c for c in couplings}


def read(h, n, **kwargs):
    coeffs = pauli_coefficients_by_order([h], n)
    return spin_couplings(coeffs, n, orders=[1], **kwargs)


# ----------------------------------------------------------------- Pauli coefficients

@pytest.mark.parametrize("n", [1, 2, 3, 4])
@pytest.mark.parametrize("seed", [0, 1])
@pytest.mark.parametrize("kind", ["dense", "sparse"])
def test_pauli_coefficients_match_brute_force_trace(n, seed, kind):
    # Slow twin: tr(sigma_s H) / 2^N over all 4^N strings (orthogonality of Pauli strings,
    # common practice), against the Walsh-Hadamard kernel.
    rng = np.random.default_rng(seed)
    h = random_hermitian(n, rng, None if kind == "dense" else 0.3)
    dense = h.toarray() if sp.issparse(h) else h
    expected = brute_force_pauli(dense, n)
    got = pauli_coefficients(h, n)
    assert max(abs(c.imag) for c in expected.values()) < 1e-12
    for label, c in expected.items():
        assert got.get(label, 0.0) == pytest.approx(c.real, abs=1e-12)
    assert set(got) <= set(expected)


def test_pauli_coefficients_basis_convention():
    # Z on site 0 acts on the least significant bit; bit 0 = up = +1 (lowfold.readout.pauli).
    assert pauli_coefficients(np.diag([1.0, -1.0, 1.0, -1.0]), 2) == {"Z0": 1.0}
    assert pauli_coefficients(np.diag([1.0, 1.0, -1.0, -1.0]), 2) == {"Z1": 1.0}
    # |up up> <-> |down up> is X on site 0 (index 0 <-> 1).
    flip = np.zeros((4, 4))
    flip[0, 1] = flip[1, 0] = flip[2, 3] = flip[3, 2] = 1.0
    assert pauli_coefficients(flip, 2) == {"X0": 1.0}
    assert pauli_coefficients(np.kron(PAULI["Y"], PAULI["X"]), 2) == {"X0 Y1": 1.0}


def test_pauli_coefficients_duplicates_and_zero_sites():
    # COO duplicates are summed (scipy convention); a 1x1 matrix is the identity string.
    coo = sp.coo_matrix(([0.5, 0.5], ([0, 0], [0, 0])), shape=(2, 2))
    assert pauli_coefficients(coo, 1) == {"I": 0.5, "Z0": 0.5}
    assert pauli_coefficients(np.array([[2.5]]), 0) == {"I": 2.5}


def test_pauli_coefficients_rejects_bad_input():
    with pytest.raises(ModelError, match="not Hermitian"):
        pauli_coefficients(np.array([[0, 1], [0, 0]]), 1)
    with pytest.raises(ModelError, match="shape"):
        pauli_coefficients(np.eye(3), 1)
    with pytest.raises(ModelError, match="non-finite"):
        pauli_coefficients(np.diag([np.nan, 1.0]), 1)
    with pytest.raises(ModelError, match="n_sites"):
        pauli_coefficients(np.eye(2), -1)
    with pytest.raises(SizeError, match="readout limit"):
        pauli_coefficients(np.eye(2), 25)
    diagonal = np.diag(np.random.default_rng(3).normal(size=16))  # 16 I/Z strings
    assert len(pauli_coefficients(diagonal, 4)) == 16
    with pytest.raises(SizeError, match="max_terms"):
        pauli_coefficients(diagonal, 4, max_terms=5)


def test_parse_pauli_string():
    assert parse_pauli_string("X0 Y3 Z5") == ((0, "X"), (3, "Y"), (5, "Z"))
    assert parse_pauli_string("I") == ()
    for bad in ["X3 Z1", "A0", "X", "X0 Y0", ""]:
        with pytest.raises(ModelError):
            parse_pauli_string(bad)


# ----------------------------------------------------------------- named couplings

def test_two_site_couplings_read_back():
    # J S_i.S_j + D.(S_i x S_j) + S_i.G.S_j + h.S: the decomposition of a bilinear exchange
    # tensor into trace, antisymmetric (Dzyaloshinskii-Moriya) and symmetric traceless parts
    # (Moriya, Phys. Rev. 120, 91 (1960)).
    n = 3
    s = spins(n)
    J, D, h, c0 = 1.3, np.array([0.2, -0.15, 0.4]), np.array([0.1, 0.0, -0.6]), 0.35
    g = np.array([[0.3, 0.1, -0.2], [0.1, -0.5, 0.05], [-0.2, 0.05, 0.2]])
    g = g + g.T
    g -= np.trace(g) / 3 * np.eye(3)
    aniso = sum(g[a, b] * s[0][a] @ s[2][b] for a in range(3) for b in range(3))
    H = (J * dot(s, 0, 2) + cross_dot(s, D, 0, 2) + aniso
         + sum(h[a] * s[1][a] for a in range(3)) + c0 * np.eye(2 ** n))
    couplings, residual = read(H, n)
    got = by_kind(couplings)
    assert set(got) == {("exchange", (0, 2)), ("dm", (0, 2)), ("anisotropy", (0, 2)),
                        ("field", (1,)), ("constant", ())}
    assert got["exchange", (0, 2)].value == pytest.approx(J, abs=1e-12)
    assert np.allclose(got["dm", (0, 2)].value, D, atol=1e-12)
    assert np.allclose(got["anisotropy", (0, 2)].value, g, atol=1e-12)
    assert np.allclose(got["field", (1,)].value, h, atol=1e-12)
    assert got["constant", ()].value == pytest.approx(c0, abs=1e-12)
    assert residual == {}


def test_singlet_projector_identity():
    # S0.S1 has eigenvalue 1/4 on the triplet and -3/4 on the singlet, so
    # J (S0.S1 - 1/4) = -J |singlet><singlet| (common practice).
    s = spins(2)
    s01 = dot(s, 0, 1)
    assert np.allclose(np.linalg.eigvalsh(s01), [-0.75, 0.25, 0.25, 0.25])
    singlet = np.zeros(4)
    singlet[1], singlet[2] = 1 / np.sqrt(2), -1 / np.sqrt(2)  # (|up dn> - |dn up>)/sqrt 2
    J = 0.8
    H = J * (s01 - 0.25 * np.eye(4))
    assert np.allclose(H, -J * np.outer(singlet, singlet))
    couplings, residual = read(H, 2)
    got = by_kind(couplings)
    assert set(got) == {("exchange", (0, 1)), ("constant", ())}
    assert got["exchange", (0, 1)].value == pytest.approx(J, abs=1e-14)
    assert got["constant", ()].value == pytest.approx(-J / 4, abs=1e-14)
    assert residual == {}


def test_ring_operator_is_pure_four_site():
    # Products (S_i.S_j)(S_k.S_l) over four distinct sites contain only four-site strings.
    terms = pauli_coefficients(ring(spins(4), 0, 1, 2, 3), 4)
    assert terms and all(len(parse_pauli_string(t)) == 4 for t in terms)


def test_ring_exchange_reads_back():
    # K = 0.7 ring exchange on the square 0-1-2-3 plus nearest and diagonal exchange.
    s = spins(4)
    K, J1, J2 = 0.7, 1.1, 0.25
    bonds = [(0, 1), (1, 2), (2, 3), (0, 3)]
    H = K * ring(s, 0, 1, 2, 3) + J1 * sum(dot(s, *b) for b in bonds) \
        + J2 * (dot(s, 0, 2) + dot(s, 1, 3))
    for cycles in [None, [(1, 2, 3, 0)]]:
        couplings, residual = read(H, 4, ring_cycles=cycles)
        got = by_kind(couplings)
        assert got["ring", (0, 1, 2, 3)].value == pytest.approx(K, abs=1e-12)
        for b in bonds:
            assert got["exchange", b].value == pytest.approx(J1, abs=1e-12)
        assert got["exchange", (0, 2)].value == pytest.approx(J2, abs=1e-12)
        assert got["exchange", (1, 3)].value == pytest.approx(J2, abs=1e-12)
        assert len(couplings) == 7
        assert residual == {}


def test_ring_cyclic_order_is_found():
    # On the cycle 0-2-1-3 the diagonals are (0,1) and (2,3); the fit must find this order.
    s = spins(4)
    H = -0.3 * ring(s, 0, 2, 1, 3)
    couplings, residual = read(H, 4)
    assert [(c.kind, c.sites) for c in couplings] == [("ring", (0, 2, 1, 3))]
    assert couplings[0].value == pytest.approx(-0.3, abs=1e-12)
    assert residual == {}
    # Fitting a wrong cyclic order leaves the unexplained part in the residual.
    couplings, residual = read(H, 4, ring_cycles=[(0, 1, 2, 3)])
    assert residual
    back = sum(c.value * ring(s, *c.sites) for c in couplings)
    back = back + sum(v[0] * _string_matrix(t, 4) for t, v in residual.items())
    assert np.allclose(back, H, atol=1e-12)


def _string_matrix(label, n):
    ops = dict((site, letter) for site, letter in parse_pauli_string(label))
    m = np.eye(1)
    for site in reversed(range(n)):
        m = np.kron(m, PAULI[ops.get(site, "I")])
    return m


def test_ring_and_cyclic_permutations():
    # P_ijkl + P_ijkl^-1 = 4 R_ijkl + sum of the six S.S + 1/4 for spin 1/2 (Roger,
    # Hetherington & Delrieu, Rev. Mod. Phys. 55, 1 (1983); from memory, checked here against
    # permutation matrices of the qubits).
    n, dim = 4, 16

    def permutation(perm):  # the spin on site q moves to site perm[q]
        p = np.zeros((dim, dim))
        for col in range(dim):
            p[sum(((col >> q) & 1) << perm[q] for q in range(n)), col] = 1.0
        return p

    cyc = permutation([1, 2, 3, 0])
    couplings, residual = read((cyc + cyc.T) / 4, n, ring_cycles=[(0, 1, 2, 3)])
    got = by_kind(couplings)
    assert got["ring", (0, 1, 2, 3)].value == pytest.approx(1.0, abs=1e-12)
    assert got["constant", ()].value == pytest.approx(1 / 16, abs=1e-12)
    for pair in [(0, 1), (1, 2), (2, 3), (0, 3), (0, 2), (1, 3)]:
        assert got["exchange", pair].value == pytest.approx(0.25, abs=1e-12)
    assert len(couplings) == 8 and residual == {}


def test_chirality_reads_back():
    # chi S_0.(S_1 x S_2) on a triangle with exchange; orientation reversal flips the sign
    # (antisymmetry of the triple product, common practice).
    n = 4
    s = spins(n)
    chi, J = 0.45, 0.9
    H = chi * chirality(s, 0, 1, 2) + J * (dot(s, 0, 1) + dot(s, 1, 2) + dot(s, 0, 2)) \
        + 0.2 * dot(s, 2, 3)
    couplings, residual = read(H, n)
    got = by_kind(couplings)
    assert got["chirality", (0, 1, 2)].value == pytest.approx(chi, abs=1e-12)
    assert got["exchange", (2, 3)].value == pytest.approx(0.2, abs=1e-12)
    assert len(couplings) == 5 and residual == {}
    couplings, _ = read(H, n, triangles=[(2, 1, 0)])
    assert by_kind(couplings)["chirality", (0, 2, 1)].value == pytest.approx(-chi, abs=1e-12)


def test_unexplained_terms_stay_in_residual():
    # Z0 Z1 Z2 is not one of the named kinds: it must be kept, not dropped.
    s = spins(3)
    H = 0.5 * s[0][2] @ s[1][2] @ s[2][2] + dot(s, 0, 1)
    couplings, residual = read(H, 3)
    assert [(c.kind, c.sites) for c in couplings] == [("exchange", (0, 1))]
    assert residual == {"Z0 Z1 Z2": [pytest.approx(0.5 / 8)]}


def test_orders_are_kept_apart_and_json_ready():
    # Two "orders": exchange at order 2, exchange and ring at order 4; value = their sum.
    s = spins(4)
    h2 = 1.0 * dot(s, 0, 1)
    h4 = -0.1 * dot(s, 0, 1) + 0.05 * ring(s, 0, 1, 2, 3)
    coeffs = pauli_coefficients_by_order([h2, h4], 4)
    assert coeffs["X0 X1"] == [pytest.approx(0.25), pytest.approx(-0.025)]
    couplings, residual = spin_couplings(coeffs, 4, orders=[2, 4])
    got = by_kind(couplings)
    ex = got["exchange", (0, 1)]
    assert ex.value == pytest.approx(0.9) and ex.orders == {2: pytest.approx(1.0),
                                                            4: pytest.approx(-0.1)}
    assert got["ring", (0, 1, 2, 3)].orders[2] == pytest.approx(0.0, abs=1e-14)
    assert got["ring", (0, 1, 2, 3)].orders[4] == pytest.approx(0.05)
    assert residual == {}
    d = json.loads(json.dumps(ex.to_dict()))
    assert d["kind"] == "exchange" and d["sites"] == [0, 1] and set(d["orders"]) == {"2", "4"}
    assert isinstance(Coupling("field", (1,), [0.0, 0.0, 1.0], {2: [0.0, 0.0, 1.0]}).to_dict()
                      ["orders"]["2"], list)


def test_spin_couplings_rejects_bad_input():
    with pytest.raises(ModelError):
        spin_couplings({"X0 X5": [1.0]}, 3, orders=[2])
    with pytest.raises(ModelError):
        spin_couplings({"X0 X1": [1.0, 2.0]}, 3, orders=[2])
    with pytest.raises(ModelError):
        spin_couplings({"X0 X1": [1.0]}, 4, orders=[2], ring_cycles=[(0, 1, 1, 2)])
    with pytest.raises(ModelError):
        spin_couplings({"X0 X1": [1.0]}, 4, orders=[2],
                       ring_cycles=[(0, 1, 2, 3), (0, 2, 1, 3)])


def test_sixteen_site_sparse_model():
    # Heisenberg model on a 4x4 torus (32 bonds) with a DM bond, a local field, a ring term
    # on one plaquette and a chirality on one triangle; ~1.2e6 non-zeros at 65,536 states.
    n, L = 16, 4
    s = spins(n, sparse=True)
    bonds = sorted({tuple(sorted((x + L * y, (x + dx) % L + L * ((y + dy) % L))))
                    for x in range(L) for y in range(L) for dx, dy in ((1, 0), (0, 1))})
    J, D, h, K, chi = 1.0, [0.1, 0.2, -0.3], [0.3, 0.0, -0.2], 0.05, 0.07
    H = J * sum(dot(s, *b) for b in bonds) + cross_dot(s, D, 0, 1) \
        + sum(h[a] * s[5][a] for a in range(3)) + K * ring(s, 0, 1, 5, 4) \
        + chi * chirality(s, 9, 10, 14)
    H = sp.csr_matrix(H)
    H.eliminate_zeros()
    assert len(bonds) == 32 and H.nnz > 1_000_000
    couplings, residual = read(H, n)
    got = by_kind(couplings)
    for b in bonds:
        assert got["exchange", b].value == pytest.approx(J, abs=1e-12)
    assert np.allclose(got["dm", (0, 1)].value, D, atol=1e-12)
    assert np.allclose(got["field", (5,)].value, h, atol=1e-12)
    assert got["ring", (0, 1, 5, 4)].value == pytest.approx(K, abs=1e-12)
    assert got["chirality", (9, 10, 14)].value == pytest.approx(chi, abs=1e-12)
    assert len(couplings) == 32 + 4 and residual == {}


# ----------------------------------------------------------------- rational recognition

@pytest.mark.parametrize("ratio", [Fraction(4), Fraction(-16), Fraction(80), Fraction(1, 3)])
def test_recognise_rational(ratio):
    # Fourth-order style coefficients c t^4 / U^3 with t = 0.1, U = 8 (values of our own).
    scale = 0.1 ** 4 / 8.0 ** 3
    assert recognise_rational(float(ratio) * scale, scale) == ratio


def test_recognise_rational_rejects_irrational():
    # pi's best approximant with q <= 1000 is 355/113 (common practice), 8.5e-8 off relatively.
    assert recognise_rational(math.pi, 1.0) is None
    assert recognise_rational(math.pi, 1.0, rtol=1e-6) == Fraction(355, 113)
    assert recognise_rational(float("nan"), 1.0) is None
    with pytest.raises(ModelError):
        recognise_rational(1.0, 0.0)
