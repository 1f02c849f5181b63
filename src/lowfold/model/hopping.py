"""Hopping terms: complex amplitudes, Peierls phases (per bond or from a flux) and
spin-orbit hopping.

A ``hopping`` term of strength ``s`` on the bonds ``(i, j)`` it selects is

    H = - sum_bonds sum_ab  c+_{i a} T^{ij}_{ab} c_{j b}  +  h.c.,
    T^{ij} = exp(i phi_ij) (s 1 + i lambda . sigma)

(spinless fermions and bosons: ``T^{ij} = s exp(i phi_ij)``, one component).  Conventions
(docs/model-files.md, "Complex strengths, flux and spin-orbit hopping"):

- the bond ``(i, j)`` is taken in the order the term lists it (a bond class lists it with
  ``i < j``, along the translations on periodic clusters: the ring's bond ``(L - 1, 0)``,
  :func:`lowfold.model.patterns.along_translations`); ``T^{ji} = (T^{ij})^dagger``, so that H is Hermitian for any complex ``s``:
  ``phi_ji = -phi_ij`` and ``lambda_ji = -lambda_ij``;
- ``c+_i T c_j`` moves a particle from ``j`` to ``i``; it picks up ``exp(i phi_ij)``: going
  once around a loop ``r_0 -> r_1 -> ... -> r_0`` a particle collects
  ``exp(i sum_m phi_{m+1, m})``, which is ``exp(2 pi i Phi)`` for a loop around a flux
  ``Phi`` (in flux quanta) traversed counterclockwise;
- ``phases = [...]``: ``phi_ij`` in radians, one per listed bond (explicit ``bonds`` only);
- ``flux = Phi``: the Peierls phases of a uniform field perpendicular to the plane with a
  flux ``Phi`` (flux quanta) through the smallest face of the lattice (the triangle of
  triangular and kagome, the square of square and ladder, the hexagon of honeycomb): the
  symmetric gauge on open clusters, a Landau gauge with magnetic translations on periodic
  ones, where a torus needs a whole number of flux quanta in all
  (:mod:`lowfold.model.flux_gauge`);
- ``soc = [lx, ly, lz]``: the real vector ``lambda`` (numbers or parameter names) of the
  spin-orbit hopping ``i lambda . sigma`` of electrons, the same on every bond; or ``soc =
  [[lx, ly, lz], ...]``, one vector per bond of an explicit ``bonds`` list (like
  ``phases``).  ``lambda`` along z conserves S^z; any other direction does not
  (:func:`breaks_sz`).

With ``s`` real, no phases and no ``soc`` the products are those of the plain hopping
``-s (c+_i c_j + c+_j c_i)``, real floats.
"""

from __future__ import annotations

import cmath
import math

import numpy as np

from lowfold.errors import ModelError
from lowfold.model.flux_gauge import FACE_AREAS, flux_phases
from lowfold.model.patterns import along_translations

__all__ = ["hopping_products", "bond_phases", "soc_vectors", "breaks_sz", "FACE_AREAS"]

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


def _per_bond(soc) -> bool:
    """Whether ``soc`` lists one vector per bond (``[[lx, ly, lz], ...]``)."""
    return bool(soc) and all(isinstance(v, (list, tuple)) for v in soc)


def _vector(entries, parameters, where: str) -> tuple[float, float, float]:
    if not isinstance(entries, (list, tuple)) or len(entries) != 3:
        raise ModelError(f"{where} must be [lx, ly, lz], got {entries!r}")
    return tuple(_value(v, parameters, f"{where}[{k}]") for k, v in enumerate(entries))


def soc_vectors(term, parameters, n_bonds: int | None = None) -> list | None:
    """The real spin-orbit vectors ``lambda`` of a hopping term, one per bond, or ``None``.

    ``soc = [lx, ly, lz]`` gives the same vector to each of ``n_bonds`` bonds; ``soc =
    [[lx, ly, lz], ...]`` one per bond of an explicit bonds list (checked against
    ``n_bonds`` when it is given).
    """
    if term.soc is None:
        return None
    where = f"term {term.label!r}: soc"
    if not _per_bond(term.soc):
        vector = _vector(term.soc, parameters, where)
        return [vector] * (1 if n_bonds is None else n_bonds)
    if term.bonds is None or isinstance(term.bonds, str):
        raise ModelError(f"{where}: one vector per bond needs explicit bonds = [[i, j], ...] "
                         "(one [lx, ly, lz] per listed bond, in that order)")
    if n_bonds is not None and len(term.soc) != n_bonds:
        count = f"{len(term.soc)} vector{'' if len(term.soc) == 1 else 's'}"
        raise ModelError(f"{where}: {count} for {n_bonds} bonds; give one [lx, ly, lz] per "
                         "bond")
    return [_vector(v, parameters, f"{where}[{b}]") for b, v in enumerate(term.soc)]


def breaks_sz(term, parameters) -> bool:
    """Whether a hopping term has a spin-orbit part not along z (then S^z is not conserved)."""
    if term.type != "hopping" or term.soc is None:
        return False
    return any(lx != 0 or ly != 0 for lx, ly, _ in soc_vectors(term, parameters))


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
    return flux_phases(lattice, bonds, flux, f"term {term.label!r}: flux")


def _bond_list(term, lattice):
    bonds = [tuple(int(x) for x in pair) for pair in lattice.bonds(term.bonds or "nearest")]
    return along_translations(bonds, lattice) if isinstance(term.bonds or "nearest", str) else bonds


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
    soc = soc_vectors(term, parameters, len(bonds))
    if soc is not None and site.type != "electron":
        raise ModelError(f"term {term.label!r}: soc (spin-orbit hopping) needs electron sites, "
                         f"not {site.type} sites")
    if soc is not None and not any(any(v) for v in soc):
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
    out = []
    for (i, j), phi, vector in zip(bonds, phases, soc):
        spin_part = 1j * sum(l * p for l, p in zip(vector, _PAULI))
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
