"""Tests of ``lowfold.model.lattice.lattice_cycles``: 4-cycles and triangles of the
nearest-neighbour graph, checked by exact counting (hand counts written beside each case).

Site numbering (``lowfold.model.lattice``): ``site = x + Lx*y``; triangular lattice vectors
``a1 = (1, 0)``, ``a2 = (1/2, sqrt3/2)``, so the nearest neighbours of ``(x, y)`` are
``(x+-1, y)``, ``(x, y+-1)`` and ``(x-+1, y+-1)``.
"""

from __future__ import annotations

import pytest

from lowfold.model.cycles import lattice_cycles
from lowfold.model.lattice import make_lattice


def test_open_2x2_square_has_one_plaquette():
    # sites 0 (0,0), 1 (1,0), 2 (0,1), 3 (1,1); bonds 0-1, 2-3, 0-2, 1-3: the cycle 0-1-3-2
    rings, triangles = lattice_cycles(make_lattice("square", [2, 2]))
    assert rings == [(0, 1, 3, 2)]
    assert triangles == []


def test_open_3x3_square_has_four_plaquettes_and_no_other_cycle():
    # (Lx-1)(Ly-1) = 4 unit squares; a square lattice has no other 4-cycle and no triangle
    rings, triangles = lattice_cycles(make_lattice("square", [3, 3]))
    assert rings == [(0, 1, 4, 3), (1, 2, 5, 4), (3, 4, 7, 6), (4, 5, 8, 7)]
    assert triangles == []


def test_open_2x2_triangular_is_a_rhombus_of_two_triangles():
    # bonds 0-1, 2-3, 0-2, 1-3 and the short diagonal 1-2 ((1,0)-(0,1) at distance 1);
    # 0-3 is sqrt3 apart.  Triangles 0-1-2 and 1-2-3; the one 4-cycle is the rhombus rim.
    rings, triangles = lattice_cycles(make_lattice("triangular", [2, 2]))
    assert triangles == [(0, 1, 2), (1, 2, 3)]
    assert rings == [(0, 1, 3, 2)]


def test_open_3x3_triangular_counts():
    # 2 (Lx-1)(Ly-1) = 8 triangles.  Every 4-cycle of the triangular lattice is the rim of
    # two triangles sharing an edge, one per interior edge: 16 edges (6 along a1, 6 along
    # a2, 4 short diagonals), 8 triangles x 3 edges = 24 = 2 interior + boundary, so 8
    # interior edges and 8 four-cycles.
    rings, triangles = lattice_cycles(make_lattice("triangular", [3, 3]))
    assert len(triangles) == 8 and len(set(triangles)) == 8
    assert len(rings) == 8 and len(set(rings)) == 8
    for tri in triangles:
        assert list(tri) == sorted(tri)
    for ring in rings:
        assert ring[0] == min(ring) and ring[1] < ring[3]   # smallest rotation/reflection


@pytest.mark.parametrize("n,rings,triangles", [
    (3, [], [(0, 1, 2)]),         # a closed ring of three is one triangle
    (4, [(0, 1, 2, 3)], []),      # a closed ring of four is one 4-cycle
    (5, [], []),                  # a ring of five has neither
])
def test_periodic_chains(n, rings, triangles):
    assert lattice_cycles(make_lattice("chain", [n], "periodic")) == (rings, triangles)
