"""Spin-orbit hopping with one vector per bond: ``soc = [[lx, ly, lz], ...]``.

A Hubbard chain of three sites (one electron each on average) with the bonds (0, 1) and
(1, 2) carrying different spin-orbit vectors ``lambda_01`` and ``lambda_12``.  At second
order every bond contributes its own dimer result independently (virtual hops on different
bonds do not interfere at this order), so per bond (Moriya, Phys. Rev. 120, 91 (1960); the
dimer derivation is in tests/test_spin_orbit_hopping.py and docs/model-files.md):

    J_ij = 4 (t^2 - lambda_ij^2)/U + 8 lambda_ij^2 / (3U),   D_ij = 8 t lambda_ij / U,
    G_ij = 8 (lambda_a lambda_b - delta_ab lambda_ij^2/3) / U,  constant -(t^2 + lambda_ij^2)/U.

Exact check: on a chain (a tree) a spin rotation of each site removes every ``T_ij = t 1 + i
lambda_ij . sigma = sqrt(t^2 + lambda_ij^2) R_ij`` bond by bond (the hidden isotropy of L.
Shekhtman, O. Entin-Wohlman & A. Aharony, PRL 69, 836 (1992), applied along the tree), so
the spectrum is that of the plain Hubbard chain with the real hoppings ``t'_ij = sqrt(t^2 +
lambda_ij^2)``; both are computed with QuSpin (tests/helpers/electrons.py) and compared with
lowfold's exact and effective levels.
"""

from __future__ import annotations

import numpy as np
import pytest

from helpers.cli import one_line_error, run
from helpers.electrons import hop_matrix, quspin_electron_levels
from lowfold import ModelError, derive, parse_model, spectrum

T, U = 0.1, 8.0
LAM_A = np.array([0.03, 0.0, 0.02])
LAM_B = np.array([0.0, -0.04, 0.01])


