"""Low-lying spectra of lowfold models against QuSpin, an independent exact-diagonalisation
library (P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017)).

Each model is written as a model file; the QuSpin Hamiltonian is built in the test from the
same bond list, written out by hand (and checked against the lowfold lattice).  The point is
the Hamiltonian construction: operator order, Jordan-Wigner signs across periodic wraps at
even and odd particle numbers, spin conventions.  Only the lowest ``LEVELS`` energies are
compared, as sorted lists, so degenerate levels are compared as multisets.
"""

from __future__ import annotations

import numpy as np
import pytest

import lowfold
from helpers import reference as ref
from helpers.modelfiles import (exchange, hubbard_text, lattice_text, model_of, spin_text,
                                term_text)

LEVELS = 6
ATOL = 1e-9


def lowfold_levels(model, k=LEVELS, method="auto"):
    res = lowfold.spectrum(model, levels=k, method=method)
    return np.sort(np.asarray(res.energies, dtype=float))


def assert_levels(model, expected, k=LEVELS, method="auto"):
    expected = np.sort(np.asarray(expected))[:k]
    got = lowfold_levels(model, k=len(expected), method=method)
    np.testing.assert_allclose(got, expected, rtol=0, atol=ATOL)


def same_bonds(model, bonds, selector="nearest"):
    got = {tuple(sorted(map(int, b))) for b in model.lattice.bonds(selector)}
    want = {tuple(sorted(b)) for b in bonds}
    assert got == want, f"lattice bonds {sorted(got)} != written-out bonds {sorted(want)}"


def chain_bonds(n, periodic):
    bonds = [(i, i + 1) for i in range(n - 1)]
    if periodic and n > 2:
        bonds.append((n - 1, 0))
    return bonds


# ladder numbering (lattice.py docstring): site = 2 * x + leg
LADDER_2x3_OPEN = [(0, 1), (2, 3), (4, 5), (0, 2), (2, 4), (1, 3), (3, 5)]

# square numbering: site = x + Lx * y
SQUARE_3x2_OPEN = [(0, 1), (1, 2), (3, 4), (4, 5), (0, 3), (1, 4), (2, 5)]
SQUARE_3x3_PERIODIC = (
    [(x + 3 * y, (x + 1) % 3 + 3 * y) for y in range(3) for x in range(3)]
    + [(x + 3 * y, x + 3 * ((y + 1) % 3)) for y in range(3) for x in range(3)]
)
# 2 x 2 periodic: each pair is bonded once, so it is the 4-site ring 0-1-3-2
SQUARE_2x2_PERIODIC = [(0, 1), (2, 3), (0, 2), (1, 3)]


# --------------------------------------------------------------------------------------
# Hubbard models


def quspin_hubbard(n_sites, bonds, t, U, particles, sz=None, k=LEVELS):
    """The ``k`` lowest levels of the sector: a fixed (N_up, N_dn) or, without sz, all
    splits of N (the ``k`` lowest of each, merged)."""
    if sz is not None:
        n_up = int(round(particles / 2 + sz))
        splits = [(n_up, particles - n_up)]
    else:
        splits = [(u, particles - u) for u in range(particles + 1)
                  if u <= n_sites and particles - u <= n_sites]
    levels = np.concatenate([ref.quspin_hubbard_energies(n_sites, bonds, t, U, u, d, k=k)
                             for u, d in splits])
    return np.sort(levels)[:k]


@pytest.mark.parametrize("boundary, particles, sz", [
    ("open", 3, None), ("open", 5, 0.5), ("open", 6, 0),
    ("periodic", 3, None), ("periodic", 5, None), ("periodic", 5, 0.5),
    ("periodic", 6, 0), ("periodic", 6, None), ("periodic", 4, 1),
])
def test_hubbard_chain(boundary, particles, sz):
    # L = 6: the wrap bond (5, 0) carries the Jordan-Wigner parity of the 4 middle sites
    t, U = 1.0, 4.5
    model = model_of(hubbard_text("chain", [6],
                                  boundary=boundary, t=t, U=U,
                                  particles=particles, sz=sz, hubbard_sites="all"))
    bonds = chain_bonds(6, boundary == "periodic")
    same_bonds(model, bonds)
    assert_levels(model, quspin_hubbard(6, bonds, t, U, particles, sz))


