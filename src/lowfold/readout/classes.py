"""Geometry of coupling classes: class names, translations and minimum-image positions.

A coupling class gathers the couplings that a symmetry of the lattice maps into each other
(all nearest-neighbour exchanges, all plaquette ring terms, ...).  This module names a
member's geometry (:func:`class_name`), gives the site permutations of the translations of a
periodic cluster (:func:`translations`) and places a member's sites at their minimum images
(:func:`member_positions`).  The grouping itself, which makes
:class:`~lowfold.results.CouplingClass` objects, is ``lowfold.jobs.classes``.

Class names
-----------
- no site: ``constant``; one site: ``site``;
- two sites: ``nearest``, ``next-nearest``, ``third`` by the distance shell of the infinite
  lattice of the shape (the bond classes of :mod:`lowfold.model.lattice`), else
  ``pair at 2.646`` (the distance, 4 significant digits);
- three sites all nearest neighbours: ``triangle``; four sites that, in some cyclic order,
  are a 4-cycle of the nearest-neighbour graph: ``4-cycle``;
- otherwise ``3 sites (1, 1, 2)``: the number of sites and their sorted pair distances.

On a ``graph`` lattice the coordinates are drawing positions, not geometry: positions are
matched to sites and distances are counted in bonds (the graph's own classes).
"""

from __future__ import annotations

import itertools

import numpy as np

from lowfold.errors import ModelError
from lowfold.model.lattice import BOND_CLASSES, Lattice, make_lattice

__all__ = ["class_name", "lattice_shells", "translation_invariant", "translations",
           "member_positions"]

_ATOL = 1e-6            # distances are O(1), as in lowfold.model.lattice
_REFERENCE_CELLS = 4    # an open cluster holding the three neighbour shells of every shape


def lattice_shells(lattice: Lattice) -> tuple[float, ...]:
    """Distances of the ``nearest``, ``next-nearest`` and ``third`` classes of the shape.

    Read from an open reference cluster of the same shape (``graph``: ``(1, 2, 3)``, counted
    in bonds).
    """
    if lattice.shape == "graph":
        return (1.0, 2.0, 3.0)
    reference = make_lattice(lattice.shape, [_REFERENCE_CELLS] * len(lattice.size), "open")
    shells = []
    for name in BOND_CLASSES:
        bonds = reference.bonds(name)
        if len(bonds):
            i, j = bonds[0]
            shells.append(float(np.linalg.norm(reference.coordinates[j]
                                               - reference.coordinates[i])))
    return tuple(shells)


def _graph_distances(lattice: Lattice, positions) -> np.ndarray:
    """Pairwise bond-count distances of graph sites found at ``positions``."""
    sites = []
    for p in positions:
        match = np.flatnonzero(np.linalg.norm(lattice.coordinates - np.asarray(p), axis=1)
                               <= _ATOL)
        if match.size != 1:
            raise ModelError(f"position {list(p)} is not a site of the graph")
        sites.append(int(match[0]))
    hops = np.full((len(sites), len(sites)), np.inf)
    np.fill_diagonal(hops, 0.0)
    for k, name in enumerate(BOND_CLASSES, start=1):
        pairs = {tuple(map(int, b)) for b in lattice.bonds(name)}
        for a, b in itertools.combinations(range(len(sites)), 2):
            if (min(sites[a], sites[b]), max(sites[a], sites[b])) in pairs:
                hops[a, b] = hops[b, a] = k
    return hops


def _distances(lattice: Lattice, positions) -> np.ndarray:
    if lattice.shape == "graph":
        return _graph_distances(lattice, positions)
    x = np.asarray(positions, dtype=float).reshape(len(positions), -1)
    return np.linalg.norm(x[:, None, :] - x[None, :, :], axis=2)


def _shell_name(d: float, shells) -> str | None:
    for name, r in zip(BOND_CLASSES, shells):
        if abs(d - r) <= _ATOL:
            return name
    return None


