"""The edges of the linked-cluster expansion: the groups of sites each V term acts on.

A V term of an infinite lattice acts on a bond class (two-site terms: ``hopping``,
``exchange``, ``interaction``, ``dm``, ``anisotropy``, ``biquadratic``, two-factor
``pauli`` and ``string``; without ``bonds`` on the nearest bonds, as on a finite cluster),
or on translated groups of more sites: ``three-site`` paths (every path of two nearest bonds
by default), ``ring`` and ``chirality`` cycles, and ``pattern`` groups of any multi-site type
-- the terms an exported effective model holds.  On a patch (an open cluster of the
lattice) every group of every V term is an *edge* of the cluster graphs, coloured by the set
of terms on it (:func:`coloured_groups`); bonds are taken along the translations
(:func:`lowfold.model.patterns.along_translations`), groups in their term's order.

An edge is *ordered* (:func:`ordered_colours`, :func:`lowfold.perturbation.linked_clusters.
canonical_form`) unless every term on it is symmetric under the exchange of its two sites (a
real hopping, ``exchange``, ``interaction``, ``biquadratic``, a ``pauli`` of equal letters):
a complex or spin-orbit hopping, a DM vector and an ordered string are not, and a group of
three or more sites always keeps its order.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from lowfold.model.lattice import Lattice
from lowfold.model.local_terms import paths
from lowfold.model.model import Model, directed_hopping
from lowfold.model.patterns import along_translations
from lowfold.model.spin_terms import term_groups

__all__ = ["with_bond_classes", "default_bonds", "term_width", "term_groups_on",
           "coloured_groups", "ordered_colours", "cell_reach"]

_BOND_TYPES = ("hopping", "interaction", "exchange", "dm", "anisotropy", "biquadratic")
_GROUP_WIDTH = {"ring": 4, "chirality": 3, "three-site": 3}
_SYMMETRIC = ("interaction", "exchange", "biquadratic")


def term_width(term) -> int:
    """Sites of one group of ``term`` (1: a one-site term)."""
    if term.type in _GROUP_WIDTH:
        return _GROUP_WIDTH[term.type]
    if term.type in ("pauli", "string"):
        return len(term.operators or ())
    if term.type == "product":
        return 2 if term.bonds is not None else 1
    return 2 if term.type in _BOND_TYPES else 1


def default_bonds(term) -> str | None:
    """The bond class a two-site term acts on: its ``bonds``, else ``nearest`` when it names
    no other selector; None for other terms."""
    if term.bonds is not None:
        return term.bonds
    others = (term.sites, term.pattern, term.cycles)
    if term_width(term) == 2 and term.type != "product" and all(x is None for x in others):
        return "nearest"
    return None


def with_bond_classes(model: Model) -> Model:
    """``model`` with every two-site term that names no selector on the nearest bonds, so
    that the cluster graphs see its bonds (a hopping without ``bonds`` is a bond term)."""
    terms = tuple(replace(t, bonds=default_bonds(t)) if t.bonds is None and default_bonds(t)
                  else t for t in model.terms)
    return model if terms == model.terms else replace(model, terms=terms)


def term_groups_on(term, lattice: Lattice) -> list[tuple[int, ...]] | None:
    """The groups of ``term`` on a cluster of the model's shape (bonds along the
    translations, groups in the term's order), or None for a one-site term."""
    width = term_width(term)
    if width == 1:
        return None
    if term.bonds is not None:
        return along_translations(lattice.bonds(term.bonds), lattice)
    if term.type == "three-site" and term.pattern is None and term.sites is None:
        return paths(lattice)
    return [tuple(int(s) for s in g) for g in term_groups(term, lattice, width)]


def coloured_groups(model: Model, cluster: Lattice):
    """``(groups, colours, labels)``: the V-groups of a cluster of the model's shape, each
    with the colour of its set of terms, and the labels of each colour."""
    on_group: dict[tuple, list[str]] = {}
    for label in model.perturbation_labels:
        groups = term_groups_on(model.term(label), cluster)
        for group in groups or ():
            on_group.setdefault(tuple(group), []).append(label)
    colour_of, labels, group_list, colours = {}, {}, [], []
    for group, names in sorted(on_group.items()):
        key = tuple(sorted(names))
        if key not in colour_of:
            colour_of[key] = len(colour_of)
            labels[colour_of[key]] = key
        group_list.append(group)
        colours.append(colour_of[key])
    return group_list, colours, labels


def _symmetric(model: Model, term) -> bool:
    """Whether a two-site term is unchanged by exchanging its two sites."""
    if term.type == "hopping":
        return not directed_hopping(model, term)
    if term.type == "pauli":
        return len(set(term.operators or ())) == 1
    return term.type in _SYMMETRIC


def ordered_colours(model: Model, labels: dict) -> frozenset:
    """Colours of the two-site edges whose cluster graphs keep their direction."""
    return frozenset(c for c, names in labels.items()
                     if not all(_symmetric(model, model.term(name)) for name in names))


def cell_reach(patch: Lattice, groups) -> int:
    """Largest difference of cell coordinates along one direction within one group (the
    groups of one term: all of one size)."""
    if not groups:
        return 1
    size = np.array(patch.size)
    cells = np.asarray(groups, dtype=np.int64) // len(patch.unit_cell)
    reach = 1
    for k in range(len(size)):
        coordinate = (cells // int(np.prod(size[:k]))) % size[k]
        reach = max(reach, int((coordinate.max(axis=1) - coordinate.min(axis=1)).max()))
    return reach
