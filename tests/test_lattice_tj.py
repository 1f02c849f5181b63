"""The t-J model of the infinite lattice: the Hubbard model read out on {0, u, d} per site.

``filling = "mixed"`` keeps every particle number of the lowest one-site level of
H0 = U n_up n_dn, so the linked-cluster expansion sums X-operator strings with Jordan-Wigner
signs (docs/local-readout.md).  Published couplings, in lowfold's conventions:

    H = -t sum_<ij>,s P (c+_is c_js + h.c.) P + J sum_<ij> (S_i.S_j - n_i n_j / 4)
        - (J/4) sum_(i,j,k) sum_s P (c+_is n_j,-s c_ks - c+_is c+_j,-s c_js c_k,-s + h.c.) P

with J = 4 t^2/U (Chao, Spalek & Oles, J. Phys. C 10, L271 (1977); MacDonald, Girvin &
Yoshioka, Phys. Rev. B 37, 9753 (1988)); the first-order hopping is t.

Checks: the linked-cluster identity on open clusters (sum of the weights of the subclusters
= the cluster's own effective Hamiltonian, string by string and coupling by coupling); the
classes of the chain and the square lattice at second order; the fourth order of the chain
against the central bond of a long open chain (the weights of the bulk); the error of the
order-n couplings put on a periodic ring, against its exact levels, falling like t^(n+1).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from helpers.cli import run_all, succeeded
from helpers.lattice_models import parse, tj_text

import lowfold
from lowfold.jobs.lattice import derive_infinite, open_cluster_sum
from lowfold.readout.local_basis import product_manifold
from lowfold.readout.local_names import name_strings
from lowfold.readout.local_strings import strings_of_orders

T, U = 1.0, 10.0
J = 4 * T**2 / U
ATOL = 1e-10


def derive_on(model, cluster, order):
    finite = lowfold.Model(cluster, model.site, model.terms, lowfold.Sector(), model.parameters,
                           model.perturbation)
    return lowfold.derive(finite, order, compare_exact=False)


def cluster_and_sum(model, shape, size, order):
    """The open cluster's own derive, its local basis, its X-operator strings, and the sum
    of the weights of its subclusters (same keys)."""
    cluster = lowfold.make_lattice(shape, size, "open")
    direct = derive_on(model, cluster, order)
    basis, _ = product_manifold(direct.model, direct.manifold.states)
    own = strings_of_orders(basis, list(direct.orders))
    summed = {tuple((s, a, b) for s, (a, b) in key): v
              for key, v in open_cluster_sum(model, cluster, order).items()}
    return direct, basis, own, summed


def assert_same_strings(own, summed, order):
    zero = np.zeros(order + 1)
    for key in set(own) | set(summed):                   # string by string
        np.testing.assert_allclose(summed.get(key, zero), own.get(key, zero), atol=ATOL,
                                   err_msg=str(key))


@pytest.mark.parametrize("shape, size, order", [("chain", [5], 4), ("square", [2, 2], 4),
                                                ("square", [3, 2], 3)])
def test_subcluster_weights_sum_to_the_cluster(shape, size, order):
    # Gelfand, Singh & Huse, J. Stat. Phys. 59, 1093 (1990): on a finite cluster the
    # weights of its connected subclusters sum to its own effective Hamiltonian
    model = parse(tj_text(shape, order=order))
    direct, basis, own, summed = cluster_and_sum(model, shape, size, order)
    assert_same_strings(own, summed, order)
    mine, _ = name_strings(direct.model, basis, summed, order + 1)
    named = {(c.kind, c.sites, c.operator): c.orders for c in mine}
    theirs = {(c.kind, tuple(c.sites), c.operator): c.orders for c in direct.couplings}
    assert set(named) == set(theirs)                     # coupling by coupling
    for key, orders in theirs.items():
        for m in range(order + 1):
            assert named[key].get(m, 0.0) == pytest.approx(orders.get(m, 0.0), abs=ATOL), key
    # not trivial: every bond hops at first order and exchanges at second, three-site terms
    kinds = {kind for kind, _, _ in named}
    assert {"hopping", "exchange", "three-site"} <= kinds


def by_class(result) -> dict:
    return {(c.kind, c.name): c for c in result.classes}


def test_chain_classes_at_second_order():
    result = derive_infinite(parse(tj_text("chain", order=2)), 2)
    classes = by_class(result)
    assert set(classes) == {("hopping", "nearest"), ("exchange", "nearest"),
                            ("three-site", "3 sites (1, 1, 2)")}
    hop, exchange = classes[("hopping", "nearest")], classes[("exchange", "nearest")]
    three = classes[("three-site", "3 sites (1, 1, 2)")]
    assert hop.orders == {1: pytest.approx(T)} and hop.formula == "t"
    assert exchange.orders == {2: pytest.approx(J)} and exchange.formula == "4 t^2/U"
    assert three.orders == {2: pytest.approx(J / 4)} and three.formula == "t^2/U"
    assert hop.multiplicity == exchange.multiplicity == three.multiplicity == 1
    left, middle, right = (x for (x,) in three.positions)       # the middle one second
    assert (middle - left, right - middle) == (1.0, 1.0)
    assert result.manifold.readout == "local operators ({0 u d} per site)"
    data = result.to_dict()["classes"]
    assert {(c["kind"], c["class"]) for c in data} == set(classes)


def test_square_classes_at_second_order():
    # per site: 2 bonds, 4 bent paths i-j-k (k at the diagonal) and 2 straight ones
    result = derive_infinite(parse(tj_text("square", order=2)), 2)
    classes = by_class(result)
    assert set(classes) == {("hopping", "nearest"), ("exchange", "nearest"),
                            ("three-site", "3 sites (1, 1, 1.414)"),
                            ("three-site", "3 sites (1, 1, 2)")}
    assert classes[("hopping", "nearest")].multiplicity == 2
    assert classes[("exchange", "nearest")].orders[2] == pytest.approx(J)
    bent = classes[("three-site", "3 sites (1, 1, 1.414)")]
    straight = classes[("three-site", "3 sites (1, 1, 2)")]
    assert (bent.multiplicity, straight.multiplicity) == (4, 2)
    assert bent.orders[2] == pytest.approx(J / 4) and straight.orders[2] == pytest.approx(J / 4)


def test_fourth_order_of_the_chain_is_the_bulk_of_an_open_chain():
    # an order-4 coupling on a bond (three sites) uses processes on at most 4 bonds around
    # it: on the 8-site open chain the bond (3, 4) and the path (2, 3, 4) are bulk
    order = 4
    model = parse(tj_text("chain", order=order))
    infinite = by_class(derive_infinite(model, order))
    chain = derive_on(model, lowfold.make_lattice("chain", [8], "open"), order)
    finite = {(c.kind, tuple(c.sites)): c.orders for c in chain.couplings}
    pairs = [(("hopping", "nearest"), ("hopping", (3, 4))),
             (("exchange", "nearest"), ("exchange", (3, 4))),
             (("three-site", "3 sites (1, 1, 2)"), ("three-site", (2, 3, 4)))]
    for lattice_key, finite_key in pairs:
        for m in (3, 4):
            assert infinite[lattice_key].orders.get(m, 0.0) == pytest.approx(
                finite[finite_key].get(m, 0.0), abs=1e-10), (lattice_key, m)
    assert abs(infinite[("exchange", "nearest")].orders[4]) > 1e-4     # there is a 4th order
    for key in infinite:                                 # every class is met in the bulk
        assert any(k[0] == key[0] for k in finite), key


def test_error_on_a_ring_falls_like_the_next_power():
    # the couplings to order n, put on a periodic ring, miss its exact levels (every block
    # of particle number and S^z) by O(t^(n+1)/U^n)
    errors = []
    for t in (0.04, 0.02):
        model = parse(tj_text("chain", order=3, t=t, u=1.0))
        result = lowfold.derive(model, 3, compare_exact=True)
        assert result.check is not None and result.check.cluster.startswith("periodic chain")
        errors.append(result.check.max_abs_error)
    for n in (1, 2, 3):
        power = np.log2(errors[0][n] / errors[1][n])
        assert power == pytest.approx(n + 1, abs=0.2), (n, power)


def test_cli_json_classes_and_a_bad_filling(tmp_path):
    good = tmp_path / "tj.toml"
    good.write_text(tj_text("chain", order=2))
    bad = tmp_path / "bad.toml"
    bad.write_text(tj_text("chain", order=2).replace('filling = "mixed"', 'filling = "half"'))
    runs = run_all({"json": ["derive", good, "--json", "--no-check"],
                    "bad": ["derive", bad, "--no-check"]})
    data = json.loads(succeeded(runs["json"]))
    found = {(c["kind"], c["class"]): c for c in data["classes"]}
    assert found[("exchange", "nearest")]["formula"] == "4 t^2/U"
    assert found[("three-site", "3 sites (1, 1, 2)")]["orders"]["2"] == pytest.approx(J / 4)
    assert runs["bad"].returncode == 2 and "Traceback" not in runs["bad"].stderr
    assert runs["bad"].stderr.count("\n") == 1 and "perturbation.filling" in runs["bad"].stderr


def test_square_couplings_on_a_torus_fall_like_the_next_power():
    # the 3x3 torus: the fermion signs of bent three-site paths and of bonds across the
    # boundary in two dimensions; blocks of 2 and 3 electrons (every S^z) keep it fast
    from lowfold.jobs.lattice import linked_cluster_sum
    from lowfold.jobs.lattice_local_check import local_lattice_check
    errors = []
    for t in (0.04, 0.02):
        model = parse(tj_text("square", order=2, t=t, u=1.0))
        result = derive_infinite(model, 2)
        check, _, _ = local_lattice_check(result, linked_cluster_sum(model, 2),
                                          levels="all", particles=(2, 3))
        assert check.cluster == "periodic square 3x3, 9 sites"
        errors.append(check.max_abs_error)
    for n in (1, 2):
        power = np.log2(errors[0][n] / errors[1][n])
        assert power == pytest.approx(n + 1, abs=0.2), (n, power)


def test_a_hopping_without_bonds_is_on_the_nearest_bonds():
    # a two-site term names no bonds: the nearest ones, as on a finite cluster
    plain = derive_infinite(parse(tj_text("chain", order=2)), 2)
    implicit = derive_infinite(parse(tj_text("chain", order=2).replace('bonds = "nearest"\n', "")),
                               2)
    assert [(c.kind, c.name, c.orders) for c in implicit.classes] == \
        [(c.kind, c.name, c.orders) for c in plain.classes]


def test_linked_cluster_identity_with_three_site_groups_in_the_perturbation():
    # V holds groups of three sites (the bent and straight three-site paths of the square
    # lattice, ordered: the middle site second) beside the hopping bonds; the weights of
    # the subclusters of an open 3x2 cluster still sum to its own effective Hamiltonian
    order = 2
    text = tj_text("square", order=order).replace("[perturbation]", """[[term]]
label = "three"
type = "three-site"
strength = 0.3
[perturbation]""")
    _, _, own, summed = cluster_and_sum(parse(text), "square", [3, 2], order)
    # the three-site term enters at first order: strings on three sites of size 0.3
    assert any(len(key) == 3 and abs(abs(v[1]) - 0.3) < 1e-12 for key, v in own.items())
    assert_same_strings(own, summed, order)
