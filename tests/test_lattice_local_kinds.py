"""Infinite lattices read out in local operators beyond electrons: bosons and spins.

Bose-Hubbard chain, H = -t sum (b+_i b_j + h.c.) + (U/2) sum n (n - 1) + mu sum n with
mu = -U: the one-site levels n = 1 and n = 2 are degenerate (energy -U), and
``filling = "mixed"`` keeps both, a particle (2) moving on a Mott background (1).  Second-order
strong-coupling values for a particle on the n = 1 Mott state (the scheme of Freericks &
Monien, Phys. Rev. B 53, 2691 (1996), closed forms derived in tests/test_boson_readout.py
for filling n = 1, coordination 2):

- Mott energy per site -2 n (n+1) t^2/U = -4 t^2/U (plus -U from H0);
- particle hopping (n+1) t = 2 t at first order, n (n+1) t^2/U = 2 t^2/U to the next-nearest
  neighbour at second order;
- particle energy above the Mott state [4 n(n+1) - n(n+2)] t^2/U = 5 t^2/U.

Spin-2 chain with H0 = D sum ((S^z)^4 - (S^z)^2), D > 0: the one-site levels S^z = +1, 0, -1
are degenerate (energy 0; S^z = +-2 costs 12 D), a three-state manifold read out with the
spin kinds (exchange, biquadratic, single-ion, field) of the spin-2 operators projected onto
it, V = J sum S_i.S_j.  At first order P V P is the projected exchange itself: one class,
``exchange`` nearest, value J.

Both: the linked-cluster identity on an open chain (string by string), and the error of the
order-n couplings on a periodic ring against its exact levels falling like (t/U)^(n+1).
Last, easy-axis spin-1 (two kept states) on the infinite chain: the pseudo-spin-1/2 route.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.lattice_models import boson_text, parse

import lowfold
from lowfold.jobs.lattice import derive_infinite, open_cluster_sum
from lowfold.readout.local_basis import product_manifold
from lowfold.readout.local_strings import strings_of_orders

U, D = 1.0, 1.0


def spin2_text(j: float, order: int) -> str:
    return f"""
