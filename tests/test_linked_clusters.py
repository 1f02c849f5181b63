"""Infinite lattices by the linked-cluster expansion: checks from outside.

- Takahashi, J. Phys. C 10, 1289 (1977): half-filled Hubbard chain at order 4,
  J1 = 4t^2/U - 16t^4/U^3, J2 = 4t^4/U^3.
- Two-site Hubbard model (exact, common practice): singlet-triplet gap (sqrt(U^2+16t^2) - U)/2.
- Linked-cluster identity (Gelfand, Singh & Huse, J. Stat. Phys. 59, 1093 (1990)): on a
  finite open cluster the weights of its subclusters sum to the cluster's own effective
  Hamiltonian, order by order.
- Pfeuty, Ann. Phys. 57, 79 (1970): energy per site of the transverse-field Ising chain.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import lowfold
from helpers.exact import pfeuty_per_site
from lowfold.jobs.lattice import energy_per_site, open_cluster_sum
from lowfold.readout.pauli import parse_pauli_string

T, U = 1.0, 10.0


def hubbard(shape="chain", *, boundary="infinite", size=None, order=4, extra=""):
    """Hubbard model with a chemical potential -U/2 in H0 (selects one electron per site)."""
    lattice = f'shape = "{shape}"\nboundary = "{boundary}"\n' + (f"size = {size}\n" if size else "")
    text = f"""
[lattice]
{lattice}
[site]
type = "electron"
[parameters]
t = {T}
U = {U}
mu = {-U / 2}
[[term]]
label = "hop"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
[[term]]
label = "mu"
type = "potential"
strength = "mu"
{extra}
[perturbation]
unperturbed = ["U", "mu"]
order = {order}
"""
    import tomllib
    return lowfold.parse_model(tomllib.loads(text))


def classes_of(result):
    return {(c.kind, c.name): c for c in result.classes}


def test_takahashi_chain_order_4():
    # Takahashi, J. Phys. C 10, 1289 (1977)
    found = classes_of(lowfold.derive(hubbard(order=4)))
    j1, j2 = found[("exchange", "nearest")], found[("exchange", "next-nearest")]
    assert j1.orders[2] == pytest.approx(4 * T**2 / U, rel=1e-10)
    assert j1.orders[4] == pytest.approx(-16 * T**4 / U**3, rel=1e-10)
    assert j2.orders[4] == pytest.approx(4 * T**4 / U**3, rel=1e-10)
    assert j1.multiplicity == 1 and j2.multiplicity == 1
    assert [abs(a - b) for a, b in zip(*j1.positions)] == [1.0]


def exchange_of(terms, i, j, order):
    """J of J S_i.S_j from the Pauli coefficients (S = sigma/2: J = 4 c(Z_i Z_j))."""
    return 4 * terms.get(((i, "Z"), (j, "Z")), np.zeros(order + 1))


def test_one_bond_graph_matches_two_site_closed_form_to_order_8():
    # exact two-site singlet-triplet gap (sqrt(U^2 + 16 t^2) - U)/2; its binomial series
    # in x = t/U is U/2 (8x^2 - 32x^4 + 256x^6 - 2560x^8 + ...) (common practice)
    model = hubbard()
    terms = open_cluster_sum(model, model.lattice.patch(2), 8)
    j = exchange_of(terms, 0, 1, 8)
    x = T / U
    assert j[2::2] == pytest.approx([U / 2 * c * x**p for c, p in
                                     ((8, 2), (-32, 4), (256, 6), (-2560, 8))], rel=1e-8)
    exact = (math.sqrt(U**2 + 16 * T**2) - U) / 2
    next_term = U / 2 * 28672 * x**10                # 7 y^5/256 with y = 16 x^2
    assert 0 < exact - j.sum() < next_term              # alternating series


def finite_terms(model_infinite, cluster, order):
    """Pauli coefficients per order of derive on the open cluster itself."""
    finite = lowfold.Model(cluster, model_infinite.site, model_infinite.terms,
                           lowfold.Sector(), model_infinite.parameters,
                           model_infinite.perturbation)
    result = lowfold.derive(finite, order, compare_exact=False)
    return {tuple(sorted(parse_pauli_string(t.operator))):
            np.array([t.orders.get(m, 0.0) for m in range(order + 1)]) for t in result.terms}


def assert_same_operator(a, b, atol=1e-9):
    for key in set(a) | set(b):
        np.testing.assert_allclose(a.get(key, 0.0), b.get(key, 0.0), atol=atol, err_msg=str(key))


@pytest.mark.parametrize("shape, size, order", [
    ("chain", [4], 4), ("chain", [5], 6), ("ladder", [3], 4), ("triangular", [3, 2], 3)])
def test_linked_cluster_identity(shape, size, order):
    model = hubbard(shape)
    cluster = lowfold.make_lattice(shape, size, "open")
    assert_same_operator(open_cluster_sum(model, cluster, order, prune=False),
                         finite_terms(model, cluster, order))


def test_tree_pruning_changes_nothing():
    model = hubbard("ladder")
    cluster = lowfold.make_lattice("ladder", [3], "open")
    assert_same_operator(open_cluster_sum(model, cluster, 4, prune=True),
                         open_cluster_sum(model, cluster, 4, prune=False))
    pruned = classes_of(lowfold.derive(hubbard("chain", order=5)))
    full = classes_of(lowfold.jobs.lattice.derive_infinite(hubbard("chain"), 5, prune=False))
    for key in full:
        assert pruned[key].orders == pytest.approx(full[key].orders, abs=1e-12)


def ising(order):
    """Transverse-field Ising chain H = -sum sigma^z - g sum sigma^x sigma^x (g = 1 here, so
    the coefficient of order m is that of g^m; axes rotated so that H0 is diagonal).  By
    Kramers-Wannier self-duality its energy per site is the same function of g as that of
    the ordered side -sum s^x s^x - g sum s^z (Pfeuty 1970)."""
    import tomllib
    text = f"""
