"""Spin-orbit hopping ``t 1 + i lambda . sigma``: the Moriya couplings of a Hubbard dimer and
the hidden isotropy of its spectrum.

Model (docs/model-files.md, "Complex strengths, flux and spin-orbit hopping"): two sites,
one electron each on average, ``H = -sum_ab (c+_{0a} T_ab c_{1b} + h.c.) + U sum_i n_up n_dn``
with ``T = t 1 + i lambda . sigma`` (t, lambda real).

Derivation of the second order (ours; the structure is Moriya's, T. Moriya, Phys. Rev. 120,
91 (1960)).  With ``K = c+_0 T c_1 + c+_1 T^dagger c_0`` (so ``V = -K``) and every
intermediate state at energy U above the manifold, ``H_2 = -(1/U) P K Q K P``.  On one
electron per site ``c+_{ia} c_{ib} = (rho_i)_{ba}`` with ``rho_i = 1/2 + S_i . sigma``, and

    P (c+_0 T c_1)(c+_1 T^dagger c_0) P = Tr[rho_0 T (1 - rho_1) T^dagger]

(plus the same with 0 <-> 1, T <-> T^dagger).  With ``T T^dagger = (t^2 + lambda^2) 1`` and

    T sigma_b T^dagger = (t^2 - lambda^2) sigma_b + 2 lambda_b (lambda . sigma)
                         - 2 t eps_abc lambda_a sigma_c,

each trace is ``(t^2 + lambda^2)/2 - 2 (t^2 - lambda^2) S_0.S_1 - 4 (lambda.S_0)(lambda.S_1)
- 4 t lambda . (S_0 x S_1)``, so

    H_2 = -(t^2 + lambda^2)/U + 4 (t^2 - lambda^2)/U S_0.S_1
          + 8 t lambda . (S_0 x S_1) / U + 8 (lambda.S_0)(lambda.S_1) / U.

In the readout's conventions (README, "Conventions": ``J S_0.S_1 + D.(S_0 x S_1) + sum_ab
G_ab S^a_0 S^b_1`` with G traceless) this is

    J = 4 (t^2 - lambda^2)/U + 8 lambda^2 / (3U),   D = 8 t lambda / U  (along +lambda for
    the bond (0, 1) as listed),   G_ab = 8 (lambda_a lambda_b - delta_ab lambda^2 / 3) / U,

and the constant ``-(t^2 + lambda^2)/U``.  At lambda = 0 this is Anderson's ``J = 4 t^2/U``.

Hidden isotropy (L. Shekhtman, O. Entin-Wohlman & A. Aharony, PRL 69, 836 (1992)): ``T =
sqrt(t^2 + lambda^2) exp(i theta n . sigma)`` is a spin rotation times a real amplitude, so a
rotation of the spin axes of site 1 removes it: the spectrum is that of the plain Hubbard
dimer with ``t' = sqrt(t^2 + lambda^2)`` -- at second order an isotropic exchange ``J' = 4 (t^2
+ lambda^2)/U`` (singlet at ``-3J'/4``, triplet at ``J'/4``, both shifted by the constant), and
exactly the Hubbard-dimer levels ``(U - sqrt(U^2 + 16 t'^2))/2`` and ``0`` (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from lowfold import ModelError, derive, parse_model, spectrum
from helpers.electrons import hop_matrix, quspin_electron_levels

T, U = 0.1, 8.0
LAMBDAS = [(0.0, 0.0, 0.04), (0.05, 0.0, 0.0), (0.03, -0.02, 0.05)]


def dimer(t, lam, u=U, *, sector=None, order=2):
    """The two-site Hubbard model with spin-orbit hopping ``lam`` on the bond (0, 1)."""
    return parse_model({
        "lattice": {"shape": "chain", "size": [2]}, "site": {"type": "electron"},
        "sector": sector or {"particles": 2},
        "parameters": {"t": t, "U": u, "lx": lam[0], "ly": lam[1], "lz": lam[2]},
        "term": [{"type": "hopping", "strength": "t", "soc": ["lx", "ly", "lz"]},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": order}})


def coupling(result, kind, order=2):
    found = [c for c in result.couplings if c.kind == kind]
    assert len(found) <= 1
    if not found:
        return np.zeros((3, 3)) if kind == "anisotropy" else (np.zeros(3) if kind == "dm" else 0.0)
    return np.asarray(found[0].orders.get(order, 0.0), dtype=float)


@pytest.mark.parametrize("lam", LAMBDAS)
def test_second_order_moriya_couplings(lam):
    lam = np.array(lam)
    result = derive(dimer(T, lam), compare_exact=False)
    l2 = lam @ lam
    assert coupling(result, "constant") == pytest.approx(-(T**2 + l2) / U, rel=1e-10)
    assert coupling(result, "exchange") == pytest.approx(4 * (T**2 - l2) / U + 8 * l2 / (3 * U),
                                                         rel=1e-10)
    np.testing.assert_allclose(coupling(result, "dm"), 8 * T * lam / U, atol=1e-14)
    np.testing.assert_allclose(coupling(result, "anisotropy"),
                               8 * (np.outer(lam, lam) - np.eye(3) * l2 / 3) / U, atol=1e-14)


def test_dm_changes_sign_with_the_bond_direction():
    """``lambda_10 = -lambda_01``: listing the bond as (1, 0) reverses D (the readout keeps
    the sites ascending)."""
    lam = (0.0, 0.03, 0.0)
    forward = derive(dimer(T, lam), compare_exact=False)
    reverse = parse_model({
        "lattice": {"shape": "graph", "sites": 2, "bonds": [[0, 1]]}, "site": {"type": "electron"},
        "sector": {"particles": 2}, "parameters": {"t": T, "U": U},
        "term": [{"type": "hopping", "strength": "t", "bonds": [[1, 0]], "soc": list(lam)},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": 2}})
    backward = derive(reverse, compare_exact=False)
    np.testing.assert_allclose(coupling(backward, "dm"), -coupling(forward, "dm"), atol=1e-15)
    assert coupling(backward, "dm")[1] == pytest.approx(-8 * T * 0.03 / U, rel=1e-10)


@pytest.mark.parametrize("lam", LAMBDAS)
def test_hidden_isotropy_of_the_second_order_spectrum(lam):
    """The effective two-spin spectrum is a singlet and a degenerate triplet split by
    ``J' = 4 (t^2 + lambda^2)/U`` (Shekhtman, Entin-Wohlman & Aharony 1992)."""
    result = derive(dimer(T, lam), compare_exact=False)
    h = sum(m.toarray() for m in result.orders)
    levels = np.linalg.eigvalsh(h)
    t2 = T**2 + np.dot(lam, lam)
    j_prime = 4 * t2 / U
    expected = -t2 / U + np.array([-0.75, 0.25, 0.25, 0.25]) * j_prime
    np.testing.assert_allclose(levels, expected, atol=1e-14)


