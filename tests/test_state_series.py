"""``lowfold series`` end to end: model files -> :func:`lowfold.state_series`.

Every model is written as a TOML model file (``helpers/series_models.py``) and loaded with
:func:`lowfold.load_model`; the results are checked against exact solutions (Pfeuty's
transverse-field Ising chain, its finite-ring Jordan-Wigner solution), closed forms of our
own derivation, and dense numpy calculations on independently built (Kronecker-product)
matrices.  Sweeps are in ``test_state_series_sweeps.py``, the CLI in ``test_series_cli.py``.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from helpers.exact import (followed_eigenvalue, heisenberg, label_index, pfeuty_per_site,
                           ring_coefficients, ring_energy, spin_z_total, tfim_dense)
from helpers.modelfiles import hubbard_text
from helpers.series_models import (DIMER_AND_FREE_SPIN, GRADED_FIELDS, HUBBARD_DIMER, NO_SPLIT,
                                   SPIN_DIMERS, ZEEMAN_CHAIN, graded_dense, ionic_hubbard_file,
                                   offset_dimer_file, one_spin_file, singlet_block, tfim_file)
from lowfold import ModelError, build_basis, hamiltonian_matrix, state_series

# ---------------------------------------------------------------------------------------
# independent references


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
    model = load(ionic_hubbard_file(t, 4))
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
    text = hubbard_text("chain", [3], t=0.1, U=1.0, order=4)
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