[lattice]
shape = "chain"
boundary = "infinite"
[site]
type = "spin"
[[term]]
label = "field"
type = "field"
axis = "z"
strength = -2.0
[[term]]
label = "zz"
type = "product"
operators = ["Sx", "Sx"]
bonds = "nearest"
strength = -4.0
[perturbation]
unperturbed = ["field"]
order = {order}
"""
    return lowfold.parse_model(tomllib.loads(text))


def test_transverse_field_ising_energy_per_site_pfeuty():
    order = 8
    got = energy_per_site(ising(order), order)
    want = [float(c) for c in pfeuty_per_site(order)]
    np.testing.assert_allclose(got, want, atol=1e-10)


@pytest.mark.parametrize("extra, change, words", [
    ('[[term]]\nlabel = "V"\ntype = "interaction"\nstrength = 1.0\nbonds = "nearest"\n',
     ["U", "mu", "V"], "H0 term 'V'"),
])
def test_bond_term_in_h0_is_refused(extra, change, words):
    model = hubbard(extra=extra)
    model = lowfold.Model(model.lattice, model.site, model.terms, model.sector,
                          model.parameters, lowfold.PerturbationSpec(tuple(change), 2))
    with pytest.raises(lowfold.ModelError, match=words):
        lowfold.derive(model)


def test_window_and_fixed_total_are_refused():
    model = hubbard()
    window = lowfold.Model(model.lattice, model.site, model.terms, model.sector, model.parameters,
                           lowfold.PerturbationSpec(("U", "mu"), 2, None, (-10.0, 1.0)))
    with pytest.raises(lowfold.ModelError, match="energy window"):
        lowfold.derive(window)
    with pytest.raises(lowfold.ModelError, match="no fixed totals"):
        lowfold.derive(model.with_sector(lowfold.Sector(particles=2)))


def test_infinite_lattice_input_errors():
    import tomllib
    with pytest.raises(lowfold.ModelError, match="graph cannot be infinite"):
        lowfold.make_lattice("graph", None, "infinite", sites=2, bonds=[[0, 1]])
    with pytest.raises(lowfold.ModelError, match="no size"):
        lowfold.make_lattice("chain", [4], "infinite")
    with pytest.raises(lowfold.ModelError, match="lattice.size"):
        lowfold.parse_model(tomllib.loads('[lattice]\nshape = "chain"\nsize = [4]\n'
                                          'boundary = "infinite"\n[site]\ntype = "spin"\n'))
    with pytest.raises(lowfold.ModelError, match="give the lattice a size"):
        lowfold.spectrum(hubbard())
