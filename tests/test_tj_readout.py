"""Local-operator readout of the doped Mott insulator: the t-J model with three-site terms.

Source of the couplings: the Hubbard model at large U away from half filling is, to second
order in t/U, the t-J model with J = 4 t^2/U and the correlated three-site hopping of
coefficient J/4 (Chao, Spalek & Oles, J. Phys. C 10, L271 (1977); MacDonald, Girvin &
Yoshioka, Phys. Rev. B 37, 9753 (1988)), in lowfold's conventions (docs/local-readout.md):

    H = -t sum_<ij>,s P (c+_is c_js + h.c.) P + J sum_<ij> (S_i.S_j - n_i n_j / 4)
        - (J/4) sum_(i,j,k) sum_s P (c+_is n_j,-s c_ks - c+_is c+_j,-s c_js c_k,-s + h.c.) P,

the last sum over paths i-j-k with i != k (each unordered pair {i, k} once, j the middle).
The first-order projected hopping is t itself.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.modelfiles import hubbard_text, model_of

from lowfold.jobs.derive import derive
from lowfold.readout.local_basis import product_manifold
from lowfold.readout.local_strings import matrix_of_strings, strings_of_orders
from lowfold.results import EffectiveModel

T, U = 0.1, 1.0


def _tj(shape, size, particles, t=T, order=2):
    return derive(model_of(hubbard_text(shape, size, t=t, U=U, particles=particles,
                                        order=order)), order, compare_exact=False)


def _by_kind(result):
    out = {}
    for c in result.couplings:
        out.setdefault(c.kind, {})[tuple(c.sites)] = c
    return out


def _assert_tj(result, bonds, paths, t=T):
    j = 4 * t**2 / U
    kinds = _by_kind(result)
    assert set(kinds) == {"hopping", "exchange", "three-site"}, kinds.keys()
    assert set(kinds["hopping"]) == set(bonds) and set(kinds["exchange"]) == set(bonds)
    for bond in bonds:
        hop = kinds["hopping"][bond].orders
        assert hop[1] == pytest.approx(t, rel=1e-12) and abs(hop.get(2, 0.0)) < 1e-12
        assert kinds["exchange"][bond].orders[2] == pytest.approx(j, rel=1e-9)
    assert set(kinds["three-site"]) == set(paths)
    for path in paths:
        assert kinds["three-site"][path].orders[2] == pytest.approx(j / 4, rel=1e-9)


def test_three_site_chain_with_two_electrons():
    result = _tj("chain", [3], 2)
    assert result.manifold.readout.startswith("local operators ({0 u d}")
    _assert_tj(result, [(0, 1), (1, 2)], [(0, 1, 2)])


def test_plaquette_with_three_electrons():
    # 2x2 open square: sites 0 1 / 2 3, bonds 0-1, 0-2, 1-3, 2-3; each site is the middle
    # of one path between its two neighbours
    result = _tj("square", [2, 2], 3)
    paths = [(1, 0, 2), (0, 1, 3), (0, 2, 3), (1, 3, 2)]
    _assert_tj(result, [(0, 1), (0, 2), (1, 3), (2, 3)], paths)


def test_all_particle_numbers_give_the_same_couplings():
    # without a particle number the manifold is the whole product {0, u, d}^3: the
    # decomposition is unique there, and it agrees with the fixed-N slice above
    text = hubbard_text("chain", [3], t=T, U=U, order=2).replace("particles = 3", "")
    result = derive(model_of(text), 2, compare_exact=False)
    assert "at fixed particle number" not in result.manifold.readout
    _assert_tj(result, [(0, 1), (1, 2)], [(0, 1, 2)])


@pytest.mark.parametrize("shape, size, particles", [("chain", [4], 3), ("square", [2, 2], 3)])
def test_spectrum_error_falls_like_the_next_power(shape, size, particles):
    # the order-n effective spectrum misses the exact levels by O(t^(n+1)/U^n)
    errors = []
    for t in (0.04, 0.02):
        model = model_of(hubbard_text(shape, size, t=t, U=U, particles=particles, order=2))
        errors.append(derive(model, 2).check.max_abs_error)
    for n in (1, 2):
        power = np.log2(errors[0][n] / errors[1][n])
        assert power == pytest.approx(n + 1, abs=0.15), (n, power)


def test_strings_round_trip_on_the_whole_product():
    # the string expansion on the hull is unique: strings -> matrix -> strings is the identity
    text = hubbard_text("chain", [3], t=T, U=U, order=2).replace("particles = 3", "")
    result = derive(model_of(text), 2, compare_exact=False)
    basis, _ = product_manifold(result.model, result.manifold.states)
    strings = strings_of_orders(basis, [result.matrix(2)])
    back = matrix_of_strings(basis, {k: v[0] for k, v in strings.items()})
    np.testing.assert_allclose(back.toarray(), result.matrix(2), atol=1e-13)
    assert len(strings) < 200          # far fewer than the 9^3 strings of three sites


def test_unnamed_terms_are_strings_and_survive_json():
    # a Zeeman field on site 0, h S^z_0, has no name: two one-site strings, +-h/2
    field = '\n[[term]]\ntype = "field"\naxis = "z"\nstrength = 0.03\nsites = [0]\n'
    text = hubbard_text("chain", [3], t=T, U=U, particles=2, order=1, terms=field)
    result = derive(model_of(text), 1, compare_exact=False)
    strings = {c.operator: c.value for c in result.couplings if c.kind == "string"}
    assert strings == {"|u><u|_0": pytest.approx(0.015), "|d><d|_0": pytest.approx(-0.015)}
    data = result.to_dict()
    assert {c.get("operator") for c in data["couplings"] if c["kind"] == "string"} == set(strings)
    again = EffectiveModel.from_dict(data)
    assert {c.operator for c in again.couplings if c.kind == "string"} == set(strings)
    assert data["effective"]["orders"]        # the matrices stay in the JSON