[lattice]
shape = "chain"
boundary = "infinite"
[site]
type = "spin"
spin = 2
[parameters]
J = {j}
[[term]]
label = "quartic"
type = "product"
operators = ["Sz", "Sz", "Sz", "Sz"]
sites = "all"
strength = {D}
[[term]]
label = "quadratic"
type = "product"
operators = ["Sz", "Sz"]
sites = "all"
strength = {-D}
[[term]]
label = "exchange"
type = "exchange"
strength = "J"
bonds = "nearest"
[perturbation]
unperturbed = ["quartic", "quadratic"]
order = {order}
"""


def by_class(result) -> dict:
    return {(c.kind, c.name): c for c in result.classes if c.kind != "string"}


def test_bose_hubbard_particle_on_the_mott_state():
    t = 0.05
    result = derive_infinite(parse(boson_text(t, 2)), 2)
    assert result.manifold.readout == "local operators ({1 2} per site)"
    classes = by_class(result)
    hop = classes[("particle-hopping", "nearest")]
    assert hop.orders == {1: pytest.approx(2 * t)} and hop.formula == "2 t"
    assert classes[("particle-hopping", "next-nearest")].orders[2] == pytest.approx(2 * t**2 / U)
    assert classes[("particle-energy", "site")].orders[2] == pytest.approx(5 * t**2 / U)
    constant = classes[("constant", "constant")]
    assert constant.orders[0] == pytest.approx(-U)
    assert constant.orders[2] == pytest.approx(-4 * t**2 / U)


@pytest.mark.parametrize("text", [boson_text(0.05, 3, max_occupation=4), spin2_text(0.05, 3)],
                         ids=["bosons", "spin-2"])
def test_subcluster_weights_sum_to_the_cluster(text):
    # Gelfand, Singh & Huse, J. Stat. Phys. 59, 1093 (1990)
    order = 3
    model = parse(text)
    cluster = lowfold.make_lattice("chain", [4], "open")
    finite = lowfold.Model(cluster, model.site, model.terms, lowfold.Sector(), model.parameters,
                           model.perturbation)
    direct = lowfold.derive(finite, order, compare_exact=False)
    basis, _ = product_manifold(direct.model, direct.manifold.states)
    own = strings_of_orders(basis, list(direct.orders))
    summed = {tuple((s, a, b) for s, (a, b) in key): v
              for key, v in open_cluster_sum(model, cluster, order).items()}
    zero = np.zeros(order + 1)
    assert len(own) > 20
    for key in set(own) | set(summed):
        np.testing.assert_allclose(summed.get(key, zero), own.get(key, zero), atol=1e-12,
                                   err_msg=str(key))


def test_spin2_first_order_is_the_projected_exchange():
    j = 0.05
    result = derive_infinite(parse(spin2_text(j, 2)), 2)
    assert result.manifold.readout == "local operators ({+1 0 -1} per site)"
    first = [c for c in result.classes if 1 in c.orders]
    assert [(c.kind, c.name) for c in first] == [("exchange", "nearest")]
    assert first[0].orders[1] == pytest.approx(j) and first[0].multiplicity == 1
    kinds = {c.kind for c in result.classes}
    assert {"single-ion", "biquadratic"} <= kinds        # second order: spin-2 virtual states


@pytest.mark.parametrize("text_of", [lambda x: boson_text(x, 2), lambda x: spin2_text(x, 2)],
                         ids=["bosons", "spin-2"])
def test_error_on_a_ring_falls_like_the_next_power(text_of):
    errors = []
    for x in (0.04, 0.02):
        result = lowfold.derive(parse(text_of(x)), 2, compare_exact=True)
        assert result.check is not None, result.warnings
        errors.append(result.check.max_abs_error)
    for n in (1, 2):
        power = np.log2(errors[0][n] / errors[1][n])
        assert power == pytest.approx(n + 1, abs=0.2), (n, power)


def test_easy_axis_spin1_chain_is_an_infinite_xxz_chain():
    # H0 = D sum (S^z)^2 with D < 0 keeps S^z = +1, -1: a pseudo-spin-1/2 per site, read out
    # in Pauli strings.  Second order (derived in tests/test_spin1_readout.py, common
    # practice): J_z = 4 J + J^2/|D|, J_xy = -J^2/|D|, and D - J^2/(4|D|) per site; on the
    # chain no second-order process reaches beyond a bond
    d, j = -1.0, 0.1
    text = f"""
[lattice]
shape = "chain"
boundary = "infinite"
[site]
type = "spin"
spin = 1
[[term]]
label = "anisotropy"
type = "product"
operators = ["Sz", "Sz"]
sites = "all"
strength = {d}
[[term]]
label = "exchange"
type = "exchange"
strength = {j}
bonds = "nearest"
[perturbation]
unperturbed = ["anisotropy"]
order = 2
"""
    result = derive_infinite(parse(text), 2)
    jz, jxy = 4 * j + j**2 / abs(d), -j**2 / abs(d)
    iso = (2 * jxy + jz) / 3                       # exchange = trace / 3, anisotropy the rest
    classes = {(c.kind, c.name): c for c in result.classes}
    assert set(classes) == {("constant", "constant"), ("exchange", "nearest"),
                            ("anisotropy", "nearest")}
    assert classes[("exchange", "nearest")].value == pytest.approx(iso, rel=1e-10)
    np.testing.assert_allclose(np.diag(classes[("anisotropy", "nearest")].value),
                               [jxy - iso, jxy - iso, jz - iso], rtol=1e-10, atol=1e-14)
    assert classes[("constant", "constant")].value == pytest.approx(d - j**2 / (4 * abs(d)))
