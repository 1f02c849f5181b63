"""Coupling classes of an infinite lattice, read from its linked-cluster sum per unit cell.

Two readouts, as on a finite cluster:

- one spin-1/2 (or pseudo-spin-1/2) per site: Pauli strings, named spin couplings per
  support of sites (:func:`read_classes`);
- any other product of one-site manifolds (the doped Mott insulator {0, u, d}, spin sites
  with three or more kept states, bosons): strings of X-operators
  (:mod:`lowfold.readout.local_strings`) named by the local-operator fit
  (:mod:`lowfold.readout.local_names`) per unit cell (:func:`read_local_classes`): every
  template's strings are moved to their translation representatives, so that a term split
  over several supports (the one-site part of a spin exchange) is fitted once per cell.

Members of equal kind, class name (:func:`lowfold.readout.classes.class_name` of their
positions on the patch), operator and values are one :class:`~lowfold.results.CouplingClass`;
``multiplicity`` is members per site.  A three-site member lists its sites with the middle
one second; a leftover ``string`` member names its string on the member's own sites, numbered
from 0 in ascending order of the patch (``"|u><0|_0 |0><u|_1"``).
"""

from __future__ import annotations

import re
from dataclasses import replace

import numpy as np

from lowfold.model.cycles import lattice_cycles
from lowfold.model.model import Model
from lowfold.perturbation.linked_clusters import translate_key
from lowfold.readout.classes import class_name, lattice_shells
from lowfold.readout.couplings import spin_couplings
from lowfold.readout.formulas import coupling_formula
from lowfold.readout.local_basis import uniform_basis
from lowfold.readout.local_names import name_strings
from lowfold.readout.pauli import parse_pauli_string
from lowfold.readout.rationals import single_ratio
from lowfold.results import CouplingClass

__all__ = ["read_classes", "read_local_classes", "local_cell_couplings", "formula_model",
           "KIND_RANK"]

TOL = 1e-10   # coefficients at or below this (absolute) are left out of the readout
_SHELL_RANK = {"nearest": 0, "next-nearest": 1, "third": 2}    # classes listed by distance
KIND_RANK = ["constant", "field", "hopping", "exchange", "dm", "anisotropy", "chirality", "ring",
             "three-site", "density", "single-ion", "biquadratic", "particle-energy",
             "hole-energy", "particle-hopping", "hole-hopping", "particle-interaction",
             "hole-interaction", "particle-hole-interaction", "pauli", "string"]


def read_classes(run, order: int, model: Model | None = None) -> tuple[CouplingClass, ...]:
    """Coupling classes of a per-cell sum of Pauli strings: named couplings per support of
    sites, members with equal kind, class and values grouped, multiplicity = members per
    site; ordered by kind, then sites, then distance and name.

    Ring exchange and scalar chirality are read on the 4-cycles and triangles of the patch's
    nearest-neighbour graph (:func:`lowfold.model.cycles.lattice_cycles`), the cycles of the
    infinite lattice.  With ``model``, each class gets its formula (:func:`formula_model`,
    :func:`lowfold.readout.formulas.coupling_formula`).
    """
    by_support: dict[tuple, dict] = {}
    for key, values in run.total.terms.items():
        if np.max(np.abs(values)) > TOL:
            by_support.setdefault(tuple(s for s, _ in key), {})[key] = values
    coords = run.patch.coordinates
    shells = lattice_shells(run.patch)
    rings, triangles = lattice_cycles(run.patch)
    cycles = {frozenset(c): c for c in (*rings, *triangles)}
    groups: dict[tuple, list] = {}
    names: dict[tuple, str] = {}          # class names met so far, by offsets of the sites
    for support, terms in sorted(by_support.items()):
        local = {s: k for k, s in enumerate(support)}
        table = {" ".join(f"{p}{local[s]}" for s, p in key) or "I": list(values)
                 for key, values in terms.items()}
        cycle = cycles.get(frozenset(support))
        mine = [tuple(local[s] for s in cycle)] if cycle else []
        found, residual = spin_couplings(table, len(support), orders=list(range(order + 1)),
                                         tol=TOL, ring_cycles=[c for c in mine if len(c) == 4],
                                         triangles=[c for c in mine if len(c) == 3])
        for c in found:
            sites = [support[k] for k in c.sites] if c.kind != "constant" else []
            _member(groups, names, c.kind, sites, c.orders, None, coords, run.patch, shells)
        for text, values in residual.items():
            ops = parse_pauli_string(text)
            _member(groups, names, "pauli", [support[k] for k, _ in ops],
                    dict(enumerate(values)), " ".join(p for _, p in ops), coords, run.patch,
                    shells)
    return _classes(groups, run, model)


