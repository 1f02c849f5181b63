"""Reading and validating model files (TOML, the format of docs/model-files.md).

Every problem is a :class:`~lowfold.errors.ModelError` whose one-line message names the file
and the key, e.g. ``dots.toml: term[2].strength: parameter 'V' is not defined``.
"""

from __future__ import annotations

import math
from fractions import Fraction
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

from lowfold.model.complex_form import ComplexForm, parse_number, parse_parameter
from lowfold.model.sector import Sector, sector_totals
from lowfold.errors import ModelError, SizeError
from lowfold.model.lattice import make_lattice
from lowfold.model.model import Model, PerturbationSpec
from lowfold.model.sites import check_state_space, make_site
from lowfold.model.local_terms import LOCAL_TERM_TYPES
from lowfold.model.spin_terms import SPIN_TERM_TYPES
from lowfold.model.terms import TERM_TYPES, TWO_SITE_TYPES, Term, check_label, check_strength

__all__ = ["load_model", "parse_model", "read_toml"]

_TOP_KEYS = {"title", "lattice", "site", "sector", "parameters", "term", "perturbation"}
_LATTICE_KEYS = {"shape", "size", "boundary", "sites", "bonds"}
_SITE_KEYS = {"type", "spin", "max_occupation", "min_occupation", "states"}
_SECTOR_KEYS = {"particles", "sz"}
_TERM_KEYS = {"type", "strength", "bonds", "sites", "label", "axis", "operators", "conjugate",
              "cycles", "pattern", "vector", "tensor", "phases", "flux", "soc"}
_PERTURBATION_KEYS = {"unperturbed", "order", "manifold", "window", "tolerance", "filling"}


