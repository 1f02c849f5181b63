"""Short cycles of a lattice's nearest-neighbour bond graph: the triangles and 4-cycles on
which scalar chirality and ring exchange live (readout, model-file selectors, export)."""

from __future__ import annotations

__all__ = ["lattice_cycles"]


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
