"""``lowfold series`` end to end: model files -> :func:`lowfold.state_series`.

Every model is written as a TOML model file and loaded with :func:`lowfold.load_model`; the
results are checked against exact solutions (Pfeuty's transverse-field Ising chain, its
finite-ring Jordan-Wigner solution), closed forms of our own derivation, and dense numpy
calculations on independently built (Kronecker-product) matrices.  The CLI is exercised
in ``test_series_cli.py``, which reuses the model files defined here.
"""

from __future__ import annotations

from fractions import Fraction
from functools import reduce

import numpy as np
import pytest

from lowfold import ModelError, build_basis, hamiltonian_matrix, load_model, state_series
from lowfold.cli.app import parse_sweep

# ---------------------------------------------------------------------------------------
# model files (TOML); spin labels: one letter per site, site 0 first, u = S^z +1/2

TFIM_RING = """
title = "transverse-field Ising ring"
# H0 = -sum_i sigma^z_i (field strength -2 on S^z = sigma^z / 2): a unique all-up state.
# V  = -g sum_i X_i X_(i+1): the Ising coupling, here along x (Pfeuty's chain rotated).
[lattice]
shape = "chain"
size = [{L}]
boundary = "periodic"
[site]
type = "spin"
spin = 0.5
[parameters]
minus_g = {minus_g}
[[term]]
type = "field"
axis = "z"
strength = -2.0
label = "field"
[[term]]
type = "product"
operators = ["X", "X"]
strength = "minus_g"
bonds = "nearest"
label = "ising"
[perturbation]
unperturbed = ["field"]
order = {order}
"""

SPIN_DIMERS = """
title = "two exchange-coupled spin dimers"
# H0 = J (S0.S1 + S2.S3): not diagonal in the S^z basis, unique singlet-singlet ground state.
# V  = J' S1.S2, a weak link between the dimers.
[lattice]
shape = "chain"
size = [4]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
J = 1.0
Jp = {Jp}
[[term]]
type = "exchange"
strength = "J"
bonds = [[0, 1], [2, 3]]
label = "dimer"
[[term]]
type = "exchange"
strength = "Jp"
bonds = [[1, 2]]
label = "link"
[perturbation]
unperturbed = ["dimer"]
order = {order}
"""

IONIC_HUBBARD = """
title = "ionic Hubbard chain, charge-density-wave limit"
# Deep wells (-Delta) on the even sites of an open chain at half filling; with Delta > U the
# unique H0 ground state has both electrons of a pair on each even site.  V = hopping.
[lattice]
shape = "chain"
size = [4]
boundary = "open"
[site]
type = "electron"
[sector]
particles = 4
sz = 0
[parameters]
t = {t}
U = 1.0
Delta = 3.0
[[term]]
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
type = "hubbard"
strength = "U"
[[term]]
type = "potential"
strength = -3.0
sites = [0, 2]
label = "wells"
[perturbation]
unperturbed = ["hubbard", "wells"]
order = {order}
"""

OFFSET_DIMER = """
title = "Hubbard dimer with a potential offset"
# Two electrons on two dots; dot 0 lies D = 2 deeper (U = 1), so the pair on dot 0 is the
# unique H0 ground state.  V = hopping t{tilt_note}.
[lattice]
shape = "chain"
size = [2]
boundary = "open"
[site]
type = "electron"
[sector]
particles = 2
sz = 0
[parameters]
t = {t}
U = 1.0
[[term]]
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
type = "hubbard"
strength = "U"
[[term]]
type = "potential"
strength = -2.0
sites = [0]
label = "offset"
{tilt}
[perturbation]
unperturbed = ["hubbard", "offset"]
order = {order}
"""

TILT = """[[term]]
type = "potential"
strength = 1.0
sites = [0]
label = "tilt"
"""

GRADED_FIELDS = """
title = "four spins in a graded field"
# H0 = sum_i h_i S^z_i with all 16 configurations at distinct energies; V = J sum S_i.S_j.
[lattice]
shape = "chain"
size = [4]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
J = {J}
[[term]]
type = "field"
axis = "z"
strength = -1.0
sites = [0]
label = "h0"
[[term]]
type = "field"
axis = "z"
strength = -2.1
sites = [1]
label = "h1"
[[term]]
type = "field"
axis = "z"
strength = -4.3
sites = [2]
label = "h2"
[[term]]
type = "field"
axis = "z"
strength = -8.7
sites = [3]
label = "h3"
[[term]]
type = "exchange"
strength = "J"
bonds = "nearest"
[perturbation]
unperturbed = ["h0", "h1", "h2", "h3"]
order = 6
"""
GRADED_H = (-1.0, -2.1, -4.3, -8.7)