@pytest.mark.parametrize("lam", LAMBDAS)
def test_exact_levels_are_the_hubbard_dimer_with_rotated_hopping(lam):
    """lowfold's exact spectrum, QuSpin's and the closed form of the Hubbard dimer with
    ``t' = sqrt(t^2 + lambda^2)`` agree."""
    t_prime2 = T**2 + np.dot(lam, lam)
    closed = np.sort([(U - np.sqrt(U**2 + 16 * t_prime2)) / 2, 0, 0, 0])
    reference = quspin_electron_levels(2, [(0, 1, hop_matrix(T, lam))], U, 2, k=4)
    found = spectrum(dimer(T, lam), 4).energies
    np.testing.assert_allclose(reference, closed, atol=1e-12)
    np.testing.assert_allclose(found, reference, atol=1e-12)


def test_effective_levels_converge_to_quspin_like_the_next_order():
    """The order-n effective spectrum misses the exact (QuSpin) levels by O(g^(n+1)) when t
    and lambda are scaled by g: odd orders vanish on the dimer, so the error after order 2
    falls like g^4 and after order 4 like g^6 -- at least the (n+1)-th power."""
    lam = np.array([0.03, -0.02, 0.05])
    errors = {2: [], 4: []}
    scales = [1.0, 0.5]
    for g in scales:
        result = derive(dimer(g * T, g * lam, order=4), compare_exact=False)
        exact = quspin_electron_levels(2, [(0, 1, hop_matrix(g * T, g * lam))], U, 2, k=4)
        for n in errors:
            h = sum(m.toarray() for m in result.orders[:n + 1])
            errors[n].append(np.abs(np.linalg.eigvalsh(h) - exact).max())
    for n, (big, small) in errors.items():
        power = np.log(big / small) / np.log(2.0)
        assert power > n + 1 - 0.1, (n, power)
    assert errors[4][0] < errors[2][0] * 1e-2


def test_fixed_sz_is_refused_when_lambda_is_not_along_z():
    with pytest.raises(ModelError, match="does not conserve S\\^z"):
        dimer(T, (0.02, 0.0, 0.0), sector={"particles": 2, "sz": 0})


def test_lambda_along_z_keeps_sz_blocks():
    """lambda along z conserves S^z: a fixed sz is accepted, the exact levels per block are
    those of the full sector, and derive splits the manifold by S^z without a warning."""
    lam = (0.0, 0.0, 0.04)
    whole = spectrum(dimer(T, lam), 4).energies
    block = spectrum(dimer(T, lam, sector={"particles": 2, "sz": 0}), 2).energies
    np.testing.assert_allclose(block, whole[:2], atol=1e-12)
    result = derive(dimer(T, lam))
    assert not any("S^z is not conserved" in w for w in result.warnings)
    assert len(result.check.blocks) == 3


def test_lambda_off_z_warns_and_checks_one_block():
    result = derive(dimer(T, (0.02, 0.01, 0.0)))
    assert any("S^z is not conserved" in w and "'hopping'" in w for w in result.warnings)
    assert len(result.check.blocks) == 1
    assert result.check.max_abs_error[2] < 1e-5


def test_real_path_stays_real_and_complex_path_is_complex():
    from lowfold.build.hamiltonian import Hamiltonian

    assert Hamiltonian.of(dimer(T, (0.0, 0.0, 0.0))).dtype == np.float64
    assert Hamiltonian.of(dimer(T, (0.0, 0.0, 0.02))).dtype == np.complex128


def test_exported_effective_model_keeps_the_hidden_isotropy():
    """The order-4 effective model written as a model file (exchange, DM and anisotropy
    terms) has a degenerate triplet and the singlet of the rotated Hubbard dimer, ``-J'`` with
    ``J' = (sqrt(U^2 + 16 t'^2) - U)/2`` to O(t'^6/U^5) (hidden isotropy survives the
    readout and the export)."""
    from lowfold import export_text
    from helpers.modelfiles import model_of

    lam = np.array([0.03, -0.02, 0.05])
    exported = model_of(export_text(derive(dimer(T, lam, order=4), compare_exact=False)))
    levels = spectrum(exported, 4).energies
    t_prime2 = T**2 + lam @ lam
    j_prime = (np.sqrt(U**2 + 16 * t_prime2) - U) / 2
    np.testing.assert_allclose(levels[1:], levels[1], atol=1e-15)
    assert levels[0] == pytest.approx(-j_prime, abs=5 * t_prime2**3 / U**5 * 64)
    assert levels[1] == pytest.approx(0.0, abs=1e-12)
