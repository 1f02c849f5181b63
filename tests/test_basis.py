"""Many-body bases against a slow brute-force twin.

The twin enumerates every integer of the full space ``0 .. radix**n_slots - 1``, reads its
base-``radix`` digits, keeps the states whose digit sums (per species) match, and sorts.
Every basis kind of ``lowfold.basis`` (full, fixed digit sum, two species, explicit, and the
physical sectors built on them) must give the same states in the same ascending order, and
``index`` must invert it and give -1 for every non-member.

Sector sizes are checked against closed forms:
binomial counts of fermion and spin-1/2 sectors (common practice), and the central
trinomial coefficients for spin-1 chains at S^z = 0 (OEIS A002426; values from memory and
recomputed here by the brute-force twin).
"""

from __future__ import annotations

from fractions import Fraction
from math import comb

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lowfold.model.sector import Sector
from lowfold.build.basis import (explicit_basis, fixed_sum_basis, full_basis, sector_basis,
                                 sector_size, two_species_basis)
from lowfold.errors import ModelError
from lowfold.model.sites import make_site

# ---------------------------------------------------------------------------------------
# the slow twin


def digits_of(state: int, n_slots: int, radix: int) -> list[int]:
    """Base-``radix`` digits of ``state``, least significant (slot 0) first."""
    return [(state // radix**k) % radix for k in range(n_slots)]


def brute_states(n_slots: int, radix: int, groups=()) -> np.ndarray:
    """All states of the full space whose digit sums match ``groups``, ascending.

    ``groups`` is a list of ``(first_slot, n, total)``: the digits of slots
    ``first_slot .. first_slot + n - 1`` must sum to ``total``.  Vectorised over the full
    space: column k of ``digits`` is the digit of slot k of every integer.
    """
    full = np.arange(radix**n_slots, dtype=np.int64)
    digits = (full[:, None] // radix ** np.arange(n_slots, dtype=np.int64)) % radix
    keep = np.ones(full.size, dtype=bool)
    for a, n, total in groups:
        keep &= digits[:, a:a + n].sum(axis=1) == total
    return np.sort(full[keep])


def non_members(members: np.ndarray, n_slots: int, radix: int) -> np.ndarray:
    """States of the full space that are not members, plus out-of-range and negative ones."""
    full = np.arange(radix**n_slots, dtype=np.int64)
    outside = np.setdiff1d(full, members)
    top = radix**n_slots
    shifted = members[:5] + top            # same low digits, one extra high digit
    extra = [top, top + 1, 2 * top, 2**62 - 1, 2**63 - 1, -1, -2, -top, -(2**62), -(2**63)]
    return np.concatenate([outside, shifted, np.array(extra, dtype=np.int64)])


def check_against_twin(basis, expected: np.ndarray, n_slots: int, radix: int) -> None:
    """Same states, same order; index round-trips; non-members give -1."""
    assert basis.states.dtype == np.int64
    np.testing.assert_array_equal(basis.states, expected)
    assert basis.size == len(basis) == expected.size
    np.testing.assert_array_equal(basis.index(expected), np.arange(expected.size))
    np.testing.assert_array_equal(basis.index(list(expected)), np.arange(expected.size))
    assert np.all(basis.contains(expected))
    others = non_members(expected, n_slots, radix)
    np.testing.assert_array_equal(basis.index(others), np.full(others.size, -1))
    assert not np.any(basis.contains(others))


# ---------------------------------------------------------------------------------------
# the basis kinds


@pytest.mark.parametrize("n_slots,radix", [(1, 2), (6, 2), (11, 2), (1, 3), (5, 3), (7, 3),
                                           (3, 4), (5, 4), (4, 5)])
def test_full_basis(n_slots, radix):
    basis = full_basis(n_slots, radix)
    check_against_twin(basis, brute_states(n_slots, radix), n_slots, radix)


@pytest.mark.parametrize("n_slots,radix", [(1, 2), (5, 2), (10, 2), (1, 3), (4, 3), (7, 3),
                                           (2, 4), (5, 4)])
def test_fixed_sum_basis_every_total(n_slots, radix):
    for total in range(n_slots * (radix - 1) + 1):
        basis = fixed_sum_basis(n_slots, radix, total)
        expected = brute_states(n_slots, radix, [(0, n_slots, total)])
        check_against_twin(basis, expected, n_slots, radix)


def test_fixed_sum_basis_beyond_capacity_is_empty():
    basis = fixed_sum_basis(4, 3, 9)                  # 4 digits of at most 2 sum to <= 8
    assert basis.size == 0
    np.testing.assert_array_equal(basis.index([0, 1, 80, -1]), [-1, -1, -1, -1])


@pytest.mark.parametrize("n_each", [1, 2, 3, 4, 5])
def test_two_species_basis_every_pair_of_totals(n_each):
    for low in range(n_each + 1):
        for high in range(n_each + 1):
            basis = two_species_basis(n_each, low, high)
            expected = brute_states(2 * n_each, 2, [(0, n_each, low), (n_each, n_each, high)])
            check_against_twin(basis, expected, 2 * n_each, 2)


@pytest.mark.parametrize("radix,n_slots", [(2, 8), (3, 5), (4, 4)])
def test_explicit_basis_sorts_and_deduplicates(radix, n_slots):
    rng = np.random.default_rng(1234)
    full = radix**n_slots
    chosen = rng.integers(0, full, size=full // 3)          # unsorted, with repeats
    basis = explicit_basis(chosen, n_slots, radix)
    expected = np.array(sorted(set(int(s) for s in chosen)), dtype=np.int64)
    check_against_twin(basis, expected, n_slots, radix)


def test_explicit_basis_empty():
    basis = explicit_basis([], 3, 2)
    assert basis.size == 0
    np.testing.assert_array_equal(basis.index([0, 7, -1]), [-1, -1, -1])


# ---------------------------------------------------------------------------------------
# physical sectors: the digit-sum constraints follow from the encodings of the README ("Conventions")


def physical_filter(site_kwargs: dict, n_sites: int, particles, sz) -> np.ndarray:
    """Brute force from the physical quantities: read N and S^z of every full-space state."""
    site = make_site(**site_kwargs)
    n_slots = n_sites * site.modes
    kept = []
    for state in range(site.radix**n_slots):
        d = digits_of(state, n_slots, site.radix)
        if site.type == "spin":
            n, m = None, sum(Fraction(site.spin) - k for k in d)   # S^z = S - digit
        elif site.type == "electron":
            up, dn = d[:n_sites], d[n_sites:]                      # bit i: up, bit N+i: down
            n, m = sum(d), Fraction(sum(up) - sum(dn), 2)
        else:
            n, m = sum(d), None
        if (particles is None or n == particles) and (sz is None or m == sz):
            kept.append(state)
    return np.array(kept, dtype=np.int64)


SECTORS = [
    ({"type": "spin", "spin": 0.5}, 6, None, Fraction(0)),
    ({"type": "spin", "spin": 0.5}, 5, None, Fraction(-3, 2)),
    ({"type": "spin", "spin": 1}, 5, None, Fraction(1)),
    ({"type": "spin", "spin": 1.5}, 4, None, Fraction(1)),
    ({"type": "spin", "spin": 1.5}, 3, None, Fraction(-1, 2)),
    ({"type": "fermion"}, 7, 3, None),
    ({"type": "boson", "max_occupation": 3}, 4, 5, None),
    ({"type": "electron"}, 4, 4, Fraction(0)),
    ({"type": "electron"}, 4, 3, Fraction(1, 2)),
    ({"type": "electron"}, 4, 5, None),
    ({"type": "electron"}, 3, 2, Fraction(-1)),
]


@pytest.mark.parametrize("site_kwargs,n_sites,particles,sz", SECTORS)
def test_sector_basis_matches_physical_brute_force(site_kwargs, n_sites, particles, sz):
    site = make_site(**site_kwargs)
    basis = sector_basis(site, n_sites, Sector(particles, sz))
    expected = physical_filter(site_kwargs, n_sites, particles, sz)
    check_against_twin(basis, expected, n_sites * site.modes, site.radix)
    assert sector_size(site, n_sites, Sector(particles, sz)) == expected.size


@pytest.mark.parametrize("site_kwargs,n_sites", [({"type": "spin", "spin": 1}, 3),
                                                 ({"type": "fermion"}, 4),
                                                 ({"type": "electron"}, 3)])
def test_empty_sector_is_the_full_space(site_kwargs, n_sites):
    site = make_site(**site_kwargs)
    basis = sector_basis(site, n_sites, Sector())
    n_slots = n_sites * site.modes
    check_against_twin(basis, brute_states(n_slots, site.radix), n_slots, site.radix)


@pytest.mark.parametrize("site_kwargs,n_sites,particles,sz", [
    ({"type": "spin", "spin": 0.5}, 4, None, Fraction(3)),        # |S^z| > N S
    ({"type": "spin", "spin": 0.5}, 3, None, Fraction(0)),        # odd N: S^z half-integer
    ({"type": "spin", "spin": 1}, 4, None, Fraction(1, 2)),       # integer spins
    ({"type": "spin", "spin": 0.5}, 4, 2, None),                  # spins carry no particles
    ({"type": "fermion"}, 4, 5, None),                            # more particles than modes
    ({"type": "fermion"}, 4, -1, None),
    ({"type": "fermion"}, 4, 2, Fraction(0)),                     # spinless: no S^z
    ({"type": "boson", "max_occupation": 2}, 3, 7, None),         # above the cut-off
    ({"type": "electron"}, 3, 7, None),
    ({"type": "electron"}, 3, 2, Fraction(1, 2)),                 # N/2 + S^z not integer
    ({"type": "electron"}, 3, 2, Fraction(2)),                    # more up than electrons
    ({"type": "electron"}, 3, 6, Fraction(1)),                    # more up than sites
])
def test_impossible_sectors_are_model_errors(site_kwargs, n_sites, particles, sz):
    with pytest.raises(ModelError):
        sector_basis(make_site(**site_kwargs), n_sites, Sector(particles, sz))


# ---------------------------------------------------------------------------------------
# sector sizes against closed forms


def popcount(states: np.ndarray, first_bit: int, n_bits: int) -> np.ndarray:
    """Number of set bits ``first_bit .. first_bit + n_bits - 1`` of each state."""
    count = np.zeros(states.shape, dtype=np.int64)
    for bit in range(first_bit, first_bit + n_bits):
        count += (states >> bit) & 1
    return count


def check_large(basis) -> None:
    """Ascending, unique, and index() is the inverse of states[] (fast vectorised checks)."""
    assert np.all(np.diff(basis.states) > 0)
    np.testing.assert_array_equal(basis.index(basis.states), np.arange(basis.size))


def test_hubbard_12_sites_half_filling_sz0():
    # C(12, 6)**2 = 853,776 states (N_up = N_dn = 6 on 12 sites; common practice)
    basis = sector_basis(make_site("electron"), 12, Sector(12, Fraction(0)))
    assert basis.size == comb(12, 6) ** 2 == 853_776
    check_large(basis)
    assert np.all(popcount(basis.states, 0, 12) == 6)
    assert np.all(popcount(basis.states, 12, 12) == 6)


def test_spin_half_24_sites_sz0():
    # C(24, 12) = 2,704,156 states (common practice)
    basis = sector_basis(make_site("spin", spin=0.5), 24, Sector(None, Fraction(0)))
    assert basis.size == comb(24, 12) == 2_704_156
    check_large(basis)
    assert np.all(popcount(basis.states, 0, 24) == 12)


@pytest.mark.parametrize("n_sites", [1, 2, 3, 4, 5, 6])
def test_electrons_with_particles_only(n_sites):
    # 2L spin-orbitals, N electrons, S^z free: C(2L, N) states (common practice)
    site = make_site("electron")
    for particles in range(2 * n_sites + 1):
        sector = Sector(particles, None)
        assert sector_size(site, n_sites, sector) == comb(2 * n_sites, particles)
        basis = sector_basis(site, n_sites, sector)
        assert basis.size == comb(2 * n_sites, particles)
        check_large(basis)
        assert np.all(popcount(basis.states, 0, 2 * n_sites) == particles)


# central trinomial coefficients, OEIS A002426 (from memory), for L = 1 .. 6
CENTRAL_TRINOMIAL = [1, 3, 7, 19, 51, 141]


@pytest.mark.parametrize("n_sites,expected", list(enumerate(CENTRAL_TRINOMIAL, start=1)))
def test_spin_one_chain_sz0_sizes(n_sites, expected):
    site = make_site("spin", spin=1)
    basis = sector_basis(site, n_sites, Sector(None, Fraction(0)))
    assert basis.size == sector_size(site, n_sites, Sector(None, Fraction(0))) == expected
    # the twin recomputes the remembered values
    assert brute_states(n_sites, 3, [(0, n_sites, n_sites)]).size == expected
    check_large(basis)


# ---------------------------------------------------------------------------------------
# random small spaces


@st.composite
def small_space(draw):
    radix = draw(st.integers(2, 5))
    largest = {2: 12, 3: 8, 4: 6, 5: 5}[radix]        # keep radix**n_slots <= 4096
    n_slots = draw(st.integers(1, largest))
    total = draw(st.integers(0, n_slots * (radix - 1) + 1))   # one past the capacity too
    return n_slots, radix, total


@settings(max_examples=60, deadline=None)
@given(small_space())
def test_fixed_sum_random(space):
    n_slots, radix, total = space
    basis = fixed_sum_basis(n_slots, radix, total)
    check_against_twin(basis, brute_states(n_slots, radix, [(0, n_slots, total)]),
                       n_slots, radix)


@settings(max_examples=40, deadline=None)
@given(st.integers(1, 6).flatmap(
    lambda n: st.tuples(st.just(n), st.integers(0, n), st.integers(0, n))))
def test_two_species_random(args):
    n_each, low, high = args
    basis = two_species_basis(n_each, low, high)
    expected = brute_states(2 * n_each, 2, [(0, n_each, low), (n_each, n_each, high)])
    check_against_twin(basis, expected, 2 * n_each, 2)


@settings(max_examples=40, deadline=None)
@given(small_space(), st.data())
def test_explicit_random(space, data):
    n_slots, radix, _ = space
    full = radix**n_slots
    chosen = data.draw(st.lists(st.integers(0, full - 1), max_size=40))
    basis = explicit_basis(chosen, n_slots, radix)
    check_against_twin(basis, np.array(sorted(set(chosen)), dtype=np.int64), n_slots, radix)
