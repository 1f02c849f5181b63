"""derive --export of an infinite lattice read out in local operators: the t-J chain.

The Hubbard chain with ``filling = "mixed"`` (manifold {0, u, d} per site) is derived on the
infinite lattice and exported as one term per coupling class (hopping, exchange with its
density part, three-site, and from the third order on X-operator ``string`` classes on
translated patterns).  The exported file, given a periodic size and a particle number, is
run on a 6-site ring and compared with:

- QuSpin's t-J model with the three-site term (tests/helpers/quspin_tj.py) at the published
  second-order couplings J = 4 t^2/U and K = J/4 (Chao, Spalek & Oles, J. Phys. C 10, L271
  (1977); MacDonald, Girvin & Yoshioka, Phys. Rev. B 37, 9753 (1988)): the same levels;
- the exact low levels of the Hubbard ring itself (QuSpin, every S^z): the error of the
  couplings summed to order n falls like t^(n+1) (n = 2, 3, 4; no cluster of the order-n
  expansion of the chain wraps around a 6-site ring, so the ring adds no error of lower
  order).

The square lattice to second order, exported and run on the 3x3 torus, is QuSpin's t-J
model there with every bond and every straight and bent three-site path: a class holds the
members of every orientation (bent paths: four per site), and each is written.

The Bose-Hubbard chain with one particle on the Mott state at unit filling ({1, 2} per
site; its classes as `string` terms of X-operators), exported and run on the 6-site ring with
7 bosons, plus 6 times the constant per site, misses the ring's exact levels (QuSpin,
occupations up to 3 as in the derived model) by O(t^(n+1)), n = 1, 2.

Round trips (docs/local-readout.md): `derive` of the exported file on the infinite lattice
at first order returns every class of the export (kind, class, operator, members, value),
for the t-J chain at third order (strings on groups of up to four sites in V) and for the
half-filled square Hubbard model at fourth order (ring exchange on the 4-cycles).

Five electrons and four: an odd and an even number of fermions, so the bonds and strings
across the ring's boundary are met with both signs of the fermion reordering.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from helpers.lattice_models import boson_text, hubbard_text, parse, tj_text
from helpers.quspin_tj import quspin_tj_levels

from lowfold.jobs.export import export_text
from lowfold.jobs.lattice import derive_infinite
from lowfold.jobs.spectrum import spectrum

L = 6
RING = [(i, (i + 1) % L) for i in range(L)]
PATHS = [((i - 1) % L, i, (i + 1) % L) for i in range(L)]


def exported_on(size, t, u, order, particles, shape="chain"):
    """The infinite lattice's couplings to ``order``, exported and run on the periodic
    cluster of ``size`` cells with ``particles`` electrons: all its levels and the text."""
    result = derive_infinite(parse(tj_text(shape, order=order, t=t, u=u)), order)
    text = export_text(result)
    assert 'boundary = "infinite"' in text
    text = text.replace('boundary = "infinite"', f'boundary = "periodic"\nsize = {size}')
    text = text.replace("[parameters]", f"[sector]\nparticles = {particles}\n\n[parameters]")
    sites = math.prod(size)
    levels = spectrum(parse(text), math.comb(sites, particles) * 2**particles).energies
    return np.sort(levels), text


def exported_on_ring(t, u, order, particles):
    return exported_on([L], t, u, order, particles)


def hubbard_ring_levels(t, u, particles, count):
    """The ``count`` lowest levels of the Hubbard ring with ``particles`` electrons (QuSpin,
    every S^z)."""
    from quspin.basis import spinful_fermion_basis_1d
    from quspin.operators import hamiltonian
    basis = spinful_fermion_basis_1d(L, Nf=[(up, particles - up) for up in range(particles + 1)])
    hop = [[-t, a, b] for a, b in RING] + [[-t, b, a] for a, b in RING]
    static = [["+-|", hop], ["|+-", hop], ["n|n", [[u, i, i] for i in range(L)]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_symm=False,
                    check_herm=False, check_pcon=False)
    return np.linalg.eigvalsh(h.toarray())[:count]


@pytest.mark.parametrize("particles", [5, 4])
def test_second_order_export_is_the_published_tj_model(particles):
    t, u = 0.1, 1.0
    levels, text = exported_on_ring(t, u, 2, particles)
    assert 'type = "three-site"' in text and 'type = "string"' not in text
    j = 4 * t**2 / u
    reference = quspin_tj_levels(L, RING, PATHS, particles, t=t, j=j, k=j / 4)
    assert levels.size == reference.size == math.comb(L, particles) * 2**particles
    np.testing.assert_allclose(levels, reference, atol=1e-12)


@pytest.mark.parametrize("particles", [5, 4])
def test_error_of_the_exported_model_falls_like_the_next_power(particles):
    for order in (2, 3, 4):
        errors = []
        for t in (0.04, 0.02):
            levels, text = exported_on_ring(t, 1.0, order, particles)
            exact = hubbard_ring_levels(t, 1.0, particles, levels.size)
            errors.append(np.abs(levels - exact).max())
        if order == 3:
            assert 'type = "string"' in text        # correlated hoppings beyond the names
        power = np.log2(errors[0] / errors[1])
        assert power == pytest.approx(order + 1, abs=0.25), (order, particles, power)


def test_square_lattice_export_holds_every_orientation():
    t, u, particles = 0.1, 1.0, 3
    levels, text = exported_on([3, 3], t, u, 2, particles, shape="square")
    assert text.count('type = "three-site"') == 6      # 4 bent and 2 straight orientations
    site = lambda x, y: (x % 3) + 3 * (y % 3)          # noqa: E731
    bonds = [(site(x, y), site(x + dx, y + dy)) for x in range(3) for y in range(3)
             for dx, dy in ((1, 0), (0, 1))]
    neighbours = {s: sorted({b for a, b in bonds if a == s} | {a for a, b in bonds if b == s})
                  for s in range(9)}
    paths = [(i, j, k) for j in range(9) for i in neighbours[j] for k in neighbours[j] if i < k]
    assert len(paths) == 54
    j = 4 * t**2 / u
    reference = quspin_tj_levels(9, bonds, paths, particles, t=t, j=j, k=j / 4)
    np.testing.assert_allclose(levels, reference, atol=1e-12)


def bose_hubbard_ring_levels(t, u, mu, bosons, count):
    """Lowest levels of -t sum (b+_i b_j + h.c.) + (U/2) sum n(n-1) + mu sum n on the ring
    (QuSpin, up to 3 bosons per site)."""
    from quspin.basis import boson_basis_1d
    from quspin.operators import hamiltonian
    basis = boson_basis_1d(L, Nb=bosons, sps=4)
    hop = [[-t, a, b] for a, b in RING] + [[-t, b, a] for a, b in RING]
    static = [["+-", hop], ["nn", [[u / 2, i, i] for i in range(L)]],
              ["n", [[mu - u / 2, i] for i in range(L)]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_symm=False,
                    check_herm=False, check_pcon=False)
    return np.linalg.eigvalsh(h.toarray())[:count]


def test_boson_classes_export_and_run_on_a_ring():
    for order in (1, 2):
        errors = []
        for t in (0.02, 0.01):
            result = derive_infinite(parse(boson_text(t, order)), order)
            per_site = next(c.value for c in result.classes if c.kind == "constant")
            text = export_text(result)
            assert f"constant per site (not written as a term): {per_site!r}" in text
            text = text.replace('boundary = "infinite"', f'boundary = "periodic"\nsize = [{L}]')
            text = text.replace("[parameters]", f"[sector]\nparticles = {L + 1}\n\n[parameters]")
            levels = np.sort(spectrum(parse(text), L).energies) + L * per_site
            exact = bose_hubbard_ring_levels(t, 1.0, -1.0, L + 1, L)
            errors.append(np.abs(levels - exact).max())
        power = np.log2(errors[0] / errors[1])
        assert power == pytest.approx(order + 1, abs=0.25), (order, power)


def test_json_classes_list_a_member_of_every_orbit():
    result = derive_infinite(parse(tj_text("square", order=2, t=0.1, u=1.0)), 2)
    three = {c.name: c.to_dict() for c in result.classes if c.kind == "three-site"}
    bent, straight = three["3 sites (1, 1, 1.414)"], three["3 sites (1, 1, 2)"]
    assert bent["multiplicity"] == 4 and len(bent["members"]) == 4
    assert straight["multiplicity"] == 2 and len(straight["members"]) == 2
    assert bent["members"][0] == bent["positions"]
    # the middle site is listed second: the four members bend in the four directions
    bends = {frozenset(tuple(np.subtract(m[e], m[1]).round(9)) for e in (0, 2))
             for m in bent["members"]}
    assert bends == {frozenset({(1.0, 0.0), (0.0, 1.0)}), frozenset({(-1.0, 0.0), (0.0, 1.0)}),
                     frozenset({(-1.0, 0.0), (0.0, -1.0)}), frozenset({(1.0, 0.0), (0.0, -1.0)})}


def classes_of(result) -> dict:
    """(kind, class, operator, member shapes) -> (value, members per site) of every class."""
    def value(c):
        v = c.to_dict()["value"]
        return np.asarray(complex(*v) if c.kind == "string" and isinstance(v, list) else v)
    def shape(member):                 # offsets from its first site (patches differ)
        return tuple(tuple(np.round(np.subtract(p, member[0]), 9)) for p in member)
    return {(c.kind, c.name, c.operator, frozenset(map(shape, c.members or (c.positions,)))):
            (value(c), c.multiplicity) for c in result.classes if c.kind != "constant"}


@pytest.mark.parametrize("text, order", [(tj_text("chain", order=3, t=0.1, u=1.0), 3),
                                         (hubbard_text("square", order=4, t=0.1, u=1.0), 4)],
                         ids=["t-J chain", "square Hubbard"])
def test_exported_classes_derive_back_on_the_infinite_lattice(text, order):
    result = derive_infinite(parse(text), order)
    again = derive_infinite(parse(export_text(result)), 1)
    mine, theirs = classes_of(result), classes_of(again)
    assert set(mine) == set(theirs) and len(mine) > 3
    for key, (value, per_site) in mine.items():
        np.testing.assert_allclose(theirs[key][0], value, atol=1e-14, err_msg=str(key))
        assert theirs[key][1] == per_site
    assert any(kind in ("string", "ring") for kind, *_ in mine)
