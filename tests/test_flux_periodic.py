"""A uniform flux on periodic clusters: the Landau gauge with magnetic translations.

Checks against results from outside lowfold:

- Stokes: the product of the one-particle amplitudes once counterclockwise around every
  face (those across the periodic boundary included; faces found by tests/helpers/faces.py
  from the geometry alone) is ``(-t)^k exp(2 pi i Phi A / A_0)``, ``A_0`` the area of the
  smallest face;
- the Hofstadter spectrum (D. R. Hofstadter, PRB 14, 2239 (1976), from memory): on an
  ``Lx x Ly`` torus with ``Phi = p/q`` per square and ``q | Lx``, the Landau gauge ``A = (0,
  B x)`` gives the magnetic Bloch (Harper) matrix of the ``q`` sites of a magnetic cell,
  ``-t e^{+-i kx}`` between neighbours and ``-2 t cos(ky + 2 pi Phi x)`` on site ``x``, for
  ``kx = 2 pi m / Lx`` (``m < Lx/q``) and ``ky = 2 pi n / Ly``.  It is built here in numpy
  from that recipe, in another gauge than lowfold's, and the spectra must agree (gauge
  invariance; both gauges have trivial Wilson loops around the torus);
- the ring exchange ``80 t^4 cos(2 pi Phi) / U^3`` of each plaquette of a half-filled
  Hubbard square torus at fourth order, equal to that of an open plaquette, and the
  error of the order-n levels falling like (t/U)^(n+1);
- the scalar chirality ``-24 t^3 sin(2 pi Phi) / U^2`` of each triangle of a half-filled
  Hubbard triangular torus at third order (D. Sen & R. Chitra, PRB 51, 1922 (1995), from
  memory; sign and magnitude fixed by the exact check of tests/test_flux_chirality.py),
  which must also equal the open single-triangle result;
- the Rayleigh-Schroedinger energies of one particle on a site lowered by 1 of a 4 x 4
  triangular torus: ``E_2 = -6 t^2`` and ``E_3 = -12 t^3 cos(2 pi Phi)`` (its six triangles,
  each passed both ways; common practice), and the error of order n falls like t^(n+1).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from helpers.faces import faces
from lowfold import ModelError, derive, parse_model, spectrum, state_series
from lowfold.build.hamiltonian import Hamiltonian

SMALLEST = {"square": 1.0, "ladder": 1.0, "honeycomb": 3 * math.sqrt(3) / 2,
            "triangular": math.sqrt(3) / 4, "kagome": math.sqrt(3) / 4}


def one_particle(shape, size, boundary, flux, t=0.8, site="fermion"):
    return parse_model({"lattice": {"shape": shape, "size": size, "boundary": boundary},
                        "site": {"type": site}, "sector": {"particles": 1},
                        "parameters": {"phi": flux},
                        "term": [{"type": "hopping", "strength": t, "flux": "phi"}]})


CLUSTERS = [  # shape, size, boundary, flux, face length(s), number of smallest faces
    ("square", [4, 3], "periodic", 1 / 12, (4,), 12),
    ("square", [3, 3], "periodic", 4 / 9, (4,), 9),
    ("triangular", [3, 3], "periodic", 5 / 18, (3,), 18),
    ("triangular", [4, 3], "periodic", 1 / 24, (3, 4), 24),
    ("honeycomb", [3, 3], "periodic", 2 / 9, (6,), 9),
    ("kagome", [2, 2], "periodic", 1 / 32, (3, 6), 8),
    ("square", [4, 3], ["periodic", "open"], 0.17, (4,), 8),
    ("square", [3, 4], ["open", "periodic"], 0.17, (4,), 8),
    ("triangular", [3, 3], ["open", "periodic"], 0.31, (3,), 12),
    ("ladder", [5], "periodic", 0.23, (4,), 5),
]


@pytest.mark.parametrize("shape, size, boundary, flux, lengths, n_smallest", CLUSTERS)
def test_every_face_collects_its_flux(shape, size, boundary, flux, lengths, n_smallest):
    t = 0.8
    model = one_particle(shape, size, boundary, flux, t)
    h = Hamiltonian.of(model).to_csr().toarray()         # one fermion: basis = sites in order
    found = [face for k in lengths for face in faces(model.lattice, k)]
    smallest = [f for f in found if abs(f[1] - SMALLEST[shape]) < 1e-9]
    assert len(smallest) == n_smallest
    for cycle, area in found:
        product = np.prod([h[b, a] for a, b in zip(cycle, cycle[1:] + cycle[:1])])
        expected = (-t) ** len(cycle) * np.exp(2j * math.pi * flux * area / SMALLEST[shape])
        assert product == pytest.approx(expected, rel=1e-11, abs=1e-13), (cycle, area)


def test_diagonal_bonds_across_the_boundary_enclose_half_a_square():
    """Next-nearest (diagonal) bonds take the phase of the same field: each of the 32
    half-squares of a 4 x 4 torus, drawn with two sides and a diagonal, holds Phi/2."""
    flux = 3 / 16
    model = parse_model({
        "lattice": {"shape": "square", "size": [4, 4], "boundary": "periodic"},
        "site": {"type": "fermion"}, "sector": {"particles": 1},
        "term": [{"type": "hopping", "strength": 1.0, "flux": flux},
                 {"type": "hopping", "label": "diagonal", "strength": 0.5, "flux": flux,
                  "bonds": "next-nearest"}]})
    h = Hamiltonian.of(model).to_csr().toarray()

    def site(x, y):
        return x % 4 + 4 * (y % 4)

    for x in range(4):
        for y in range(4):
            for cycle in ([site(x, y), site(x + 1, y), site(x + 1, y + 1)],
                          [site(x, y), site(x + 1, y + 1), site(x, y + 1)]):
                product = np.prod([h[b, a] for a, b in zip(cycle, cycle[1:] + cycle[:1])])
                assert product == pytest.approx(-0.5 * np.exp(1j * math.pi * flux), rel=1e-12)


def harper_levels(lx, ly, p, q, t=1.0):
    """The one-particle levels of the Hofstadter model on an ``lx x ly`` torus from the q x q
    magnetic Bloch matrices (module docstring)."""
    flux, levels = p / q, []
    for m in range(lx // q):
        kx = 2 * math.pi * m / lx
        for n in range(ly):
            ky = 2 * math.pi * n / ly
            h = np.diag([-2 * t * math.cos(ky + 2 * math.pi * flux * x) for x in range(q)])
            h = h.astype(complex)
            for x in range(q):
                h[(x + 1) % q, x] += -t * np.exp(1j * kx)
                h[x, (x + 1) % q] += -t * np.exp(-1j * kx)
            levels.extend(np.linalg.eigvalsh(h))
    return np.sort(levels)


@pytest.mark.parametrize("lx, ly, p, q", [(6, 4, 1, 3), (4, 4, 1, 4), (6, 5, 2, 3),
                                           (3, 3, 1, 3), (4, 6, 1, 2)])
def test_square_torus_has_the_hofstadter_spectrum(lx, ly, p, q):
    model = one_particle("square", [lx, ly], "periodic", p / q, t=1.0)
    levels = np.linalg.eigvalsh(Hamiltonian.of(model).to_csr().toarray())
    np.testing.assert_allclose(levels, harper_levels(lx, ly, p, q), atol=1e-11)


def test_two_fermions_on_the_torus_fill_hofstadter_levels():
    """Fermion signs across the boundary: two spinless fermions at U = 0 have the sums of
    two different one-particle levels (common practice)."""
    one = harper_levels(4, 4, 1, 4)
    pairs = np.sort([one[a] + one[b] for a in range(16) for b in range(a + 1, 16)])
    model = parse_model({"lattice": {"shape": "square", "size": [4, 4], "boundary": "periodic"},
                         "site": {"type": "fermion"}, "sector": {"particles": 2},
                         "term": [{"type": "hopping", "strength": 1.0, "flux": 0.25}]})
    np.testing.assert_allclose(spectrum(model, 10).energies, pairs[:10], atol=1e-10)


def triangular_hubbard(flux, t=0.1, U=8.0, size=(3, 3), boundary="periodic"):
    return parse_model({
        "lattice": {"shape": "triangular", "size": list(size), "boundary": boundary},
        "site": {"type": "electron"},
        "sector": {"particles": size[0] * size[1], "sz": 0.5},
        "parameters": {"t": t, "U": U, "phi": flux},
        "term": [{"type": "hopping", "strength": "t", "flux": "phi"},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": 3}})


def open_triangle_chirality(flux, t, U):
    model = parse_model({
        "lattice": {"shape": "kagome", "size": [1, 1]}, "site": {"type": "electron"},
        "sector": {"particles": 3}, "parameters": {"t": t, "U": U, "phi": flux},
        "term": [{"type": "hopping", "strength": "t", "flux": "phi"},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": 3}})
    found = [c for c in derive(model, compare_exact=False).couplings if c.kind == "chirality"]
    return float(found[0].orders[3])


def test_triangular_torus_chirality_is_that_of_an_open_triangle():
    """Every one of the 18 triangles of the 3 x 3 torus (Phi = 1/18, 9 electrons) carries
    the third-order chirality of a single threaded triangle, counterclockwise."""
    t, U, flux = 0.1, 8.0, 1 / 18
    model = triangular_hubbard(flux, t, U)
    chi = {c.sites: float(c.orders.get(3, 0.0))
           for c in derive(model, compare_exact=False).couplings if c.kind == "chirality"}
    expected = -24 * t**3 * math.sin(2 * math.pi * flux) / U**2
    assert open_triangle_chirality(flux, t, U) == pytest.approx(expected, rel=1e-9)
    triangles = faces(model.lattice, 3)
    assert len(triangles) == 18
    for cycle, _ in triangles:
        ordered = tuple(sorted(cycle))
        sign = 1 if ordered in [cycle[k:] + cycle[:k] for k in range(3)] else -1
        assert sign * chi[ordered] == pytest.approx(expected, rel=1e-8), cycle


def square_hubbard(size, boundary, flux, t=0.1, U=8.0, sz=None):
    sector = {"particles": size[0] * size[1]}
    if sz is not None:
        sector["sz"] = sz
    return parse_model({
        "lattice": {"shape": "square", "size": size, "boundary": boundary},
        "site": {"type": "electron"}, "sector": sector,
        "parameters": {"t": t, "U": U, "phi": flux},
        "term": [{"type": "hopping", "strength": "t", "flux": "phi"},
                 {"type": "hubbard", "strength": "U"}],
        "perturbation": {"unperturbed": ["hubbard"], "order": 4}})


def rings(model) -> dict:
    return {frozenset(c.sites): float(c.orders[4])
            for c in derive(model, compare_exact=False).couplings if c.kind == "ring"}


@pytest.mark.parametrize("flux", [1 / 9, 2 / 9])
def test_square_torus_ring_exchange_is_that_of_an_open_plaquette(flux):
    """Fourth order on the half-filled 3 x 3 torus: every one of its 9 plaquettes carries
    the ring exchange of an open 2 x 2 plaquette, ``K = 80 t^4 cos(2 pi Phi) / U^3`` (80
    t^4/U^3 at Phi = 0: A. H. MacDonald, S. M. Girvin & D. Yoshioka, PRB 37, 9753 (1988),
    from memory; each ring process carries an electron around the plaquette, with
    ``exp(+-2 pi i Phi)`` for the two orientations, common practice)."""
    t, U = 0.1, 8.0
    expected = 80 * t**4 * math.cos(2 * math.pi * flux) / U**3
    (plaquette,) = rings(square_hubbard([2, 2], "open", flux, t, U)).values()
    assert plaquette == pytest.approx(expected, rel=1e-9)
    model = square_hubbard([3, 3], "periodic", flux, t, U, sz=0.5)
    found = rings(model)
    plaquettes = faces(model.lattice, 4)
    assert len(plaquettes) == 9
    for cycle, _ in plaquettes:
        assert found[frozenset(cycle)] == pytest.approx(expected, rel=1e-9), cycle


def test_torus_effective_levels_converge_with_the_next_power():
    """derive's check on the 3 x 3 square torus at Phi = 1/9: the error of the order-n
    levels against the exact ones falls at least like (t/U)^(n+1) when t is halved."""
    errors = [derive(square_hubbard([3, 3], "periodic", 1 / 9, t, sz=0.5)).check.max_abs_error
              for t in (0.4, 0.2)]
    for n in (2, 3, 4):
        power = math.log(errors[0][n] / errors[1][n], 2)
        assert power > n + 1 - 0.2, (n, power)


def one_lowered_site(flux, t, order=5):
    return parse_model({
        "lattice": {"shape": "triangular", "size": [4, 4], "boundary": "periodic"},
        "site": {"type": "fermion"}, "sector": {"particles": 1},
        "parameters": {"t": t, "phi": flux},
        "term": [{"type": "hopping", "strength": "t", "flux": "phi"},
                 {"type": "potential", "label": "well", "strength": -1.0, "sites": [5]}],
        "perturbation": {"unperturbed": ["well"], "order": order}})


@pytest.mark.parametrize("flux", [0.0, 3 / 32, 0.25, 13 / 32])
def test_series_on_the_torus_sees_the_flux_of_six_triangles(flux):
    t = 0.05
    result = state_series(one_lowered_site(flux, t))
    assert result.energies[2] == pytest.approx(-6 * t**2, rel=1e-12)
    assert result.energies[3] == pytest.approx(-12 * t**3 * math.cos(2 * math.pi * flux),
                                               rel=1e-9, abs=1e-15)


def test_series_error_on_the_torus_falls_with_the_next_power():
    """The fifth order is large (its coefficient ~60 against ~5 for the fourth), so t is
    small enough that E_4 dominates the error after order 3."""
    flux, errors = 3 / 32, []
    for t in (0.01, 0.005):
        exact = spectrum(one_lowered_site(flux, t), 1).energies[0]
        errors.append(np.abs(np.cumsum(state_series(one_lowered_site(flux, t)).energies) - exact))
    for n in (2, 3, 4):
        power = math.log(errors[0][n] / errors[1][n], 2)
        assert power > n + 1 - 0.2, (n, power)


@pytest.mark.parametrize("size, flux, allowed", [([4, 4], 0.1, "k/16"), ([3, 3], 0.05, "k/18")])
def test_a_torus_refuses_a_fractional_total_flux(size, flux, allowed):
    shape = "square" if size == [4, 4] else "triangular"
    with pytest.raises(ModelError, match=f"whole number of flux quanta.*Phi = {allowed}"):
        one_particle(shape, size, "periodic", flux)


@pytest.mark.parametrize("shape, size, boundary, match", [
    ("square", [2, 3], "periodic", "two equally short paths"),
    ("square", [1, 3], "periodic", "at least 2 cells"),
    ("chain", [4], "periodic", "two-dimensional lattice shape"),
    ("cubic", [2, 2, 2], "open", "two-dimensional lattice shape"),
])
def test_flux_refuses_clusters_without_a_gauge(shape, size, boundary, match):
    with pytest.raises(ModelError, match=match):
        one_particle(shape, size, boundary, 0.5)