def local_cell_couplings(run, order: int, model: Model):
    """Named couplings of a per-cell sum of X-operator strings, on representative patch
    sites (each with its smallest cell the reference cell), and the strings left over.

    Returns ``(couplings, residual)`` as :func:`lowfold.readout.local_names.name_strings`:
    each :class:`~lowfold.readout.local_names.LocalCoupling` is one member per unit cell.
    """
    patch, n_basis = run.patch, run.n_basis
    basis = uniform_basis(run.local, patch.n_sites)
    strings = {tuple((s, a, b) for s, (a, b) in key): np.asarray(values)
               for key, values in run.total.terms.items() if np.max(np.abs(values)) > TOL}
    cell_of = [s // n_basis for s in range(patch.n_sites)]

    def fold(key):
        moved = translate_key(tuple((s, (a, b)) for s, a, b in key), cell_of, run.reference,
                              n_basis)
        return tuple((s, a, b) for s, (a, b) in moved)

    bonded = {frozenset(map(int, b)) for b in patch.bonds("nearest")}
    return name_strings(model, basis, strings, order + 1, tol=TOL, bonded=bonded, fold=fold)


def read_local_classes(run, order: int, model: Model) -> tuple[CouplingClass, ...]:
    """Coupling classes of a per-cell sum of X-operator strings (module docstring)."""
    couplings, _ = local_cell_couplings(run, order, model)
    coords = run.patch.coordinates
    shells = lattice_shells(run.patch)
    groups: dict[tuple, list] = {}
    names: dict[tuple, str] = {}          # class names met so far, by offsets of the sites
    for c in couplings:
        sites = sorted(c.sites) if c.kind == "string" else list(c.sites)   # label order
        operator = _local_string(c.operator, sites) if c.kind == "string" else None
        _member(groups, names, c.kind, sites, dict(c.orders), operator, coords, run.patch,
                shells)
    return _classes(groups, run, model)


def _local_string(label: str, sites) -> str:
    """A string's label with its sites renumbered from 0 (ascending patch order)."""
    local = {s: k for k, s in enumerate(sorted(sites))}
    return re.sub(r"_(\d+)", lambda m: f"_{local[int(m.group(1))]}", label)


def _classes(groups: dict, run, model: Model | None) -> tuple[CouplingClass, ...]:
    scales = formula_model(model) if model is not None else None
    coords = run.patch.coordinates
    out = []
    for (kind, name, operator, _), members in groups.items():
        sites, orders = members[0]
        count = 1.0 if kind == "constant" else len(members) / run.n_basis
        if kind == "constant":
            orders = {m: np.asarray(v) / run.n_basis for m, v in orders.items()}
        orders = {m: (float(np.real(v)) if np.ndim(v) == 0 else v) for m, v in orders.items()
                  if np.max(np.abs(v)) > TOL}
        formula = coupling_formula(scales, orders) if scales is not None and orders else None
        position = lambda member: tuple(tuple(float(x) for x in coords[s])  # noqa: E731
                                        for s in member)
        out.append(CouplingClass(kind, name, position(sites), count, orders, formula, operator,
                                 tuple(position(m) for m, _ in members)))
    rank = lambda kind: KIND_RANK.index(kind) if kind in KIND_RANK else len(KIND_RANK)  # noqa: E731
    return tuple(sorted(out, key=lambda c: (rank(c.kind), len(c.positions),
                                            _SHELL_RANK.get(c.name, 3), c.name,
                                            c.operator or "", c.positions)))


def formula_model(model: Model) -> Model | None:
    """The model whose two named scales the formulas use (``None``: no formula).

    The model itself when V and H0 each have one named strength
    (:func:`lowfold.readout.rationals.single_ratio`).  On an infinite lattice H0 usually
    also holds a one-site potential that selects the filling (``mu = -U/2``): then, when V
    has one named strength and every H0 term a named strength, H0's scale is the parameter
    of largest magnitude and the others enter at their values (a formula is written only
    when every order is a rational multiple of ``t^m/U^(m-1)`` at those values; for hopping
    the potential cancels from every energy denominator, as the particle number is kept).
    """
    if model.perturbation is None or single_ratio(model) is not None:
        return model
    v = {model.term(label).strength for label in model.perturbation_labels}
    h0 = {model.term(label).strength for label in model.unperturbed_labels}
    if len(v) != 1 or not all(isinstance(s, str) for s in v | h0):
        return None
    large = max(sorted(h0), key=lambda name: abs(float(model.parameters[name])))
    terms = tuple(replace(t, strength=large) if t.label in model.unperturbed_labels else t
                  for t in model.terms)
    return replace(model, terms=terms)


def _member(groups, names, kind, sites, orders, operator, coords, patch, shells) -> None:
    offsets = tuple(tuple(coords[s] - coords[sites[0]]) for s in sites) if sites else ()
    name = _name_of(patch, offsets, shells, names)
    values = [np.ravel(np.asarray(v)) for _, v in sorted(orders.items())]
    values = [np.concatenate([v.real, v.imag]) if np.iscomplexobj(v) else v.astype(float)
              for v in values]
    flat = np.round(np.concatenate(values), 9) if values else np.zeros(0)
    rounded = (tuple(len(v) for v in values), tuple(flat.tolist()))     # rounded once
    groups.setdefault((kind, name, operator, rounded), []).append((sites, dict(orders)))



def _name_of(patch, offsets: tuple, shells, names: dict) -> str:
    """:func:`class_name` of a member from its sites' offsets to its first site, memoised in
    ``names`` (the name depends on the shape and the distances only)."""
    key = tuple(tuple(round(float(x), 9) for x in o) for o in offsets)
    if key not in names:
        names[key] = class_name(patch, [list(o) for o in offsets], shells=shells)
    return names[key]