def read_toml(path) -> dict:
    """Parse a TOML file (UTF-8, as TOML requires).

    Raises
    ------
    ModelError
        The file is missing, a directory, unreadable, not UTF-8 (the message gives the byte
        offset of the first bad byte) or not valid TOML; the message starts with the path.
    """
    path = Path(path)
    shown = _shown(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise ModelError(f"{shown}: no such file") from None
    except IsADirectoryError:
        raise ModelError(f"{shown}: is a directory, not a model file") from None
    except PermissionError:
        raise ModelError(f"{shown}: permission denied (the file is not readable)") from None
    except OSError as exc:
        raise ModelError(f"{shown}: cannot be read ({exc.strerror or type(exc).__name__})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ModelError(f"{shown}: not UTF-8 text (byte 0x{raw[exc.start]:02x} at byte offset "
                         f"{exc.start}); save the file as UTF-8") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(f"{shown}: not valid TOML ({exc})") from None


def _shown(path) -> str:
    """A path as one printable line: as given, or its escaped ``repr`` if it holds control
    characters (a file name may contain a newline)."""
    text = str(path)
    return text if text.isprintable() else repr(text)


def load_model(path) -> Model:
    """Read a model file."""
    return parse_model(read_toml(path), source=str(path))


def parse_model(data: dict, *, source: str = "<model>") -> Model:
    """Build a :class:`Model` from a parsed TOML document."""
    try:
        return _parse(data, source)
    except (ModelError, SizeError) as exc:
        message, shown = str(exc), _shown(source)
        raise type(exc)(message if message.startswith(shown) else f"{shown}: {message}") from None


def _unknown(table: dict, allowed: set, where: str) -> None:
    extra = sorted(set(table) - allowed)
    if extra:
        raise ModelError(f"{where}: unknown key {extra[0]!r} (allowed: {', '.join(sorted(allowed))})")


def _table(data: dict, key: str, *, required: bool) -> dict:
    if key not in data:
        if required:
            raise ModelError(f"missing [{key}] table")
        return {}
    if not isinstance(data[key], dict):
        raise ModelError(f"{key}: must be a table")
    return data[key]


def _number(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ModelError(f"{where}: must be a finite number, got {value!r}")
    return float(value)


def _integer(value, where: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ModelError(f"{where}: must be an integer, got {value!r}")
    return value


def _parse(data: dict, source: str) -> Model:
    _unknown(data, _TOP_KEYS, "top level")
    title = data.get("title", Path(source).stem)
    if not isinstance(title, str):
        raise ModelError("title: must be a string")
    lattice = _parse_lattice(_table(data, "lattice", required=True))
    site = _parse_site(_table(data, "site", required=True))
    try:
        check_state_space(site, lattice.n_sites)
    except SizeError as exc:
        raise SizeError(f"lattice: {exc}") from None
    parameters = _parse_parameters(_table(data, "parameters", required=False))
    sector = _parse_sector(_table(data, "sector", required=False), site, lattice.n_sites)
    terms = _parse_terms(data.get("term", []), parameters)
    perturbation = None
    if "perturbation" in data:
        perturbation = _parse_perturbation(_table(data, "perturbation", required=True), terms)
    try:
        return Model(lattice, site, terms, sector, parameters, perturbation, title, source)
    except ModelError as exc:
        raise ModelError(_locate(str(exc), terms)) from None


def _locate(message: str, terms) -> str:
    """Prefix a term-level message with the term's key, e.g. ``term[1]``."""
    for index, term in enumerate(terms):
        if message.startswith(f"term {term.label!r}"):
            return f"term[{index}] ({term.label}){message[len('term ' + repr(term.label)):]}"
    return message


def _parse_lattice(table: dict):
    _unknown(table, _LATTICE_KEYS, "lattice")
    shape = table.get("shape")
    if not isinstance(shape, str):
        raise ModelError("lattice.shape: missing or not a string")
    if shape == "graph":
        if table.get("boundary") == "infinite":
            raise ModelError("lattice.boundary: a graph cannot be infinite; use a lattice shape "
                             "(chain, ladder, square, ...) or open graph bonds")
        for key in ("size", "boundary"):
            if key in table:
                raise ModelError(f"lattice.{key}: not used with shape = \"graph\" (give sites and bonds)")
        sites = _integer(table.get("sites"), "lattice.sites")
        bonds = table.get("bonds", [])
        try:
            return make_lattice("graph", None, sites=sites, bonds=bonds)
        except (ModelError, SizeError) as exc:
            raise type(exc)(f"lattice: {exc}") from None
    for key in ("sites", "bonds"):
        if key in table:
            raise ModelError(f"lattice.{key}: only used with shape = \"graph\"")
    if table.get("boundary") == "infinite":
        if "size" in table:
            raise ModelError("lattice.size: not used with boundary = \"infinite\" (leave it out, "
                             "or give boundary \"open\" or \"periodic\")")
        return make_lattice(shape, None, "infinite")
    size = table.get("size")
    if isinstance(size, int) and not isinstance(size, bool):
        size = [size]
    if not isinstance(size, list) or not all(isinstance(n, int) and not isinstance(n, bool) for n in size):
        raise ModelError("lattice.size: must be a list of integers, e.g. [4] or [2, 3]")
    try:
        return make_lattice(shape, size, table.get("boundary", "open"))
    except (ModelError, SizeError) as exc:
        raise type(exc)(f"lattice: {exc}") from None


def _parse_site(table: dict):
    _unknown(table, _SITE_KEYS, "site")
    kind = table.get("type")
    if not isinstance(kind, str):
        raise ModelError("site.type: missing or not a string")
    spin = table.get("spin")
    if spin is not None:
        spin = _number(spin, "site.spin")
    try:
        return make_site(kind, spin=spin, max_occupation=table.get("max_occupation"),
                         states=table.get("states"), min_occupation=table.get("min_occupation"))
    except (ModelError, SizeError) as exc:
        raise type(exc)(f"site: {exc}") from None


def _parse_parameters(table: dict) -> dict:
    for name in table:
        check_label(name, "parameters: name")
    out = {}
    for name, value in table.items():
        value = parse_parameter(value, f"parameters.{name}")
        out[name] = value if isinstance(value, ComplexForm) else check_strength(
            value, f"parameters.{name}")
    return out


def _parse_sector(table: dict, site, n_sites: int) -> Sector:
    _unknown(table, _SECTOR_KEYS, "sector")
    particles = table.get("particles")
    if particles is not None:
        particles = _integer(particles, "sector.particles")
    sz = table.get("sz")
    if sz is not None:
        sz_value = _number(sz, "sector.sz")
        if (2 * sz_value) % 1 != 0:
            raise ModelError(f"sector.sz: must be a multiple of 1/2, got {sz!r}")
        sz = Fraction(sz_value).limit_denominator(2)
    sector = Sector(particles, sz)
    try:
        sector_totals(site, n_sites, sector)
    except ModelError as exc:
        raise ModelError(f"sector: {exc}") from None
    return sector


def _parse_terms(entries, parameters: dict) -> tuple[Term, ...]:
    if not isinstance(entries, list):
        raise ModelError("term: use [[term]] tables")
    terms = []
    for index, table in enumerate(entries):
        where = f"term[{index}]"
        if not isinstance(table, dict):
            raise ModelError(f"{where}: must be a table; write each term as [[term]]")
        _unknown(table, _TERM_KEYS, where)
        kind = table.get("type")
        if kind not in TERM_TYPES:
            raise ModelError(f"{where}.type: unknown term type {kind!r} (known: {', '.join(TERM_TYPES)})")
        label = table.get("label", kind)
        check_label(label, f"{where}.label")
        if label in [t.label for t in terms]:
            raise ModelError(f"{where}.label: {label!r} is used twice; give each term a unique label")
        strength = table.get("strength")
        if strength is None:
            raise ModelError(f"{where}.strength: missing (a number or a parameter name)")
        if isinstance(strength, str):
            if strength not in parameters:
                raise ModelError(f"{where}.strength: parameter {strength!r} is not defined in [parameters]")
        else:
            strength = check_strength(parse_number(strength, f"{where}.strength"), f"{where}.strength")
        bonds, sites = table.get("bonds"), table.get("sites")
        if kind in TWO_SITE_TYPES and sites is not None:
            raise ModelError(f"{where}.sites: a {kind} term acts on bonds; use 'bonds'")
        if kind not in TWO_SITE_TYPES + ("product", "dm", "anisotropy", "pauli", "biquadratic",
                                          "string") and bonds is not None:
            raise ModelError(f"{where}.bonds: a {kind} term acts on sites; use 'sites'")
        operators = table.get("operators")
        if operators is not None:
            if kind not in ("product", "pauli", "string"):
                raise ModelError(f"{where}.operators: only used by product, pauli and string terms")
            if not isinstance(operators, list) or not all(isinstance(o, str) for o in operators):
                raise ModelError(f"{where}.operators: must be a list of operator names")
            operators = tuple(operators)
        if kind == "product" and bonds is None and sites is None:
            bonds = "nearest" if operators is not None and len(operators) == 2 else None
            sites = None if bonds else "all"
        axis = table.get("axis")
        if axis is not None and kind not in ("field", "dm"):
            raise ModelError(f"{where}.axis: only used by field and dm terms")
        if kind == "field" and axis is None:
            raise ModelError(f"{where}.axis: a field term needs axis = \"x\", \"y\" or \"z\"")
        conjugate = table.get("conjugate", False)
        if not isinstance(conjugate, bool):
            raise ModelError(f"{where}.conjugate: must be true or false")
        if conjugate and kind not in ("product", "string"):
            raise ModelError(f"{where}.conjugate: only used by product and string terms")
        extra = _spin_keys(table, kind, where) | _hopping_keys(table, kind, where)
        sites = (_groups(sites, f"{where}.sites") if kind in SPIN_TERM_TYPES + LOCAL_TERM_TYPES
                 else _selector(sites, f"{where}.sites", 1))
        terms.append(Term(label, kind, strength, _selector(bonds, f"{where}.bonds", 2),
                          sites, axis, operators, conjugate, **extra))
    return tuple(terms)


def _selector(value, where: str, width: int):
    if value is None or isinstance(value, str):
        return value
    if not isinstance(value, list):
        raise ModelError(f"{where}: must be a name or a list")
    if width == 1:
        if not all(isinstance(i, int) and not isinstance(i, bool) for i in value):
            raise ModelError(f"{where}: must be a list of site indices")
        return tuple(value)
    if not all(isinstance(b, list) and len(b) == 2 and all(isinstance(i, int) for i in b) for b in value):
        raise ModelError(f"{where}: must be a list of [i, j] pairs")
    return tuple(tuple(b) for b in value)


def _spin_keys(table: dict, kind: str, where: str) -> dict:
    """``cycles``, ``pattern``, ``vector`` and ``tensor`` of the multi-spin term types."""
    users = {"cycles": ("ring", "chirality", "pauli"), "pattern": ("ring", "chirality", "dm",
             "anisotropy", "pauli") + LOCAL_TERM_TYPES, "vector": ("dm",),
             "tensor": ("anisotropy",)}
    out = {}
    for key, kinds in users.items():
        value = table.get(key)
        if value is None:
            continue
        if kind not in kinds:
            raise ModelError(f"{where}.{key}: only used by {', '.join(kinds)} terms")
        if key == "cycles":
            if value not in (3, 4) or isinstance(value, bool):
                raise ModelError(f"{where}.cycles: must be 3 (triangles) or 4 (4-cycles), got {value!r}")
        elif key == "pattern":
            if not isinstance(value, list) or not all(isinstance(v, list) for v in value):
                raise ModelError(f"{where}.pattern: must be a list of cell offsets, e.g. [[0, 0], [1, 0]]")
            value = tuple(tuple(v) for v in value)
        elif key == "vector":
            if not isinstance(value, list) or len(value) != 3:
                raise ModelError(f"{where}.vector: must be [Dx, Dy, Dz]")
            value = tuple(_number(v, f"{where}.vector") for v in value)
        else:
            if not isinstance(value, list) or len(value) != 3 or not all(
                    isinstance(r, list) and len(r) == 3 for r in value):
                raise ModelError(f"{where}.tensor: must be a 3x3 list of rows")
            value = tuple(tuple(_number(v, f"{where}.tensor") for v in r) for r in value)
        out[key] = value
    return out


def _hopping_keys(table: dict, kind: str, where: str) -> dict:
    """``phases``, ``flux`` and ``soc`` of a hopping term: numbers or parameter names
    (:mod:`lowfold.model.hopping`)."""
    out = {}
    for key in ("phases", "flux", "soc"):
        value = table.get(key)
        if value is None:
            continue
        if kind != "hopping":
            raise ModelError(f"{where}.{key}: only used by hopping terms")
        if key == "flux":
            out[key] = value if isinstance(value, str) else _number(value, f"{where}.flux")
            continue
        if key == "soc" and isinstance(value, list) and value and all(
                isinstance(v, list) for v in value):          # one vector per bond
            if not all(len(v) == 3 for v in value):
                raise ModelError(f"{where}.soc: one vector per bond is [[lx, ly, lz], ...]")
            out[key] = tuple(tuple(_real_or_name(x, f"{where}.soc[{b}]") for x in v)
                             for b, v in enumerate(value))
            continue
        shape = ("[lx, ly, lz] or one per bond [[lx, ly, lz], ...]" if key == "soc"
                 else "[phi_1, phi_2, ...] (radians)")
        if not isinstance(value, list) or (key == "soc" and len(value) != 3):
            raise ModelError(f"{where}.{key}: must be a list {shape}")
        out[key] = tuple(_real_or_name(v, f"{where}.{key}") for v in value)
    return out


def _real_or_name(value, where: str):
    return value if isinstance(value, str) else _number(value, where)


def _groups(value, where: str):
    """``sites`` of a multi-spin term: "all", site indices, or a list of site groups."""
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, list) and value and all(isinstance(g, list) for g in value):
        if not all(all(isinstance(i, int) and not isinstance(i, bool) for i in g) for g in value):
            raise ModelError(f"{where}: site groups must list integer site indices")
        return tuple(tuple(g) for g in value)
    return _selector(value, where, 1)


def _parse_perturbation(table: dict, terms) -> PerturbationSpec:
    _unknown(table, _PERTURBATION_KEYS, "perturbation")
    unperturbed = table.get("unperturbed")
    if not isinstance(unperturbed, list) or not unperturbed or not all(isinstance(u, str) for u in unperturbed):
        raise ModelError("perturbation.unperturbed: must be a non-empty list of term labels")
    labels = [t.label for t in terms]
    for label in unperturbed:
        if label not in labels:
            raise ModelError(f"perturbation.unperturbed: {label!r} is not a term label "
                             f"(labels: {', '.join(labels)})")
    order = _integer(table.get("order", 2), "perturbation.order")
    if order < 1:
        raise ModelError(f"perturbation.order: must be at least 1, got {order}")
    manifold = table.get("manifold")
    window = table.get("window")
    if manifold is not None and window is not None:
        raise ModelError("perturbation: give either manifold = \"lowest\" or window = [emin, emax], not both")
    if window is not None:
        if not isinstance(window, list) or len(window) != 2:
            raise ModelError("perturbation.window: must be [emin, emax]")
        window = (_number(window[0], "perturbation.window"), _number(window[1], "perturbation.window"))
        if window[0] > window[1]:
            raise ModelError("perturbation.window: emin must not exceed emax")
    elif manifold is None:
        manifold = "lowest"
    if manifold is not None and manifold != "lowest":
        raise ModelError(f"perturbation.manifold: must be \"lowest\" (or give a window), got {manifold!r}")
    tolerance = _number(table.get("tolerance", 1e-9), "perturbation.tolerance")
    if not 0 < tolerance < 1:
        raise ModelError(f"perturbation.tolerance: must lie between 0 and 1 (relative), got {tolerance}")
    filling = table.get("filling")
    if filling is not None and filling != "mixed":
        raise ModelError("perturbation.filling: must be \"mixed\" (keep every particle number of "
                         f"the lowest one-site level of H0), got {filling!r}")
    return PerturbationSpec(tuple(unperturbed), order, manifold, window, tolerance, filling)
