"""Export of a local-operator readout: the effective model on its kept local states.

:func:`local_export_text` writes the model file of an effective model read out in local
operators (:mod:`lowfold.readout.local_names`): the derived lattice; ``[site]`` with the
site type and ``states``, the kept local states of the manifold (``["0", "u", "d"]`` for the
doped Mott insulator; left out when every state is kept), so that the exported model lives
in the span of the manifold (docs/model-files.md, ``[site]``); ``[sector]`` with the
manifold's particle number when the manifold is the slice of its product at fixed particle
number (and the derived model's ``sz`` when it fixes one); then one term per group of equal
couplings (or per coupling class on an infinite lattice), each kind as

=======================  ================================================================
readout kind             model-file term (strength)
=======================  ================================================================
``hopping``              ``hopping`` (t)
``exchange`` electrons   ``exchange`` (J) and ``interaction`` (-J/4): ``J (S.S - n n/4)``
``three-site``           ``three-site`` (K)
``density``              ``interaction`` (V) on two sites, ``potential`` (mu) on one
``exchange`` spins       ``exchange`` (J)
``biquadratic``          ``biquadratic`` (B)
``single-ion``           ``single-ion`` (D)
``field``                ``field`` along z (h)
boson kinds              ``string`` of X-operators relative to the background b of the
                         readout (p = b + 1, h = b - 1): ``particle-hopping`` t ->
                         ``-t (|p><b| |b><p| + h.c.)``, ``particle-energy`` e ->
                         ``e |p><p|``, ``particle-hole-interaction`` W -> ``W |p><p| |h><h|``
``string``               ``string`` with the X-operators of its label
``constant``             ``constant`` (E0)
=======================  ================================================================

and ``[perturbation]`` with H0 the constant and a window holding every state, as for the
spin export (:mod:`lowfold.jobs.export`): ``derive`` of the file at first order reads the
same couplings back, and ``spectrum`` gives the effective spectrum.
"""

from __future__ import annotations

import re

import numpy as np

from lowfold.errors import ModelError
from lowfold.jobs.export_parts import (class_groups, labelled_selectors, lattice_table,
                                       toml_value, unique_name, values_close)
from lowfold.model.lattice import BOND_CLASSES
from lowfold.model.local_terms import paths
from lowfold.model.patterns import translated_pattern
from lowfold.readout.local_basis import product_manifold

__all__ = ["local_export_text"]

_BOSON_STEP = {"particle": 1, "hole": -1}


def local_export_text(result, *, use_classes: bool | None = None) -> str:
    """Model-file text of ``result`` (local-operator readout).

    ``use_classes``: one term per coupling class (``result.classes``) rather than per group
    of equal couplings; default: on an infinite lattice only (a finite cluster's couplings
    are written as they are, strings included).

    Raises
    ------
    ModelError
        No manifold states (a result read back from JSON), kept states that differ from
        site to site, or a manifold that is a slice at several particle numbers.
    """
    model = result.model
    if model is None:
        raise ModelError("the effective model cannot be exported: no model attached")
    infinite = model.lattice.infinite
    kept, background, sector_lines = _kept_states(result)
    site_lines = _site_table(model.site, kept)
    classes = tuple(getattr(result, "classes", ()) or ())
    if use_classes is None:
        use_classes = infinite
    if use_classes and classes:
        items = [(kind, value, {k: v for k, v in selector.items() if k != "operators"},
                  tuple(selector["operators"]) if "operators" in selector else None)
                 for kind, _, value, selector in class_groups(classes, model.lattice)]
    elif infinite:
        raise ModelError("the effective model cannot be exported: an infinite lattice needs "
                         "its coupling classes")
    else:
        items = _coupling_groups(result.couplings, model.lattice)
    constant = float(np.real(next((c.value for c in result.couplings if c.kind == "constant"), 0.0)))
    parameters = {"E0": constant}
    terms = [_term_text("constant", "E0", "E0", {})]
    taken = {"E0"}                             # parameter names and term labels
    for kind, value, selector, operator in items:
        for spec in _term_specs(kind, value, selector, operator, model.site, background or kept,
                                model.lattice):
            kind_out, base, strength, keys, note = spec
            name = unique_name(base, taken)
            taken.add(name)
            if isinstance(strength, str):        # a literal strength, written in the term
                strength = float(strength)
            else:
                parameters[name] = strength
                strength = name
            for label, placed in labelled_selectors(name, keys, taken):   # per pattern
                terms.append(_term_text(kind_out, label, strength, placed, note))
    lines = [f"title = {toml_value(f'effective model of {model.title} (order {result.order})')}",
             "# written by lowfold derive --export: the couplings summed to order "
             f"{result.order}, on the kept local states {result.manifold.readout}"]
    per_site = [c.value for c in classes if c.kind == "constant"]
    if use_classes and per_site:
        per_site = toml_value(float(np.real(per_site[0])))
        lines.append(f"# constant per site (not written as a term): {per_site}")
    lines += ["", lattice_table(model.lattice)] + site_lines + sector_lines + ["[parameters]"]
    lines += [f"{name} = {_strength(value)}" for name, value in parameters.items()]
    window = [constant - 1.0, constant + 1.0]
    mixed = ['filling = "mixed"'] if infinite and model.site.type != "spin" else []
    lines += [""] + terms + ["[perturbation]", 'unperturbed = ["E0"]', "order = 1",
                             f"window = {toml_value(window)}", *mixed, ""]
    return "\n".join(lines)


