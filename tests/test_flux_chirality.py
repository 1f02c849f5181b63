"""Peierls phases: the scalar chirality of a threaded Hubbard triangle, rings with a twist
against free fermions, and phases that are a gauge.

Triangle (three sites 0, 1, 2 counterclockwise, three electrons, ``-t`` hopping, flux ``Phi``
through the triangle so that a particle going once 0 -> 1 -> 2 -> 0 collects ``exp(2 pi i
Phi)``, docs/model-files.md).  Third order, ``H_3 = -(1/U^2) P K Q K Q K P`` with ``V = -K``:
only processes that carry an electron once around the triangle survive.  Each comes with the
loop product ``W = t_01 t_12 t_20 = t^3 exp(-2 pi i Phi)`` (``t_ij`` the amplitude of ``c+_i
c_j``) or its conjugate for the other orientation.  Working the three hops through the
fermion algebra on one electron per site (ours) gives, per oriented loop ``(i, j, k)``,
``1 - P_ij - P_ik + C_ijk`` with ``P`` the spin transpositions and ``C`` a cyclic spin
permutation; the processes where the hole rather than the doublon moves give the same, so the
part odd in ``Phi`` is ``-(6/U^2) (W C + W* C^-1)`` restricted to ``Im W``, and ``C_123 -
C_132 = [P_12, P_23] = -4 i S_1 . (S_2 x S_3)`` turns it into

    chi S_0 . (S_1 x S_2),   |chi| = 24 t^3 |sin(2 pi Phi)| / U^2,

zero at Phi = 0 (the result of D. Sen & R. Chitra, PRB 51, 1922 (1995), from memory).  The
sign depends on which cyclic permutation the loop makes, which we do not trust to a hand
calculation: it is fixed, with the magnitude, by an independent exact diagonalisation
(dense Jordan-Wigner build in numpy, tests/helpers/electrons.py): the two S = 1/2 doublets
of ``J sum S.S + chi S_0.(S_1 x S_2)`` lie at ``-3J/4 -+ (sqrt3/4) chi`` (the chirality of a
doublet is ``+-sqrt3/4``), so the exact doublet splitting is ``(sqrt3/2) |chi|`` up to
``O(t^5/U^4)`` (a loop needs 3 hops, a second winding 5), and the exact ground doublet has
chirality ``-sign(chi) sqrt3/4``.  Verified: ``chi = -24 t^3 sin(2 pi Phi) / U^2`` for the
triangle read out as ``(0, 1, 2)``.

Ring of ``L`` sites at U = 0 with the twist ``Phi`` (phase ``2 pi Phi / L`` on each hop
``x -> x+1``): one-particle levels ``-2 t cos(2 pi (m - Phi) / L)``, ``m = 0..L-1`` (plane
waves, common practice); many-particle levels are sums over occupied sets.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from helpers.electrons import chirality_operator, dense_electrons, hop_matrix
from lowfold import derive, parse_model, spectrum

T, U = 0.5, 8.0
FLUXES = [0.05, 0.125, 0.25, 0.4, 0.7]


def kagome_triangle(flux, t=T, order=3):
    """One kagome unit cell: a single triangle (0, 0), (1, 0), (1/2, sqrt3/2), threaded by
    ``flux`` through ``flux = "phi"``."""
    return parse_model({
        "lattice": {"shape": "kagome", "size": [1, 1]}, "site": {"type": "electron"},
        "sector": {"particles": 3}, "parameters": {"t": t, "U": U, "phi": flux},
        "term": [{"type": "hopping", "strength": "t", "flux": "phi"},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": order}})


def graph_triangle(flux, t=T):
    """The same triangle as a graph, the flux as explicit phases on the hops 0->1->2->0."""
    phase = 2 * math.pi * flux / 3
    return parse_model({
        "lattice": {"shape": "graph", "sites": 3, "bonds": [[0, 1], [1, 2], [0, 2]]},
        "site": {"type": "electron"}, "sector": {"particles": 3},
        "parameters": {"t": t, "U": U},
        "term": [{"type": "hopping", "strength": "t", "bonds": [[1, 0], [2, 1], [0, 2]],
                  "phases": [phase] * 3},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": 3}})


def chirality(result, order=3):
    found = [c for c in result.couplings if c.kind == "chirality"]
    assert all(c.sites == (0, 1, 2) for c in found)
    return float(found[0].orders.get(order, 0.0)) if found else 0.0


@pytest.mark.parametrize("flux", FLUXES)
def test_third_order_chirality_is_24_t3_sin_phi_over_u2(flux):
    result = derive(kagome_triangle(flux), compare_exact=False)
    assert chirality(result) == pytest.approx(-24 * T**3 * math.sin(2 * math.pi * flux) / U**2,
                                              rel=1e-9, abs=1e-15)
    assert chirality(result, order=2) == 0.0           # no chirality below third order


def test_no_chirality_without_flux():
    result = derive(kagome_triangle(0.0), compare_exact=False)
    assert chirality(result) == 0.0
    assert result.orders[3].nnz == 0 or abs(result.orders[3]).max() < 1e-15


def test_explicit_phases_give_the_flux_of_the_symmetric_gauge():
    a = derive(kagome_triangle(0.125), compare_exact=False)
    b = derive(graph_triangle(0.125), compare_exact=False)
    assert chirality(a) == pytest.approx(chirality(b), rel=1e-12)
    np.testing.assert_allclose(spectrum(kagome_triangle(0.125), 8).energies,
                               spectrum(graph_triangle(0.125), 8).energies, atol=1e-12)


@pytest.mark.parametrize("flux", [0.125, 0.3])
def test_chirality_against_independent_exact_diagonalisation(flux):
    """Magnitude from the exact doublet splitting, sign from the exact ground state's
    chirality (module docstring); at t/U = 1/80 the O((t/U)^2) correction is below 1e-2."""
    t = 0.1
    phase = 2 * math.pi * flux / 3
    hops = [(1, 0, hop_matrix(t, phase=phase)), (2, 1, hop_matrix(t, phase=phase)),
            (0, 2, hop_matrix(t, phase=phase))]
    h, spins = dense_electrons(3, hops, U, 3)
    values, vectors = np.linalg.eigh(h)
    splitting = values[2] - values[0]
    ground = vectors[:, 0]
    measured = float(np.real(ground.conj() @ chirality_operator(spins, 0, 1, 2) @ ground))
    chi = chirality(derive(kagome_triangle(flux, t=t), compare_exact=False))
    assert np.isclose(values[0], values[1], atol=1e-12)                   # a doublet
    assert math.sqrt(3) / 2 * abs(chi) == pytest.approx(splitting, rel=1e-2)
    assert measured == pytest.approx(-np.sign(chi) * math.sqrt(3) / 4, rel=2e-2)
    # and lowfold's own exact levels agree with the independent build
    np.testing.assert_allclose(spectrum(kagome_triangle(flux, t=t), 8).energies, values[:8],
                               atol=1e-11)


def test_effective_levels_converge_with_the_next_power():
    """Error of the order-n effective spectrum against the exact levels (derive's check) at
    t and t/2: it falls at least like (t/U)^(n+1)."""
    errors = [derive(kagome_triangle(0.2, t=t)).check.max_abs_error for t in (0.4, 0.2)]
    for n in (2, 3):
        power = math.log(errors[0][n] / errors[1][n], 2)
        assert power > n + 1 - 0.2, (n, power)


def free_levels(one_particle, n):
    return np.sort([sum(c) for c in itertools.combinations(one_particle, n)])


@pytest.mark.parametrize("flux", [0.0, 0.15, 0.5])
def test_twisted_ring_at_u0_is_free_fermions(flux):
    """Spinless fermions and electrons on a 5-site ring with a twist, U = 0."""
    L, t, n = 5, 0.7, 2
    bonds = [[(x + 1) % L, x] for x in range(L)]
    one = [-2 * t * math.cos(2 * math.pi * (m - flux) / L) for m in range(L)]
    base = {"lattice": {"shape": "graph", "sites": L, "bonds": [[x, (x + 1) % L] for x in range(L)]},
            "term": [{"type": "hopping", "strength": t, "bonds": bonds,
                      "phases": [2 * math.pi * flux / L] * L}]}
    spinless = parse_model({**base, "site": {"type": "fermion"}, "sector": {"particles": n}})
    np.testing.assert_allclose(spectrum(spinless, 10).energies, free_levels(one, n), atol=1e-12)
    electrons = parse_model({**base, "site": {"type": "electron"},
                             "sector": {"particles": 2, "sz": 0}})
    expected = np.sort([a + b for a in one for b in one])
    np.testing.assert_allclose(spectrum(electrons, 25).energies, expected, atol=1e-12)


def test_phase_on_a_tree_is_a_gauge():
    """A complex hopping ``t exp(i phi)`` on the bonds of an open chain (no loop) is removed
    by ``c_j -> exp(i theta_j) c_j``: the Hubbard spectrum is that of real t."""
    def chain(strength, phases=None):
        term = {"type": "hopping", "strength": strength, "bonds": [[0, 1], [1, 2], [2, 3]]}
        if phases is not None:
            term["phases"] = phases
        return parse_model({
            "lattice": {"shape": "chain", "size": [4]}, "site": {"type": "electron"},
            "sector": {"particles": 4}, "parameters": {"U": 3.0},
            "term": [term, {"type": "hubbard", "strength": "U"}]})
    real = spectrum(chain(1.0), 12).energies
    two_site = parse_model({
        "lattice": {"shape": "chain", "size": [2]}, "site": {"type": "electron"},
        "sector": {"particles": 2},
        "term": [{"type": "hopping", "strength": {"abs": 1.0, "phase": 0.9}},
                 {"type": "hubbard", "strength": 3.0}]})
    plain_two = parse_model({
        "lattice": {"shape": "chain", "size": [2]}, "site": {"type": "electron"},
        "sector": {"particles": 2},
        "term": [{"type": "hopping", "strength": 1.0}, {"type": "hubbard", "strength": 3.0}]})
    np.testing.assert_allclose(spectrum(two_site, 6).energies, spectrum(plain_two, 6).energies,
                               atol=1e-12)
    np.testing.assert_allclose(spectrum(chain(1.0, [0.3, -1.1, 2.0]), 12).energies, real,
                               atol=1e-12)
    np.testing.assert_allclose(spectrum(chain({"re": 0.6, "im": 0.8}), 12).energies, real,
                               atol=1e-12)


def three_dots(flux, t_abs=0.1, t_phase=0.4, order=6):
    """One fermion on a threaded triangle of dots, dots 1 and 2 raised by 1 (H0), the complex
    hopping ``t`` with the flux ``phi`` as V."""
    return parse_model({
        "lattice": {"shape": "kagome", "size": [1, 1]}, "site": {"type": "fermion"},
        "sector": {"particles": 1},
        "parameters": {"t": {"abs": t_abs, "phase": t_phase}, "phi": flux},
        "term": [{"type": "hopping", "strength": "t", "flux": "phi"},
                 {"type": "potential", "label": "gates", "strength": 1.0, "sites": [1, 2]}],
        "perturbation": {"unperturbed": ["gates"], "order": order}})


@pytest.mark.parametrize("flux", [0.0, 0.15, 0.4])
def test_series_third_order_is_the_loop_product(flux):
    """Rayleigh-Schroedinger energy of the fermion on dot 0 (gap 1 to both other dots):
    ``E_2 = -2 |t|^2`` and ``E_3 = 2 Re(V_01 V_12 V_20) = -2 |t|^3 cos(theta)`` with ``theta``
    the phase collected once around the loop: ``2 pi Phi`` from the flux and ``-arg t``
    from the strength (the bonds (0,1), (1,2) are passed against their listed direction on
    the way 0 -> 1 -> 2, the bond (0,2) along it; docs/model-files.md).  Common practice
    (textbook perturbation theory); the series also converges to the exact level."""
    from lowfold import state_series

    result = state_series(three_dots(flux))
    theta = 2 * math.pi * flux - 0.4
    assert result.energies[2] == pytest.approx(-2 * 0.1**2, rel=1e-12)
    assert result.energies[3] == pytest.approx(-2 * 0.1**3 * math.cos(theta), rel=1e-10)
    exact = spectrum(three_dots(flux), 1).energies[0]
    partial = np.cumsum(result.energies)
    assert abs(partial[5] - exact) < abs(partial[3] - exact) < abs(partial[2] - exact)


def test_a_scan_over_the_flux_plans_real_points():
    """A scan grid over the real flux parameter ``phi`` gives one model per flux whose
    chirality follows ``-24 t^3 sin(2 pi phi)/U^2`` (complex parameters in scans:
    tests/test_scan_complex.py)."""
    from lowfold.scans.plan import plan_scan
    from lowfold.scans.scanfile import parse_scan

    base = kagome_triangle(0.0)
    spec = parse_scan({"task": {"name": "derive"}, "grid": {"phi": [0.1, 0.2]}},
                      source="flux scan", model=base)
    for point in plan_scan(spec, base):
        phi = point.parameters["phi"]
        chi = chirality(derive(point.model, compare_exact=False))
        assert chi == pytest.approx(-24 * T**3 * math.sin(2 * math.pi * phi) / U**2, rel=1e-9)


def hexagons(lattice):
    """The 6-cycles of the nearest-neighbour graph (a small DFS; honeycomb faces)."""
    neighbours = {i: set() for i in range(lattice.n_sites)}
    for i, j in lattice.bonds("nearest"):
        neighbours[int(i)].add(int(j))
        neighbours[int(j)].add(int(i))
    found = set()

    def walk(path):
        if len(path) == 6:
            if path[0] in neighbours[path[-1]]:
                found.add(min(tuple(path[k:] + path[:k]) for k in range(6)))
            return
        for nxt in neighbours[path[-1]] - set(path):
            walk(path + [nxt])

    for start in neighbours:
        walk([start])
    return [tuple(c) for c in found]


@pytest.mark.parametrize("shape, size", [("square", [3, 3]), ("triangular", [3, 2]),
                                         ("kagome", [2, 1]), ("ladder", [3]),
                                         ("honeycomb", [2, 2])])
def test_flux_gives_every_face_its_area_times_the_field(shape, size):
    """One particle: ``<i|H|j>`` is the amplitude of the hop j -> i, so the product of the
    amplitudes once counterclockwise around a face is ``(-t)^k exp(2 pi i Phi A / A_0)``
    (Stokes: the circulation of the vector potential is the enclosed flux; ``A_0`` the area
    of the smallest face, docs/model-files.md).  Checked on every triangle and 4-cycle."""
    from lowfold.build.hamiltonian import Hamiltonian
    from lowfold.model.cycles import lattice_cycles

    flux, t = 0.17, 0.8
    model = parse_model({"lattice": {"shape": shape, "size": size}, "site": {"type": "fermion"},
                         "sector": {"particles": 1},
                         "term": [{"type": "hopping", "strength": t, "flux": flux}]})
    h = Hamiltonian.of(model).to_csr().toarray()          # one fermion: basis = sites in order
    r = model.lattice.coordinates
    smallest = {"square": 1.0, "ladder": 1.0, "honeycomb": 3 * math.sqrt(3) / 2}.get(
        shape, math.sqrt(3) / 4)
    rings, triangles = lattice_cycles(model.lattice)
    faces = list(rings) + list(triangles) + (hexagons(model.lattice) if shape == "honeycomb" else [])
    assert faces
    for cycle in faces:
        area = 0.5 * sum(r[a, 0] * r[b, 1] - r[b, 0] * r[a, 1]
                         for a, b in zip(cycle, cycle[1:] + cycle[:1]))
        if area < 0:
            cycle, area = tuple(reversed(cycle)), -area
        product = np.prod([h[b, a] for a, b in zip(cycle, cycle[1:] + cycle[:1])])
        expected = (-t) ** len(cycle) * np.exp(2j * math.pi * flux * area / smallest)
        assert product == pytest.approx(expected, rel=1e-12), cycle


def test_exact_doublet_splitting_approaches_the_third_order_chirality_like_t2_over_u2():
    """The relative gap between the exact doublet splitting (independent dense build) and
    ``(sqrt3/2) |chi_3|`` is the next correction, O((t/U)^2): it shrinks fourfold when t
    is halved."""
    flux, gaps = 0.125, []
    for t in (0.2, 0.1):
        phase = 2 * math.pi * flux / 3
        hops = [(b, a, hop_matrix(t, phase=phase)) for a, b in ((0, 1), (1, 2), (2, 0))]
        values = np.linalg.eigvalsh(dense_electrons(3, hops, U, 3)[0])
        chi = chirality(derive(kagome_triangle(flux, t=t), compare_exact=False))
        gaps.append(abs((values[2] - values[0]) / (math.sqrt(3) / 2 * abs(chi)) - 1))
    assert gaps[0] / gaps[1] == pytest.approx(4.0, rel=0.05)
