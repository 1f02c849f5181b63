"""Tests of lowfold.lattice: geometry, bond classes, selectors and validation."""

import itertools

import numpy as np
import pytest

from lowfold.errors import ModelError
from lowfold.model.lattice import BOND_CLASSES, SHAPES, Lattice, make_lattice

S2, S3 = np.sqrt(2.0), np.sqrt(3.0)

# Neighbour shells of the infinite lattices (distances with nearest-neighbour distance 1).
# Common practice; square/cubic shells as in Ashcroft & Mermin, Solid State Physics (1976),
# ch. 4; honeycomb as in Castro Neto et al., Rev. Mod. Phys. 81, 109 (2009), Sec. II.A.
SHELLS = {
    "chain": (1.0, 2.0, 3.0),
    "ladder": (1.0, S2, 2.0),
    "square": (1.0, S2, 2.0),
    "triangular": (1.0, S3, 2.0),
    "honeycomb": (1.0, S3, 2.0),
    "kagome": (1.0, S3, 2.0),
    "cubic": (1.0, S2, S3),
}

# Coordination numbers (nearest, next-nearest, third) in the bulk. Common practice
# (chain 2/2/2, square 4/4/4, triangular 6/6/6, honeycomb 3/6/3, cubic 6/12/8, kagome 4/4);
# kagome third shell at distance 2: 4 sites along the straight lines through a site plus
# 2 across the hexagons = 6 (counted by hand from the kagome geometry).
COORDINATION = {
    "chain": ([12], (2, 2, 2)),
    "ladder": ([8], (3, 2, 2)),  # 2 legs + 1 rung; 2 diagonals; 2 along the leg
    "square": ([6, 6], (4, 4, 4)),
    "triangular": ([6, 6], (6, 6, 6)),
    "honeycomb": ([5, 5], (3, 6, 3)),
    "kagome": ([4, 4], (4, 4, 6)),
    "cubic": ([5, 5, 5], (6, 12, 8)),
}


def degrees(lat, cls):
    return np.bincount(lat.bonds(cls).ravel(), minlength=lat.n_sites)


def brute_force_classes(lat, shells, reach=4):
    """Slow twin: shortest image distance by trying every shift in [-reach, reach]."""
    vectors = {  # primitive vectors, written out again here (not read from the module)
        "chain": [[1.0]], "ladder": [[1.0, 0.0]], "square": [[1.0, 0.0], [0.0, 1.0]],
        "triangular": [[1.0, 0.0], [0.5, S3 / 2]], "honeycomb": [[S3, 0.0], [S3 / 2, 1.5]],
        "kagome": [[2.0, 0.0], [1.0, S3]], "cubic": np.eye(3).tolist(),
    }[lat.shape]
    periods = [n * np.array(v) for n, v, b in zip(lat.size, vectors, lat.boundary)
               if b == "periodic"]
    shifts = [sum((k * t for k, t in zip(ks, periods)), np.zeros(lat.coordinates.shape[1]))
              for ks in itertools.product(range(-reach, reach + 1), repeat=len(periods))]
    found = {c: [] for c in BOND_CLASSES}
    for i, j in itertools.combinations(range(lat.n_sites), 2):
        d = min(np.linalg.norm(lat.coordinates[j] - lat.coordinates[i] + s) for s in shifts)
        for c, r in zip(BOND_CLASSES, shells):
            if abs(d - r) < 1e-9:
                found[c].append((i, j))
    return found


# -- coordination and counts -----------------------------------------------------------------

@pytest.mark.parametrize("shape", sorted(COORDINATION))
def test_bulk_coordination_on_periodic_clusters(shape):
    size, expected = COORDINATION[shape]
    lat = make_lattice(shape, size, "periodic")
    for cls, z in zip(BOND_CLASSES, expected):
        assert set(degrees(lat, cls).tolist()) == {z}, cls


@pytest.mark.parametrize("shape", sorted(SHELLS))
def test_bond_lengths_match_shells_on_open_clusters(shape):
    size = [5] * len(COORDINATION[shape][0])
    lat = make_lattice(shape, size)
    for cls, r in zip(BOND_CLASSES, SHELLS[shape]):
        b = lat.bonds(cls)
        assert len(b) > 0
        lengths = np.linalg.norm(lat.coordinates[b[:, 1]] - lat.coordinates[b[:, 0]], axis=1)
        np.testing.assert_allclose(lengths, r, atol=1e-12)


