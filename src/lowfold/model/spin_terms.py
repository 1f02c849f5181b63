"""Multi-spin term types: the readout kinds of an effective spin model as model-file terms.

Every readout kind of :mod:`lowfold.readout.couplings` is a ``[[term]]`` type, so that an
effective model can be written out and read back (docs/model-files.md, ``[[term]]``).  With
``s`` the strength and ``S = sigma / 2`` (spin-1/2 sites only):

- ``ring``:       ``s sum_(i,j,k,l) [(S_i.S_j)(S_k.S_l) + (S_i.S_l)(S_j.S_k) - (S_i.S_k)(S_j.S_l)]``
  on 4-cycles ``(i, j, k, l)`` in cyclic order;
- ``chirality``:  ``s sum_(i,j,k) S_i . (S_j x S_k)`` on triangles, oriented as listed;
- ``dm``:         ``s sum_(i,j) D . (S_i x S_j)`` on bonds ``(i, j)`` as listed, with
  ``D = vector`` (or the unit vector along ``axis``);
- ``anisotropy``: ``s sum_(i,j) sum_ab G_ab S^a_i S^b_j`` with ``G = tensor`` (real symmetric
  3x3; the readout gives it traceless, a trace adds exchange ``tr(G)/3 S_i.S_j``);
- ``pauli``:      ``s sum_groups P_1 P_2 ... `` with ``operators = ["X", "Z", ...]``
  (``X Y Z``, one per site of each group, in the group's order);
- ``constant``:   ``s`` times the identity.

Groups of sites come from :func:`term_groups`: ``cycles = 3 | 4`` (triangles / 4-cycles of
the nearest-neighbour graph, :func:`lowfold.model.lattice.lattice_cycles`), ``bonds`` (a
class name or pairs), ``sites`` (a list of groups ``[[i, j, ...], ...]``; one-site groups
may be written flat) or a translated ``pattern`` (:mod:`lowfold.model.patterns`).
"""

from __future__ import annotations

import itertools

import numpy as np

from lowfold.errors import ModelError
from lowfold.model.cycles import lattice_cycles
from lowfold.model.patterns import along_translations, translated_pattern

__all__ = ["SPIN_TERM_TYPES", "SPIN_EXPANDERS", "term_groups"]

SPIN_TERM_TYPES = ("ring", "chirality", "dm", "anisotropy", "pauli", "constant")
_AXES = ("Sx", "Sy", "Sz")
_WIDTH = {"ring": 4, "chirality": 3, "dm": 2, "anisotropy": 2}
_PAULI = ("X", "Y", "Z")


def _require_spin_half(term, site) -> None:
    if site.type != "spin" or site.radix != 2:
        raise ModelError(f"term {term.label!r}: type {term.type!r} is defined for spin-1/2 "
                         f"sites only (site type {site.type!r}"
                         + (f", S = {site.spin}" if site.spin is not None else "") + ")")


def _width(term) -> int:
    if term.type == "pauli":
        if not term.operators:
            raise ModelError(f"term {term.label!r}: pauli needs a non-empty 'operators' list, "
                             "e.g. [\"Z\", \"Z\"]")
        bad = [o for o in term.operators if o not in _PAULI]
        if bad:
            raise ModelError(f"term {term.label!r}: pauli operators are X, Y, Z; got {bad[0]!r}")
        return len(term.operators)
    return _WIDTH[term.type]


def term_groups(term, lattice, width: int | None = None) -> list[tuple[int, ...]]:
    """The site groups a multi-spin term acts on (see the module docstring); ``width``:
    the sites of a group, for term types of other modules (default: the type's own).

    Raises
    ------
    ModelError
        More than one selector, a selector of the wrong width, or a pattern that fits
        nowhere on the lattice.
    """
    width = _width(term) if width is None else width
    given = [k for k in ("bonds", "sites", "cycles", "pattern") if getattr(term, k) is not None]
    if len(given) > 1:
        raise ModelError(f"term {term.label!r}: give one of {', '.join(given)}, not several")
    chosen = given[0] if given else {4: "cycles", 3: "cycles", 2: "bonds"}.get(width, "sites")
    if chosen == "cycles":
        size = term.cycles if term.cycles is not None else width
        if size not in (3, 4) or size != width:
            raise ModelError(f"term {term.label!r}: cycles = {size} does not fit a {term.type} "
                             f"term on {width} sites (cycles = 3 or 4)")
        rings, triangles = lattice_cycles(lattice)
        return [tuple(c) for c in (rings if size == 4 else triangles)]
    if chosen == "bonds":
        if width != 2:
            raise ModelError(f"term {term.label!r}: bonds select pairs, but the term acts on "
                             f"{width} sites")
        if isinstance(term.bonds or "nearest", str):      # a class: along the translations
            return along_translations(lattice.bonds(term.bonds or "nearest"), lattice)
        return [tuple(int(x) for x in b) for b in lattice.bonds(term.bonds)]
    if chosen == "pattern":
        groups = translated_pattern(term.pattern, lattice, where=f"term {term.label!r}")
        if len(term.pattern) != width:
            raise ModelError(f"term {term.label!r}: the pattern has {len(term.pattern)} sites, "
                             f"the term acts on {width}")
        return _distinct_groups(term, groups)
    return _explicit_groups(term, lattice, width)