@pytest.mark.parametrize("L, particles", [(4, 2), (4, 3), (5, 4), (5, 5)])
def test_hubbard_ring_small(L, particles):
    # a ring with t < 0 and an odd length: no bipartite sign freedom hides a wrap error
    t, U = -0.7, 2.0
    model = model_of(hubbard_text("chain", [L],
                                  boundary="periodic", t=t, U=U,
                                  particles=particles, hubbard_sites="all"))
    bonds = chain_bonds(L, True)
    same_bonds(model, bonds)
    assert_levels(model, quspin_hubbard(L, bonds, t, U, particles))


@pytest.mark.parametrize("particles, sz", [(6, 0), (5, None), (4, 0)])
def test_hubbard_ladder(particles, sz, tmp_path):
    t, U = 1.0, 6.0
    path = tmp_path / "ladder.toml"
    path.write_text(hubbard_text("ladder", [3],
                                 boundary="open", t=t, U=U,
                                 particles=particles, sz=sz, hubbard_sites="all"))
    model = lowfold.load_model(path)
    same_bonds(model, LADDER_2x3_OPEN)
    assert_levels(model, quspin_hubbard(6, LADDER_2x3_OPEN, t, U, particles, sz))


@pytest.mark.parametrize("method", ["csr", "matrix-free"])
def test_hubbard_ring_degenerate_levels_by_iteration(method):
    # L = 7, N = 6, all S^z: 3003 states, above the size where lowfold diagonalises densely;
    # the iterative routes must return every member of the spin multiplets
    t, U = 1.0, 4.5
    model = model_of(hubbard_text("chain", [7],
                                  boundary="periodic", t=t, U=U,
                                  particles=6, hubbard_sites="all"))
    bonds = chain_bonds(7, True)
    expected = quspin_hubbard(7, bonds, t, U, 6, k=8)
    assert np.min(np.diff(expected)) < 1e-9          # the case does contain degeneracies
    assert_levels(model, expected, k=8, method=method)


def test_hubbard_ring_above_dense_limit():
    # L = 7, N = 7, S^z = 1/2: 35 * 35 = 1225 states, odd ring, odd particle number
    t, U = 1.0, 3.0
    model = model_of(hubbard_text("chain", [7],
                                  boundary="periodic", t=t, U=U,
                                  particles=7, sz=0.5, hubbard_sites="all"))
    bonds = chain_bonds(7, True)
    assert_levels(model, quspin_hubbard(7, bonds, t, U, 7, 0.5))


# --------------------------------------------------------------------------------------
# spinless fermions and bosons


def spinless_text(L, boundary, t, V, particles):
    return lattice_text("chain", [L], boundary, {"type": "fermion"},
                        term_text("hopping", t, bonds="nearest")
                        + term_text("interaction", V, bonds="nearest"),
                        sector={"particles": particles})


@pytest.mark.parametrize("boundary", ["open", "periodic"])
@pytest.mark.parametrize("particles", [2, 3, 4])
def test_spinless_chain(boundary, particles):
    t, V = 1.0, 1.3
    model = model_of(spinless_text(7, boundary, t, V, particles))
    bonds = chain_bonds(7, boundary == "periodic")
    same_bonds(model, bonds)
    assert_levels(model, ref.quspin_spinless_energies(7, bonds, t, particles, V=V, k=LEVELS))