@pytest.mark.parametrize("L", [2, 3, 4, 5, 6, 7, 9])
def test_chain_counts(L):
    # Open chain: L-1, L-2, L-3 bonds. Ring: L bonds per shell once the shell fits,
    # L/2 when the shell reaches halfway round, none when it is shorter (common practice).
    opened = make_lattice("chain", [L])
    assert [len(opened.bonds(c)) for c in BOND_CLASSES] == [max(L - k, 0) for k in (1, 2, 3)]
    ring = make_lattice("chain", [L], "periodic")

    def ring_count(k):
        return L if 2 * k < L else (L // 2 if 2 * k == L else 0)

    assert [len(ring.bonds(c)) for c in BOND_CLASSES] == [ring_count(k) for k in (1, 2, 3)]


def test_two_site_ring_has_one_bond_and_four_site_ring_one_diagonal_each():
    assert make_lattice("chain", [2], "periodic").bonds("nearest").tolist() == [[0, 1]]
    ring = make_lattice("chain", [4], "periodic")
    assert ring.bonds("next-nearest").tolist() == [[0, 2], [1, 3]]
    assert ring.bonds("nearest").tolist() == [[0, 1], [0, 3], [1, 2], [2, 3]]


@pytest.mark.parametrize("Lx,Ly", [(2, 3), (4, 4), (5, 3)])
def test_open_square_counts(Lx, Ly):
    # Counting rows and columns of an Lx x Ly grid (common practice).
    lat = make_lattice("square", [Lx, Ly])
    expected = [Lx * (Ly - 1) + Ly * (Lx - 1), 2 * (Lx - 1) * (Ly - 1),
                Lx * max(Ly - 2, 0) + Ly * max(Lx - 2, 0)]
    assert [len(lat.bonds(c)) for c in BOND_CLASSES] == expected


def test_open_counts_other_shapes():
    # Bonds per direction of an open L x L rhombus (counted by hand).
    assert len(make_lattice("triangular", [4, 3]).bonds("nearest")) == 3 * 12 - 2 * 7 + 1
    assert len(make_lattice("honeycomb", [4, 3]).bonds("nearest")) == 3 * 12 - 4 - 3
    assert len(make_lattice("cubic", [3, 3, 3]).bonds("nearest")) == 3 * 27 - 3 * 9
    ladder = make_lattice("ladder", [5])
    assert [len(ladder.bonds(c)) for c in BOND_CLASSES] == [3 * 5 - 2, 2 * 4, 2 * 3]
    assert len(make_lattice("kagome", [1, 1]).bonds("nearest")) == 3  # one triangle


@pytest.mark.parametrize("L", [1, 2, 3, 4, 5])
def test_periodic_square_counts(L):
    lat = make_lattice("square", [L, L], "periodic")
    n = L * L
    nearest = {1: 0, 2: n, 3: 2 * n}.get(L, 2 * n)
    assert len(lat.bonds("nearest")) == nearest


# -- no double bonds, minimum image ----------------------------------------------------------

SMALL_PERIODIC = [
    ("chain", [1]), ("chain", [2]), ("chain", [3]), ("ladder", [1]), ("ladder", [2]),
    ("ladder", [3]), ("square", [1, 3]), ("square", [2, 2]), ("square", [3, 4]),
    ("triangular", [1, 5]), ("triangular", [2, 3]), ("triangular", [3, 3]),
    ("honeycomb", [1, 1]), ("honeycomb", [2, 1]), ("honeycomb", [3, 2]),
    ("kagome", [1, 1]), ("kagome", [2, 1]), ("kagome", [2, 2]),
    ("cubic", [1, 2, 3]), ("cubic", [2, 2, 2]),
]


@pytest.mark.parametrize("shape,size", SMALL_PERIODIC)
def test_no_self_or_double_bonds(shape, size):
    lat = make_lattice(shape, size, "periodic")
    all_pairs = np.concatenate([lat.bonds(c) for c in BOND_CLASSES])
    assert np.all(all_pairs[:, 0] < all_pairs[:, 1])
    assert len({tuple(p) for p in all_pairs.tolist()}) == len(all_pairs)
    for c in BOND_CLASSES:
        b = lat.bonds(c)
        assert b.dtype == np.int64 and b.shape[1] == 2
        assert b.tolist() == sorted(b.tolist())


@pytest.mark.parametrize("shape,size,boundary", [
    (s, z, "periodic") for s, z in SMALL_PERIODIC] + [
    ("triangular", [1, 7], "periodic"), ("triangular", [6, 2], ["open", "periodic"]),
    ("honeycomb", [4, 1], ["periodic", "open"]), ("kagome", [3, 1], "periodic"),
    ("square", [4, 3], ["periodic", "open"]), ("cubic", [3, 1, 4], ["open", "periodic", "periodic"]),
])
def test_classes_match_brute_force_minimum_image(shape, size, boundary):
    lat = make_lattice(shape, size, boundary)
    found = brute_force_classes(lat, SHELLS[shape])
    for c in BOND_CLASSES:
        assert lat.bonds(c).tolist() == [list(p) for p in found[c]], c


def test_wrapped_bond_is_nearest():
    lat = make_lattice("square", [4, 3], ["periodic", "open"])
    nearest = {tuple(p) for p in lat.bonds("nearest").tolist()}
    assert (0, 3) in nearest  # wraps along x
    assert (0, 8) not in nearest  # y is open: (0, 0)-(0, 2) is distance 2
    assert (0, 8) in {tuple(p) for p in lat.bonds("third").tolist()}


# -- numbering and coordinates ---------------------------------------------------------------

def test_site_numbering():
    sq = make_lattice("square", [3, 2])
    np.testing.assert_allclose(sq.coordinates[4], [1.0, 1.0])  # site = x + Lx*y
    ladder = make_lattice("ladder", [3])
    np.testing.assert_allclose(ladder.coordinates[5], [2.0, 1.0])  # site = 2x + leg
    assert [[2 * x, 2 * x + 1] for x in range(3)] == [
        p for p in ladder.bonds("nearest").tolist() if p[1] - p[0] == 1]
    cube = make_lattice("cubic", [2, 3, 4])
    np.testing.assert_allclose(cube.coordinates[1 + 2 * (2 + 3 * 3)], [1.0, 2.0, 3.0])
    hc = make_lattice("honeycomb", [2, 2])
    assert hc.n_sites == 8 and make_lattice("kagome", [2, 3]).n_sites == 18
    np.testing.assert_allclose(hc.coordinates[2 * 3 + 1], [S3 + S3 / 2 + S3 / 2, 1.5 + 0.5])


def test_lattice_is_read_only():
    lat = make_lattice("chain", [3])
    assert isinstance(lat, Lattice) and lat.size == (3,) and lat.boundary == ("open",)
    with pytest.raises(ValueError):
        lat.coordinates[0, 0] = 5.0
    with pytest.raises(ValueError):
        lat.bonds("nearest")[0, 0] = 2
    with pytest.raises(TypeError):
        lat.bonds_by_class["nearest"] = np.zeros((0, 2))


# -- graph -----------------------------------------------------------------------------------

def test_graph_classes_by_graph_distance():
    edges = [[0, 1], [2, 1], [2, 3], [3, 4], [1, 5]]
    lat = make_lattice("graph", sites=6, bonds=edges)
    assert lat.shape == "graph" and lat.size == (6,) and lat.n_sites == 6
    # Slow twin: graph distance from powers of the adjacency matrix.
    adj = np.zeros((6, 6), dtype=int)
    for i, j in edges:
        adj[i, j] = adj[j, i] = 1
    reach = [np.eye(6, dtype=int)]
    for _ in range(3):
        reach.append(np.minimum(reach[-1] + reach[-1] @ adj, 1))
    for k, c in enumerate(BOND_CLASSES, start=1):
        at_k = (reach[k] - reach[k - 1]) > 0
        expected = [[i, j] for i in range(6) for j in range(i + 1, 6) if at_k[i, j]]
        assert lat.bonds(c).tolist() == expected, c
    np.testing.assert_allclose(np.linalg.norm(lat.coordinates, axis=1), 1.0)
    np.testing.assert_allclose(lat.coordinates[1], [np.cos(np.pi / 3), np.sin(np.pi / 3)])


def test_graph_ring_agrees_with_periodic_chain():
    ring = make_lattice("graph", [6], sites=6, bonds=[[i, (i + 1) % 6] for i in range(6)])
    chain = make_lattice("chain", [6], "periodic")
    for c in BOND_CLASSES:
        assert ring.bonds(c).tolist() == chain.bonds(c).tolist()


def test_single_site_graph():
    lat = make_lattice("graph", sites=1, bonds=[])
    assert lat.n_sites == 1 and all(len(lat.bonds(c)) == 0 for c in BOND_CLASSES)


# -- selectors -------------------------------------------------------------------------------

def test_explicit_bonds_keep_order():
    lat = make_lattice("chain", [4])
    out = lat.bonds([[2, 1], [0, 3]])
    assert out.tolist() == [[2, 1], [0, 3]] and out.dtype == np.int64
    assert lat.bonds([]).shape == (0, 2)


def test_site_selector():
    lat = make_lattice("square", [2, 2])
    assert lat.sites("all").tolist() == [0, 1, 2, 3]
    assert lat.sites([3, 1]).tolist() == [3, 1]


@pytest.mark.parametrize("selector,fragment", [
    ("second", "unknown bond class"), ([[0, 4]], "[0, 4] is out of range"),
    ([[-1, 2]], "[-1, 2] is out of range"), ([[1, 1]], "[1, 1] joins a site to itself"),
    ([[0, 1], [1, 0]], "[1, 0] is listed twice"), ([[0, 1, 2]], "not a pair"),
    ([[0.0, 1]], "not a pair"), ([[True, 1]], "not a pair"), (3, "list of pairs"),
])
def test_bad_bond_selector(selector, fragment):
    lat = make_lattice("chain", [4])
    with pytest.raises(ModelError, match=fragment.replace("[", r"\[").replace("]", r"\]")):
        lat.bonds(selector)


@pytest.mark.parametrize("selector,fragment", [
    ("some", "unknown site selector"), ([4], "out of range"), ([1, 1], "listed twice"),
    ([0.5], "not an integer"), (2, "list of site indices"),
])
def test_bad_site_selector(selector, fragment):
    with pytest.raises(ModelError, match=fragment):
        make_lattice("chain", [4]).sites(selector)


# -- validation of make_lattice --------------------------------------------------------------

@pytest.mark.parametrize("args,kwargs,fragment", [
    (("hexagonal", [2]), {}, "unknown lattice shape"),
    (("square", [2]), {}, "needs 2 size entries"),
    (("chain", [2, 2]), {}, "needs 1 size entry"),
    (("ladder", [2, 2]), {}, "needs 1 size entry"),
    (("cubic", None), {}, "needs 3 size entries"),
    (("square", [2, 0]), {}, ">= 1"),
    (("square", [2, 1.5]), {}, ">= 1"),
    (("chain", [3], "closed"), {}, "got 'closed'"),
    (("square", [3, 3], ["open"]), {}, "list of 2"),
    (("chain", [3]), {"sites": 3}, "only for shape"),
    (("graph", None), {"bonds": [[0, 1]]}, "sites = an integer"),
    (("graph", None), {"sites": 0, "bonds": []}, "sites = an integer"),
    (("graph", None), {"sites": 3}, "needs bonds"),
    (("graph", [4]), {"sites": 3, "bonds": [[0, 1]]}, "disagrees"),
    (("graph", None, "periodic"), {"sites": 3, "bonds": [[0, 1]]}, "open boundaries"),
    (("graph", None), {"sites": 3, "bonds": [[0, 3]]}, "out of range"),
    (("graph", None), {"sites": 3, "bonds": [[2, 2]]}, "itself"),
    (("graph", None), {"sites": 3, "bonds": [[0, 1], [0, 1]]}, "listed twice"),
])
def test_make_lattice_errors(args, kwargs, fragment):
    with pytest.raises(ModelError, match=fragment) as info:
        make_lattice(*args, **kwargs)
    assert "\n" not in str(info.value)


def test_shapes_constant_covers_all_builders():
    for shape in SHAPES:
        if shape == "graph":
            lat = make_lattice(shape, sites=2, bonds=[[0, 1]])
        else:
            lat = make_lattice(shape, [2] * len(COORDINATION[shape][0]))
        assert lat.bonds("nearest").shape[0] >= 1
