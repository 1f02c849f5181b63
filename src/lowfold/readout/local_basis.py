"""Per-site state sets of a manifold: is P a product, and the local states of every site.

A manifold P is read out in local operators when it is a *product of per-site state sets*,
``P = L_0 x L_1 x ... x L_{N-1}`` (the doped Mott insulator: ``L_i = {0, u, d}``; spin-1
with easy-axis anisotropy: ``{+1, -1}``; bosons: ``{n-1, n, n+1}``), or the part of such a
product with the particle numbers that P has (the *slice* of the product at
fixed particle number, as a sector with ``particles = N`` gives; every S^z of the product
must be present, as derive reads out all S^z blocks).  The product itself is the
*hull* of P.

Conventions
-----------
A site's local state is the tuple of its slot digits (:mod:`lowfold.model.sites`), stored as
the *local value* ``sum_m digit_m radix**m`` (electrons: 0 empty, 1 up, 2 down, 3 double).
``L_i`` lists the local values of site ``i`` met in P, ascending; a state of P is the row of
its *codes*, ``codes[a, i]`` = the position of its local value in ``L_i``.

Fermions: the X-operators of lowfold act on the *site-ordered* basis
``|l_0 l_1 ...> = F(l_0)_0 F(l_1)_1 ... |0>``, ``F(l)_i`` the creators of site ``i`` for
local state ``l`` in mode order (electrons: up before down).  lowfold's occupation integers
are ordered by slot (all spin-up slots first); the two differ by the sign of the reordering,
:attr:`LocalBasis.signs`.  This is the site order DESIGN.md ("Conventions", fermions) fixes
for the spin-1/2 reading, ``c+_{0,s0} c+_{1,s1} ... |0>``, extended to any local states.  A fermion-parity-odd X-operator
``|a><b|_i`` carries the Jordan-Wigner string ``prod_{k<i} (-1)^{n_k}``, so that every string
of X-operators is a physical operator (see :mod:`lowfold.readout.local_strings`).

Each site has a *reference* state, the one a string leaves implicit (a string's diagonal
factors are projectors ``|a><a|_i`` onto the other states): electrons the local state with the
fewest particles (the hole of the doped Mott insulator); spins and bosons the local state
most frequent in P (ties: fewest particles, then highest S^z), i.e. the background of a
magnet or of a bosonic Mott insulator.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product as cartesian

import numpy as np

from lowfold.model.model import Model

__all__ = ["LocalBasis", "local_labels", "product_manifold", "uniform_basis", "product_slice",
           "product_states"]


@dataclass(frozen=True, eq=False)
class LocalBasis:
    """The local state sets of a product manifold and what each local state carries.

    Attributes
    ----------
    site_type : str
        ``"spin" | "fermion" | "electron" | "boson"``.
    values : tuple of ndarray
        ``L_i``: local values of site ``i``, ascending.
    labels : tuple of tuple of str
        Label of each local state (electrons ``0 u d 2``, spins S^z ``+1 0 -1``, bosons the
        occupation).
    particles, twice_sz, parity : tuple of ndarray
        Per site and local state: particle number, 2 S^z, fermion parity (0 or 1).
    reference : ndarray of int
        Code of the reference state of every site.
    codes : ndarray of int8/int16, shape (dim P, n_sites)
        Codes of the states of P, in the order of P.
    signs : ndarray of float
        Sign relating each state of P to its site-ordered basis state.
    is_hull : bool
        True when P is the whole product, False for a slice at fixed totals.
    totals : frozenset of int
        The particle numbers met in P (the slice's constraint).
    """

    site_type: str
    values: tuple
    labels: tuple
    particles: tuple
    twice_sz: tuple
    parity: tuple
    reference: np.ndarray
    codes: np.ndarray
    signs: np.ndarray
    is_hull: bool
    totals: frozenset

    @property
    def n_sites(self) -> int:
        return len(self.values)

    @property
    def sizes(self) -> np.ndarray:
        return np.array([v.size for v in self.values])

    @property
    def fermionic(self) -> bool:
        return self.site_type in ("fermion", "electron")

    def label(self, site: int, code: int) -> str:
        return self.labels[site][code]

    def key_of(self, codes: np.ndarray) -> np.ndarray:
        """Mixed-radix integer of rows of codes (one per configuration of the hull)."""
        codes = np.asarray(codes, dtype=np.int64)
        if not self.n_sites:
            return np.zeros(codes.shape[0], dtype=np.int64)
        weights = np.cumprod(np.concatenate([[1], self.sizes[:-1]])).astype(np.int64)
        return codes @ weights


def local_labels(model: Model) -> dict[int, str]:
    """Label of every local value of the model's site."""
    site = model.site
    if site.type == "electron":
        return {0: "0", 1: "u", 2: "d", 3: "2"}
    if site.type == "spin":
        out = {}
        for k in range(site.radix):
            m = site.spin - k
            out[k] = ("+" if m > 0 else "") + str(m)
        return out
    return {k: str(k) for k in range(site.radix)}


def _local_values(model: Model, states: np.ndarray) -> np.ndarray:
    """Local value of every site of every state, shape (n_states, n_sites)."""
    site, n = model.site, model.n_sites
    values = np.zeros((states.size, n), dtype=np.int64)
    for mode in range(site.modes):
        for i in range(n):
            digit = (states // site.radix ** (i + mode * n)) % site.radix
            values[:, i] += digit * site.radix ** mode
    return values


def _quantities(model: Model, value: int) -> tuple[int, int, int]:
    """Particles, 2 S^z and fermion parity of one local value."""
    site = model.site
    digits = [(value // site.radix ** m) % site.radix for m in range(site.modes)]
    if site.type == "spin":
        return 0, int(2 * site.spin) - 2 * digits[0], 0
    particles = int(sum(digits))
    twice_sz = sum(d * site.slot_twice_sz(m) for m, d in enumerate(digits))
    return particles, int(twice_sz), particles % 2 if site.is_fermionic else 0


def _reorder_signs(model: Model, values: np.ndarray) -> np.ndarray:
    """Sign from slot order (modes outer) to site order (sites outer) of the fermions."""
    site = model.site
    if not site.is_fermionic or site.modes == 1:
        return np.ones(values.shape[0])
    occupied = [(values // site.radix ** m) % site.radix for m in range(site.modes)]
    inversions = np.zeros(values.shape[0], dtype=np.int64)
    # a mode-m fermion of site i precedes, in slot order, every mode-m' (m' > m) fermion of a
    # site j < i, which precedes it in site order
    for m in range(site.modes):
        for m2 in range(m + 1, site.modes):
            below = np.cumsum(occupied[m2], axis=1) - occupied[m2]
            inversions += np.sum(occupied[m] * below, axis=1)
    return np.where(inversions % 2, -1.0, 1.0)


def _count_with_particles(particles, totals) -> int:
    """Number of hull configurations whose particle number lies in ``totals``."""
    counts = {0: 1}
    for n_i in particles:
        new = {}
        for n, c in counts.items():
            for a in n_i:
                new[n + int(a)] = new.get(n + int(a), 0) + c
        counts = new
    return sum(counts.get(t, 0) for t in totals)


def _reference(model: Model, codes_i, particles, twice_sz) -> int:
    if model.site.type in ("electron", "fermion"):
        return int(np.lexsort((-twice_sz, particles))[0])
    frequency = np.bincount(codes_i, minlength=particles.size)
    return int(np.lexsort((-twice_sz, particles, -frequency))[0])


def product_manifold(model: Model, states: np.ndarray) -> tuple[LocalBasis | None, str]:
    """The local state sets of P when P is a product of them (or its slice at fixed totals).

    Parameters
    ----------
    model : Model
    states : ndarray of int64
        The manifold's basis states (occupation integers), ascending.

    Returns
    -------
    basis : LocalBasis or None
    reason : str
        ``""`` with a basis, else why P is not a product of per-site state sets.
    """
    values = _local_values(model, states)
    n = model.n_sites
    sets = [np.unique(values[:, i]) for i in range(n)]
    codes = np.stack([np.searchsorted(sets[i], values[:, i]) for i in range(n)], axis=1)
    table = {v: _quantities(model, int(v)) for v in np.unique(values)}
    particles = tuple(np.array([table[int(v)][0] for v in s]) for s in sets)
    twice_sz = tuple(np.array([table[int(v)][1] for v in s]) for s in sets)
    parity = tuple(np.array([table[int(v)][2] for v in s]) for s in sets)
    hull = int(np.prod([float(s.size) for s in sets]))
    totals_n = sum(particles[i][codes[:, i]] for i in range(n))
    totals = frozenset(np.unique(totals_n).tolist())
    if hull != states.size:
        count = _count_with_particles(particles, totals)
        if count != states.size:
            sizes = "x".join(str(s.size) for s in sets)
            return None, (f"the manifold's {states.size:,} states are not a product of per-site "
                          f"state sets (the product of the sets met, {sizes}, has {count:,} "
                          "states at the manifold's particle numbers)")
    labels = local_labels(model)
    reference = np.array([_reference(model, codes[:, i], particles[i], twice_sz[i])
                          for i in range(n)])
    small = np.int8 if max(s.size for s in sets) < 127 else np.int32
    return LocalBasis(model.site.type, tuple(sets),
                      tuple(tuple(labels[int(v)] for v in s) for s in sets),
                      particles, twice_sz, parity, reference, codes.astype(small),
                      _reorder_signs(model, values), hull == states.size, totals), ""


def hull_codes(basis: LocalBasis, sites) -> np.ndarray:
    """Every configuration of the hull on ``sites`` (rows of codes, first site fastest)."""
    ranges = [range(basis.sizes[i]) for i in sites]
    rows = [tuple(reversed(c)) for c in cartesian(*reversed(ranges))]
    return np.array(rows, dtype=np.int64).reshape(len(rows), len(ranges))


def uniform_basis(one_site: LocalBasis, n_sites: int) -> LocalBasis:
    """The hull of ``n_sites`` copies of a one-site basis, without its states (``codes`` is
    empty): the local sets, labels and references of every site, for building and naming
    strings on many sites (an infinite lattice's patch) without enumerating the product."""
    copies = lambda field: tuple(field[0] for _ in range(n_sites))       # noqa: E731
    return LocalBasis(one_site.site_type, copies(one_site.values), copies(one_site.labels),
                      copies(one_site.particles), copies(one_site.twice_sz),
                      copies(one_site.parity), np.full(n_sites, one_site.reference[0]),
                      np.zeros((0, n_sites), dtype=np.int8), np.ones(0), True, frozenset())


def product_slice(model: Model, states: np.ndarray, one_site: LocalBasis) -> LocalBasis:
    """The states of a cluster whose every site is in the one-site set of ``one_site``, as a
    basis with that set on every site (the codes of the one-site basis, whatever states the
    slice meets): for placing strings of an infinite lattice on a finite cluster.

    ``states`` (occupation integers, ascending) must all lie in the product; see
    :func:`product_states` for picking them out of a sector."""
    values = _local_values(model, states)
    n = model.n_sites
    allowed = one_site.values[0]
    codes = np.searchsorted(allowed, values)
    base = uniform_basis(one_site, n)
    return LocalBasis(base.site_type, base.values, base.labels, base.particles, base.twice_sz,
                      base.parity, base.reference, codes.astype(np.int8),
                      _reorder_signs(model, values), False,
                      frozenset(np.unique(sum(one_site.particles[0][codes[:, i]]
                                              for i in range(n))).tolist()) if n else frozenset())


def product_states(model: Model, states: np.ndarray, one_site: LocalBasis) -> np.ndarray:
    """The entries of ``states`` whose every site holds a state of the one-site set."""
    values = _local_values(model, states)
    return states[np.all(np.isin(values, one_site.values[0]), axis=1)]