def class_name(lattice: Lattice, positions, *, shells: tuple[float, ...] | None = None) -> str:
    """The class of a member with sites at Cartesian ``positions`` (module docstring).

    Parameters
    ----------
    lattice : Lattice
        Supplies the shape (its neighbour shells) and, for a graph, the sites.
    positions : sequence of coordinate sequences
        One member's sites, unwrapped (minimum images on a periodic cluster).
    shells : tuple of float, optional
        :func:`lattice_shells` of the lattice, when the caller names many members.

    Examples
    --------
    >>> square = make_lattice("square", [3, 3], "open")
    >>> class_name(square, [[0, 0], [1, 1]])
    'next-nearest'
    >>> class_name(square, [[0, 0], [1, 0], [1, 1], [0, 1]])
    '4-cycle'
    >>> class_name(make_lattice("chain", [6], "periodic"), [[0], [1], [2]])
    '3 sites (1, 1, 2)'
    """
    n = len(positions)
    if n == 0:
        return "constant"
    if n == 1:
        return "site"
    shells = lattice_shells(lattice) if shells is None else shells
    d = _distances(lattice, positions)
    near = lambda a, b: abs(d[a, b] - shells[0]) <= _ATOL          # noqa: E731
    if n == 2:
        return _shell_name(float(d[0, 1]), shells) or f"pair at {float(d[0, 1]):.4g}"
    if n == 3 and all(near(a, b) for a, b in itertools.combinations(range(3), 2)):
        return "triangle"
    if n == 4:
        for order in ((0, 1, 2, 3), (0, 1, 3, 2), (0, 2, 1, 3)):
            if all(near(order[k], order[(k + 1) % 4]) for k in range(4)):
                return "4-cycle"
    pairs = sorted(float(d[a, b]) for a, b in itertools.combinations(range(n), 2))
    return f"{n} sites ({', '.join(f'{x:.4g}' for x in pairs)})"


# --------------------------------------------------------------------------- translations

def translation_invariant(lattice: Lattice) -> bool:
    """True for a Bravais-lattice cluster periodic in every direction (not a graph)."""
    return lattice.shape != "graph" and all(b == "periodic" for b in lattice.boundary)


def _cell_vectors(lattice: Lattice) -> np.ndarray:
    """Primitive vectors of the shape, one per row (from a 2-cell open reference cluster)."""
    dim = len(lattice.size)
    reference = make_lattice(lattice.shape, [2] * dim, "open")
    n_basis = reference.n_sites // 2 ** dim
    cells = [n_basis * 2 ** k for k in range(dim)]          # the cell one step along axis k
    return np.array([reference.coordinates[c] - reference.coordinates[0] for c in cells])


def translations(lattice: Lattice) -> list[np.ndarray]:
    """Site permutations of the primitive translations of a periodic cluster.

    Returns one array ``perm`` per periodic direction: the translation by one cell along it
    maps site ``s`` to ``perm[s]`` (site numbering of :mod:`lowfold.model.lattice`).  Together
    they generate every translation of the cluster.
    """
    if lattice.shape == "graph":
        return []
    size = lattice.size
    n_cells = int(np.prod(size))
    n_basis = lattice.n_sites // n_cells
    cell = np.arange(n_cells)
    index = np.stack(np.unravel_index(cell, size[::-1]), axis=1)[:, ::-1]   # x fastest
    out = []
    for axis, boundary in enumerate(lattice.boundary):
        if boundary != "periodic":
            continue
        moved = index.copy()
        moved[:, axis] = (moved[:, axis] + 1) % size[axis]
        target = np.ravel_multi_index(tuple(moved[:, ::-1].T), size[::-1])
        perm = (n_basis * target[:, None] + np.arange(n_basis)[None, :]).reshape(-1)
        out.append(perm.astype(np.int64))
    return out


def member_positions(lattice: Lattice, sites) -> tuple[tuple[float, ...], ...]:
    """Cartesian positions of a member's sites, each at the minimum image of the one before.

    On open directions these are the sites' own coordinates; along periodic directions each
    site is moved by whole periods to lie closest to the previous site of ``sites``, so that a
    bond or a plaquette that wraps around the cluster is drawn whole.
    """
    coords = lattice.coordinates
    if not sites:
        return ()
    periodic = [k for k, b in enumerate(lattice.boundary) if b == "periodic"]
    if lattice.shape == "graph" or not periodic:
        return tuple(tuple(float(x) for x in coords[s]) for s in sites)
    vectors = _cell_vectors(lattice)
    periods = np.array([lattice.size[k] * vectors[k] for k in periodic])
    shifts = np.array(list(itertools.product((-1, 0, 1), repeat=len(periods)))) @ periods
    placed = [coords[sites[0]]]
    for s in sites[1:]:
        candidates = coords[s] + shifts
        best = np.argmin(np.linalg.norm(candidates - placed[-1], axis=1))
        placed.append(candidates[best])
    return tuple(tuple(float(x) for x in p) for p in placed)
