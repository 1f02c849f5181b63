"""Operator terms: labelled sums of products of local operators.

A :class:`Term` is what one ``[[term]]`` table of a model file says.  :func:`expand_term`
turns it into *products*: ``(coefficient, ((operator_name, site), ...))`` with the strength
already applied, the leftmost operator first, following docs/model-files.md (``[[term]]``):

- ``hopping``:      ``-s sum_bonds sum_spin (c+_i c_j + h.c.)`` (bosons ``b+_i b_j + h.c.``);
  ``s`` may be complex, and ``phases``, ``flux`` and ``soc`` add Peierls phases and the
  spin-orbit hopping ``i lambda . sigma`` (:mod:`lowfold.model.hopping`)
- ``hubbard``:      ``s sum_i n_i,up n_i,dn`` (bosons ``(s/2) sum_i n_i (n_i - 1)``)
- ``interaction``:  ``s sum_bonds n_i n_j``;  ``potential``: ``s sum_sites n_i``
- ``exchange``:     ``s sum_bonds S_i . S_j`` (spin sites or electron spins)
- ``field``:        ``s sum_sites S^a_i`` along ``axis``
- ``product``:      ``s sum_(bonds or sites) O_1 O_2 ...`` (+ h.c. with ``conjugate``)
- ``ring``, ``chirality``, ``dm``, ``anisotropy``, ``pauli``, ``constant``: the readout kinds
  of an effective spin-1/2 model, see :mod:`lowfold.model.spin_terms`

Strengths (numbers or the parameters they name) must be finite and either 0 or of size
between ``1 / STRENGTH_LIMIT`` and :data:`STRENGTH_LIMIT` = 1e100 (:func:`check_strength`):
matrix elements are strengths times operator amplitudes (up to ~1e9 at the largest local
dimension) summed over up to ~1e4 products per row, and their squares -- which norms,
Lanczos and second-order energies form -- must stay inside the normal double range
(2.2e-308 to 1.8e308).  A strength of 1e308 would turn the spectrum into infinities.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

from lowfold.errors import ModelError
from lowfold.model.hopping import hopping_products
from lowfold.model.lattice import Lattice
from lowfold.model.local_terms import LOCAL_EXPANDERS, LOCAL_TERM_TYPES
from lowfold.model.sites import Site
from lowfold.model.spin_terms import SPIN_EXPANDERS, SPIN_TERM_TYPES

__all__ = ["Term", "TERM_TYPES", "STRENGTH_LIMIT", "check_label", "check_strength", "expand_term"]

STRENGTH_LIMIT = 1e100      # see the module docstring

TERM_TYPES = ("hopping", "hubbard", "interaction", "potential", "exchange", "field",
              "product") + SPIN_TERM_TYPES + LOCAL_TERM_TYPES
TWO_SITE_TYPES = ("hopping", "interaction", "exchange")
ONE_SITE_TYPES = ("hubbard", "potential", "field")

Product = tuple[complex, tuple[tuple[str, int], ...]]


@dataclass(frozen=True)
class Term:
    """One labelled term of a model.

    ``strength`` is a number or the name of a parameter; ``bonds`` is a bond class name or a
    tuple of pairs (two-site terms and two-operator products on bonds); ``sites`` is
    ``"all"`` or a tuple of site indices (one-site terms and on-site products), or for the
    multi-spin types a tuple of site groups.  ``cycles`` (3 or 4), ``pattern`` (cell
    offsets), ``vector`` (dm) and ``tensor`` (anisotropy) serve the multi-spin types
    (:mod:`lowfold.model.spin_terms`); ``phases`` (radians, one per explicit bond),
    ``flux`` (flux quanta per smallest face) and ``soc`` (``[lx, ly, lz]`` or one such
    vector per explicit bond, numbers or parameter names) serve ``hopping`` (:mod:`lowfold.model.hopping`).  The label is one
    printable line (:func:`check_label`): it is shown in messages and tables.
    """

    label: str
    type: str
    strength: float | str
    bonds: str | tuple[tuple[int, int], ...] | None = None
    sites: str | tuple[int, ...] | None = None
    axis: str | None = None
    operators: tuple[str, ...] | None = None
    conjugate: bool = False
    cycles: int | None = None
    pattern: tuple[tuple[int, ...], ...] | None = None
    vector: tuple[float, ...] | None = None
    tensor: tuple[tuple[float, ...], ...] | None = None
    phases: tuple[float | str, ...] | None = None
    flux: float | str | None = None
    soc: tuple | None = None

    def __post_init__(self):
        check_label(self.label, "term label")


def check_label(name, what: str = "label") -> None:
    """Raise ``ModelError`` unless ``name`` is a non-empty string of printable characters
    (no newline, tab or other control or format character; ``str.isprintable``)."""
    if not isinstance(name, str) or not name:
        raise ModelError(f"{what}: must be a non-empty string, got {name!r}")
    if not name.isprintable():
        bad = next(c for c in name if not c.isprintable())
        raise ModelError(f"{what} {name!r} contains the control character {bad!r}; "
                         "use printable characters on one line")


def check_strength(value, where: str) -> float | complex:
    """``value`` as a float (a complex number with a non-zero imaginary part stays complex) if
    it is a usable strength.

    Raises
    ------
    ModelError
        ``value`` is not a number, not finite, or nonzero with ``|value|`` outside
        ``[1 / STRENGTH_LIMIT, STRENGTH_LIMIT]``; the message starts with ``where``.
    """
    if isinstance(value, bool) or not isinstance(value, numbers.Complex):
        raise ModelError(f"{where}: must be a number, got {value!r}")
    value = complex(value) if getattr(value, "imag", 0) else float(getattr(value, "real", value))
    size = abs(value)
    if not math.isfinite(size):
        raise ModelError(f"{where}: must be a finite number, got {value!r}")
    if size and not 1 / STRENGTH_LIMIT <= size <= STRENGTH_LIMIT:
        raise ModelError(f"{where}: {value!r} is outside the strengths lowfold accepts (0 or "
                         f"{1 / STRENGTH_LIMIT:g} <= |s| <= {STRENGTH_LIMIT:g}, so that squares "
                         "of matrix elements stay finite); rescale the energy unit")
    return value


def expand_term(term: Term, strength: float | complex, lattice: Lattice, site: Site,
                parameters=None) -> list[Product]:
    """Products of named local operators for ``term`` at the given numeric strength
    (``parameters``: the values that ``soc``, ``flux`` and ``phases`` of a hopping may name)."""
    if term.type == "hopping":
        return hopping_products(term, strength, lattice, site, parameters or {})
    if term.phases is not None or term.flux is not None or term.soc is not None:
        raise ModelError(f"term {term.label!r}: phases, flux and soc belong to hopping terms")
    expand = _EXPANDERS[term.type]
    return expand(term, strength, lattice, site)


def _require(site: Site, allowed: tuple[str, ...], term: Term) -> None:
    if site.type not in allowed:
        raise ModelError(f"term {term.label!r}: type {term.type!r} is not defined for "
                         f"{site.type} sites (allowed: {', '.join(allowed)})")


def _bonds(term: Term, lattice: Lattice):
    return [tuple(int(x) for x in pair) for pair in lattice.bonds(term.bonds or "nearest")]


def _sites(term: Term, lattice: Lattice):
    return [int(i) for i in lattice.sites(term.sites or "all")]


def _hubbard(term, s, lattice, site):
    _require(site, ("electron", "boson"), term)
    out = []
    for i in _sites(term, lattice):
        if site.type == "electron":
            out.append((s, (("n_up", i), ("n_dn", i))))
        else:
            out.append((s / 2, (("n", i), ("n", i))))
            out.append((-s / 2, (("n", i),)))
    return out


def _interaction(term, s, lattice, site):
    _require(site, ("fermion", "electron", "boson"), term)
    return [(s, (("n", i), ("n", j))) for i, j in _bonds(term, lattice)]


def _potential(term, s, lattice, site):
    _require(site, ("fermion", "electron", "boson"), term)
    return [(s, (("n", i),)) for i in _sites(term, lattice)]


def _exchange(term, s, lattice, site):
    _require(site, ("spin", "electron"), term)
    out = []
    for i, j in _bonds(term, lattice):
        out.append((s, (("Sz", i), ("Sz", j))))
        out.append((s / 2, (("S+", i), ("S-", j))))
        out.append((s / 2, (("S-", i), ("S+", j))))
    return out


def _field(term, s, lattice, site):
    _require(site, ("spin", "electron"), term)
    if term.axis not in ("x", "y", "z"):
        raise ModelError(f"term {term.label!r}: axis must be \"x\", \"y\" or \"z\", "
                         f"got {term.axis!r}")
    name = "S" + term.axis
    return [(s, ((name, i),)) for i in _sites(term, lattice)]


def _product(term, s, lattice, site):
    operators = term.operators or ()
    if not operators:
        raise ModelError(f"term {term.label!r}: product needs a non-empty 'operators' list")
    for name in operators:
        site.operator(name)                      # raises ModelError for unknown names
    if term.bonds is not None and term.sites is not None:
        raise ModelError(f"term {term.label!r}: give either 'bonds' or 'sites', not both")
    if term.sites is not None:
        placements = [tuple((name, i) for name in operators) for i in _sites(term, lattice)]
    else:
        if len(operators) != 2:
            raise ModelError(f"term {term.label!r}: a product on bonds takes exactly two "
                             f"operators (O_i O_j), got {len(operators)}")
        placements = [((operators[0], i), (operators[1], j)) for i, j in _bonds(term, lattice)]
    out = [(s, factors) for factors in placements]
    if term.conjugate:
        out += [(complex(s).conjugate(), tuple((site.adjoint_name(n), i) for n, i in reversed(f)))
                for f in placements]
    return out


_EXPANDERS = {
    "hubbard": _hubbard,
    "interaction": _interaction,
    "potential": _potential,
    "exchange": _exchange,
    "field": _field,
    "product": _product,
    **SPIN_EXPANDERS,
    **LOCAL_EXPANDERS,
}
