"""Export: the effective spin model of a derive as a model file every command reads.

(A local-operator readout -- t-J, spin-1, bosons -- is written by
:mod:`lowfold.jobs.export_local`, on the kept local states.)

:func:`export_text` writes TOML (docs/model-files.md) for an
:class:`~lowfold.results.EffectiveModel` with a spin form:

- ``title``, the derived model's ``[lattice]`` table, ``[site] type = "spin"``, ``spin = 0.5``;
- ``[parameters]``: one value per group of couplings (``J1``, ``J2``, ``J3`` for exchange on
  the bond classes, ``K`` ring, ``chi`` chirality, ``D`` dm, ``G`` anisotropy, ``hx`` ...
  fields, ``P`` leftover Pauli strings, ``E0`` the constant; numbered when a kind has
  several groups).  With coupling classes (``EffectiveModel.classes``) there is one term
  per class (bond-class, cycle or pattern selector); otherwise couplings of one kind with
  equal values (to 1e-9 relative) form one term, whose selector is the bond class or the
  cycles when the group is exactly that set, else the explicit sites.  A dm or anisotropy
  term's parameter is the norm of its vector / tensor, the term carrying the unit direction.
- a ``constant`` term (``E0``, 0 when there is none) and ``[perturbation] unperturbed =
  ["E0"]``, ``order = 1``, ``window = [E0 - 1, E0 + 1]``: H0 is the constant, so the window
  holds every state and ``derive`` of the exported file at first order returns the
  couplings written (``spectrum`` ignores the table).

Values are sums over all orders of the derive; contributions the readout left out
(at most its ``COUPLING_TOL`` = 1e-10 per coupling) are not written.  Numbers are written
with ``repr`` (shortest round trip), so reading the file back gives the same floats.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lowfold.errors import ModelError
from lowfold.jobs.export_local import local_export_text
from lowfold.jobs.export_parts import (class_groups, labelled_selectors, lattice_table,
                                       toml_value, unique_name, values_close)
from lowfold.model.cycles import lattice_cycles
from lowfold.model.lattice import BOND_CLASSES
from lowfold.readout.local_form import LOCAL_READOUT
from lowfold.readout.pauli import parse_pauli_string

__all__ = ["export_text", "write_export"]

_BASE = {"exchange": "J", "ring": "K", "chirality": "chi", "dm": "D", "anisotropy": "G",
         "pauli": "P"}


def write_export(result, path) -> Path:
    """Write :func:`export_text` of ``result`` to ``path``; the path written."""
    path = Path(path)
    text = export_text(result)
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise ModelError(f"{path}: cannot be written ({exc.strerror or type(exc).__name__})") from None
    return path


def export_text(result, *, use_classes: bool | None = None) -> str:
    """The effective model of ``result`` (an EffectiveModel) as model-file text.

    ``use_classes`` (local-operator readouts only): one term per coupling class; default:
    on an infinite lattice only (:mod:`lowfold.jobs.export_local`).

    Raises
    ------
    ModelError
        The result has no spin form (no named couplings to write), or no model.
    """
    model = result.model
    if result.manifold.readout.startswith(LOCAL_READOUT):
        return local_export_text(result, use_classes=use_classes)
    if not result.spin_form or model is None:
        why = result.readout_note or "no model attached"
        raise ModelError(f"the effective model has no spin-1/2 form ({why}); only spin "
                         "models with named couplings and local-operator readouts can be "
                         "exported")
    classes = tuple(getattr(result, "classes", ()) or ())
    groups = class_groups(classes, model.lattice) if classes else _groups(result, model.lattice)
    constant = next((c.value for c in result.couplings if c.kind == "constant"), 0.0)
    per_site = [c.value for c in classes if c.kind == "constant"]
    parameters, terms = {"E0": float(constant)}, [_term("constant", "E0", {})]
    taken = {"E0"}                             # parameter names and term labels
    for kind, name_hint, value, selector in groups:
        name = unique_name(_name(kind, name_hint), taken)
        taken.add(name)
        strength, extra = _strength(kind, value)
        parameters[name] = strength
        for label, keys in labelled_selectors(name, selector, taken):
            terms.append(_term(kind, name, {**extra, **keys}, label=label))
    lines = [f"title = {toml_value(f'effective model of {model.title} (order {result.order})')}",
             "# written by lowfold derive --export: the couplings summed to order "
             f"{result.order}"]
    if result.manifold.readout.startswith("pseudo-spin-1/2"):
        lines.append(f"# each spin-1/2 is a pseudo-spin of the derived model: {result.manifold.readout}")
    if per_site and not constant:
        lines.append(f"# constant per site (not written as a term): {toml_value(per_site[0])}")
    lines += ["", lattice_table(model.lattice),
             "[site]", 'type = "spin"', "spin = 0.5", "", "[parameters]"]
    lines += [f"{name} = {toml_value(value)}" for name, value in parameters.items()]
    window = [float(constant) - 1.0, float(constant) + 1.0]
    lines += [""] + terms + ["[perturbation]", 'unperturbed = ["E0"]', "order = 1",
                             f"window = {toml_value(window)}", ""]
    return "\n".join(lines)


# --------------------------------------------------------------------------- grouping

def _groups(result, lattice):
    """(kind, class hint, value, selector) per group of equal couplings, in readout order."""
    rings, triangles = lattice_cycles(lattice)
    cycle_sets = {4: {frozenset(c) for c in rings}, 3: {frozenset(c) for c in triangles}}
    bonds = {name: {frozenset(map(int, b)) for b in lattice.bonds(name)} for name in BOND_CLASSES}
    items = [(c.kind, tuple(c.sites), c.value) for c in result.couplings
             if c.kind not in ("constant", "field")]
    for c in result.couplings:
        if c.kind == "field":
            items += [("field" + axis, tuple(c.sites), h) for axis, h in zip("xyz", c.value) if h]
    for label, values in sorted(getattr(result, "residual", {}).items()):
        ops = parse_pauli_string(label)
        items.append(("pauli", tuple(s for s, _ in ops), float(np.sum(values)),
                      tuple(p for _, p in ops)))
    out = []
    for kind, value, members, operators in _collect(items):
        sets = {frozenset(m) for m in members}
        hint, selector = None, {"sites": [list(m) for m in members]}
        if len(members[0]) == 1:
            selector = {"sites": [m[0] for m in members]}
        elif len(members[0]) == 2 and kind in ("exchange", "anisotropy"):
            hint = next((n for n in BOND_CLASSES if bonds[n] == sets and sets), None)
            selector = {"bonds": hint} if hint else {"bonds": [list(m) for m in members]}
        elif len(members[0]) == 2:
            selector = {"bonds": [list(m) for m in members]}
        elif kind == "ring" and sets == cycle_sets[4] and _same_cycles(members, rings):
            selector = {"cycles": 4}
        elif kind == "chirality" and tuple(map(tuple, members)) == tuple(triangles):
            selector = {"cycles": 3}
        if operators:
            selector = {"operators": list(operators), **selector}
        out.append((kind, hint, value, selector))
    return out


def _same_cycles(members, rings):
    return sorted(tuple(m) for m in members) == sorted(tuple(r) for r in rings)


def _collect(items):
    """Group (kind, sites, value[, operators]) by kind, operators and equal value."""
    groups = []
    for item in items:
        kind, sites, value = item[:3]
        operators = item[3] if len(item) > 3 else ()
        arr = np.asarray(value, dtype=float)
        for group in groups:
            if group[0] == kind and group[3] == operators and values_close(group[1], arr):
                group[2].append(sites)
                break
        else:
            groups.append([kind, arr, [sites], operators])
    return [(k, v, members, ops) for k, v, members, ops in groups]


# --------------------------------------------------------------------------- writing

def _name(kind, hint):
    if kind == "exchange" and hint in BOND_CLASSES:
        return f"J{BOND_CLASSES.index(hint) + 1}"
    if kind.startswith("field"):
        return "h" + kind[-1]
    return _BASE.get(kind, kind)


def _strength(kind, value):
    """The parameter value and the extra keys (direction of a vector or tensor)."""
    arr = np.asarray(value, dtype=float)
    if kind == "dm":
        norm = float(np.linalg.norm(arr))
        return norm, {"vector": (arr / norm).tolist()}
    if kind == "anisotropy":
        norm = float(np.abs(arr).max())
        return norm, {"tensor": (arr / norm).tolist()}
    return float(arr), {}


def _term(kind, name, keys, label=None):
    kind = "field" if kind.startswith("field") else kind
    lines = ["[[term]]", f"type = {toml_value(kind)}", f"label = {toml_value(label or name)}",
             f"strength = {toml_value(name)}"]
    if kind == "field":
        lines.append(f"axis = {toml_value(name[1])}")
    lines += [f"{key} = {toml_value(value)}" for key, value in keys.items()]
    return "\n".join(lines) + "\n"
