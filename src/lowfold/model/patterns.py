"""Translated patterns: one group of sites given in cell coordinates, repeated over a lattice.

A pattern lists its members as cell offsets ``[dx]``, ``[dx, dy]`` or ``[dx, dy, dz]`` (one
entry per lattice direction; basis site 0), or with the basis site last,
``[dx, dy, s]`` (lattices with several sites per cell: ladder, honeycomb, kagome).  The
pattern is translated by every cell ``c`` of the lattice: member ``c + d``, wrapped along
periodic directions; along open directions translates with a member outside the cluster
are left out.  Site numbering is that of :mod:`lowfold.model.lattice`
(``site = n_basis * cell + s``, ``cell = x + Lx*y + Lx*Ly*z``).

Examples
--------
>>> from lowfold.model.lattice import make_lattice
>>> translated_pattern([[0, 0], [1, 0], [1, 1], [0, 1]], make_lattice("square", [3, 2]))
[(0, 1, 4, 3), (1, 2, 5, 4)]
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from lowfold.errors import ModelError

__all__ = ["translated_pattern", "pattern_of", "pattern_of_positions", "along_translations"]


def _is_int(x) -> bool:
    return isinstance(x, int) and not isinstance(x, bool)


def translated_pattern(pattern, lattice, *, where: str = "pattern") -> list[tuple[int, ...]]:
    """Site groups of ``pattern`` translated over ``lattice`` (see the module docstring).

    An infinite lattice (no sites of its own, as for bond classes) gives no group; its
    pattern is checked against the unit cell.

    Raises
    ------
    ModelError
        A malformed pattern, a graph lattice (no translations), a pattern whose members
        coincide on a small periodic cluster, or one that fits nowhere.
    """
    if lattice.shape == "graph":
        raise ModelError(f"{where}: a graph lattice has no translations; list the sites")
    if getattr(lattice, "infinite", False):      # no sites of its own: checked, none placed
        _members(pattern, len(lattice.translations), len(lattice.unit_cell), where)
        return []
    dim = len(lattice.size)
    n_basis = lattice.n_sites // math.prod(lattice.size)
    members = _members(pattern, dim, n_basis, where)
    groups = []
    for cell in itertools.product(*(range(n) for n in reversed(lattice.size))):
        cell = cell[::-1]
        placed = []
        for offset, s in members:
            x = [c + d for c, d in zip(cell, offset)]
            if any(b == "open" and not 0 <= xi < n for xi, n, b in
                   zip(x, lattice.size, lattice.boundary)):
                break
            x = [xi % n for xi, n in zip(x, lattice.size)]
            index = sum(xi * math.prod(lattice.size[:k]) for k, xi in enumerate(x))
            placed.append(n_basis * index + s)
        else:
            if len(set(placed)) != len(placed):
                raise ModelError(f"{where}: the pattern does not fit a {_shown(lattice)} "
                                 "cluster: its sites coincide after wrapping around; use a "
                                 "larger size")
            groups.append(tuple(placed))
    if not groups:
        raise ModelError(f"{where}: the pattern does not fit a {_shown(lattice)} cluster "
                         "anywhere; use a larger size or periodic boundaries")
    return groups


def _shown(lattice) -> str:
    size = "x".join(str(n) for n in lattice.size)
    bounds = "/".join(dict.fromkeys(lattice.boundary))
    return f"{size} {bounds} {lattice.shape}"


def _members(pattern, dim, n_basis, where):
    if not isinstance(pattern, (list, tuple)) or not pattern:
        raise ModelError(f"{where}: pattern must be a non-empty list of cell offsets, "
                         "e.g. [[0, 0], [1, 0]]")
    out = []
    for entry in pattern:
        if (not isinstance(entry, (list, tuple)) or len(entry) not in (dim, dim + 1)
                or not all(_is_int(v) for v in entry)):
            raise ModelError(f"{where}: pattern entry {entry!r} must be {dim} integer cell "
                             f"offsets, optionally followed by a basis site")
        s = entry[dim] if len(entry) == dim + 1 else 0
        if not 0 <= s < n_basis:
            raise ModelError(f"{where}: pattern entry {list(entry)!r}: basis site {s} is out "
                             f"of range (this lattice has {n_basis} per cell)")
        out.append((tuple(entry[:dim]), s))
    if len(set(out)) != len(out):
        raise ModelError(f"{where}: pattern lists a site twice")
    return out


def pattern_of(sites, lattice) -> list[list[int]]:
    """The pattern (cell offsets relative to the first member's cell, basis site last when
    the lattice has several per cell) of a group of sites of ``lattice``.

    Along periodic directions the offset is the shortest one (``|d| <= L/2``), so that a
    group that wraps around the cluster gives the pattern of its compact image.
    """
    n_basis = lattice.n_sites // math.prod(lattice.size)

    def cell_of(i):
        cell, s = divmod(int(i), n_basis)
        x = []
        for n in lattice.size:
            cell, xi = divmod(cell, n)
            x.append(xi)
        return x, s

    origin, _ = cell_of(sites[0])
    out = []
    for i in sites:
        x, s = cell_of(i)
        d = [xi - oi for xi, oi in zip(x, origin)]
        d = [(di + n // 2) % n - n // 2 if b == "periodic" else di
             for di, n, b in zip(d, lattice.size, lattice.boundary)]
        out.append(d + [s] if n_basis > 1 else d)
    return out


def pattern_of_positions(positions, lattice) -> list[list[int]]:
    """The pattern of a group of sites given by their Cartesian positions (anywhere on the
    lattice: minimum images on a periodic cluster, sites of an infinite lattice's patch),
    relative to the cell of the first position; basis site last as in :func:`pattern_of`.

    Raises
    ------
    ModelError
        A position that is no site of the lattice.
    """
    vectors = np.asarray(lattice.translations, dtype=float)
    basis = np.asarray(lattice.unit_cell, dtype=float)
    cells = []
    for position in positions:
        point = np.asarray(position, dtype=float)
        for s, b in enumerate(basis):
            x = np.linalg.lstsq(vectors.T, point - b, rcond=None)[0]
            n = np.round(x)
            if np.allclose(vectors.T @ n + b, point, atol=1e-6):
                cells.append((n.astype(int), s))
                break
        else:
            raise ModelError(f"position {list(point)} is no site of the {lattice.shape} lattice")
    origin = cells[0][0]
    return [[int(v) for v in x - origin] + ([s] if len(basis) > 1 else []) for x, s in cells]


def along_translations(bonds, lattice) -> list[tuple[int, int]]:
    """The bonds of a class taken as on an open cluster or the infinite lattice, along the
    translations: each bond's shortest displacement from ``i`` to ``j`` in cells has its
    last nonzero component positive (same cell: the lower basis site first).  On an open
    cluster that is ``i < j``; on a periodic one it keeps a directed term (a DM vector, a
    complex or spin-orbit hopping, an ordered string) translation invariant: the ring's bond
    ``(0, L - 1)`` is ``(L - 1, 0)``."""
    if lattice.shape == "graph" or "periodic" not in lattice.boundary:
        return [tuple(b) for b in bonds]
    n_basis = lattice.n_sites // math.prod(lattice.size)
    out = []
    for i, j in bonds:
        (ci, bi), (cj, bj) = divmod(int(i), n_basis), divmod(int(j), n_basis)
        last = 0
        for n, boundary in zip(lattice.size, lattice.boundary):
            (ci, xi), (cj, xj) = divmod(ci, n), divmod(cj, n)
            d = xj - xi
            if boundary == "periodic" and abs(d) > n / 2:
                d -= n if d > 0 else -n
            last = d or last
        forward = last > 0 or (last == 0 and bi <= bj)
        out.append((int(i), int(j)) if forward else (int(j), int(i)))
    return out
