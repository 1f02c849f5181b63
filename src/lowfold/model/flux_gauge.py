"""Peierls phases of a uniform magnetic field on a two-dimensional cluster.

A field ``B`` perpendicular to the plane (flux quanta per unit area, ``B = Phi / A_0`` with
``Phi`` the flux through the smallest face of area ``A_0``) enters the hopping ``j -> i`` as
the phase ``phi_ij = 2 pi int_{r_j}^{r_i} A . dl`` along the straight bond, ``curl A = B``;
then a particle going once counterclockwise around any face collects ``exp(2 pi i B
area)`` (Stokes).  The gauge depends on the boundary:

- open cluster: the symmetric gauge ``A = (B/2) (-y, x)``, ``phi_ij = pi B (r_j x r_i)_z``;
- periodic along ``a1`` only (a cylinder; the ladder along its legs): the Landau gauge
  ``A . dr = -B A_c v du`` in the cell coordinates ``r = u a1 + v a2`` (``A_c = |a1 x
  a2|``), unchanged by a shift along ``a1``, so any ``Phi`` is allowed;
- periodic along ``a2`` only: ``A . dr = +B A_c u dv``, unchanged by a shift along ``a2``;
- periodic along both (a torus ``T1 = L1 a1``, ``T2 = L2 a2``): the Landau gauge of the
  cylinder, which a shift by ``T2`` changes by the gradient of ``chi(u) = -B A_c L2 u``.
  The operators of an image site are then ``c_{r + n1 T1 + n2 T2} = exp(2 pi i n2
  chi(u)) c_r`` (the magnetic translations), so a bond whose shortest image crosses the
  ``T2`` boundary ``n2`` times gets ``phi = phi_plane + 2 pi n2 B A_c L2 u_i``.  The two
  translations agree only when the total flux ``B A_c L1 L2`` through the torus is a whole
  number of flux quanta (the magnetic boundary condition; common practice since Hofstadter,
  PRB 14, 2239 (1976), from memory): ``Phi * L1 L2 A_c / A_0`` must be an integer.

A bond whose two sites are joined by two equally short images (a periodic direction of 2
cells) would need two different phases on one bond and is refused, as is a periodic
direction of 1 cell (its bonds join a site to its own image and are dropped).

Examples
--------
>>> from lowfold.model.lattice import make_lattice
>>> lat = make_lattice("square", [3, 3], "periodic")
>>> phases = flux_phases(lat, lat.bonds("nearest"), 1 / 9, "flux")
>>> phases.shape
(18,)
"""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import numpy as np

from lowfold.errors import ModelError

__all__ = ["FACE_AREAS", "flux_phases", "faces_per_cluster"]

_S3 = math.sqrt(3.0)
# smallest face of each two-dimensional shape with a flux (nearest-neighbour distance 1)
FACE_AREAS = {"triangular": _S3 / 4, "kagome": _S3 / 4, "square": 1.0, "ladder": 1.0,
              "honeycomb": 3 * _S3 / 2}
_TIE = 1e-6          # image lengths are O(1): equal lengths agree to rounding error
_WHOLE = 1e-9        # tolerance of the magnetic boundary condition (a float Phi = 1/9)


def _frame(lattice) -> np.ndarray:
    """The two cell vectors ``a1, a2`` (rows); the ladder's second is its rung (0, 1)."""
    vectors = lattice.translations
    if len(vectors) == 1:
        return np.array([vectors[0], [0.0, 1.0]])
    return vectors


def _periodic(lattice) -> tuple[bool, bool]:
    flags = [b == "periodic" for b in lattice.boundary]
    return (flags + [False, False])[0], (flags + [False, False])[1]


def faces_per_cluster(lattice) -> float:
    """The area of a periodic cluster in units of its smallest face (``L1 L2 A_c / A_0``):
    the number the flux ``Phi`` is multiplied by to give the total flux."""
    a = _frame(lattice)
    cell = abs(a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0])
    sizes = (list(lattice.size) + [1])[:2]
    return sizes[0] * sizes[1] * cell / FACE_AREAS[lattice.shape]


