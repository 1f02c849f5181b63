"""Wrap-around processes on periodic clusters: from which order a coupling can receive
processes that wind around a periodic direction.

A term of order n of the effective Hamiltonian is a product of n factors of V, each acting on
the sites of one of V's bonds (common practice: the linked-cluster picture of the expansion).
The bonds a process uses form a connected set of at most n bonds.  If that set contains no
closed loop with non-zero winding around the periodic directions -- no path from a site to
one of its own periodic images in the unfolded lattice -- the process unfolds one-to-one
onto the infinite lattice and contributes exactly as it does there.  The shortest such loop,
``w`` bonds, is found by a breadth-first search on the bond graph of V with every bond marked
by the image shift it makes (its winding); so couplings up to order ``w - 1`` are those of
the infinite lattice, and from order ``w`` on they may contain wrap-around processes (on a
3x3 triangular torus, w = 3; on a periodic ring of L sites, w = L).
"""

from __future__ import annotations

import itertools
from collections import deque

import numpy as np

from lowfold.model.lattice import period_vectors
from lowfold.model.model import Model

__all__ = ["shortest_winding_loop", "wrap_around_warnings"]


def _bond_windings(model: Model) -> list[tuple[int, int, tuple[int, ...]]]:
    """``(i, j, shift)`` for every bond of V: going from i to j moves by ``shift`` periods
    (all shortest images when several tie)."""
    periods = period_vectors(model.lattice)
    coords = model.lattice.coordinates
    pairs = set()
    for _, products in model.products(model.perturbation_labels):
        for _, factors in products:
            sites = sorted({int(site) for _, site in factors})
            pairs.update(itertools.combinations(sites, 2))
    shifts = np.array(list(itertools.product((-1, 0, 1), repeat=len(periods))), dtype=int)
    edges = []
    for i, j in sorted(pairs):
        images = coords[j] - coords[i] + shifts.reshape(-1, len(periods)) @ periods
        lengths = np.linalg.norm(images, axis=1)
        for n in shifts[lengths <= lengths.min() + 1e-9]:
            edges.append((i, j, tuple(int(x) for x in n)))
    return edges


def shortest_winding_loop(model: Model) -> int | None:
    """Bonds in the shortest closed loop of V's bond graph that winds around a periodic
    direction (None: the cluster has no periodic direction, or no such loop)."""
    periods = period_vectors(model.lattice)
    if len(periods) == 0:
        return None
    neighbours: dict[int, list[tuple[int, tuple[int, ...]]]] = {}
    for i, j, n in _bond_windings(model):
        neighbours.setdefault(i, []).append((j, n))
        neighbours.setdefault(j, []).append((i, tuple(-x for x in n)))
    zero = (0,) * len(periods)
    best = None
    limit = 2 * model.n_sites + 2          # a shortest winding loop is a simple cycle
    for source in neighbours:
        seen = {(source, zero): 0}
        queue = deque([(source, zero)])
        while queue:
            site, wind = queue.popleft()
            depth = seen[(site, wind)]
            if depth >= limit or (best is not None and depth + 1 >= best):
                continue
            for other, n in neighbours[site]:
                state = (other, tuple(a + b for a, b in zip(wind, n)))
                if state in seen:
                    continue
                if other == source and state[1] != zero:
                    best = depth + 1
                    break
                seen[state] = depth + 1
                queue.append(state)
    return best


def wrap_around_warnings(model: Model, order: int) -> list[str]:
    """A warning when couplings at ``order`` can receive wrap-around processes."""
    w = shortest_winding_loop(model)
    if w is None or order < w:
        return []
    return [f"on this periodic cluster the shortest loop of bonds around a periodic direction "
            f"has {w} bonds, so from order {w} on the couplings also receive processes that "
            "wind around the cluster and differ from those of the infinite lattice; use a "
            "larger cluster, or open boundaries, for couplings at those orders"]
