"""Closed-form results for small clusters, checked for lowfold and for the dense reference.

Each case is computed twice: by ``lowfold.spectrum`` on a model file, and by the dense
Kronecker-product reference of ``tests/helpers/reference.py`` (which imports nothing of lowfold);
both must reproduce the closed form.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pytest

import lowfold
from helpers import reference as ref
from helpers.modelfiles import lattice_text, model_of, term_text

ATOL = 1e-9


def chain_text(site: dict, L, boundary, terms, sector=None):
    return lattice_text("chain", [L], boundary, site, terms, sector=sector)


def term(kind, strength, **keys):
    return term_text(kind, strength, label=kind, **keys)


def ring_bonds(L):
    return [(i, (i + 1) % L) for i in range(L)] if L > 2 else [(0, 1)]


def reference_levels(site_type, L, terms, *, spin=0.5, **sector):
    h = ref.sparse_hamiltonian(site_type, L, terms, spin=spin)
    states = ref.sector_states(site_type, L, spin=spin, **sector)
    return np.linalg.eigvalsh(ref.restrict(h, states))


def lowfold_levels(text, k):
    return np.sort(lowfold.spectrum(model_of(text), levels=k).energies)


# --------------------------------------------------------------------------------------
# two-site Hubbard model, N = 2
# Closed form of the Hubbard dimer (common practice, textbook): levels in the S^z = 0 sector
# E_- = (U - sqrt(U^2 + 16 t^2))/2, 0 (triplet), U, E_+ = (U + sqrt(U^2 + 16 t^2))/2.


def dimer_levels(t, U):
    r = np.sqrt(U**2 + 16 * t**2)
    return np.sort([(U - r) / 2, 0.0, U, (U + r) / 2])


DIMER_CASES = [(1.0, 0.0), (1.0, 1.0), (1.0, 4.0), (1.0, 10.0), (0.5, 20.0), (-1.3, 2.2)]


@pytest.mark.parametrize("t, U", DIMER_CASES)
def test_hubbard_dimer_lowfold(t, U):
    text = chain_text({"type": "electron"}, 2, "open",
                      term("hopping", t, bonds="nearest") + term("hubbard", U),
                      {"particles": 2, "sz": 0})
    got = lowfold_levels(text, 4)
    np.testing.assert_allclose(got, dimer_levels(t, U), atol=ATOL)
    # ground state of the full N = 2 space (triplet S^z = +-1 at 0 lie above E_-)
    text_all = text.replace("sz = 0", "")
    assert abs(lowfold_levels(text_all, 1)[0] - dimer_levels(t, U)[0]) < ATOL


@pytest.mark.parametrize("t, U", DIMER_CASES)
def test_hubbard_dimer_reference(t, U):
    terms = (ref.expand_term("electron", "hopping", t, bonds=[(0, 1)])
             + ref.expand_term("electron", "hubbard", U, sites=[0, 1]))
    got = reference_levels("electron", 2, terms, particles=2, sz=0)
    np.testing.assert_allclose(got, dimer_levels(t, U), atol=ATOL)


# --------------------------------------------------------------------------------------
# four-site Heisenberg ring, H = J sum S_i.S_j
# With A = {0, 2}, B = {1, 3}: H = (J/2)[S^2 - S_A^2 - S_B^2] (common practice), so for
# J > 0 the ground energy is (J/2)(0 - 2 - 2) = -2J (S = 0, S_A = S_B = 1); for J < 0 it is
# the S = 2 multiplet, (J/2)(6 - 2 - 2) = J.  Full spectrum: J/2 [S(S+1) - S_A(S_A+1) -
# S_B(S_B+1)] over the allowed (S_A, S_B, S).


def ring4_spectrum(J):
    levels = []
    for sa in (0, 1):
        for sb in (0, 1):
            for s in range(abs(sa - sb), sa + sb + 1):
                levels += [J / 2 * (s * (s + 1) - sa * (sa + 1) - sb * (sb + 1))] * (2 * s + 1)
    return np.sort(levels)


@pytest.mark.parametrize("J", [1.0, 2.5, -1.0])
def test_heisenberg_ring4(J):
    text = chain_text({"type": "spin", "spin": 0.5}, 4, "periodic",
                      term("exchange", J, bonds="nearest"))
    expected = ring4_spectrum(J)
    if J > 0:
        assert abs(expected[0] + 2 * J) < 1e-12
    np.testing.assert_allclose(lowfold_levels(text, 16), expected, atol=ATOL)
    ref_levels = reference_levels("spin", 4, ref.expand_term("spin", "exchange", J,
                                                             bonds=ring_bonds(4)))
    np.testing.assert_allclose(ref_levels, expected, atol=ATOL)


# --------------------------------------------------------------------------------------
# two spins s coupled by J S_1.S_2 = (J/2)[S(S+1) - 2 s(s+1)], S = 0..2s, each level
# (2S+1)-fold (addition of angular momenta, common practice)


@pytest.mark.parametrize("s", [0.5, 1.0, 1.5, 2.0])
def test_spin_dimer_all_spins(s):
    J = 0.8
    expected = np.sort([J / 2 * (S * (S + 1) - 2 * s * (s + 1))
                        for S in range(int(2 * s) + 1) for _ in range(2 * S + 1)])
    text = chain_text({"type": "spin", "spin": s}, 2, "open",
                      term("exchange", J, bonds="nearest"))
    np.testing.assert_allclose(lowfold_levels(text, len(expected)), expected, atol=ATOL)
    ref_levels = reference_levels("spin", 2, ref.expand_term("spin", "exchange", J,
                                                             bonds=[(0, 1)]), spin=s)
    np.testing.assert_allclose(ref_levels, expected, atol=ATOL)


# --------------------------------------------------------------------------------------
# free fermions on a ring
# H = -t sum_i (c+_i c_{i+1} + h.c.) with the wrap bond (L-1, 0) written with fermion
# operators is translation invariant with c_L = c_0: one-body energies -2t cos(2 pi m / L),
# m = 0..L-1, and the N-fermion ground energy is the sum of the N lowest (common practice).


def one_body(L, t):
    return np.sort(-2 * t * np.cos(2 * np.pi * np.arange(L) / L))


@pytest.mark.parametrize("L, N, t", [(6, 2, 1.0), (6, 3, 1.0), (6, 4, 1.0), (7, 3, 1.0),
                                     (7, 4, 0.8), (8, 4, 1.0), (8, 5, -1.0), (5, 2, 1.0)])
def test_free_spinless_fermions_ring(L, N, t):
    expected = one_body(L, t)[:N].sum()
    text = chain_text({"type": "fermion"}, L, "periodic",
                      term("hopping", t, bonds="nearest"), {"particles": N})
    assert abs(lowfold_levels(text, 1)[0] - expected) < ATOL
    ref_e = reference_levels("fermion", L, ref.expand_term("fermion", "hopping", t,
                                                           bonds=ring_bonds(L)), particles=N)
    assert abs(ref_e[0] - expected) < ATOL


def test_free_spinless_fermions_ring_excitations():
    # all many-body levels of N = 3 on a 6-ring: sums of 3 distinct one-body energies
    L, N, t = 6, 3, 1.0
    eps = -2 * t * np.cos(2 * np.pi * np.arange(L) / L)
    expected = np.sort([eps[list(c)].sum() for c in combinations(range(L), N)])
    text = chain_text({"type": "fermion"}, L, "periodic",
                      term("hopping", t, bonds="nearest"), {"particles": N})
    np.testing.assert_allclose(lowfold_levels(text, 8), expected[:8], atol=ATOL)


def free_electron_ground(L, t, N, sz=None):
    eps = one_body(L, t)
    ups = range(N + 1) if sz is None else [int(round(N / 2 + sz))]
    return min(eps[:u].sum() + eps[:N - u].sum() for u in ups if u <= L and N - u <= L)


@pytest.mark.parametrize("L, N, sz", [(4, 2, None), (4, 3, None), (5, 4, 0), (5, 5, 0.5),
                                      (6, 6, 0), (6, 5, 0.5), (6, 4, 1)])
def test_free_electrons_ring(L, N, sz):
    t = 1.0
    expected = free_electron_ground(L, t, N, sz)
    sec = {"particles": N} if sz is None else {"particles": N, "sz": sz}
    text = chain_text({"type": "electron"}, L, "periodic",
                      term("hopping", t, bonds="nearest") + term("hubbard", 0.0), sec)
    assert abs(lowfold_levels(text, 1)[0] - expected) < ATOL
    if L <= 5:
        ref_e = reference_levels("electron", L, ref.expand_term("electron", "hopping", t,
                                                                bonds=ring_bonds(L)), **sec)
        assert abs(ref_e[0] - expected) < ATOL


# --------------------------------------------------------------------------------------
# transverse-field Ising ring, H = -J sum Z_i Z_{i+1} - h sum X_i (Pauli matrices)
# P. Pfeuty, Ann. Phys. 57, 79 (1970): the ground state lies in the even-parity sector,
# where the Jordan-Wigner fermions are antiperiodic, k = pi (2m + 1) / L, and
# E_0 = -sum_k sqrt(J^2 + h^2 - 2 J h cos k) over all L such k (from memory; it gives
# -L J at h = 0 and -L h at J = 0).


def tfim_ground(L, J, h):
    k = np.pi * (2 * np.arange(L) + 1) / L
    return -np.sum(np.sqrt(J**2 + h**2 - 2 * J * h * np.cos(k)))


@pytest.mark.parametrize("L, J, h", [(6, 1.0, 0.5), (6, 1.0, 1.0), (7, 1.0, 1.7),
                                     (8, 0.6, 1.0)])
def test_transverse_field_ising_ring(L, J, h):
    expected = tfim_ground(L, J, h)
    # field term: s sum S^x = (s/2) sum X, so s = -2h
    terms = (term("product", -J, operators=["Z", "Z"], bonds="nearest")
             + term("field", -2 * h, axis="x", sites="all"))
    text = chain_text({"type": "spin", "spin": 0.5}, L, "periodic", terms)
    assert abs(lowfold_levels(text, 1)[0] - expected) < ATOL
    ref_terms = ([(-J, [("Z", i), ("Z", j)]) for i, j in ring_bonds(L)]
                 + ref.expand_term("spin", "field", -2 * h, sites=range(L), axis="x"))
    assert abs(reference_levels("spin", L, ref_terms)[0] - expected) < ATOL