def flux_phases(lattice, bonds, flux: float, where: str) -> np.ndarray:
    """Peierls phase ``phi_ij`` (radians) of each bond ``(i, j)`` for the flux ``flux``
    through the smallest face (module docstring for the gauge of each boundary).

    Raises
    ------
    ModelError
        Not a two-dimensional shape; an infinite lattice; a periodic direction of fewer
        cells than the flux needs; on a torus, a total flux that is not whole.
    """
    if lattice.shape not in FACE_AREAS:
        raise ModelError(f"{where} needs a two-dimensional lattice shape "
                         f"({', '.join(FACE_AREAS)}); a {lattice.shape} has no faces to thread "
                         "(give phases per bond instead)")
    if lattice.infinite:
        raise ModelError(f"{where} is not supported on an infinite lattice; use a finite cluster")
    bonds = np.asarray(bonds, dtype=np.int64).reshape(-1, 2)
    field = flux / FACE_AREAS[lattice.shape]
    p1, p2 = _periodic(lattice)
    if not (p1 or p2):
        r = lattice.coordinates
        i, j = bonds.T
        cross = r[j, 0] * r[i, 1] - r[j, 1] * r[i, 0]          # (r_j x r_i)_z
        return math.pi * field * cross
    sizes = (list(lattice.size) + [1])[:2]
    for k, (flag, n) in enumerate(zip((p1, p2), sizes)):
        if flag and n < 2:
            raise ModelError(f"{where} needs at least 2 cells along a periodic direction "
                             f"(direction {k + 1} has {n}): its bonds would join a site to itself")
    if p1 and p2:
        field = _whole_flux_field(lattice, flux, where)
    return _landau_phases(lattice, bonds, field, (p1, p2), where)


def _whole_flux_field(lattice, flux: float, where: str) -> float:
    """The field of a torus, with its total flux snapped to the whole number it must be."""
    faces = faces_per_cluster(lattice)
    total = flux * faces
    if abs(total - round(total)) > _WHOLE * max(1.0, abs(total)):
        n = int(round(faces))
        steps = ", ".join(str(Fraction(k, n)) for k in range(1, 4))
        size = " x ".join(str(s) for s in lattice.size)
        raise ModelError(f"{where} = {flux!r} on a periodic {size} {lattice.shape} cluster: the "
                         f"total flux {flux!r} * {n} (the cluster's area in smallest faces) must "
                         f"be a whole number of flux quanta on a torus; allowed: Phi = k/{n} for "
                         f"integer k ({steps}, ...), or open one direction")
    return round(total) / faces / FACE_AREAS[lattice.shape]


def _landau_phases(lattice, bonds, field: float, periodic, where: str) -> np.ndarray:
    a = _frame(lattice)
    cell = a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0]
    sizes = (list(lattice.size) + [1])[:2]
    uv = lattice.coordinates @ np.linalg.inv(a)                    # r = u a1 + v a2
    out = np.zeros(len(bonds))
    for b, (i, j) in enumerate(bonds):
        n1, n2 = _shortest_image(uv[i] - uv[j], a, sizes, periodic, (int(i), int(j)), where)
        ui, vi = uv[i, 0] + n1 * sizes[0], uv[i, 1] + n2 * sizes[1]
        uj, vj = uv[j]
        if periodic[0]:
            phase = -field * cell * (vi + vj) / 2 * (ui - uj)
            if periodic[1]:
                phase += n2 * field * cell * sizes[1] * uv[i, 0]   # magnetic translation by T2
        else:
            phase = field * cell * (ui + uj) / 2 * (vi - vj)
        out[b] = 2 * math.pi * phase
    return out


def _shortest_image(d, a, sizes, periodic, pair, where: str) -> tuple[int, int]:
    """Shifts ``(n1, n2)`` of site ``i`` (in periods) that make ``d + n . L`` shortest; a tie
    between two images is refused."""
    base = [-round(d[k] / sizes[k]) if periodic[k] else 0 for k in range(2)]
    options = []
    for shift in itertools.product(*((-1, 0, 1) if periodic[k] else (0,) for k in range(2))):
        n = (base[0] + shift[0], base[1] + shift[1])
        frac = np.array([d[0] + n[0] * sizes[0], d[1] + n[1] * sizes[1]])
        options.append((float(np.linalg.norm(frac @ a)), n))
    options.sort()
    if len(options) > 1 and options[1][0] - options[0][0] < _TIE:
        raise ModelError(f"{where}: bond {list(pair)} joins its sites by two equally short "
                         "paths across the periodic boundary (e.g. a periodic direction of 2 "
                         "cells); a flux gives them different phases, which one bond cannot "
                         "carry: use more cells or open boundaries")
    return options[0][1]
