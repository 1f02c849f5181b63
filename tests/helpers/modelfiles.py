"""Model-file text writers for the tests: Hubbard clusters, spin lattices, ``[[term]]`` tables.

Each writer returns the text of a TOML model file as a user would write it (the format of
``docs/model-files.md``); :func:`model_of` parses such a text without a file and
:func:`write_models` writes several files at once.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

try:
    import tomllib
except ModuleNotFoundError:          # Python 3.10
    import tomli as tomllib

import lowfold


def toml_value(value) -> str:
    """``value`` (str, number, bool, or a nested list of them) as a TOML value."""
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, (bool, np.bool_)):
        return "true" if value else "false"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return repr(float(value)) if isinstance(value, (float, np.floating)) else repr(value)


def term_text(kind: str, strength, **keys) -> str:
    """One ``[[term]]`` table: ``type = kind``, ``strength``, then ``keys`` in order."""
    lines = [f"type = {toml_value(kind)}", f"strength = {toml_value(strength)}"]
    lines += [f"{key} = {toml_value(value)}" for key, value in keys.items()]
    return "\n[[term]]\n" + "\n".join(lines) + "\n"


def exchange(J, bonds="nearest") -> str:
    """A Heisenberg exchange term ``J S_i.S_j`` on ``bonds`` (a bond class or a list)."""
    return term_text("exchange", J, bonds=bonds)


def table_text(name: str, entries: dict) -> str:
    """One TOML table ``[name]`` with ``entries`` (``""`` when there are none)."""
    if not entries:
        return ""
    return f"[{name}]\n" + "".join(f"{k} = {toml_value(v)}\n" for k, v in entries.items())


def lattice_text(shape, size, boundary, site: dict, terms: str, *, sector: dict | None = None,
                 parameters: dict | None = None) -> str:
    """A model file: a lattice ``shape`` of ``size`` with ``boundary``, the ``[site]`` table
    ``site``, optional ``[sector]`` and ``[parameters]`` tables, then the ``[[term]]`` tables
    ``terms`` as text."""
    return "\n".join([
        "", table_text("lattice", {"shape": shape, "size": list(size), "boundary": boundary}),
        table_text("site", site), table_text("sector", sector or {}),
        table_text("parameters", parameters or {}), terms])


def spin_text(shape, size, boundary, terms: str, *, spin=0.5, sz=None) -> str:
    """Spins ``spin`` on a lattice, with the ``[[term]]`` tables ``terms`` and, when ``sz`` is
    given, the sector of fixed total S^z."""
    return lattice_text(shape, size, boundary, {"type": "spin", "spin": spin}, terms,
                        sector=None if sz is None else {"sz": sz})


def hubbard_text(shape: str, size, *, boundary: str = "open", t: float = 0.1, U: float = 1.0,
                 particles: int | None = None, sz=None, order: int | None = None,
                 unperturbed=("hubbard",), hubbard_sites: str | None = None, terms: str = "",
                 title: str = "Hubbard cluster", extra: str = "") -> str:
    """Hubbard model ``-t sum c+_i c_j + U sum n_up n_dn`` on nearest-neighbour bonds.

    ``particles`` defaults to one electron per site (half filling); ``sz`` fixes the total
    S^z.  ``terms``: further ``[[term]]`` tables.  With ``order``, a ``[perturbation]`` table
    makes H0 of the terms labelled ``unperturbed`` (the Hubbard U alone by default) and V
    of the rest, to that order.  ``hubbard_sites`` writes the Hubbard term's ``sites`` key
    (absent: every site, the default); ``extra`` is appended as it is.
    """
    if particles is None:
        particles = int(np.prod(size))
    sector = f"particles = {particles}" + ("" if sz is None else f"\nsz = {sz}")
    sites = "" if hubbard_sites is None else f"\nsites = {toml_value(hubbard_sites)}"
    perturbation = "" if order is None else (
        f"[perturbation]\nunperturbed = {toml_value(list(unperturbed))}\norder = {order}\n")
    return f"""
title = "{title}"
[lattice]
shape = "{shape}"
size = {list(size)}
boundary = "{boundary}"
[site]
type = "electron"
[sector]
{sector}
[parameters]
t = {t!r}
U = {U!r}
[[term]]
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
type = "hubbard"
strength = "U"{sites}
{terms}
{perturbation}{extra}
"""


def model_of(text: str, source: str = "<test>") -> lowfold.Model:
    """The model of a model-file text, parsed without writing a file."""
    return lowfold.parse_model(tomllib.loads(text), source=source)


def write_models(directory, texts: dict) -> dict:
    """Write ``{name: text}`` as ``directory/name.toml``; ``{name: path}``."""
    paths = {}
    for name, text in texts.items():
        paths[name] = Path(directory) / f"{name}.toml"
        paths[name].write_text(text)
    return paths