def _explicit_groups(term, lattice, width):
    sites = term.sites if term.sites is not None else "all"
    if isinstance(sites, str) or all(not isinstance(s, (tuple, list)) for s in sites):
        if width != 1:
            raise ModelError(f"term {term.label!r}: sites must be a list of groups of {width} "
                             "sites, e.g. [[0, 1, 2, 3]]")
        return [(int(i),) for i in lattice.sites(sites)]
    groups = []
    for group in sites:
        if not isinstance(group, (tuple, list)) or len(group) != width:
            raise ModelError(f"term {term.label!r}: site group {list(group) if isinstance(group, tuple) else group!r} "
                             f"must list {width} sites")
        picked = tuple(int(i) for i in lattice.sites(list(group)))
        groups.append(picked)
    return groups


def _distinct_groups(term, groups):
    """Translates that land on the same sites twice (small periodic clusters) count once,
    like bonds: the key is the set of sites (for pauli and string, of (site, operator)
    pairs; for three-site, the middle site and the set of ends: on a 3-site ring the three
    paths share their sites)."""
    seen, out = set(), []
    for group in groups:
        if term.type in ("pauli", "string"):
            key = frozenset(zip(group, term.operators))
        elif term.type == "three-site":
            key = (group[1], frozenset((group[0], group[2])))
        else:
            key = frozenset(group)
        if key not in seen:
            seen.add(key)
            out.append(group)
    return out


def _dot(i, j):
    return [(1.0, ((a, i), (a, j))) for a in _AXES]


def _times(left, right, sign=1.0):
    return [(sign * c1 * c2, f1 + f2) for c1, f1 in left for c2, f2 in right]


def _ring(term, s, lattice, site):
    _require_spin_half(term, site)
    out = []
    for i, j, k, l in term_groups(term, lattice):
        for (a, b), (c, d), sign in (((i, j), (k, l), 1.0), ((i, l), (j, k), 1.0),
                                     ((i, k), (j, l), -1.0)):
            out += [(s * c_, f) for c_, f in _times(_dot(a, b), _dot(c, d), sign)]
    return out


def _levi_civita():
    for a, b, c in itertools.permutations(range(3)):
        yield a, b, c, float(np.linalg.det(np.eye(3)[[a, b, c]]))


def _chirality(term, s, lattice, site):
    _require_spin_half(term, site)
    return [(s * sign, ((_AXES[a], i), (_AXES[b], j), (_AXES[c], k)))
            for i, j, k in term_groups(term, lattice) for a, b, c, sign in _levi_civita()]


def _real_array(value, shape, what, term):
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError):
        arr = None
    if arr is None or arr.shape != shape or not np.all(np.isfinite(arr)):
        raise ModelError(f"term {term.label!r}: {what} must be {'x'.join(map(str, shape))} "
                         f"finite numbers, got {value!r}")
    return arr


def _dm_vector(term):
    if term.vector is not None and term.axis is not None:
        raise ModelError(f"term {term.label!r}: give either vector or axis, not both")
    if term.axis is not None:
        if term.axis not in ("x", "y", "z"):
            raise ModelError(f"term {term.label!r}: axis must be \"x\", \"y\" or \"z\", got {term.axis!r}")
        return np.eye(3)["xyz".index(term.axis)]
    if term.vector is None:
        raise ModelError(f"term {term.label!r}: dm needs vector = [Dx, Dy, Dz] or axis")
    return _real_array(term.vector, (3,), "vector", term)


def _dm(term, s, lattice, site):
    _require_spin_half(term, site)
    d = _dm_vector(term)
    return [(s * d[a] * sign, ((_AXES[b], i), (_AXES[c], j)))
            for i, j in term_groups(term, lattice)
            for a, b, c, sign in _levi_civita() if d[a] != 0]


def _anisotropy(term, s, lattice, site):
    _require_spin_half(term, site)
    if term.tensor is None:
        raise ModelError(f"term {term.label!r}: anisotropy needs tensor = [[Gxx, Gxy, Gxz], ...]")
    g = _real_array(term.tensor, (3, 3), "tensor", term)
    if not np.allclose(g, g.T, rtol=0, atol=1e-12 * max(1.0, np.abs(g).max())):
        raise ModelError(f"term {term.label!r}: tensor must be symmetric (the antisymmetric "
                         "part of a two-spin coupling is a dm term)")
    return [(s * g[a, b], ((_AXES[a], i), (_AXES[b], j)))
            for i, j in term_groups(term, lattice)
            for a in range(3) for b in range(3) if g[a, b] != 0]


def _pauli(term, s, lattice, site):
    _require_spin_half(term, site)
    return [(s, tuple(zip(term.operators, group))) for group in term_groups(term, lattice)]


def _constant(term, s, lattice, site):
    given = [k for k in ("bonds", "sites", "cycles", "pattern") if getattr(term, k) is not None]
    if given:
        raise ModelError(f"term {term.label!r}: a constant takes no {given[0]}")
    return [(s, ())]


SPIN_EXPANDERS = {"ring": _ring, "chirality": _chirality, "dm": _dm,
                  "anisotropy": _anisotropy, "pauli": _pauli, "constant": _constant}