def chain(t=T, lam_a=LAM_A, lam_b=LAM_B, *, order=2, sector=None, soc=None):
    """Three sites, bonds (0, 1) and (1, 2); the second vector by parameter names."""
    hopping = {"type": "hopping", "strength": "t", "bonds": [[0, 1], [1, 2]],
               "soc": soc if soc is not None else [list(map(float, lam_a)), ["bx", "by", "bz"]]}
    return parse_model({
        "lattice": {"shape": "chain", "size": [3]}, "site": {"type": "electron"},
        "sector": sector or {"particles": 3},
        "parameters": {"t": t, "U": U, "bx": float(lam_b[0]), "by": float(lam_b[1]),
                       "bz": float(lam_b[2])},
        "term": [hopping, {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": order}})


def couplings(result, kind, sites, order=2):
    found = [c for c in result.couplings if c.kind == kind and c.sites == sites]
    assert len(found) == 1, (kind, sites)
    return np.asarray(found[0].orders[order], dtype=float)


def quspin_levels(g=1.0, rotated=False, k=None):
    """QuSpin levels of the chain with hoppings scaled by g; ``rotated``: the plain chain with
    ``t'_ij = sqrt(t^2 + lambda_ij^2)``."""
    hops = []
    for (i, j), lam in (((0, 1), LAM_A), ((1, 2), LAM_B)):
        if rotated:
            hops.append((i, j, hop_matrix(g * np.sqrt(T**2 + lam @ lam))))
        else:
            hops.append((i, j, hop_matrix(g * T, g * lam)))
    return quspin_electron_levels(3, hops, U, 3, k=k)


def test_each_bond_has_its_own_moriya_couplings():
    result = derive(chain(), compare_exact=False)
    for sites, lam in (((0, 1), LAM_A), ((1, 2), LAM_B)):
        l2 = lam @ lam
        assert couplings(result, "exchange", sites) == pytest.approx(
            4 * (T**2 - l2) / U + 8 * l2 / (3 * U), rel=1e-10)
        np.testing.assert_allclose(couplings(result, "dm", sites), 8 * T * lam / U, atol=1e-14)
        np.testing.assert_allclose(couplings(result, "anisotropy", sites),
                                   8 * (np.outer(lam, lam) - np.eye(3) * l2 / 3) / U, atol=1e-14)
    constant = [c for c in result.couplings if c.kind == "constant"][0].orders[2]
    assert constant == pytest.approx(-(2 * T**2 + LAM_A @ LAM_A + LAM_B @ LAM_B) / U, rel=1e-10)
    assert not [c for c in result.couplings if c.kind == "exchange" and c.sites == (0, 2)]


def test_exact_levels_are_the_rotated_plain_chain():
    reference = quspin_levels()
    np.testing.assert_allclose(reference, quspin_levels(rotated=True), atol=1e-12)
    np.testing.assert_allclose(spectrum(chain(), 20).energies, reference, atol=1e-12)


def test_effective_levels_converge_to_quspin_like_the_next_order():
    """Odd orders vanish on the open chain (no loop), so the error after order 2 falls like
    g^4 and after order 4 like g^6 when t and both lambdas are scaled by g: at least the
    (n+1)-th power."""
    errors = {2: [], 4: []}
    for g in (1.0, 0.5):
        result = derive(chain(g * T, g * LAM_A, g * LAM_B, order=4), compare_exact=False)
        exact = quspin_levels(g, k=8)
        for n in errors:
            h = sum(m.toarray() for m in result.orders[:n + 1])
            errors[n].append(np.abs(np.linalg.eigvalsh(h) - exact).max())
    for n, (big, small) in errors.items():
        assert np.log2(big / small) > n + 1 - 0.1, (n, big, small)


def test_a_triangle_with_phases_and_three_vectors_matches_quspin():
    """On a loop the spin-orbit vectors cannot all be rotated away: the spectrum of a Hubbard
    triangle with a phase and its own vector on each bond, against QuSpin's build of the
    same hops ``exp(i phi_ij) (t 1 + i lambda_ij . sigma)``."""
    bonds = [(0, 1), (1, 2), (2, 0)]
    vectors = [(0.03, 0.0, 0.02), (0.0, -0.04, 0.01), (0.05, 0.02, 0.0)]
    phases = [0.3, -0.2, 0.7]
    model = parse_model({
        "lattice": {"shape": "graph", "sites": 3, "bonds": [[0, 1], [1, 2], [0, 2]]},
        "site": {"type": "electron"}, "sector": {"particles": 3},
        "term": [{"type": "hopping", "strength": T, "bonds": [list(b) for b in bonds],
                  "phases": phases, "soc": [list(v) for v in vectors]},
                 {"type": "hubbard", "strength": U}]})
    hops = [(i, j, hop_matrix(T, v, phase=p)) for (i, j), v, p in zip(bonds, vectors, phases)]
    np.testing.assert_allclose(spectrum(model, 20).energies, quspin_electron_levels(3, hops, U, 3),
                               atol=1e-12)


def test_vectors_along_z_on_every_bond_keep_sz():
    lam_a, lam_b = np.array([0, 0, 0.03]), np.array([0, 0, -0.05])
    whole = spectrum(chain(lam_a=lam_a, lam_b=lam_b), 20).energies
    block = spectrum(chain(lam_a=lam_a, lam_b=lam_b, sector={"particles": 3, "sz": 0.5}), 9)
    assert block.energies[0] == pytest.approx(whole[0], abs=1e-12)
    for level in block.energies:                      # every level of the block is a level
        assert np.abs(whole - level).min() < 1e-12
    with pytest.raises(ModelError, match="does not conserve S\\^z"):
        chain(lam_a=lam_a, lam_b=LAM_B, sector={"particles": 3, "sz": 0.5})


@pytest.mark.parametrize("soc, match", [
    ([[0, 0, 0.1]] * 3, "3 vectors for 2 bonds"),
    ([[0, 0, 0.1], ["nope", 0, 0]], "parameter 'nope' is not defined"),
    ([[0, 0, 0.1], [0, 0]], r"\[\[lx, ly, lz\], \.\.\.\]"),
    ([[0, 0, 0.1], [0, 0, "t", 1]], r"\[\[lx, ly, lz\], \.\.\.\]"),
])
def test_bad_per_bond_vectors_are_refused(soc, match):
    with pytest.raises(ModelError, match=match):
        chain(soc=soc)


def test_per_bond_vectors_need_explicit_bonds():
    with pytest.raises(ModelError, match="needs explicit bonds"):
        parse_model({"lattice": {"shape": "chain", "size": [3]}, "site": {"type": "electron"},
                     "term": [{"type": "hopping", "strength": 1.0,
                               "soc": [[0, 0, 0.1], [0, 0, 0.2]]}]})


def test_cli_says_one_line_for_a_count_mismatch(tmp_path):
    path = tmp_path / "chain.toml"
    path.write_text('[lattice]\nshape = "chain"\nsize = [3]\n[site]\ntype = "electron"\n'
                    '[[term]]\ntype = "hopping"\nstrength = 1.0\nbonds = [[0, 1], [1, 2]]\n'
                    'soc = [[0.0, 0.0, 0.1]]\n')
    message = one_line_error(run("spectrum", str(path)))
    assert "1 vector for 2 bonds" in message and "term[0]" in message