# --------------------------------------------------------------------------- tables

def _kept_states(result):
    """(kept local values, background occupation per site, [sector] lines) of the manifold:
    from its states on a cluster, or from the readout's description on an infinite lattice
    (no background there: a boson class takes it from its kind, :func:`_boson_specs`)."""
    model = result.model
    if model.lattice.infinite:
        sets = re.findall(r"\{([^}]*)\}", result.manifold.readout)
        labels = model.site.local_labels()
        if len(sets) != 1 or not all(x in labels for x in sets[0].split()):
            raise ModelError("the effective model cannot be exported: its readout names no "
                             f"single set of kept local states ({result.manifold.readout})")
        return tuple(labels.index(x) for x in sets[0].split()), {}, []
    states = getattr(result.manifold, "states", None)
    if states is None:
        raise ModelError("the effective model cannot be exported: its manifold states are not "
                         "attached (export from the derive run itself)")
    basis, reason = product_manifold(model, np.asarray(states, dtype=np.int64))
    if basis is None:
        raise ModelError(f"the effective model cannot be exported: {reason}")
    kept = [tuple(v.tolist()) for v in basis.values]
    if len(set(kept)) != 1:
        raise ModelError("the effective model cannot be exported: the kept local states differ "
                         "from site to site, and [site] states is one set for every site")
    background = {int(i): int(basis.values[i][basis.reference[i]]) for i in range(basis.n_sites)}
    return kept[0], background, _sector_table(model, basis)


def _site_table(site, kept) -> list[str]:
    lines = ["[site]", f"type = {toml_value(site.type)}"]
    if site.type == "spin":
        spin = site.spin
        lines.append(f"spin = {toml_value(float(spin)) if spin.denominator != 1 else int(spin)}")
    if site.type == "boson":           # the derived model's cut-off: the same state integers
        lines.append(f"max_occupation = {site.max_occupation}")
    full = tuple(range(site.local_dimension))
    labels = site.local_labels()
    if tuple(kept) != full:
        lines.append(f"states = {toml_value([labels[v] for v in kept])}")
    return lines + [""]


def _sector_table(model, basis) -> list[str]:
    sector = model.sector
    particles = sector.particles
    if particles is None and not basis.is_hull:
        if len(basis.totals) != 1:
            raise ModelError("the effective model cannot be exported: its manifold is the part "
                             "of a product of local states at several particle numbers, which "
                             "no [sector] describes")
        particles = next(iter(basis.totals))
    lines = []
    if particles is not None and model.site.type != "spin":
        lines.append(f"particles = {int(particles)}")
    if sector.sz is not None:
        sz = sector.sz
        lines.append(f"sz = {int(sz) if sz.denominator == 1 else float(sz)}")
    return (["[sector]"] + lines + [""]) if lines else []


# --------------------------------------------------------------------------- grouping

def _coupling_groups(couplings, lattice):
    """(kind, value, selector, operator names) per group of equal couplings."""
    groups = []
    for c in couplings:
        if c.kind == "constant":
            continue
        kind, value = c.kind, np.asarray(c.value, dtype=float if not _is_complex(c.value) else complex)
        if c.kind == "field":
            kind, value = "fieldz", np.asarray(c.value[2], dtype=float)
        if c.kind == "string" and isinstance(c.value, list):
            value = np.asarray(complex(*c.value))
        operator = _string_operators(c.operator) if c.kind == "string" else None
        for group in groups:
            if group[0] == kind and group[3] == operator and values_close(group[1], value):
                group[2].append(tuple(c.sites))
                break
        else:
            groups.append([kind, value, [tuple(c.sites)], operator])
    return [(kind, value, _selector(kind, members, lattice), operator)
            for kind, value, members, operator in groups]


def _is_complex(value) -> bool:
    return isinstance(value, complex)


def _string_operators(label: str) -> tuple[str, ...]:
    """``("|u><0|", "|0><u|")`` of the string label ``"|u><0|_0 |0><u|_1"``."""
    return tuple(part.rsplit("_", 1)[0] for part in label.split())


def _selector(kind, members, lattice) -> dict:
    width = len(members[0])
    sets = {frozenset(m) for m in members}
    if width == 1:
        listed = sorted(m[0] for m in members)
        return {"sites": "all" if listed == list(range(lattice.n_sites)) else listed}
    if width == 2 and kind not in ("string",):
        for name in BOND_CLASSES:
            bonds = {frozenset(map(int, b)) for b in lattice.bonds(name)}
            if bonds and bonds == sets:
                return {"bonds": name}
        return {"bonds": [list(m) for m in members]}
    if kind == "three-site" and sorted(members) == sorted(paths(lattice)):
        return {}
    return {"sites": [list(m) for m in members]}