ZEEMAN_CHAIN = """
title = "spins in a field with Heisenberg exchange"
# H0 = -sum_i S^z_i (unique all-up state), V = J sum S_i.S_j conserves S^z.
[lattice]
shape = "chain"
size = [{L}]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
J = 1.0
[[term]]
type = "field"
axis = "z"
strength = -1.0
label = "zeeman"
[[term]]
type = "exchange"
strength = "J"
bonds = "nearest"
[perturbation]
unperturbed = ["zeeman"]
order = 4
"""

ONE_SPIN = """
title = "one spin swept through a level crossing"
# H(lambda) = -sigma^z + lambda (r sigma^z + b sigma^x): the diagonal levels cross at
# lambda = 1/r, the x field b turns the crossing into an avoided one.
[lattice]
shape = "chain"
size = [1]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "field"
axis = "z"
strength = -2.0
label = "bias"
[[term]]
type = "field"
axis = "z"
strength = {two_r}
label = "ramp"
[[term]]
type = "field"
axis = "x"
strength = {two_b}
label = "mixing"
[perturbation]
unperturbed = ["bias"]
order = 8
"""

HUBBARD_DIMER = """
title = "half-filled Hubbard dimer"
# H0 = U sum n_up n_dn: the two singly occupied S^z = 0 states are degenerate and the
# hopping couples them at second order.
[lattice]
shape = "chain"
size = [2]
boundary = "open"
[site]
type = "electron"
[sector]
particles = 2
sz = 0
[parameters]
t = 0.1
U = 1.0
[[term]]
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["hubbard"]
order = 4
"""

DIMER_AND_FREE_SPIN = """
title = "a spin dimer beside a free spin"
# H0 = S0.S1: its ground level (singlet x free spin) is twofold degenerate.
[lattice]
shape = "chain"
size = [3]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "exchange"
strength = 1.0
bonds = [[0, 1]]
label = "pair"
[[term]]
type = "exchange"
strength = 0.1
bonds = [[1, 2]]
label = "link"
[perturbation]
unperturbed = ["pair"]
"""

NO_SPLIT = """
title = "no H0 / V split"
[lattice]
shape = "chain"
size = [2]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "exchange"
strength = 1.0
bonds = "nearest"
"""


def tfim_file(L, g, order):
    return TFIM_RING.format(L=L, minus_g=-g, order=order)


def offset_dimer_file(t, order, tilt=False):
    return OFFSET_DIMER.format(t=t, order=order, tilt=TILT if tilt else "",
                               tilt_note=", plus a tilt +1 n_0 that undoes half the offset"
                               if tilt else "")


def one_spin_file(r, b):
    return ONE_SPIN.format(two_r=2.0 * r, two_b=2.0 * b)


@pytest.fixture
def load(tmp_path):
    """Write a model file and load it: ``load(text, name)``."""
    def _load(text, name="model.toml"):
        path = tmp_path / name
        path.write_text(text)
        return load_model(path)
    return _load


# ---------------------------------------------------------------------------------------
# independent references

PAULI_X = np.array([[0.0, 1.0], [1.0, 0.0]])
PAULI_Y = np.array([[0.0, -1j], [1j, 0.0]])
PAULI_Z = np.array([[1.0, 0.0], [0.0, -1.0]])


def site_op(op, i, n_sites):
    """``op`` on site i of n spin-1/2 (site 0 the leftmost Kronecker factor, |u> = (1, 0))."""
    return reduce(np.kron, [op if j == i else np.eye(2) for j in range(n_sites)])


def heisenberg(bonds, n_sites):
    """sum over bonds of S_i.S_j, S = sigma / 2 (dense, real)."""
    out = sum(site_op(p, i, n_sites) @ site_op(p, j, n_sites)
              for i, j in bonds for p in (PAULI_X, PAULI_Y, PAULI_Z)) / 4
    return np.real(out)


def spin_z_total(n_sites):
    return np.real(sum(site_op(PAULI_Z, i, n_sites) for i in range(n_sites)).diagonal()) / 2


def label_index(label):
    """Index of a spin label in the Kronecker basis (u -> bit 0, site 0 most significant)."""
    return int("".join("0" if c == "u" else "1" for c in label), 2)


def followed_eigenvalue(h0, v, psi0, steps=400):
    """Eigenvalue of h0 + v grown from the eigenvector psi0 of h0 along lambda in [0, 1]
    by maximal overlap in small steps (numpy eigh; common practice)."""
    vector = psi0
    for lam in np.linspace(0.0, 1.0, steps + 1)[1:]:
        values, vectors = np.linalg.eigh(h0 + lam * v)
        k = int(np.argmax(np.abs(vectors.T.conj() @ vector)))
        vector = vectors[:, k]
    return values[k]


