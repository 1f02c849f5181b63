"""Many-body bases: the states of a sector as sorted integers, with fast ranking.

A :class:`Basis` answers four questions: how many states (``size``), the state at an index
(``states[i]``), the index of states (``index``, vectorised, -1 for non-members) and whether
states belong (``contains``).  Sectors are enumerated directly, never masked out of the full
space.  See ``lowfold._kernels.basis`` for the ranking scheme.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lowfold._kernels import basis as kernels
from lowfold.errors import SizeError
from lowfold.model.local_space import local_quantities
from lowfold.model.sites import Site
from lowfold.model.sector import Sector, sector_totals

__all__ = ["Basis", "full_basis", "sector_basis", "explicit_basis", "sector_size"]

_STATE_LIMIT = 2**62


@dataclass(frozen=True, eq=False)
class Basis:
    """An ordered set of many-body states (ascending integers).

    Attributes
    ----------
    n_slots, radix : int
        Digits per state and digit range (see ``lowfold.sites``).
    params, weights : ndarray
        Ranking description handed to the kernels.
    states : ndarray of int64
        The states, ascending.
    """

    n_slots: int
    radix: int
    params: np.ndarray
    weights: np.ndarray
    states: np.ndarray

    @property
    def size(self) -> int:
        return int(self.states.shape[0])

    def __len__(self) -> int:
        return self.size

    @property
    def lookup_arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(params, weights, sorted_states)`` as the kernels take them."""
        return self.params, self.weights, self.states

    def index(self, states) -> np.ndarray:
        """Indices of ``states`` (int64 array); -1 where a state is not in the basis."""
        states = np.ascontiguousarray(states, dtype=np.int64)
        return kernels.lookup_many(states, *self.lookup_arrays)

    def contains(self, states) -> np.ndarray:
        return self.index(states) >= 0

    def digits(self, states=None) -> np.ndarray:
        """Digits of states (default: all), shape ``(n, n_slots)``; slot k in column k."""
        states = self.states if states is None else np.asarray(states, dtype=np.int64)
        powers = self.radix ** np.arange(self.n_slots, dtype=np.int64)
        return (states[:, None] // powers[None, :]) % self.radix


def _check_size(size: int, max_states: int | None) -> None:
    if size >= _STATE_LIMIT or (max_states is not None and size > max_states):
        raise SizeError(f"the basis has {size:,} states, more than the {max_states or _STATE_LIMIT:,} "
                        "allowed; use a smaller cluster or a sector")


def _make(n_slots, radix, params, weights, size, max_states) -> Basis:
    _check_size(size, max_states)
    params = np.array(params, dtype=np.int64)
    states = kernels.enumerate_states(params, weights, size)
    return Basis(n_slots, radix, params, weights, states)


def basis_size(n_slots: int, radix: int, totals: list[tuple[int, int]] | None) -> int:
    """Number of states of a full space (``totals=None``) or of species with fixed digit sums,
    ``totals = [(n_slots_a, total_a), ...]``, computed exactly with Python integers."""
    if totals is None:
        return radix ** n_slots
    size = 1
    for n, total in totals:
        size *= _count_fillings(n, radix, total)
    return size


def _count_fillings(n: int, radix: int, total: int) -> int:
    ways = [1] + [0] * total
    for _ in range(n):
        ways = [sum(ways[r - u] for u in range(min(radix - 1, r) + 1)) for r in range(total + 1)]
    return ways[total] if total >= 0 else 0


def full_basis(n_slots: int, radix: int, *, max_states: int | None = None) -> Basis:
    size = basis_size(n_slots, radix, None)
    _check_size(size, max_states)
    weights = np.zeros((1, 1), dtype=np.int64)
    return _make(n_slots, radix, [kernels.FULL, radix, n_slots, 0, 0, 0, size], weights, size,
                 max_states)


def fixed_sum_basis(n_slots: int, radix: int, total: int, *, max_states=None) -> Basis:
    size = basis_size(n_slots, radix, [(n_slots, total)])
    _check_size(size, max_states)
    weights = kernels.weight_table(n_slots, radix, total)
    return _make(n_slots, radix, [kernels.FIXED_SUM, radix, n_slots, total, 0, 0, size],
                 weights, size, max_states)


def two_species_basis(n_each: int, total_low: int, total_high: int, *, max_states=None) -> Basis:
    """Radix-2 states whose low ``n_each`` bits have ``total_low`` ones and whose high
    ``n_each`` bits have ``total_high`` ones (electrons at fixed N_up, N_dn)."""
    size_low = basis_size(n_each, 2, [(n_each, total_low)])
    size = size_low * basis_size(n_each, 2, [(n_each, total_high)])
    _check_size(size, max_states)
    weights = kernels.weight_table(n_each, 2, max(total_low, total_high))
    params = [kernels.TWO_SPECIES, 2, n_each, total_low, n_each, total_high, size_low]
    return _make(2 * n_each, 2, params, weights, size, max_states)


def explicit_basis(states, n_slots: int, radix: int) -> Basis:
    """A basis made of the given states (sorted and de-duplicated)."""
    states = np.unique(np.asarray(states, dtype=np.int64))
    params = np.array([kernels.SORTED, radix, n_slots, 0, 0, 0, states.size], dtype=np.int64)
    return Basis(n_slots, radix, params, np.zeros((1, 1), dtype=np.int64), states)


def sector_basis(site: Site, n_sites: int, sector: Sector, *, max_states: int | None = None) -> Basis:
    """Enumerate the basis of ``sector`` for ``n_sites`` sites of type ``site``; on a site
    with kept states (:mod:`lowfold.model.local_space`), the states whose every site is kept."""
    if not site.is_restricted:
        return _sector_basis(site, n_sites, sector, max_states=max_states)
    sector_totals(site, n_sites, sector)                 # refuses impossible sectors
    _check_size(kept_sector_size(site, n_sites, sector), max_states)
    return explicit_basis(kept_states(site, n_sites, sector), n_sites * site.modes, site.radix)


def _reachable(n: np.ndarray, s: np.ndarray, target, rest: set, key) -> np.ndarray:
    """Whether the totals ``(n, s)`` so far can still end at ``target`` (``rest``: what the
    remaining sites can add), decided once per distinct pair."""
    if n.size == 0:
        return np.zeros(0, dtype=bool)
    width = int(s.max() - s.min()) + 1
    codes = (n - n.min()) * width + (s - s.min())
    unique, inverse = np.unique(codes, return_inverse=True)
    ok = np.array([key(target[0] - (int(u) // width + int(n.min())),
                       target[1] - (int(u) % width + int(s.min()))) in rest for u in unique])
    return ok[inverse.ravel()]


def kept_states(site: Site, n_sites: int, sector: Sector) -> np.ndarray:
    """The encoded states of a sector made of kept local states only, enumerated site by
    site (a partial state is extended only when the remaining sites can still reach the
    sector's particle number and S^z), never by filtering the whole sector."""
    local = [(v, *local_quantities(site, v)) for v in site.states]
    want_n = sector.particles
    want_s = None if sector.sz is None else int(2 * sector.sz)
    key = lambda n, s: (n if want_n is not None else 0, s if want_s is not None else 0)  # noqa: E731
    reach = [{(0, 0)}]                                   # totals sites i.. can add, from the end
    for _ in range(n_sites):
        reach.append({key(n + dn, s + ds) for n, s in reach[-1] for _, dn, ds in local})
    reach.reverse()
    target = key(want_n or 0, want_s or 0)
    states = np.zeros(1, dtype=np.int64)
    used_n = np.zeros(1, dtype=np.int64)
    used_s = np.zeros(1, dtype=np.int64)
    for i in range(n_sites):
        parts = []
        for value, dn, ds in local:
            code = sum(((value // site.radix ** m) % site.radix) * site.radix ** (i + m * n_sites)
                       for m in range(site.modes))
            n, s = used_n + dn, used_s + ds
            keep = _reachable(n, s, target, reach[i + 1], key)
            parts.append((states[keep] + code, n[keep], s[keep]))
        states = np.concatenate([p[0] for p in parts])
        used_n = np.concatenate([p[1] for p in parts])
        used_s = np.concatenate([p[2] for p in parts])
    return np.sort(states)


def _sector_basis(site: Site, n_sites: int, sector: Sector, *, max_states: int | None = None) -> Basis:
    totals = sector_totals(site, n_sites, sector)
    n_slots = n_sites * site.modes
    if totals == "sz-only":
        shift = int(2 * sector.sz)
        blocks = [two_species_basis(n_sites, n_up, n_up - shift).states
                  for n_up in range(max(0, shift), min(n_sites, n_sites + shift) + 1)]
        size = sum(b.size for b in blocks)
        _check_size(size, max_states)
        return explicit_basis(np.concatenate(blocks), n_slots, 2)
    if totals is None:
        return full_basis(n_slots, site.radix, max_states=max_states)
    if len(totals) == 1:
        return fixed_sum_basis(n_slots, site.radix, totals[0][1], max_states=max_states)
    return two_species_basis(n_sites, totals[0][1], totals[1][1], max_states=max_states)


def sector_size(site: Site, n_sites: int, sector: Sector) -> int:
    """Number of states of a sector, without enumerating it."""
    if site.is_restricted:
        return kept_sector_size(site, n_sites, sector)
    totals = sector_totals(site, n_sites, sector)
    if totals == "sz-only":
        shift = int(2 * sector.sz)
        return sum(basis_size(n_sites, 2, [(n_sites, n_up)]) * basis_size(n_sites, 2, [(n_sites, n_up - shift)])
                   for n_up in range(max(0, shift), min(n_sites, n_sites + shift) + 1))
    return basis_size(n_sites * site.modes, site.radix, totals)


def kept_sector_size(site: Site, n_sites: int, sector: Sector) -> int:
    """Number of states of a sector made of kept local states only (exact, by counting the
    ways to reach each total particle number and S^z site by site)."""
    sector_totals(site, n_sites, sector)             # refuses impossible sectors
    local = [local_quantities(site, v) for v in site.states]
    counts = {(0, 0): 1}
    for _ in range(n_sites):
        new: dict = {}
        for (n, s), c in counts.items():
            for dn, ds in local:
                key = (n + dn, s + ds)
                new[key] = new.get(key, 0) + c
        counts = new
    return sum(c for (n, s), c in counts.items()
               if (sector.particles is None or n == sector.particles)
               and (sector.sz is None or s == int(2 * sector.sz)))
