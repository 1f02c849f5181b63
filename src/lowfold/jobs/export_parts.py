"""Pieces shared by the two exports (:mod:`lowfold.jobs.export` for spin readouts,
:mod:`lowfold.jobs.export_local` for local-operator readouts): TOML values and the
``[lattice]`` table, unique parameter names, equal-value tests, and the selectors of
coupling classes.

A class is written by name when it holds every member of its kind of selector (a bond
class, the triangles or 4-cycles, every site), else as one translated ``pattern`` per
translation orbit of its members (``CouplingClass.members``): :func:`class_groups` gives
``{"patterns": [...]}`` and :func:`labelled_selectors` the label and selector of each term.
"""

from __future__ import annotations

import functools
import json

import numpy as np

from lowfold.model.cycles import lattice_cycles
from lowfold.model.lattice import BOND_CLASSES, make_lattice
from lowfold.model.patterns import pattern_of_positions

__all__ = ["REL", "toml_value", "lattice_table", "unique_name", "values_close",
           "class_groups", "labelled_selectors"]

REL = 1e-9            # couplings equal to this relative tolerance share one term


def values_close(a, b) -> bool:
    """Whether two values (numbers or arrays) agree to ``REL`` of the larger."""
    scale = max(np.abs(a).max(), np.abs(b).max(), 1e-300)
    return bool(np.abs(a - b).max() <= REL * scale)


def class_groups(classes, lattice):
    """One group per coupling class: a bond class, the cycles or every site by name when the
    class holds all of them, else a pattern per translation orbit of its members (several
    patterns: ``{"patterns": [...]}``, one term each, :func:`labelled_selectors`)."""
    out = []
    per_site = _named_per_site(lattice)
    for c in classes:
        if c.kind == "constant":
            continue
        kind, name = c.kind, c.name
        value = np.asarray(c.value)
        if kind == "string" and value.size == 2:          # a complex string: [re, im]
            value = np.asarray(complex(*value))
        members = tuple(getattr(c, "members", ()) or (c.positions,))
        factors = [f.rsplit("_", 1) for f in c.operator.split()] if kind == "string" else []
        if factors:                     # X-operators in the label's order, on those sites
            members = tuple([m[int(k)] for _, k in factors] for m in members)
        whole = abs(c.multiplicity - per_site.get(name, -1.0)) < 1e-9
        if whole and name in BOND_CLASSES:
            selector = {"bonds": name}
        elif whole and name in ("triangle", "4-cycle"):
            selector = {"cycles": 3 if name == "triangle" else 4}
        elif whole and name == "site":
            selector = {"sites": "all"}
        else:
            patterns = [pattern_of_positions(m, lattice) for m in members]
            selector = ({"pattern": patterns[0]} if len(patterns) == 1
                        else {"patterns": patterns})
        if kind == "pauli" and getattr(c, "operator", None):
            selector = {"operators": c.operator.split(), **selector}
        if kind == "string":
            selector = {"operators": [op for op, _ in factors], **selector}
        if kind == "field":
            out += [("field" + a, None, h, selector) for a, h in zip("xyz", value) if h]
            continue
        out.append((kind, name if name in BOND_CLASSES else None, value, selector))
    return out


def _named_per_site(lattice) -> dict:
    """Members per site of every bond class, of the triangles and 4-cycles and of the sites
    (read on a periodic cluster of 8 cells per direction of an infinite lattice: no
    member of a class of up to third neighbours wraps around it)."""
    if lattice.shape == "graph":
        return {}
    if getattr(lattice, "infinite", False):
        return _per_site_of_shape(lattice.shape, len(lattice.translations))
    return _per_site_of(lattice)


@functools.lru_cache(maxsize=None)
def _per_site_of_shape(shape: str, ndim: int) -> dict:
    return _per_site_of(make_lattice(shape, [8] * ndim, "periodic"))


def _per_site_of(cluster) -> dict:
    n = cluster.n_sites
    rings, triangles = lattice_cycles(cluster)
    counts = {name: len(cluster.bonds(name)) / n for name in BOND_CLASSES}
    return {**counts, "triangle": len(triangles) / n, "4-cycle": len(rings) / n, "site": 1.0}


def labelled_selectors(name: str, selector: dict, taken: set) -> list[tuple[str, dict]]:
    """``(label, selector)`` of each term a class is written as: one per pattern of
    ``patterns`` (else the selector itself), the first labelled ``name`` and the others
    with unique names, each label added to ``taken``."""
    if "patterns" in selector:
        rest = {k: v for k, v in selector.items() if k != "patterns"}
        selectors = [{**rest, "pattern": p} for p in selector["patterns"]]
    else:
        selectors = [selector]
    out = []
    for k, keys in enumerate(selectors):
        label = name if k == 0 else unique_name(name, taken)
        taken.add(label)
        out.append((label, keys))
    return out


def unique_name(name, taken):
    """``name``, or ``name_2``, ``name_3``, ... when it is taken."""
    if name not in taken:
        return name
    k = 2
    while f"{name}_{k}" in taken:
        k += 1
    return f"{name}_{k}"


def lattice_table(lattice) -> str:
    """The ``[lattice]`` table of ``lattice``."""
    lines = ["[lattice]", f"shape = {toml_value(lattice.shape)}"]
    if lattice.shape == "graph":
        lines += [f"sites = {lattice.n_sites}",
                  f"bonds = {toml_value(lattice.bonds('nearest').tolist())}"]
    else:
        if getattr(lattice, "size", None) is not None and "infinite" not in lattice.boundary:
            lines.append(f"size = {toml_value(list(lattice.size))}")
        bounds = list(lattice.boundary)
        lines.append(f"boundary = {toml_value(bounds[0] if len(set(bounds)) == 1 else bounds)}")
    return "\n".join(lines) + "\n"


def toml_value(value) -> str:
    """A TOML value: strings as JSON-escaped basic strings, floats by repr, nested lists."""
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    return repr(float(value))