@pytest.mark.parametrize("particles", [3, 4])
def test_bose_hubbard_ring(particles):
    t, U, L, cutoff = 1.0, 3.0, 5, 2
    model = model_of(lattice_text("chain", [L], "periodic",
                                  {"type": "boson", "max_occupation": cutoff},
                                  term_text("hopping", t, bonds="nearest")
                                  + term_text("hubbard", U, sites="all"),
                                  sector={"particles": particles}))
    bonds = chain_bonds(L, True)
    same_bonds(model, bonds)
    assert_levels(model, ref.quspin_bose_hubbard_energies(L, bonds, t, U, particles, cutoff, k=LEVELS))


# --------------------------------------------------------------------------------------
# spin models


@pytest.mark.parametrize("boundary", ["open", "periodic"])
@pytest.mark.parametrize("L, sz", [(8, 0), (7, 0.5), (8, None)])
def test_heisenberg_chain(boundary, L, sz):
    J = 1.0
    model = model_of(spin_text("chain", [L], boundary, exchange(J), sz=sz))
    bonds = chain_bonds(L, boundary == "periodic")
    same_bonds(model, bonds)
    assert_levels(model, ref.quspin_xxz_energies(L, bonds, J, J, sz=sz, k=LEVELS))


@pytest.mark.parametrize("boundary", ["open", "periodic"])
def test_xxz_chain_exchange_plus_product(boundary):
    # H = J S.S + J (Delta - 1) Sz Sz = J (Sx Sx + Sy Sy) + J Delta Sz Sz
    J, delta, L = 0.8, 2.5, 8
    terms = exchange(J) + f"""
[[term]]
type = "product"
label = "anisotropy"
strength = {J * (delta - 1)}
operators = ["Sz", "Sz"]
bonds = "nearest"
"""
    model = model_of(spin_text("chain", [L], boundary, terms, sz=0))
    bonds = chain_bonds(L, boundary == "periodic")
    same_bonds(model, bonds)
    assert_levels(model, ref.quspin_xxz_energies(L, bonds, J, J * delta, sz=0, k=LEVELS))


@pytest.mark.parametrize("sz", [0, 1, None])
def test_xxz_chain_from_products(sz):
    # (Jxy/2)(S+ S- + h.c.) + Jz Z Z / 4 + h sum Sz, periodic ring of 8, Pauli Z for Sz Sz
    jxy, jz, h, L = 1.0, -0.6, 0.35, 8
    terms = f"""
[[term]]
type = "product"
label = "flip"
strength = {jxy / 2}
operators = ["S+", "S-"]
conjugate = true
bonds = "nearest"
[[term]]
type = "product"
label = "ising"
strength = {jz / 4}
operators = ["Z", "Z"]
bonds = "nearest"
[[term]]
type = "field"
strength = {h}
axis = "z"
sites = "all"
"""
    model = model_of(spin_text("chain", [L], "periodic", terms, sz=sz))
    bonds = chain_bonds(L, True)
    same_bonds(model, bonds)
    assert_levels(model, ref.quspin_xxz_energies(L, bonds, jxy, jz, sz=sz, hz=h, k=LEVELS))


def test_xxz_chain_from_pauli_products_in_sz_sector():
    # (J/4)(X X + Y Y) + (Jz/4) Z Z conserves total S^z although X X and Y Y separately do
    # not: their S+ S+ and S- S- parts cancel, so the S^z sector must be accepted
    J, jz, L = 1.0, 0.4, 8
    terms = "".join(f"""
[[term]]
type = "product"
label = "{name}"
strength = {strength}
operators = ["{op}", "{op}"]
bonds = "nearest"
""" for name, op, strength in (("xx", "X", J / 4), ("yy", "Y", J / 4), ("zz", "Z", jz / 4)))
    model = model_of(spin_text("chain", [L], "periodic", terms, sz=0))
    bonds = chain_bonds(L, True)
    assert_levels(model, ref.quspin_xxz_energies(L, bonds, J, jz, sz=0, k=LEVELS))


