"""Lattice geometry: sites, real-space coordinates and bonds grouped by distance class.

A :class:`Lattice` is a finite cluster of a Bravais lattice with a basis (or an explicit
graph). It knows where its sites are and which pairs of sites are nearest, next-nearest and
third neighbours; operator terms pick their bonds and sites through :meth:`Lattice.bonds`
and :meth:`Lattice.sites`.

Shapes, sizes and site numbering
--------------------------------
``size`` counts unit cells along each lattice direction; cells are numbered with the first
direction fastest, ``cell = x + Lx*y + Lx*Ly*z``, and ``site = n_basis*cell + s`` for basis
site ``s``. Nearest-neighbour distance is 1 in every shape.

=============  ==============  =====  ===========================================================
shape          size            basis  geometry
=============  ==============  =====  ===========================================================
chain          [L]             1      a1 = (1,); site = x
ladder         [L]             2      2 legs of length L; a1 = (1, 0), legs at y = 0, 1;
                                      site = 2*x + leg, so rungs are (2x, 2x+1) and the site
                                      order zig-zags (rung bonds span 1 site, leg bonds 2)
square         [Lx, Ly]        1      a1 = (1, 0), a2 = (0, 1); site = x + Lx*y
triangular     [Lx, Ly]        1      a1 = (1, 0), a2 = (1/2, sqrt3/2)
honeycomb      [Lx, Ly]        2      a1 = (sqrt3, 0), a2 = (sqrt3/2, 3/2); A (0, 0), B (sqrt3/2, 1/2)
kagome         [Lx, Ly]        3      a1 = (2, 0), a2 = (1, sqrt3); (0, 0), (1, 0), (1/2, sqrt3/2)
cubic          [Lx, Ly, Lz]    1      simple cubic, unit vectors; site = x + Lx*(y + Ly*z)
graph          (none) or [n]   -      ``sites = n``, ``bonds = [[i, j], ...]``; sites drawn on
                                      the unit circle, site k at angle 2*pi*k/n
=============  ==============  =====  ===========================================================

``boundary`` is one string for all directions or one per direction; the ladder has a single
direction (along the legs), its rung direction is always open. A graph is always open.

``boundary = "infinite"`` (one string, no size) is the whole lattice of the shape (not for a
graph). It has no sites of its own (``n_sites == 0``): :meth:`Lattice.patch` gives finite
open clusters of it (same coordinates and bond classes), and :attr:`Lattice.translations` /
:attr:`Lattice.unit_cell` its primitive vectors and basis positions for embedding.

Bond classes
------------
The classes ``nearest``, ``next-nearest`` and ``third`` are the three smallest distinct
distances between sites of the *infinite* lattice of the shape (found from geometry on a
large open reference cluster): chain 1, 2, 3; ladder and square 1, sqrt2, 2; triangular,
honeycomb and kagome 1, sqrt3, 2; cubic 1, sqrt2, sqrt3. On any cluster large enough to
contain them these are also its own three smallest distances, so classes agree with the
infinite lattice (square: sides, diagonals, two steps along an axis; honeycomb 3/6/3
neighbours; kagome 4/4/6; triangular 6/6/6; cubic 6/12/8). A pair whose distance matches
none of the three gets no bond, so a 1 x L square strip has no next-nearest bonds.

Distances use the minimum-image convention along periodic directions, and *a pair of sites
gets at most one bond*: the bond of the class of its shortest image distance (no double
bonds on small periodic clusters). A periodic chain of 2 sites thus has one nearest bond,
and a periodic 4-site ring has the pair (0, 2) once, as next-nearest. Pairs are never
bonded to themselves, also when a periodic direction has size 1.

For a graph, ``nearest`` are the given bonds and ``next-nearest`` / ``third`` the pairs at
graph distance 2 and 3 (shortest path along given bonds).

Bond arrays hold rows ``(i, j)`` with ``i < j``, sorted lexicographically, dtype int64.

Size limit
----------
A lattice has at most :data:`MAX_SITES` = 4,096 sites (a :class:`~lowfold.errors.SizeError`
otherwise, raised before anything is allocated): the distance of every pair of sites is
computed, 8.4 million pairs at the limit.  A lattice is geometry only; a *model* holds far
fewer sites, since each many-body state is one int64 (at most 62 sites, see
``lowfold.model.sites``).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from types import MappingProxyType
from typing import Mapping

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import shortest_path

from lowfold.errors import ModelError, SizeError

__all__ = ["SHAPES", "BOND_CLASSES", "MAX_SITES", "Lattice", "lattice_cycles", "make_lattice",
           "period_vectors"]

SHAPES = ("chain", "ladder", "square", "triangular", "honeycomb", "kagome", "cubic", "graph")
BOND_CLASSES = ("nearest", "next-nearest", "third")
BOUNDARIES = ("open", "periodic")
INFINITE = "infinite"
MAX_SITES = 4096  # see "Size limit" in the module docstring

_S3 = np.sqrt(3.0)
# shape -> (primitive vectors, one per row; basis positions, one per row)
_GEOMETRY = {
    "chain": ([[1.0]], [[0.0]]),
    "ladder": ([[1.0, 0.0]], [[0.0, 0.0], [0.0, 1.0]]),
    "square": ([[1.0, 0.0], [0.0, 1.0]], [[0.0, 0.0]]),
    "triangular": ([[1.0, 0.0], [0.5, _S3 / 2]], [[0.0, 0.0]]),
    "honeycomb": ([[_S3, 0.0], [_S3 / 2, 1.5]], [[0.0, 0.0], [_S3 / 2, 0.5]]),
    "kagome": ([[2.0, 0.0], [1.0, _S3]], [[0.0, 0.0], [1.0, 0.0], [0.5, _S3 / 2]]),
    "cubic": (np.eye(3).tolist(), [[0.0, 0.0, 0.0]]),
}
_SIZE_NAMES = {1: "[L]", 2: "[Lx, Ly]", 3: "[Lx, Ly, Lz]"}
_REFERENCE_CELLS = 5  # open reference cluster that contains the three shells of each shape
_ATOL = 1e-6  # distances are O(1); equal distances agree to rounding error


@dataclass(frozen=True, eq=False)
class Lattice:
    """A finite cluster: site positions and bonds grouped by distance class.

    Made by :func:`make_lattice`; the arrays are read-only. See the module docstring for
    site numbering and the bond-class rule.

    Attributes
    ----------
    shape : str
        One of :data:`SHAPES`.
    size : tuple of int
        Unit cells along each direction (a graph: ``(n_sites,)``).
    boundary : tuple of str
        ``"open"`` or ``"periodic"``, one per direction.
    coordinates : ndarray, shape (n_sites, dim)
        Real-space positions (nearest-neighbour distance 1).
    bonds_by_class : Mapping[str, ndarray]
        Class name -> (n_bonds, 2) int64 array of rows ``(i, j)``, ``i < j``, sorted.

    Examples
    --------
    >>> lat = make_lattice("chain", [4], "periodic")
    >>> lat.bonds("nearest").tolist()
    [[0, 1], [0, 3], [1, 2], [2, 3]]
    >>> lat.bonds("next-nearest").tolist()
    [[0, 2], [1, 3]]
    """

    shape: str
    size: tuple[int, ...]
    boundary: tuple[str, ...]
    coordinates: np.ndarray
    bonds_by_class: Mapping[str, np.ndarray]

    @property
    def n_sites(self) -> int:
        """Number of sites."""
        return int(self.coordinates.shape[0])

    def bonds(self, selector) -> np.ndarray:
        """Bonds picked by a class name or an explicit list of pairs.

        Parameters
        ----------
        selector : str or sequence of pairs
            ``"nearest"``, ``"next-nearest"``, ``"third"``, or ``[[i, j], ...]``. Explicit
            pairs keep the given order ``(i, j)`` (it matters for products of different
            operators); they must be in range, with ``i != j``, and no pair twice (in
            either order).

        Returns
        -------
        ndarray, shape (n_bonds, 2), int64

        Raises
        ------
        ModelError
            Unknown class name or a bad pair (named in the message).
        """
        if isinstance(selector, str):
            if selector not in BOND_CLASSES:
                raise ModelError(f"unknown bond class {selector!r}; use one of "
                                 f"{', '.join(BOND_CLASSES)} or a list of pairs [[i, j], ...]")
            return self.bonds_by_class[selector]
        return _explicit_pairs(selector, self.n_sites)

    def sites(self, selector) -> np.ndarray:
        """Sites picked by ``"all"`` or an explicit list of indices (kept in given order).

        Raises
        ------
        ModelError
            Unknown selector string, a non-integer, out-of-range or repeated site.
        """
        if isinstance(selector, str):
            if selector != "all":
                raise ModelError(f"unknown site selector {selector!r}; use \"all\" or a list "
                                 "of site indices")
            return np.arange(self.n_sites, dtype=np.int64)
        if not _is_sequence(selector):
            raise ModelError(f"sites must be \"all\" or a list of site indices, got {selector!r}")
        out = []
        for k in selector:
            if not _is_int(k):
                raise ModelError(f"site {k!r} is not an integer")
            if not 0 <= k < self.n_sites:
                raise ModelError(f"site {k} is out of range for {self.n_sites} sites")
            if k in out:
                raise ModelError(f"site {k} is listed twice")
            out.append(int(k))
        return np.array(out, dtype=np.int64).reshape(-1)

    @property
    def infinite(self) -> bool:
        """True for ``boundary = "infinite"`` (the whole lattice, no sites of its own)."""
        return INFINITE in self.boundary

    @property
    def translations(self) -> np.ndarray:
        """Primitive translation vectors, one per row (Cartesian; not for a graph)."""
        return np.array(_GEOMETRY[self.shape][0], dtype=float)

    @property
    def unit_cell(self) -> np.ndarray:
        """Basis positions of the unit cell, one per row (Cartesian; not for a graph)."""
        return np.array(_GEOMETRY[self.shape][1], dtype=float)

    def patch(self, cells: int) -> "Lattice":
        """An open cluster of ``cells`` unit cells along every direction of the shape
        (coordinates and bond classes those of the infinite lattice; numbering as any
        open cluster)."""
        if self.shape == "graph":
            raise ModelError("a graph has no unit cell to repeat into a patch")
        return make_lattice(self.shape, [cells] * len(self.translations), "open")


def period_vectors(lattice: Lattice) -> np.ndarray:
    """Translation vectors of the periodic directions (rows; ``(0, dim)`` when none): the
    cluster is the same after a shift by any of them.  A graph has none."""
    dim = lattice.coordinates.shape[1]
    if lattice.shape == "graph":
        return np.zeros((0, dim))
    vectors = np.array(_GEOMETRY[lattice.shape][0], dtype=float)
    rows = [n * v for n, v, b in zip(lattice.size, vectors, lattice.boundary) if b == "periodic"]
    return np.array(rows, dtype=float).reshape(-1, dim)


def make_lattice(shape: str, size=None, boundary="open", *, sites: int | None = None,
                 bonds=None) -> Lattice:
    """Build a lattice cluster.

    Parameters
    ----------
    shape : str
        One of :data:`SHAPES`.
    size : sequence of int
        Unit cells per direction (see the module docstring); for ``"graph"`` omit it or
        give ``[sites]``.
    boundary : str or sequence of str
        ``"open"`` or ``"periodic"`` for all directions, or one per direction.
    sites : int, optional
        Number of sites of a graph (graph only).
    bonds : sequence of pairs, optional
        Nearest-neighbour bonds of a graph (graph only); no self-bonds, no repeats.

    Returns
    -------
    Lattice

    Raises
    ------
    ModelError
        Unknown shape, bad size or boundary, bad graph sites or bonds.
    SizeError
        More than :data:`MAX_SITES` sites.
    """
    if not isinstance(shape, str) or shape not in SHAPES:
        raise ModelError(f"unknown lattice shape {shape!r}; use one of {', '.join(SHAPES)}")
    if shape == "graph":
        if boundary == INFINITE:
            raise ModelError("a graph cannot be infinite: give its sites and bonds, or use a "
                             f"lattice shape ({', '.join(SHAPES[:-1])})")
        return _make_graph(size, boundary, sites, bonds)
    if sites is not None or bonds is not None:
        raise ModelError(f"sites and bonds are given only for shape \"graph\", not {shape!r}")
    vectors, basis = (np.array(a, dtype=float) for a in _GEOMETRY[shape])
    if boundary == INFINITE or (_is_sequence(boundary) and INFINITE in boundary):
        return _make_infinite(shape, size, boundary, vectors.shape[0], basis.shape[1])
    size = _check_size(shape, size, len(vectors))
    _check_site_count(shape, math.prod(size) * len(basis))
    boundary = _check_boundary(boundary, len(vectors))
    coords = _positions(vectors, basis, size)
    periods = [n * v for n, v, b in zip(size, vectors, boundary) if b == "periodic"]
    distances = _min_image_distances(coords, np.array(periods).reshape(-1, coords.shape[1]))
    shells = _reference_shells(vectors, basis)
    pairs = np.column_stack(np.triu_indices(len(coords), 1)).astype(np.int64)
    by_class = {name: pairs[np.abs(distances - d) <= _ATOL]
                for name, d in itertools.zip_longest(BOND_CLASSES, shells, fillvalue=-1.0)}
    return _frozen(shape, size, boundary, coords, by_class)


# -- helpers ---------------------------------------------------------------------------------

def _is_int(x) -> bool:
    return isinstance(x, (int, np.integer)) and not isinstance(x, (bool, np.bool_))


def _is_sequence(x) -> bool:
    return isinstance(x, (list, tuple, np.ndarray))


def _check_size(shape, size, ndim):
    if _is_int(size):
        size = [size]
    want = _SIZE_NAMES[ndim]
    if not _is_sequence(size) or len(size) != ndim:
        raise ModelError(f"{shape} lattice needs {ndim} size entr{'y' if ndim == 1 else 'ies'} "
                         f"{want}, got {size!r}")
    for n in size:
        if not _is_int(n) or n < 1:
            raise ModelError(f"{shape} lattice size entries must be integers >= 1, got {size!r}")
    return tuple(int(n) for n in size)


def _check_site_count(shape, n_sites: int) -> None:
    if n_sites > MAX_SITES:
        raise SizeError(f"a {shape} lattice of {n_sites:,} sites is larger than the {MAX_SITES:,} "
                        "sites lowfold handles (and a model holds at most 62: one int64 per state)")


def _check_boundary(boundary, ndim):
    if isinstance(boundary, str):
        boundary = [boundary] * ndim
    if not _is_sequence(boundary) or len(boundary) != ndim:
        raise ModelError(f"boundary must be \"open\", \"periodic\" or a list of {ndim} of them, "
                         f"got {boundary!r}")
    for b in boundary:
        if b not in BOUNDARIES:
            raise ModelError(f"boundary must be \"open\" or \"periodic\", got {b!r}")
    return tuple(boundary)


def _positions(vectors, basis, size):
    """Site positions, cells with the first direction fastest, basis index fastest of all."""
    cells = np.array(list(itertools.product(*(range(n) for n in reversed(size)))))
    cells = cells[:, ::-1].reshape(-1, len(size))  # first direction fastest
    origins = cells @ vectors
    return (origins[:, None, :] + basis[None, :, :]).reshape(-1, basis.shape[1])


def _min_image_distances(coords, periods):
    """Shortest image distance of every pair i < j (in ``np.triu_indices`` order).

    ``periods`` holds the translation vectors of the periodic directions (rows). After
    wrapping the fractional coordinates into [-1/2, 1/2], the shortest image v = d + n.T has
    |b_k . v| <= |b_k| |d| for the dual vectors b_k, which bounds the shifts n_k to search.
    """
    i, j = np.triu_indices(len(coords), 1)
    disp = coords[j] - coords[i]
    if len(periods) == 0 or len(disp) == 0:
        return np.linalg.norm(disp, axis=1)
    dual = np.linalg.solve(periods @ periods.T, periods)
    disp = disp - np.round(disp @ dual.T) @ periods
    radius = np.linalg.norm(disp, axis=1).max()
    reach = np.ceil(0.5 + radius * np.linalg.norm(dual, axis=1)).astype(int)
    best = np.full(len(disp), np.inf)
    for shift in itertools.product(*(range(-m, m + 1) for m in reach)):
        best = np.minimum(best, np.linalg.norm(disp + np.array(shift) @ periods, axis=1))
    return best


def _distinct(values, count):
    """The ``count`` smallest distinct positive values, grouped within ``_ATOL``."""
    out = []
    for v in np.sort(values):
        if v > _ATOL and (not out or v - out[-1] > _ATOL):
            out.append(float(v))
            if len(out) == count:
                break
    return out


def _reference_shells(vectors, basis):
    """Three smallest neighbour distances of the infinite lattice (from an open cluster)."""
    size = (_REFERENCE_CELLS,) * len(vectors)
    coords = _positions(vectors, basis, size)
    empty = np.zeros((0, coords.shape[1]))
    return _distinct(_min_image_distances(coords, empty), len(BOND_CLASSES))


def _explicit_pairs(pairs, n_sites):
    """Validated (n, 2) int64 array of explicit pairs, order of each pair kept."""
    if not _is_sequence(pairs):
        raise ModelError(f"bonds must be a class name or a list of pairs [[i, j], ...], "
                         f"got {pairs!r}")
    out, seen = [], set()
    for pair in pairs:
        if not _is_sequence(pair) or len(pair) != 2 or not all(_is_int(k) for k in pair):
            raise ModelError(f"bond {_show(pair)} is not a pair of integer site indices")
        i, j = int(pair[0]), int(pair[1])
        if not (0 <= i < n_sites and 0 <= j < n_sites):
            raise ModelError(f"bond {[i, j]} is out of range for {n_sites} sites")
        if i == j:
            raise ModelError(f"bond {[i, j]} joins a site to itself")
        if (min(i, j), max(i, j)) in seen:
            raise ModelError(f"bond {[i, j]} is listed twice")
        seen.add((min(i, j), max(i, j)))
        out.append((i, j))
    return np.array(out, dtype=np.int64).reshape(-1, 2)


def _show(x):
    return list(x) if isinstance(x, (tuple, np.ndarray)) else repr(x)


def _make_graph(size, boundary, sites, bonds):
    if not _is_int(sites) or sites < 1:
        raise ModelError(f"graph needs sites = an integer >= 1, got {sites!r}")
    _check_site_count("graph", int(sites))
    if bonds is None:
        raise ModelError("graph needs bonds = [[i, j], ...]")
    if size is not None and _check_size("graph", size, 1) != (sites,):
        raise ModelError(f"graph size {size!r} disagrees with sites = {sites}")
    boundary = _check_boundary(boundary, 1)
    if boundary != ("open",):
        raise ModelError("a graph has open boundaries only; give its bonds explicitly")
    given = _explicit_pairs(bonds, sites)
    n = int(sites)
    angles = 2 * np.pi * np.arange(n) / n
    coords = np.column_stack([np.cos(angles), np.sin(angles)])
    adjacency = csr_matrix((np.ones(len(given)), (given[:, 0], given[:, 1])), shape=(n, n))
    hops = shortest_path(adjacency, directed=False, unweighted=True)
    pairs = np.column_stack(np.triu_indices(n, 1)).astype(np.int64)
    distance = hops[pairs[:, 0], pairs[:, 1]]
    by_class = {name: pairs[distance == k] for k, name in enumerate(BOND_CLASSES, start=1)}
    return _frozen("graph", (n,), boundary, coords, by_class)


def _make_infinite(shape, size, boundary, ndim, dim):
    if boundary != INFINITE:
        raise ModelError(f"boundary \"infinite\" applies to every direction: give it as one "
                         f"string, not {boundary!r}")
    if size is not None:
        raise ModelError(f"an infinite {shape} lattice has no size: leave size out, or give a "
                         "size with boundary \"open\" or \"periodic\"")
    empty = {name: np.zeros((0, 2), dtype=np.int64) for name in BOND_CLASSES}
    return _frozen(shape, (), (INFINITE,) * ndim, np.zeros((0, dim)), empty)


def _frozen(shape, size, boundary, coords, by_class):
    coords = np.ascontiguousarray(coords, dtype=float)
    coords.setflags(write=False)
    for arr in by_class.values():
        arr.setflags(write=False)
    return Lattice(shape=shape, size=size, boundary=boundary, coordinates=coords,
                   bonds_by_class=MappingProxyType(by_class))


def lattice_cycles(lattice) -> tuple[list[tuple], list[tuple]]:
    """The 4-cycles (cyclic order) and triangles of the nearest-neighbour bond graph: where
    ring exchange and scalar chirality are read out.

    Returns
    -------
    rings : list of 4-tuples
        Each 4-cycle once, as the smallest of its rotations and reflections, sorted.
    triangles : list of 3-tuples
        Each triangle once, sites ascending, sorted.
    """
    neighbours = {i: set() for i in range(lattice.n_sites)}
    for i, j in lattice.bonds("nearest"):
        neighbours[int(i)].add(int(j))
        neighbours[int(j)].add(int(i))
    triangles = sorted({tuple(sorted((i, j, k))) for i in neighbours for j in neighbours[i]
                        for k in neighbours[j] & neighbours[i] if len({i, j, k}) == 3})
    rings = set()
    for i in neighbours:
        for j in neighbours[i]:
            for k in neighbours[j] - {i}:
                for l in (neighbours[k] & neighbours[i]) - {i, j, k}:
                    rotations = [(i, j, k, l)[r:] + (i, j, k, l)[:r] for r in range(4)]
                    rotations += [tuple(reversed(c)) for c in rotations]
                    rings.add(min(rotations))
    return sorted(rings), triangles