def taylor_by_cauchy(h0, v, e0, n_max, radius, points=64):
    """Taylor coefficients of the eigenvalue of h0 + lam v grown from e0 (a simple level of
    h0): the eigenvalue is analytic in lam inside its radius of convergence, so
    c_n = (1/2 pi i) oint E(lam) lam^(-n-1) dlam (Cauchy's integral formula), evaluated on
    a circle |lam| = radius by the trapezoidal rule (exponentially accurate for periodic
    analytic integrands; common practice).  The level is followed continuously: out along
    the real axis, then round the circle."""
    value = e0
    for lam in np.linspace(0, radius, 50)[1:]:
        w = np.linalg.eigvals(h0 + lam * v)
        value = w[np.argmin(np.abs(w - value))]
    start, samples = value, []
    for theta in 2 * np.pi * np.arange(points) / points:
        w = np.linalg.eigvals(h0 + radius * np.exp(1j * theta) * v)
        value = w[np.argmin(np.abs(w - value))]
        samples.append(value)
    w = np.linalg.eigvals(h0 + radius * v)
    assert abs(w[np.argmin(np.abs(w - value))] - start) < 1e-9  # closed loop, no branch cut
    c = np.fft.fft(samples) / points
    return np.array([c[n].real / radius**n for n in range(n_max + 1)])


def binom_half(j):
    """C(1/2, j) exactly: Taylor coefficients of sqrt(1 + x) (binomial series)."""
    out = Fraction(1)
    for i in range(j):
        out *= (Fraction(1, 2) - i) / (i + 1)
    return out


