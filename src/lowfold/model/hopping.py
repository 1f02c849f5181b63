"""Hopping terms: complex amplitudes, Peierls phases (per bond or from a flux) and
spin-orbit hopping.

A ``hopping`` term of strength ``s`` on the bonds ``(i, j)`` it selects is

    H = - sum_bonds sum_ab  c+_{i a} T^{ij}_{ab} c_{j b}  +  h.c.,
    T^{ij} = exp(i phi_ij) (s 1 + i lambda . sigma)

(spinless fermions and bosons: ``T^{ij} = s exp(i phi_ij)``, one component).  Conventions
(docs/model-files.md, "Complex strengths, flux and spin-orbit hopping"):

- the bond ``(i, j)`` is taken in the order the term lists it (a bond class lists it with
  ``i < j``); ``T^{ji} = (T^{ij})^dagger``, so that H is Hermitian for any complex ``s``:
  ``phi_ji = -phi_ij`` and ``lambda_ji = -lambda_ij``;
- ``c+_i T c_j`` moves a particle from ``j`` to ``i``; it picks up ``exp(i phi_ij)``: going
  once around a loop ``r_0 -> r_1 -> ... -> r_0`` a particle collects
  ``exp(i sum_m phi_{m+1, m})``, which is ``exp(2 pi i Phi)`` for a loop around a flux
  ``Phi`` (in flux quanta) traversed counterclockwise;
- ``phases = [...]``: ``phi_ij`` in radians, one per listed bond (explicit ``bonds`` only);
- ``flux = Phi``: the Peierls phases of a uniform field perpendicular to the plane with a
  flux ``Phi`` (flux quanta) through the smallest face of the lattice (the triangle of
  triangular and kagome, the square of square and ladder, the hexagon of honeycomb), in the
  symmetric gauge ``phi_ij = pi B (r_j x r_i)_z`` with ``B = Phi / (area of the face)``;
  open two-dimensional clusters only (the symmetric gauge is not periodic);
- ``soc = [lx, ly, lz]``: the real vector ``lambda`` (numbers or parameter names) of the
  spin-orbit hopping ``i lambda . sigma`` of electrons.  ``lambda`` along z conserves S^z;
  any other direction does not (:func:`breaks_sz`).

With ``s`` real, no phases and no ``soc`` the products are those of the plain hopping
``-s (c+_i c_j + c+_j c_i)``, real floats.
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from lowfold.errors import ModelError

__all__ = ["hopping_products", "bond_phases", "soc_vector", "breaks_sz", "FACE_AREAS"]

_S3 = math.sqrt(3.0)
# smallest face of each two-dimensional shape with a flux (nearest-neighbour distance 1)
FACE_AREAS = {"triangular": _S3 / 4, "kagome": _S3 / 4, "square": 1.0, "ladder": 1.0,
              "honeycomb": 3 * _S3 / 2}
_SPIN = ("up", "dn")
_PAULI = (np.array([[0, 1], [1, 0]], dtype=complex),
          np.array([[0, -1j], [1j, 0]], dtype=complex),
          np.array([[1, 0], [0, -1]], dtype=complex))


def _value(value, parameters, where: str) -> float:
    """A real number or the real value of the parameter it names."""
    if isinstance(value, str):
        if value not in parameters:
            raise ModelError(f"{where}: parameter {value!r} is not defined in [parameters]")
        number = parameters[value]
        if complex(number).imag != 0:
            raise ModelError(f"{where}: parameter {value!r} is complex ({number!r}); this "
                             "must be a real number")
        return float(complex(number).real)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ModelError(f"{where}: must be a real finite number or a parameter name, got {value!r}")
    return float(value)


def soc_vector(term, parameters) -> tuple[float, float, float] | None:
    """The real spin-orbit vector ``lambda`` of a hopping term, or ``None``."""
    if term.soc is None:
        return None
    if len(term.soc) != 3:
        raise ModelError(f"term {term.label!r}: soc must be [lx, ly, lz], got {list(term.soc)!r}")
    return tuple(_value(v, parameters, f"term {term.label!r}: soc[{k}]")
                 for k, v in enumerate(term.soc))


def breaks_sz(term, parameters) -> bool:
    """Whether a hopping term has a spin-orbit part not along z (then S^z is not conserved)."""
    if term.type != "hopping" or term.soc is None:
        return False
    lx, ly, _ = soc_vector(term, parameters)
    return lx != 0 or ly != 0


def bond_phases(term, lattice, bonds, parameters) -> np.ndarray:
    """Peierls phase ``phi_ij`` (radians) of each bond, from ``phases`` or ``flux``."""
    if term.phases is not None and term.flux is not None:
        raise ModelError(f"term {term.label!r}: give either phases or flux, not both")
    if term.phases is not None:
        if term.bonds is None or isinstance(term.bonds, str):
            raise ModelError(f"term {term.label!r}: phases need explicit bonds = [[i, j], ...] "
                             "(one phase per listed bond, in that order)")
        if len(term.phases) != len(bonds):
            raise ModelError(f"term {term.label!r}: {len(term.phases)} phases for "
                             f"{len(bonds)} bonds; give one phase (radians) per bond")
        return np.array([_value(p, parameters, f"term {term.label!r}: phases")
                         for p in term.phases], dtype=float)
    if term.flux is None:
        return np.zeros(len(bonds))
    flux = _value(term.flux, parameters, f"term {term.label!r}: flux")
    return _flux_phases(term, lattice, bonds, flux)


def _flux_phases(term, lattice, bonds, flux: float) -> np.ndarray:
    where = f"term {term.label!r}: flux"
    if lattice.shape not in FACE_AREAS:
        raise ModelError(f"{where} needs a two-dimensional lattice shape ({', '.join(FACE_AREAS)}); "
                         f"on a {lattice.shape} give phases per bond instead")
    if lattice.infinite or any(b != "open" for b in lattice.boundary):
        raise ModelError(f"{where} needs open boundaries (a uniform field has no periodic "
                         "gauge on a finite torus); give phases per bond instead")
    field = flux / FACE_AREAS[lattice.shape]
    r = lattice.coordinates
    if not bonds:
        return np.zeros(0)
    i, j = np.array(bonds, dtype=np.int64).T
    cross = r[j, 0] * r[i, 1] - r[j, 1] * r[i, 0]          # (r_j x r_i)_z
    return 2 * math.pi * field / 2 * cross


def _bond_list(term, lattice):
    return [tuple(int(x) for x in pair) for pair in lattice.bonds(term.bonds or "nearest")]


def _scalar(z: complex):
    """A real amplitude as a float (the real route of the kernels), else complex."""
    return z.real if z.imag == 0 else z


def hopping_products(term, s, lattice, site, parameters):
    """Products ``(coefficient, ((operator, site), ...))`` of a hopping term (module
    docstring for the conventions)."""
    if site.type not in ("fermion", "electron", "boson"):
        raise ModelError(f"term {term.label!r}: type 'hopping' is not defined for "
                         f"{site.type} sites (allowed: fermion, electron, boson)")
    bonds = _bond_list(term, lattice)
    phases = bond_phases(term, lattice, bonds, parameters)
    soc = soc_vector(term, parameters)
    if soc is not None and site.type != "electron":
        raise ModelError(f"term {term.label!r}: soc (spin-orbit hopping) needs electron sites, "
                         f"not {site.type} sites")
    if soc is not None and not any(soc):
        soc = None
    if site.type != "electron" or soc is None:
        pairs = {"fermion": [("c+", "c")], "boson": [("b+", "b")],
                 "electron": [("c+_up", "c_up"), ("c+_dn", "c_dn")]}[site.type]
        out = []
        for (i, j), phi in zip(bonds, phases):
            amplitude = _scalar(complex(s) * cmath.exp(1j * phi)) if phi else s
            for create, annihilate in pairs:
                out.append((-amplitude, ((create, i), (annihilate, j))))
                out.append((-_conj(amplitude), ((create, j), (annihilate, i))))
        return out
    spin_part = 1j * sum(l * p for l, p in zip(soc, _PAULI))
    out = []
    for (i, j), phi in zip(bonds, phases):
        matrix = cmath.exp(1j * phi) * (complex(s) * np.eye(2) + spin_part)
        for a in range(2):
            for b in range(2):
                amplitude = complex(matrix[a, b])
                if amplitude == 0:
                    continue
                out.append((-_scalar(amplitude), ((f"c+_{_SPIN[a]}", i), (f"c_{_SPIN[b]}", j))))
                out.append((-_scalar(amplitude.conjugate()),
                            ((f"c+_{_SPIN[b]}", j), (f"c_{_SPIN[a]}", i))))
    return out


def _conj(value):
    return value.conjugate() if isinstance(value, complex) else value