@pytest.mark.parametrize("size, boundary, bonds, sz", [
    ([2, 2], "periodic", SQUARE_2x2_PERIODIC, 0),
    ([3, 2], "open", SQUARE_3x2_OPEN, 0),
    ([3, 2], "open", SQUARE_3x2_OPEN, 1),
    ([3, 3], "periodic", SQUARE_3x3_PERIODIC, 0.5),
])
def test_square_heisenberg(size, boundary, bonds, sz):
    J = 1.0
    model = model_of(spin_text("square", size, boundary, exchange(J), sz=sz))
    same_bonds(model, bonds)
    n = size[0] * size[1]
    assert_levels(model, ref.quspin_xxz_energies(n, bonds, J, J, sz=sz, general=True,
                                                 k=LEVELS))


@pytest.mark.parametrize("boundary", ["open", "periodic"])
@pytest.mark.parametrize("sz", [0, 1])
def test_spin1_chain(boundary, sz):
    J, L = 1.0, 6
    model = model_of(spin_text("chain", [L], boundary, exchange(J), spin=1, sz=sz))
    bonds = chain_bonds(L, boundary == "periodic")
    same_bonds(model, bonds)
    assert_levels(model, ref.quspin_xxz_energies(L, bonds, J, J, spin="1", sz=sz, k=LEVELS))


def test_spin1_xxz_with_single_ion_term():
    # D (Sz)^2 as a one-site product; QuSpin: "zz" on the same site
    J, D, L = 1.0, 0.7, 5
    terms = exchange(J) + f"""
[[term]]
type = "product"
label = "single_ion"
strength = {D}
operators = ["Sz", "Sz"]
sites = "all"
"""
    model = model_of(spin_text("chain", [L], "periodic", terms, spin=1, sz=0))
    bonds = chain_bonds(L, True)
    from quspin.basis import spin_basis_1d
    from quspin.operators import hamiltonian

    basis = spin_basis_1d(L, S="1", pauli=0, Nup=L)
    static = [["zz", [[J, i, j] for i, j in bonds] + [[D, i, i] for i in range(L)]],
              ["+-", [[J / 2, i, j] for i, j in bonds]],
              ["-+", [[J / 2, i, j] for i, j in bonds]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64)
    assert_levels(model, np.linalg.eigvalsh(h.toarray()))


# --------------------------------------------------------------------------------------
# the dense reference against QuSpin (self-check of tests/helpers/reference.py)


@pytest.mark.parametrize("periodic", [False, True])
@pytest.mark.parametrize("n_up, n_dn", [(2, 1), (2, 2)])
def test_reference_hubbard_matches_quspin(periodic, n_up, n_dn):
    L, t, U = 4, 1.0, 3.0
    bonds = chain_bonds(L, periodic)
    terms = (ref.expand_term("electron", "hopping", t, bonds=bonds)
             + ref.expand_term("electron", "hubbard", U, sites=range(L)))
    h = ref.sparse_hamiltonian("electron", L, terms)
    states = ref.sector_states("electron", L, particles=n_up + n_dn, sz=(n_up - n_dn) / 2)
    mine = np.linalg.eigvalsh(ref.restrict(h, states))
    theirs = ref.quspin_hubbard_energies(L, bonds, t, U, n_up, n_dn)
    np.testing.assert_allclose(mine, theirs, atol=1e-10)


def test_reference_spin1_matches_quspin():
    L = 4
    bonds = chain_bonds(L, True)
    h = ref.dense_hamiltonian("spin", L, ref.expand_term("spin", "exchange", 1.0, bonds=bonds),
                              spin=1)
    states = ref.sector_states("spin", L, sz=0, spin=1)
    mine = np.linalg.eigvalsh(ref.restrict(h, states))
    theirs = ref.quspin_xxz_energies(L, bonds, 1.0, 1.0, spin="1", sz=0)
    np.testing.assert_allclose(mine, theirs, atol=1e-10)