# --------------------------------------------------------------------------- terms

def _term_specs(kind, value, selector, operator, site, background, lattice):
    """[(term type, parameter base name, strength or literal string, keys, note)]."""
    value = np.asarray(value)
    real = float(np.real(value)) if value.ndim == 0 else None
    electron = site.type in ("electron", "fermion")
    if kind == "hopping":
        return [("hopping", "t", real, selector, None)]
    if kind == "exchange" and electron:
        return [("exchange", "J", real, selector, None),
                ("interaction", "J_density", -real / 4, selector, "the density part -J/4 of J")]
    if kind == "exchange":
        return [("exchange", "J", real, selector, None)]
    if kind == "three-site":
        return [("three-site", "K", real, selector, None)]
    if kind == "density":
        two = "bonds" in selector
        return [("interaction" if two else "potential", "V" if two else "mu", real, selector,
                 None)]
    if kind in ("biquadratic", "single-ion"):
        return [(kind, "B" if kind == "biquadratic" else "D", real, selector, None)]
    if kind == "fieldz":
        return [("field", "hz", real, {"axis": "z", **selector}, None)]
    if kind == "string":
        strength = value.item()
        if isinstance(strength, complex) and strength.imag == 0:
            strength = strength.real
        return [("string", "X", strength, {"operators": list(operator), **selector}, None)]
    if kind.split("-")[0] in _BOSON_STEP:
        return _boson_specs(kind, real, selector, site, background, lattice)
    raise ModelError(f"the effective model cannot be exported: the readout kind {kind!r} has "
                     "no model-file term")


def _boson_specs(kind, value, selector, site, background, lattice):
    """Boson kinds as ``string`` terms of X-operators relative to each site's background:
    ``background`` maps each site of a cluster to its occupation; on an infinite lattice it
    is the kept occupations, and the background is the lowest one that the kind's particle
    and hole states lie beside (the one-site readout's reference, the lowest occupation)."""
    labels = site.local_labels()
    if lattice.infinite:
        kept = tuple(background)
        steps = [_BOSON_STEP[w] for w in kind.split("-")[:-1]]
        b = min(v for v in kept if all(v + d in kept for d in steps))
        sites = selector
    else:
        groups = _groups_of(selector, background, lattice)
        refs = {background[s] for g in groups for s in g}
        if len(refs) != 1:
            raise ModelError("the effective model cannot be exported: the background "
                             "occupation differs between the sites of one boson coupling")
        b = refs.pop()
        sites = {"sites": [list(g) for g in groups]}
    x = lambda a, c: f"|{labels[a]}><{labels[c]}|"       # noqa: E731
    if kind.endswith("-hopping"):
        p = b + _BOSON_STEP[kind.split("-")[0]]
        keys = {"operators": [x(p, b), x(b, p)], "conjugate": True, **sites}
        return [("string", "tp" if kind.startswith("particle") else "th", str(-value), keys,
                 f"{kind} {value!r}: strength -t")]
    if kind.endswith("-energy"):
        p = b + _BOSON_STEP[kind.split("-")[0]]
        return [("string", "ep" if kind.startswith("particle") else "eh", value,
                 {"operators": [x(p, p)], **sites}, kind)]
    first, second = {"particle-interaction": (1, 1), "hole-interaction": (-1, -1),
                     "particle-hole-interaction": (1, -1)}[kind]
    specs = [("string", "W", value, {"operators": [x(b + first, b + first),
                                                   x(b + second, b + second)], **sites}, kind)]
    if first != second:          # the readout sums both placements, |p h> and |h p>
        specs.append(("string", "W", value, {"operators": [x(b + second, b + second),
                                                           x(b + first, b + first)],
                                             **sites}, kind))
    return specs


def _groups_of(selector, background, lattice):
    """Explicit site groups of a selector (bond classes resolved on the lattice)."""
    if "sites" in selector:
        sites = selector["sites"]
        if sites == "all":
            return [(s,) for s in sorted(background)]
        return [tuple(g) if isinstance(g, (list, tuple)) else (g,) for g in sites]
    if "bonds" in selector:
        bonds = selector["bonds"]
        return [tuple(int(x) for x in b)
                for b in (lattice.bonds(bonds) if isinstance(bonds, str) else bonds)]
    return translated_pattern(selector["pattern"], lattice)


def _term_text(kind, name, strength, keys, note=None) -> str:
    lines = ["[[term]]"] + ([f"# {note}"] if note else [])
    lines += [f"type = {toml_value(kind)}", f"label = {toml_value(name)}",
              f"strength = {_strength(strength)}"]
    lines += [f"{key} = {toml_value(value)}" for key, value in keys.items()]
    return "\n".join(lines) + "\n"


def _strength(value) -> str:
    if isinstance(value, complex):
        return f"{{re = {value.real!r}, im = {value.imag!r}}}"
    return toml_value(value)
