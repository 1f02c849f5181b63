"""Kept local states ([site] states), X-operators and the local term types.

Checks against things outside the project:

- the t-J model with the three-site term, written with ``states = ["0", "u", "d"]`` and the
  ``hopping``, ``exchange``, ``interaction`` and ``three-site`` types, has the spectrum of
  the same Hamiltonian built with QuSpin on its spinful-fermion basis without double
  occupancy (``double_occupancy=False``), on the open 3-site chain and the 2x2 plaquette;
  the Hamiltonian (Chao, Spalek & Oles, J. Phys. C 10, L271 (1977); MacDonald, Girvin &
  Yoshioka, Phys. Rev. B 37, 9753 (1988)):
  ``H = -t sum P (c+ c + h.c.) P + J sum (S.S - n n/4) - K sum_(ijk) sum_s P (c+_is n_j,-s
  c_ks - c+_is c+_j,-s c_js c_k,-s + h.c.) P``;
- sizes of kept spaces are counts of configurations: N electrons on L sites without double
  occupancy, C(L, N) 2^N states; bosons with occupations 1 or 2 on L sites and L + 1
  particles, L states (common practice);
- a hopping written with X-operators (``string`` terms) equals the projected hopping,
  also across an occupied site (the Jordan-Wigner string of the X-operators);
- ``exchange`` + ``biquadratic`` at the AKLT point has the exact ground energy -2/3 per bond
  (Affleck, Kennedy, Lieb & Tasaki, Phys. Rev. Lett. 59, 799 (1987)); ``biquadratic`` and
  ``single-ion`` against QuSpin's spin-1 chain.
"""

from __future__ import annotations

from math import comb

import numpy as np
import pytest
from helpers.modelfiles import lattice_text, model_of, term_text
from helpers.quspin_tj import quspin_tj_levels

from lowfold import ModelError
from lowfold.build.basis import sector_size
from lowfold.build.hamiltonian import build_basis, hamiltonian_matrix

T, J, K = 1.0, 0.4, 0.1


def _tj_text(shape, size, particles, *, extra_terms="", site_extra='states = ["0", "u", "d"]'):
    terms = (term_text("hopping", T, label="t") + term_text("exchange", J, label="J")
             + term_text("interaction", -J / 4, label="Jn")
             + term_text("three-site", K, label="K") + extra_terms)
    text = lattice_text(shape, size, "open", {"type": "electron"}, terms,
                        sector={"particles": particles})
    return text.replace('type = "electron"', f'type = "electron"\n{site_extra}')


def _levels(model):
    return np.linalg.eigvalsh(hamiltonian_matrix(model).toarray())


@pytest.mark.parametrize("shape, size, particles, bonds, paths", [
    ("chain", [3], 2, [(0, 1), (1, 2)], [(0, 1, 2)]),
    ("square", [2, 2], 3, [(0, 1), (0, 2), (1, 3), (2, 3)],
     [(1, 0, 2), (0, 1, 3), (0, 2, 3), (1, 3, 2)])])
def test_t_j_model_with_three_site_term_against_quspin(shape, size, particles, bonds, paths):
    pytest.importorskip("quspin")
    model = model_of(_tj_text(shape, size, particles))
    n_sites = int(np.prod(size))
    assert sorted(map(tuple, model.lattice.bonds("nearest").tolist())) == bonds
    levels = _levels(model)
    assert levels.size == comb(n_sites, particles) * 2**particles
    reference = quspin_tj_levels(n_sites, bonds, paths, particles, t=T, j=J, k=K)
    np.testing.assert_allclose(levels, reference, atol=1e-12)


@pytest.mark.parametrize("selector", [{}, {"pattern": [[0], [1], [2]]}])
def test_three_site_paths_of_the_three_site_ring_against_quspin(selector):
    # on the periodic 3-site ring the three paths (one per middle site) share their sites;
    # the default and the translated pattern both hold all three
    pytest.importorskip("quspin")
    terms = term_text("hopping", T, label="t") + term_text("three-site", K, label="K", **selector)
    text = lattice_text("chain", [3], "periodic", {"type": "electron"}, terms,
                        sector={"particles": 2})
    model = model_of(text.replace('type = "electron"', 'type = "electron"\nstates = ["0", "u", "d"]'))
    reference = quspin_tj_levels(3, [(0, 1), (1, 2), (2, 0)], [(1, 0, 2), (0, 1, 2), (0, 2, 1)],
                                 2, t=T, j=0.0, k=K)
    np.testing.assert_allclose(_levels(model), reference, atol=1e-12)


def test_kept_space_sizes():
    model = model_of(_tj_text("chain", [5], 3))
    assert build_basis(model).size == sector_size(model.site, 5, model.sector) == comb(5, 3) * 8
    boson = lattice_text("chain", [4], "periodic",
                         {"type": "boson", "max_occupation": 2, "min_occupation": 1},
                         term_text("hopping", 0.1), sector={"particles": 5})
    model = model_of(boson)
    assert model.site.kept_labels() == ("1", "2")
    assert build_basis(model).size == sector_size(model.site, 4, model.sector) == 4


@pytest.mark.parametrize("site, n_sites, sector", [
    ({"type": "electron", "states": ["0", "u", "d"]}, 6, {"particles": 4}),
    ({"type": "electron", "states": ["0", "u", "d"]}, 6, {"particles": 4, "sz": 1}),
    ({"type": "electron", "states": ["u", "d", "2"]}, 5, {"sz": 0.5}),
    ({"type": "spin", "spin": 2, "states": ["+1", "0", "-1"]}, 4, {"sz": -1}),
    ({"type": "boson", "max_occupation": 3, "min_occupation": 1}, 4, {"particles": 7}),
    ({"type": "boson", "max_occupation": 3, "states": [0, 2]}, 4, None)])
