"""Faces of a lattice cluster, periodic ones included, found without lowfold's gauge code.

A face is a closed path of nearest-neighbour bonds that does not wind around a periodic
direction: the sum of its bond vectors (each the shortest image of the bond, found here by
trying every shift by the periods) is zero.  Its signed area comes from the unwrapped
corners (shoelace formula).  Used to check that the Peierls phases collected around every
face are the flux through it (Stokes; docs/model-files.md).
"""

from __future__ import annotations

import itertools

import numpy as np


def periods(lattice) -> np.ndarray:
    """The period vectors ``L_k a_k`` of the periodic directions (rows)."""
    vectors = lattice.translations
    rows = [n * v for n, v, b in zip(lattice.size, vectors, lattice.boundary) if b == "periodic"]
    return np.array(rows, dtype=float).reshape(-1, lattice.coordinates.shape[1])


def bond_vector(lattice, a: int, b: int) -> np.ndarray:
    """The shortest image of ``r_b - r_a`` (brute force over shifts -3..3 of each period)."""
    r = lattice.coordinates
    shifts = periods(lattice)
    best = r[b] - r[a]
    for n in itertools.product(range(-3, 4), repeat=len(shifts)):
        d = r[b] - r[a] + (np.array(n) @ shifts if len(shifts) else 0.0)
        if np.linalg.norm(d) < np.linalg.norm(best) - 1e-9:
            best = d
    return best


def faces(lattice, length: int) -> list[tuple[tuple[int, ...], float]]:
    """Every contractible cycle of ``length`` nearest bonds, once, oriented counterclockwise,
    with its area: ``[(sites in order, area > 0), ...]``."""
    neighbours = {i: set() for i in range(lattice.n_sites)}
    for i, j in lattice.bonds("nearest"):
        neighbours[int(i)].add(int(j))
        neighbours[int(j)].add(int(i))
    step = {}
    for i in neighbours:
        for j in neighbours[i]:
            step[i, j] = bond_vector(lattice, i, j)
    found = {}

    def walk(path):
        if len(path) == length:
            if path[0] in neighbours[path[-1]]:
                key = frozenset(zip(path, path[1:] + path[:1])) | frozenset(
                    zip(path[1:] + path[:1], path))
                found.setdefault(key, tuple(path))
            return
        for nxt in neighbours[path[-1]] - set(path):
            if nxt > path[0]:
                walk(path + [nxt])

    for start in neighbours:
        walk([start])
    out = []
    for cycle in found.values():
        corners = [np.zeros(2)]
        for a, b in zip(cycle, cycle[1:] + cycle[:1]):
            corners.append(corners[-1] + step[a, b])
        if np.linalg.norm(corners[-1]) > 1e-9:
            continue                                  # winds around the torus
        area = 0.5 * sum(p[0] * q[1] - q[0] * p[1] for p, q in zip(corners[:-1], corners[1:]))
        if area < 0:
            cycle, area = (cycle[0],) + tuple(reversed(cycle[1:])), -area
        out.append((cycle, float(area)))
    return sorted(out)