def pfeuty_per_site(max_order):
    """Taylor coefficients in g of e(g) = -(1/pi) int_0^pi sqrt(1 + g^2 + 2 g cos k) dk,
    the ground-state energy per site of the infinite chain (Pfeuty, Ann. Phys. 57, 79
    (1970)), as exact fractions.  sqrt(1 + g^2 + 2 g cos k) = |1 + g e^{ik}|
    = sum_{a,b} C(1/2,a) C(1/2,b) g^(a+b) e^{ik(a-b)}; the k average keeps a = b:
    e(g) = -sum_a C(1/2,a)^2 g^(2a) (binomial series; common practice)."""
    coeffs = [Fraction(0)] * (max_order + 1)
    for a in range(max_order // 2 + 1):
        coeffs[2 * a] = -binom_half(a) ** 2
    return coeffs


def ring_coefficients(n_sites, max_order):
    """Exact Taylor coefficients in g of the ground-state energy of the periodic ring of
    n_sites: E = -sum_k sqrt(1 + g^2 + 2 g cos k), k = pi (2m + 1) / L (Jordan-Wigner
    fermions with even parity take antiperiodic momenta: Lieb, Schultz and Mattis, Ann.
    Phys. 16, 407 (1961); Pfeuty 1970).  With the expansion above, sum_k e^{ik(a-b)} =
    L (-1)^((a-b)/L) when L divides a - b, else 0."""
    coeffs = []
    for n in range(max_order + 1):
        total = Fraction(0)
        for a in range(n + 1):
            b = n - a
            if (a - b) % n_sites == 0:
                total += binom_half(a) * binom_half(b) * (-1) ** (abs(a - b) // n_sites)
        coeffs.append(-n_sites * total)
    return coeffs


def ring_energy(n_sites, g):
    """Closed-form ground-state energy of the ring (same source as ring_coefficients)."""
    k = np.pi * (2 * np.arange(n_sites) + 1) / n_sites
    return -np.sum(np.sqrt(1 + g * g + 2 * g * np.cos(k)))


def tfim_dense(n_sites, g):
    """H0 = -sum sigma^z, V = -g sum X X on a ring, by Kronecker products."""
    h0 = -sum(site_op(PAULI_Z, i, n_sites) for i in range(n_sites))
    v = -g * sum(site_op(PAULI_X, i, n_sites) @ site_op(PAULI_X, (i + 1) % n_sites, n_sites)
                 for i in range(n_sites))
    return h0, v


def singlet_block(t, lam_tilt=0.0):
    """Hubbard dimer with offset, two electrons, spin-singlet block on (|20>, singlet of one
    electron per dot, |02>): hopping matrix elements -sqrt(2) t between neighbours in this
    chain of states (common practice, the two-site Hubbard model), diagonal U - 2D, -D, U
    with U = 1, D = 2, plus a tilt lam_tilt n_0."""
    a = -np.sqrt(2.0) * t
    return np.array([[1.0 - 4.0 + 2 * lam_tilt, a, 0.0],
                     [a, -2.0 + lam_tilt, a],
                     [0.0, a, 1.0]])


# ---------------------------------------------------------------------------------------
# transverse-field Ising ring: Pfeuty's exact energy


def test_pfeuty_coefficients_first_terms():
    # Quoted first terms -1, -1/4, -1/64, -1/256 (from memory) and the finite-ring formula
    # reducing to L times the infinite-chain one below order L (both derived above).
    coeffs = pfeuty_per_site(8)
    assert coeffs[:7] == [-1, 0, Fraction(-1, 4), 0, Fraction(-1, 64), 0, Fraction(-1, 256)]
    ring = ring_coefficients(10, 9)
    assert ring == [10 * c for c in pfeuty_per_site(9)]


def test_tfim_ring_l12_per_site_coefficients_match_pfeuty_to_order_10(load):
    # Pfeuty, Ann. Phys. 57, 79 (1970): e(g) = -(1/pi) int_0^pi sqrt(1 + g^2 + 2g cos k) dk.
    # With field strength -2 (H0 = -sum sigma^z) and V = -g sum X X: e = -1 - g^2/4 - ...
    g, n_sites = 0.5, 12
    result = state_series(load(tfim_file(n_sites, g, 10)))
    assert result.reference == "u" * n_sites
    per_site = result.energies / n_sites / g ** np.arange(11)
    exact = np.array([float(c) for c in pfeuty_per_site(10)])
    np.testing.assert_allclose(per_site, exact, rtol=0, atol=1e-9)
    assert per_site[0] == pytest.approx(-1.0, abs=1e-14)
    assert per_site[2] == pytest.approx(-0.25, abs=1e-13)
    # the exact eigenvalue (Lanczos at 4096 states) against the closed-form ring energy
    # (Lieb, Schultz and Mattis 1961 / Pfeuty 1970, antiperiodic momenta)
    assert result.exact == pytest.approx(ring_energy(n_sites, g), abs=1e-10)


def test_tfim_ring_l6_exact_below_order_l_only(load):
    # On a ring of L sites a chain of bond flips must wind round the ring to feel its size,
    # so the coefficients are those of the infinite chain below order L and differ at order
    # L (linked-cluster counting, common practice); the finite-ring Jordan-Wigner solution
    # (Lieb, Schultz and Mattis 1961) gives every order exactly.
    n_sites, order = 6, 14
    result = state_series(load(tfim_file(n_sites, 1.0, order)))
    energies = result.energies
    infinite = np.array([float(n_sites * c) for c in pfeuty_per_site(order)])
    np.testing.assert_allclose(energies[:n_sites], infinite[:n_sites], rtol=0, atol=1e-12)
    assert abs(energies[n_sites] - infinite[n_sites]) > 0.1  # -0.2695 against -0.0234
    ring = np.array([float(c) for c in ring_coefficients(n_sites, order)])
    np.testing.assert_allclose(energies, ring, rtol=0, atol=1e-11)
    # exact eigenvalue: numpy on the Kronecker-built H; the ground state of H0 stays the
    # ground state (even-parity sector, no level crossing for 0 <= g <= 1)
    h0, v = tfim_dense(n_sites, 1.0)
    assert result.exact == pytest.approx(np.linalg.eigvalsh(h0 + v)[0], abs=1e-11)
    assert result.exact == pytest.approx(ring_energy(n_sites, 1.0), abs=1e-11)


def test_tfim_domb_sykes_radius_is_the_critical_coupling(load):
    # Infinite chain: the nearest singularity of e(g) is the critical point g_c = 1 (Pfeuty
    # 1970), on the positive axis of the series variable x = g^2 (odd orders vanish); the
    # coefficients -C(1/2, n)^2 ~ -n^-3 / (4 pi) make r_n = 1 - 3/n + O(n^-2).  A ring of L
    # sites has its branch points exactly on |g| = 1 too, but as complex pairs at
    # g = exp(+-i pi (2m + 1) / L): below order L the ratios are the infinite chain's and
    # point to g_c = 1; from order L on they oscillate (a large fit residual).
    g, n_sites = 0.5, 12
    low = state_series(load(tfim_file(n_sites, g, 10)))
    ratio = low.ratio_test
    assert ratio.variable == "lambda^2"
    assert ratio.side == "positive"
    g_c = g * ratio.radius  # radius is in lambda, the factor of the file's V
    assert abs(g_c - 1.0) < 0.08, g_c
    assert ratio.exponent < 0  # a weak (energy-like) singularity, not a pole
    assert ratio.fit_residual < 1e-8
    high = state_series(load(tfim_file(n_sites, g, 20), "high.toml"))
    assert high.ratio_test.fit_residual > 0.1


# ---------------------------------------------------------------------------------------
# non-diagonal H0 (iterative route)


def test_nondiagonal_h0_dimers_match_dense_taylor_coefficients(load):
    # H0 = S0.S1 + S2.S3 is not diagonal; the coefficients are compared with the Taylor
    # coefficients of numpy's exact eigenvalue (Cauchy integral, see taylor_by_cauchy) and
    # with the explicit second-order formula in the H0 eigenbasis.  Closed form (our own
    # derivation): V = J' S1.S2 takes the singlet pair to two triplets (energy +2J) with
    # <(S1.S2)^2> = sum_a <S1^a S1^a><S2^a S2^a> = 3/16, so E2 = -3 J'^2 / (32 J).
    jp, order = 0.2, 8
    model = load(SPIN_DIMERS.format(Jp=jp, order=order))
    result = state_series(model)
    assert result.reference == "level:0"
    assert any("not diagonal" in w for w in result.warnings)
    h0 = heisenberg([(0, 1), (2, 3)], 4)
    v = jp * heisenberg([(1, 2)], 4)
    values, vectors = np.linalg.eigh(h0)
    assert values[1] - values[0] > 0.5  # unique singlet-singlet ground state
    taylor = taylor_by_cauchy(h0, v, values[0], order, radius=2.0)
    np.testing.assert_allclose(result.energies, taylor, rtol=0, atol=1e-12)
    coupling = vectors.T @ v @ vectors[:, 0]
    e2 = np.sum(coupling[1:] ** 2 / (values[0] - values[1:]))
    assert result.energies[2] == pytest.approx(e2, abs=1e-13)
    assert result.energies[2] == pytest.approx(-3 * jp**2 / 32, abs=1e-13)
    assert result.exact == pytest.approx(np.linalg.eigvalsh(h0 + v)[0], abs=1e-12)


# ---------------------------------------------------------------------------------------
# second order and the first-order state


def test_second_order_equals_dense_sum_over_states(load):
    # E2 = sum_m |V_m0|^2 / (E_0 - E_m) (Rayleigh-Schroedinger, common practice), summed
    # densely over the matrices of the H0 and V labels.  Closed form (our own count): each
    # of the 3 bonds lets either electron of the even-site pair hop to the empty odd site,
    # at cost Delta - U, so E2 = -6 t^2 / (Delta - U) and |psi_1> has six amplitudes
    # of size t / (Delta - U).
    t, gap = 0.2, 2.0
    model = load(IONIC_HUBBARD.format(t=t, order=4))
    result = state_series(model)
    basis = build_basis(model)
    h0 = hamiltonian_matrix(model, basis, list(model.unperturbed_labels)).toarray()
    v = hamiltonian_matrix(model, basis, list(model.perturbation_labels)).toarray()
    assert np.count_nonzero(h0 - np.diag(np.diag(h0))) == 0
    energies = np.diag(h0)
    ref = int(np.argmin(energies))
    assert np.sum(energies == energies[ref]) == 1
    column = v[:, ref].copy()
    column[ref] = 0.0
    others = np.flatnonzero(column)
    denominators = energies[ref] - energies[others]
    e2 = np.sum(column[others] ** 2 / denominators)
    assert result.energies[2] == pytest.approx(e2, abs=1e-14)
    assert result.energies[2] == pytest.approx(-6 * t**2 / gap, abs=1e-14)
    assert result.reference == "2020"
    contributions = result.to_dict()["diagnostics"]["second_order_contributions"]
    assert len(contributions) == others.size == 6
    for c in contributions:
        assert c["coupling_squared"] == pytest.approx(t**2, abs=1e-14)
        assert c["denominator"] == pytest.approx(-gap, abs=1e-14)
        assert c["contribution"] == pytest.approx(-t**2 / gap, abs=1e-14)
    assert sum(c["contribution"] for c in contributions) == pytest.approx(e2, abs=1e-14)
    first = result.first_order
    assert sorted(abs(f.amplitude) for f in first) == pytest.approx([t / gap] * 6)
    assert result.validity_ratio == pytest.approx(t / gap)


def test_second_order_tfim_from_kronecker_build(load):
    # The same sum over states on an independent Kronecker-product build of the ring: every
    # bond flips two up spins (|V| = g, denominator -4), so E2 = -L g^2 / 4 (Pfeuty 1970).
    g, n_sites = 0.3, 6
    result = state_series(load(tfim_file(n_sites, g, 2)))
    h0, v = tfim_dense(n_sites, g)
    d = h0.diagonal()
    ref = int(np.argmin(d))
    column = v[:, ref]
    mask = np.arange(d.size) != ref
    e2 = np.sum(column[mask] ** 2 / (d[ref] - d[mask]))
    assert result.energies[2] == pytest.approx(e2, abs=1e-14)
    assert e2 == pytest.approx(-n_sites * g**2 / 4, abs=1e-14)


# ---------------------------------------------------------------------------------------
# the exact eigenvalue, followed from the H0 state


def graded_dense(J):
    h0 = sum(h * site_op(PAULI_Z, i, 4) / 2 for i, h in enumerate(GRADED_H)).real
    return h0, J * heisenberg([(0, 1), (1, 2), (2, 3)], 4)


@pytest.mark.parametrize("state", [None, "duud"])
def test_exact_eigenvalue_is_the_adiabatically_connected_level(load, state):
    # H = sum_i h_i S^z_i + J sum S.S conserves S^z only (the field is not uniform), so
    # inside one S^z sector levels do not cross (von Neumann and Wigner, Phys. Z. 30, 467
    # (1929)): the level grown from the r-th H0 state of its sector is the r-th eigenvalue
    # of H in that sector.  At J = 2 the level of "duud" crosses a level of another sector,
    # so its rank in the whole spectrum changes (9 -> 8) and only the sector rank is right.
    J = 2.0
    result = state_series(load(GRADED_FIELDS.format(J=J)), state=state)
    label = state or "uuuu"
    assert result.reference == label
    h0, v = graded_dense(J)
    d = h0.diagonal()
    k = label_index(label)
    assert result.energies[0] == pytest.approx(d[k], abs=1e-14)  # same state, same labels
    sz = spin_z_total(4)
    block = np.flatnonzero(sz == sz[k])
    rank = int(np.sum(d[block] < d[k]))
    in_sector = np.linalg.eigvalsh((h0 + v)[np.ix_(block, block)])[rank]
    psi0 = np.zeros(16)
    psi0[k] = 1.0
    assert followed_eigenvalue(h0, v, psi0) == pytest.approx(in_sector, abs=1e-12)
    assert result.exact == pytest.approx(in_sector, abs=1e-12)
    if state is not None:
        whole = np.linalg.eigvalsh(h0 + v)
        assert int(np.sum(d < d[k])) != int(np.sum(whole < in_sector - 1e-9))


def test_exact_eigenvalue_on_a_large_basis_stays_in_the_reference_sector(load):
    # Twelve spins (4096 states, above the dense-following limit): H0 = -sum S^z, V = sum
    # S.S.  The all-up state is an exact eigenstate of H for every lambda, at
    # -L/2 + (L - 1) J / 4 (each bond of a fully polarised pair gives +1/4; elementary
    # spin algebra), so that is its adiabatically connected level -- the S^z = L/2 block of
    # H is 1 x 1.  The ground state of H lies lower, in a smaller S^z sector.
    n = 12
    result = state_series(load(ZEEMAN_CHAIN.format(L=n)))
    level = -n / 2 + (n - 1) / 4
    np.testing.assert_allclose(result.energies[:2], [-n / 2, (n - 1) / 4], atol=1e-13)
    np.testing.assert_allclose(result.energies[2:], 0.0, atol=1e-13)
    assert result.exact == pytest.approx(level, abs=1e-10)


@pytest.mark.parametrize("b", [0.2, 0.05])
def test_exact_eigenvalue_of_ground_state_through_avoided_crossing(load, b):
    # Two levels and no symmetry: the ground state of H0 grows into the ground state of H
    # for every lambda (non-crossing rule, von Neumann and Wigner 1929), however narrow the
    # avoided crossing (here at lambda = 0.52, gap ~ 2 b lambda).
    r = 1 / 0.52
    result = state_series(load(one_spin_file(r, b)))
    h = np.array([[-1 + r, b], [b, 1 - r]])
    assert result.exact == pytest.approx(np.linalg.eigvalsh(h)[0], abs=1e-12)


# ---------------------------------------------------------------------------------------
# convergence: Pade and the radius


def branch_point_radius():
    """|t| of the nearest branch point of the singlet levels of the offset dimer: a double
    root of det(E - H(t)) = (E - d1)(E - d2)(E - d3) - 2t^2 (2E - d1 - d3), i.e. a zero of
    the cubic's discriminant 18abcd - 4b^3 d + b^2 c^2 - 4ac^3 - 27a^2 d^2 (common
    practice), a polynomial in q = 2 t^2."""
    P = np.polynomial.Polynomial
    d1, d2, d3 = -3.0, -2.0, 1.0
    # coefficients of E^3, E^2, E, 1 as polynomials in q
    a = P([1.0])
    b = P([-(d1 + d2 + d3)])
    c = P([d1 * d2 + d1 * d3 + d2 * d3, -2.0])
    d = P([-d1 * d2 * d3, d1 + d3])
    disc = 18 * a * b * c * d - 4 * b**3 * d + b**2 * c**2 - 4 * a * c**3 - 27 * a**2 * d**2
    roots = disc.roots()
    return float(np.min(np.sqrt(np.abs(roots) / 2))), roots


def test_pade_beats_partial_sum_near_the_radius(load):
    # Offset Hubbard dimer at t = 0.36, just inside the radius of convergence t_c = 0.383
    # (a complex pair of square-root branch points on the imaginary t axis).  Pade
    # approximants continue such a function far better than partial sums (Baker,
    # Essentials of Pade Approximants, 1975).
    t_c, roots = branch_point_radius()
    assert 0.3 < t_c < 0.45
    t = 0.36
    result = state_series(load(offset_dimer_file(t, 12)))
    assert result.reference == "20"
    exact = np.linalg.eigvalsh(singlet_block(t))[0]
    assert result.exact == pytest.approx(exact, abs=1e-12)
    d = result.to_dict()["diagnostics"]
    partial_error = abs(d["partial_sums"][-1] - exact)
    pade_error = abs(d["pade"]["value"] - exact)
    assert partial_error > 1e-4
    assert pade_error < 1e-2 * partial_error
    # Domb-Sykes in x = t^2: the singularity lies on the negative x axis (imaginary t),
    # at the branch point found from the discriminant
    ratio = d["ratio_test"]
    assert ratio["variable"] == "lambda^2" and ratio["side"] == "negative"
    assert t * ratio["radius"] == pytest.approx(t_c, rel=0.03)
    assert ratio["exponent"] == pytest.approx(-0.5, abs=0.1)  # square-root branch point


# ---------------------------------------------------------------------------------------
# sweeps: avoided and true crossings


def test_sweep_two_level_avoided_crossing(load):
    # H(lambda) = (-1 + r lambda) sigma^z + b lambda sigma^x: eigenvalues
    # +- sqrt((1 - r lambda)^2 + b^2 lambda^2), closest at lambda* = r / (r^2 + b^2).
    r, b = 1.0, 0.05
    result = state_series(load(one_spin_file(r, b)), sweep=parse_sweep("lambda=0:2:41"))
    sweep = result.sweep.to_dict()
    lambdas = np.linspace(0, 2, 41)
    gaps = 2 * np.sqrt((1 - r * lambdas) ** 2 + (b * lambdas) ** 2)
    best = lambdas[np.argmin(gaps)]
    star = r / (r * r + b * b)
    assert abs(best - star) <= 0.025
    avoided = sweep["avoided_crossings"]
    assert len(avoided) == 1
    assert avoided[0]["lambda"] == pytest.approx(best, abs=1e-12)
    assert avoided[0]["gap"] == pytest.approx(gaps.min(), abs=1e-12)
    assert sweep["crossings"] == []
    levels = np.array(sweep["levels"])
    np.testing.assert_allclose(levels, np.stack([-gaps / 2, gaps / 2], axis=1), atol=1e-12)


def test_sweep_hubbard_dimer_avoided_crossing(load):
    # Offset dimer with a tilt +lambda n_0: the pair on dot 0 (diagonal -3 + 2 lambda) meets
    # the singlet with one electron per dot (-2 + lambda) at lambda = 1, and the hopping
    # repels them (singlet block, see singlet_block).  The triplet T0 (-2 + lambda, not
    # coupled) runs between the two repelled levels; the avoided crossing is between
    # singlet levels 0 and 1 of the dense singlet block.
    t = 0.05
    result = state_series(load(offset_dimer_file(t, 8, tilt=True)),
                          sweep=parse_sweep("lambda=0:2:41"))
    lambdas = np.linspace(0, 2, 41)
    singlets = np.array([np.linalg.eigvalsh(singlet_block(t * lam, lam)) for lam in lambdas])
    fine = np.linspace(0, 2, 4001)
    gaps = [np.diff(np.linalg.eigvalsh(singlet_block(t * lam, lam))[:2])[0] for lam in fine]
    star = fine[int(np.argmin(gaps))]
    assert abs(star - 1.0) < 0.05  # pushed down a little by |02>
    levels = np.array(result.sweep.levels)
    for row, s in zip(levels, singlets):  # the dense singlet levels are among the levels
        assert np.min(np.abs(row[:, None] - s[None, :2]), axis=0).max() < 1e-10
    avoided = result.sweep.to_dict()["avoided_crossings"]
    assert any(abs(c["lambda"] - star) <= 0.05 for c in avoided), avoided


def test_sweep_spin_dimer_true_crossing_between_sz_sectors(load):
    # Two spins, H0 = -(S0^z + S1^z), V = S0.S1.  Exactly: |uu> at
    # -1 + lambda/4 (S^z = 1), the singlet at -3 lambda/4 (S^z = 0): a true crossing at
    # lambda = 1 between S^z sectors (V conserves S^z; elementary two-spin algebra).
    result = state_series(load(ZEEMAN_CHAIN.format(L=2)), sweep=parse_sweep("lambda=0:2:41"))
    sweep = result.sweep.to_dict()
    assert sweep["crossings"] == [{"lambda": pytest.approx(1.0, abs=0.025),
                                   "sectors": ["Sz=0", "Sz=1"]}]
    assert sweep["avoided_crossings"] == []
    lambdas = np.array(sweep["lambda"])
    np.testing.assert_allclose(sweep["followed"], -1 + lambdas / 4, atol=1e-12)
    np.testing.assert_allclose(np.array(sweep["levels"])[:, 0],
                               np.minimum(-1 + lambdas / 4, -3 * lambdas / 4), atol=1e-12)


def test_sweep_spin_chain_crossings_match_dense_sectors(load):
    # Four spins: H0 = -sum S^z, V = sum S.S (open chain).  Dense check: lowest level of
    # each S^z sector from the Kronecker build; the ground state passes S^z = 2 -> 1 -> 0.
    n = 4
    result = state_series(load(ZEEMAN_CHAIN.format(L=n)), sweep=parse_sweep("lambda=0:2:41"))
    sweep = result.sweep.to_dict()
    lambdas = np.linspace(0, 2, 41)
    sz = spin_z_total(n)
    h0 = np.diag(-sz)
    v = heisenberg([(i, i + 1) for i in range(n - 1)], n)
    sectors = np.unique(sz)
    lowest = np.array([[np.linalg.eigvalsh((h0 + lam * v)[np.ix_(sz == s, sz == s)])[0]
                        for s in sectors] for lam in lambdas])
    ground = sectors[np.argmin(lowest, axis=1)]
    changes = [(0.5 * (lambdas[i] + lambdas[i + 1]), ground[i], ground[i + 1])
               for i in range(len(lambdas) - 1) if ground[i] != ground[i + 1]]
    assert [(a, b) for _, a, b in changes] == [(2, 1), (1, 0)]
    reported = {(frozenset(c["sectors"]), round(c["lambda"], 6)) for c in sweep["crossings"]}
    for lam, a, b in changes:
        key = frozenset({f"Sz={int(a)}", f"Sz={int(b)}"})
        assert any(k == key and abs(x - lam) <= 0.05 for k, x in reported), (lam, a, b)
    # every reported crossing is a sign change of the dense lowest levels of its sectors
    for c in sweep["crossings"]:
        i, j = (int(np.flatnonzero(sectors == float(Fraction(s[3:])))[0]) for s in c["sectors"])
        near = np.abs(lambdas - c["lambda"]) <= 0.05
        diff = lowest[near, i] - lowest[near, j]
        assert diff.min() < 0 < diff.max(), c


# ---------------------------------------------------------------------------------------
# refusals and user errors


@pytest.mark.parametrize("text, state", [
    (tfim_file(6, 0.3, 4), "dduuuu"),        # coupled at first order by a bond flip
    (HUBBARD_DIMER, None),                     # coupled at second order through |20>, |02>
    (DIMER_AND_FREE_SPIN, None),               # non-diagonal H0, degenerate ground level
])
def test_degenerate_h0_level_points_to_derive(load, text, state):
    with pytest.raises(ModelError, match="lowfold derive"):
        state_series(load(text), state=state)


def test_uncoupled_degenerate_partners_warn_and_proceed(load):
    # Three singly occupied dots, all spins up: no hop is allowed (Pauli), so the 7 other
    # singly occupied H0 states are never reached and |uuu> stays an eigenstate at E = 0.
    text = HUBBARD_DIMER.replace("size = [2]", "size = [3]").replace(
        "particles = 2\nsz = 0", "particles = 3")
    result = state_series(load(text), state="uuu")
    assert result.reference == "uuu"
    np.testing.assert_allclose(result.energies, 0.0, atol=1e-15)
    assert result.exact == pytest.approx(0.0, abs=1e-12)
    assert any("degenerate in H0 with 7" in w for w in result.to_dict()["warnings"])


@pytest.mark.parametrize("text, kwargs, match", [
    (tfim_file(4, 0.3, 4), {"state": "xyz"}, "not a basis state"),
    (tfim_file(4, 0.3, 4), {"state": "level:5"}, "distinct levels"),
    (SPIN_DIMERS.format(Jp=0.1, order=4), {"state": "level:16"}, "levels"),
    (SPIN_DIMERS.format(Jp=0.1, order=4), {"state": "uudd"}, "level:K"),
    (tfim_file(4, 0.3, 4), {"order": 0}, "order"),
    (tfim_file(4, 0.3, 4), {"order": 1000}, "order"),
    (tfim_file(4, 0.3, 4), {"order": 2.5}, "order"),
    (NO_SPLIT, {}, r"\[perturbation\]"),
])
def test_bad_requests_raise_model_error(load, text, kwargs, match):
    kwargs = dict(kwargs)
    with pytest.raises(ModelError, match=match):
        state_series(load(text), kwargs.pop("order", None), **kwargs)


@pytest.mark.parametrize("text", ["lambda=0:2", "mu=0:1:5", "lambda=a:1:5", "lambda=0:1:1",
                                  "lambda=1:1:5", "lambda=0:nan:5", "lambda=0:1:5000",
                                  "lambda=0:1:-3", "", "lambda=0:1:4:2"])
def test_sweep_syntax_errors(text):
    with pytest.raises(ModelError, match="--sweep"):
        parse_sweep(text)


def test_sweep_parses_start_stop_count():
    np.testing.assert_allclose(parse_sweep(" lambda = 0:2:41 "), np.linspace(0, 2, 41))
    np.testing.assert_allclose(parse_sweep("lambda=-1:1e0:3"), [-1, 0, 1])