def test_kept_states_are_the_sector_states_whose_every_site_is_kept(site, n_sites, sector):
    # the site-by-site enumeration against the whole sector, filtered configuration by
    # configuration (local value of site i: sum_m digit(i + m n_sites) radix^m)
    text = lattice_text("chain", [n_sites], "open", site, "", sector=sector)
    model = model_of(text)
    full = model_of(text.replace(
        next(line for line in text.splitlines() if line.startswith(("states", "min_occ"))), ""))
    kept = set(model.site.states)
    radix, modes = full.site.radix, full.site.modes

    def inside(state):
        digits = [(state // radix**k) % radix for k in range(n_sites * modes)]
        return all(sum(digits[i + m * n_sites] * radix**m for m in range(modes)) in kept
                   for i in range(n_sites))

    expected = [int(x) for x in build_basis(full).states if inside(int(x))]
    assert build_basis(model).states.tolist() == expected
    assert sector_size(model.site, n_sites, model.sector) == len(expected)


def test_hopping_written_as_x_operator_strings_equals_the_projected_hopping():
    # bonds (0, 2) across site 1: the X-operators carry the Jordan-Wigner string of site 1
    bonds = [[0, 1], [1, 2], [0, 2]]
    hopping = term_text("hopping", T, bonds=bonds, label="t")
    strings = "".join(
        term_text("string", -T, operators=[f"|{s}><0|", f"|0><{s}|"], sites=bonds,
                  conjugate=True, label=f"x{s}") for s in ("u", "d"))
    site = {"type": "electron", "states": ["0", "u", "d"]}
    a = model_of(lattice_text("chain", [3], "open", site, hopping, sector={"particles": 2}))
    b = model_of(lattice_text("chain", [3], "open", site, strings, sector={"particles": 2}))
    np.testing.assert_allclose(hamiltonian_matrix(a).toarray(), hamiltonian_matrix(b).toarray(),
                               atol=1e-14)


@pytest.mark.parametrize("site_extra, message", [
    ('states = ["0", "x"]', "unknown local state 'x'"),
    ('states = ["u", "u"]', "listed twice"),
    ("states = []", "non-empty list"),
    ("min_occupation = 1", "only valid for type = \"boson\""),
])
def test_bad_kept_states_are_model_errors(site_extra, message):
    with pytest.raises(ModelError, match=message):
        model_of(_tj_text("chain", [3], 2, site_extra=site_extra))


def test_local_term_types_refuse_other_sites_and_bad_operators():
    spin = lattice_text("chain", [3], "open", {"type": "spin", "spin": 1},
                        term_text("three-site", 0.1))
    with pytest.raises(ModelError, match="three-site.*electron"):
        model_of(spin)
    electron = lattice_text("chain", [2], "open", {"type": "electron"},
                            term_text("biquadratic", 0.1))
    with pytest.raises(ModelError, match="biquadratic.*spin"):
        model_of(electron)
    bad = lattice_text("chain", [2], "open", {"type": "electron"},
                       term_text("string", 0.1, operators=["|q><0|", "|0><u|"], bonds=[[0, 1]]))
    with pytest.raises(ModelError, match="X-operator"):
        model_of(bad)
    loose = lattice_text("chain", [2], "open", {"type": "electron"},
                         term_text("string", 0.1, operators=["|u><0|", "|0><u|"], bonds=[[0, 1]]))
    with pytest.raises(ModelError, match="not Hermitian"):
        model_of(loose)


def test_aklt_chain_from_the_biquadratic_type():
    # H = sum [S.S + (S.S)^2 / 3] on an open spin-1 chain: ground energy -2/3 per bond,
    # four-fold degenerate (the edge spins 1/2); Affleck, Kennedy, Lieb & Tasaki, Phys. Rev.
    # Lett. 59, 799 (1987)
    terms = term_text("exchange", 1.0) + term_text("biquadratic", 1.0 / 3.0)
    model = model_of(lattice_text("chain", [6], "open", {"type": "spin", "spin": 1}, terms))
    levels = _levels(model)
    np.testing.assert_allclose(levels[:4], -2.0 / 3.0 * 5, atol=1e-12)
    assert levels[4] > levels[0] + 1e-3


def test_spin1_exchange_biquadratic_single_ion_against_quspin():
    pytest.importorskip("quspin")
    from quspin.basis import spin_basis_1d
    from quspin.operators import hamiltonian
    j, b, d, n = 0.7, -0.3, 0.45, 4
    terms = (term_text("exchange", j) + term_text("biquadratic", b)
             + term_text("single-ion", d, sites=[0, 2]))
    model = model_of(lattice_text("chain", [n], "open", {"type": "spin", "spin": 1}, terms))
    dot = [("z", "z", 1.0), ("+", "-", 0.5), ("-", "+", 0.5)]
    static = []
    for i in range(n - 1):
        static += [[p + q, [[j * w, i, i + 1]]] for p, q, w in dot]
        # (A_i B_j)(C_i D_j) = (A C)_i (B D)_j
        static += [[a + c + b_ + d_, [[b * w1 * w2, i, i, i + 1, i + 1]]]
                   for a, b_, w1 in dot for c, d_, w2 in dot]
    static.append(["zz", [[d, 0, 0], [d, 2, 2]]])
    basis = spin_basis_1d(n, S="1", pauli=0)
    h = hamiltonian(static, [], basis=basis, dtype=np.complex128, check_symm=False,
                    check_herm=False, check_pcon=False)
    np.testing.assert_allclose(_levels(model), np.linalg.eigvalsh(h.toarray()), atol=1e-12)
