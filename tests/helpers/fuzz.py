"""Seeded mutation of model and scan files for the fuzz tests, and the contract every run meets.

A mutant starts from a valid document (a shipped example, or a small model of one site type
on one lattice shape, :func:`small_model`) and receives one to three mutations drawn by a
``random.Random(seed)``: a key deleted, a value of another type, an extreme number, an
unknown key, a repeated label, hostile text (rich markup, control characters, a newline) in
a title, label or name, a size or order past the limits, or damage to the bytes of the file
(broken TOML, bytes that are not UTF-8) or to its name.  The same seed gives the same
mutants, so a failure is reproduced by its seed and index (``Mutant.name``).

:func:`contract_failure` is the oracle: a run either exits 0 (with ``--json``: exactly one
strict JSON object on stdout, no ``NaN``/``Infinity``) or exits 2 with exactly one line on
stderr and nothing on stdout; never a traceback, a leaked Python warning, another status
(``lowfold scan`` may also exit 1 when a point failed, docs/scans.md) or a hang.
"""

from __future__ import annotations

import copy
import json
import math
import random
import re
from dataclasses import dataclass, field
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:          # Python 3.10
    import tomli as tomllib

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"

SHAPES = {  # shape: (size, sites) kept small: every run takes well under a second or two
    "chain": ([4], 4), "ladder": ([2], 4), "square": ([2, 2], 4), "triangular": ([2, 2], 4),
    "honeycomb": ([1, 2], 4), "kagome": ([1, 1], 3), "cubic": ([2, 2, 1], 4), "graph": (None, 4),
}
SITE_TYPES = ("spin", "spin1", "fermion", "electron", "boson")

# hostile text: rich markup (closing and unclosed tags), control characters, a newline,
# an escape sequence, a right-to-left override, quotes, an empty and a very long string
NASTY_TEXT = ("a [/bold] b", "[bold red", "[link=file:///etc]x[/link]", "tab\there", "bell\x07",
              "line\nbreak", "esc\x1b[31mred", "rtl\u202eevil", 'quote"\'', "", "x" * 5000,
              "nul\x00byte", "caf\u00e9 \u2603")
EXTREME_NUMBERS = (0, -1, 1, 2, 0.5, -0.5, 1e308, -1e308, 5e-324, 1e-320, 1e100, 1e-100, 1e101,
                   2**31, 2**62, 2**63 - 1, -2**63, 10**12, 10**30, 65535, 65536, 32767.5,
                   float("nan"), float("inf"), float("-inf"), "nan", "inf", "1e308", "-1")
OTHER_VALUES = ("text", 3, -1, 0, 2.5, True, False, [], [1, 2], ["a", "b"], [[0, 1]], {},
                {"a": 1}, [{"x": 1}])
HUGE_SIZES = ([64], [40], [10**6], [2**31], [6, 6], [100, 100], [8, 8, 8], [10**12], [0], [-3],
              [], [2, 2, 2, 2])
ORDERS = (0, -1, 1, 2, 30, 200, 201, 1000, 10**9, 2**63, 2.5, "4", True)
FILE_NAMES = ("a [red]b.toml", "[link=x]y.toml", "[bold red.toml", "new\nline.toml", "bell\x07.toml",
              "esc\x1b[31m.toml", "sp ace.toml", "caf\u00e9.toml", "-dash.toml", "noext",
              "caf\udce9.toml")           # the last: a name that is not UTF-8 (surrogate escape)


def _bare(key: str) -> bool:
    return bool(re.fullmatch(r"[A-Za-z0-9_-]+", key))


def _key(key: str) -> str:
    return key if _bare(key) else _string(key)


def _string(text: str) -> str:
    # JSON string escapes are valid TOML basic-string escapes; a lone surrogate cannot be
    # written in UTF-8, so it is replaced (file bytes that are not UTF-8 are a separate
    # mutation)
    text = text.encode("utf-8", "replace").decode("utf-8")
    return json.dumps(text, ensure_ascii=False)


def toml_scalar(value) -> str:
    """``value`` as a TOML value (inline tables and arrays nest; nan and inf are TOML)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_key(k)} = {toml_scalar(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_scalar(v) for v in value) + "]"
    raise TypeError(type(value))


def _table_array(value) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def dumps(doc: dict, prefix: str = "") -> str:
    """A TOML document of ``doc`` (tables as ``[headers]``, lists of tables as ``[[headers]]``)."""
    lines = [f"{_key(k)} = {toml_scalar(v)}" for k, v in doc.items()
             if not isinstance(v, dict) and not _table_array(v)]
    for k, v in doc.items():
        name = f"{prefix}{_key(k)}"
        if isinstance(v, dict):
            lines += ["", f"[{name}]", dumps(v, name + ".")]
        elif _table_array(v):
            for item in v:
                lines += ["", f"[[{name}]]", dumps(item, name + ".")]
    return "\n".join(line for line in lines if line is not None).strip("\n") + "\n"


def small_model(shape: str, site: str, order: int = 2) -> dict:
    """A valid model document: ``site`` particles on a small ``shape``, H0 diagonal with a
    non-degenerate lowest level where the lattice allows it, V small."""
    size, n = SHAPES[shape]
    lattice = ({"shape": "graph", "sites": n, "bonds": [[i, i + 1] for i in range(n - 1)]}
               if size is None else {"shape": shape, "size": size, "boundary": "open"})
    doc = {"title": f"{site} {shape}", "lattice": lattice}
    if site.startswith("spin"):
        doc["site"] = {"type": "spin", "spin": 1 if site == "spin1" else 0.5}
        doc["parameters"] = {"Jz": -1.0, "h": 0.5, "g": 0.1}
        doc["term"] = [
            {"type": "product", "operators": ["Sz", "Sz"], "strength": "Jz", "label": "ising"},
            {"type": "field", "axis": "z", "strength": "h", "label": "zeeman"},
            {"type": "product", "operators": ["S+", "S-"], "conjugate": True, "strength": "g",
             "bonds": "nearest", "label": "flip"}]
        unperturbed = ["ising", "zeeman"]
    elif site == "electron":
        doc["site"] = {"type": "electron"}
        doc["sector"] = {"particles": n}
        doc["parameters"] = {"t": 1.0, "U": 10.0}
        doc["term"] = [{"type": "hopping", "strength": "t"}, {"type": "hubbard", "strength": "U"}]
        unperturbed = ["hubbard"]
    elif site == "fermion":
        doc["site"] = {"type": "fermion"}
        doc["sector"] = {"particles": 1}
        doc["parameters"] = {"t": 0.2, "eps": -1.0, "V": 2.0}
        doc["term"] = [{"type": "hopping", "strength": "t"},
                       {"type": "potential", "strength": "eps", "sites": [0], "label": "pin"},
                       {"type": "interaction", "strength": "V"}]
        unperturbed = ["pin", "interaction"]
    else:
        doc["site"] = {"type": "boson", "max_occupation": 2}
        doc["sector"] = {"particles": n}
        doc["parameters"] = {"t": 0.5, "U": 10.0}
        doc["term"] = [{"type": "hopping", "strength": "t"}, {"type": "hubbard", "strength": "U"}]
        unperturbed = ["hubbard"]
    doc["perturbation"] = {"unperturbed": unperturbed, "order": order, "manifold": "lowest"}
    return doc


def base_documents() -> dict:
    """``{name: document}``: the shipped example models and a small model of every site
    type on every lattice shape."""
    docs = {p.stem: tomllib.loads(p.read_text()) for p in sorted(EXAMPLES.glob("*.toml"))
            if not p.stem.startswith("scan")}
    for shape in SHAPES:
        for site in SITE_TYPES:
            docs[f"{site}-{shape}"] = small_model(shape, site)
    return docs


# ------------------------------------------------------------------------------ mutations
def _places(doc, path=()):
    """Every ``(container, key, path)`` of the document, tables and arrays included."""
    items = doc.items() if isinstance(doc, dict) else enumerate(doc)
    for key, value in items:
        yield doc, key, path + (key,)
        if isinstance(value, (dict, list)):
            yield from _places(value, path + (key,))


def _tables(doc, path=()):
    yield doc, path
    for key, value in (doc.items() if isinstance(doc, dict) else enumerate(doc)):
        if isinstance(value, dict) or _table_array(value):
            yield from _tables(value, path + (key,)) if isinstance(value, dict) else (
                t for i, item in enumerate(value) for t in _tables(item, path + (key, i)))


def _strings(doc):
    return [(c, k, p) for c, k, p in _places(doc) if isinstance(c[k], str)]


def _named(doc, names):
    return [(c, k, p) for c, k, p in _places(doc) if isinstance(k, str) and k in names]


def _pick(rng, places):
    return rng.choice(places) if places else None


def mutate_document(doc: dict, rng: random.Random) -> str:
    """Mutate ``doc`` in place once; a description of what was done.  What lowfold must
    refuse is decided on the final document (:func:`must_refuse`)."""
    kind = rng.choice(("delete", "retype", "number", "unknown", "duplicate", "text", "size",
                       "order", "number", "delete", "retype"))
    places = list(_places(doc))
    if not places:
        doc["title"] = rng.choice(NASTY_TEXT)
        return "title added"
    if kind == "delete":
        c, k, p = rng.choice(places)
        del c[k]
        return f"delete {p}"
    if kind == "retype":
        c, k, p = rng.choice(places)
        c[k] = copy.deepcopy(rng.choice([v for v in OTHER_VALUES if type(v) is not type(c[k])]))
        return f"retype {p} = {c[k]!r}"
    if kind == "unknown":
        table, p = rng.choice([t for t in _tables(doc) if isinstance(t[0], dict)])
        table["colour"] = rng.choice(("red", 1, [1]))
        return f"unknown key colour in {p}"
    if kind == "duplicate":
        terms = doc.get("term")
        if _table_array(terms):
            term = copy.deepcopy(rng.choice(terms))
            terms.append(term)
            return f"duplicate term {term.get('label', term.get('type'))!r}"
        pert = doc.get("perturbation")
        if isinstance(pert, dict) and isinstance(pert.get("unperturbed"), list) and pert["unperturbed"]:
            pert["unperturbed"].append(pert["unperturbed"][0])
            return "duplicate unperturbed label"
    if kind == "text":
        target = _pick(rng, _named(doc, ("title", "label", "model")) or _strings(doc))
        if target is not None:
            c, k, p = target
            c[k] = rng.choice(NASTY_TEXT)
            return f"text {p} = {c[k]!r}"
        params = doc.get("parameters")
        if isinstance(params, dict) and params:
            old = rng.choice(list(params))
            params[rng.choice(NASTY_TEXT)] = params.pop(old)
            return f"rename parameter {old!r}"
    if kind == "size":
        target = _pick(rng, _named(doc, ("size", "sites", "spin", "max_occupation", "particles",
                                         "levels", "num")))
        if target is not None:
            c, k, p = target
            c[k] = rng.choice(HUGE_SIZES) if k == "size" else rng.choice(
                (10**9, 2**62, 2**63 - 1, 1e9, 32767.5, 32768, 65535, 65536, 4097, 63, 64, 10**6))
            return f"size {p} = {c[k]!r}"
    if kind == "order":
        target = _pick(rng, _named(doc, ("order",)))
        if target is not None:
            c, k, p = target
            c[k] = rng.choice(ORDERS)
            return f"order {p} = {c[k]!r}"
    numeric = [t for t in places if isinstance(t[0][t[1]], (int, float))] or places
    c, k, p = rng.choice(numeric)
    c[k] = rng.choice(EXTREME_NUMBERS)
    return f"number {p} = {c[k]!r}"


def mild_mutation(doc: dict, rng: random.Random) -> str:
    """A change that keeps the file valid in form: hostile text in the title or a term
    label (the ``unperturbed`` list follows the label), an extreme parameter value, another
    order, or nothing (the command-line options are then what varies)."""
    kind = rng.choice(("title", "label", "parameter", "parameter", "order", "none"))
    terms = doc.get("term") if _table_array(doc.get("term")) else []
    params = doc.get("parameters") if isinstance(doc.get("parameters"), dict) else {}
    pert = doc.get("perturbation") if isinstance(doc.get("perturbation"), dict) else {}
    if kind == "title":
        doc["title"] = rng.choice(NASTY_TEXT)
        return f"title = {doc['title']!r}"
    if kind == "label" and terms:
        term = rng.choice(terms)
        old, new = term.get("label", term.get("type")), rng.choice(NASTY_TEXT)
        term["label"] = new
        if isinstance(pert.get("unperturbed"), list):
            pert["unperturbed"] = [new if x == old else x for x in pert["unperturbed"]]
        return f"label {old!r} -> {new!r}"
    if kind == "parameter" and params:
        name = rng.choice(sorted(params))
        params[name] = rng.choice((0, 0.0, -1.0, 1e308, -1e308, 1e100, 1e-100, 1e101, 1e-101,
                                   5e-324, 1e-15, 1e15, 3))
        return f"parameter {name} = {params[name]!r}"
    if kind == "order" and pert:
        pert["order"] = rng.choice((1, 2, 3, 6, 12, 30, 200, 201, 10**9))
        return f"order = {pert['order']!r}"
    return "unchanged"


def _non_finite(value) -> bool:
    if isinstance(value, float):
        return not math.isfinite(value)
    if isinstance(value, dict):
        return any(_non_finite(v) for v in value.values())
    if isinstance(value, list):
        return any(_non_finite(v) for v in value)
    return False


def _unknown_colour(value, path=()) -> bool:
    if isinstance(value, dict):
        if "colour" in value and path not in (("parameters",), ("grid",)):
            return True
        return any(_unknown_colour(v, path + (k,)) for k, v in value.items())
    if isinstance(value, list):
        return any(_unknown_colour(v, path + (i,)) for i, v in enumerate(value))
    return False


def must_refuse(doc: dict) -> frozenset:
    """The commands that must refuse ``doc`` (exit 2), whatever else it holds: a NaN or an
    infinity anywhere, an unknown key (docs/model-files.md, docs/scans.md), a term label
    used twice; a label repeated in ``unperturbed`` for ``derive`` and ``series``."""
    every = frozenset(("spectrum", "derive", "series", "scan"))
    if _non_finite(doc) or _unknown_colour(doc):
        return every
    terms = doc.get("term")
    if _table_array(terms):
        labels = [t.get("label", t.get("type")) for t in terms]
        hashable = [x for x in labels if isinstance(x, (str, int, float, bool))]
        if len(set(hashable)) < len(hashable):
            return every
    pert = doc.get("perturbation")
    if isinstance(pert, dict) and isinstance(pert.get("unperturbed"), list):
        names = [x for x in pert["unperturbed"] if isinstance(x, str)]
        if len(set(names)) < len(names):
            return frozenset(("derive", "series"))
    return frozenset()


def damage_bytes(data: bytes, rng: random.Random) -> tuple[bytes, str, bool]:
    """Damage the file's bytes: ``(bytes, description, must_refuse)``."""
    kind = rng.choice(("truncate", "bracket", "header", "latin1", "ff", "nul", "bom", "crlf",
                       "dupkey"))
    at = rng.randrange(len(data) + 1)
    if kind == "truncate":
        return data[:at], f"truncated at byte {at}", False
    if kind == "bracket":
        return data[:at] + b"[" + data[at:], f"'[' at byte {at}", False
    if kind == "header":
        return data + b"\n[lattice]\n", "second [lattice] header", True
    if kind == "latin1":
        return b'title = "h\xe9p"\n' + data.split(b"\n", 1)[-1], "latin-1 byte in the title", True
    if kind == "ff":
        return data[:at] + b"\xff" + data[at:], f"byte 0xff at {at}", True
    if kind == "nul":
        return data[:at] + b"\x00" + data[at:], f"NUL byte at {at}", True
    if kind == "bom":
        return b"\xef\xbb\xbf" + data, "UTF-8 byte-order mark", False
    if kind == "crlf":
        return data.replace(b"\n", b"\r\n"), "CRLF line ends", False
    line = data.split(b"\n", 1)[0]
    return data + b"\n" + line + b"\n", "first line repeated", b"=" in line


@dataclass
class Mutant:
    """One mutated file: its name (seed and index), bytes, file name and what was done."""

    name: str
    base: str
    data: bytes
    filename: str
    mutations: list = field(default_factory=list)
    refused_by: frozenset = frozenset()
    extra_args: list = field(default_factory=list)

    def describe(self) -> str:
        return f"{self.name} (from {self.base}): " + "; ".join(self.mutations)


def make_mutant(name: str, base: str, doc: dict, rng: random.Random, *, suffix=".toml") -> Mutant:
    """A mild mutation (:func:`mild_mutation`) or one to three of :func:`mutate_document`,
    sometimes byte damage, sometimes a hostile file name."""
    doc = copy.deepcopy(doc)
    if rng.random() < 0.4:
        done = [mild_mutation(doc, rng)]
    else:
        done = [mutate_document(doc, rng) for _ in range(rng.choice((1, 1, 2, 3)))]
    refuse = must_refuse(doc)
    data = dumps(doc).encode("utf-8")
    if rng.random() < 0.15:
        data, what, bad = damage_bytes(data, rng)
        done.append(what)
        if bad:
            refuse = frozenset(("spectrum", "derive", "series", "scan"))
    filename = f"m{name.rsplit('-', 1)[-1]}{suffix}"
    if rng.random() < 0.1:
        filename = rng.choice(FILE_NAMES)
        done.append(f"file name {filename!r}")
    return Mutant(name, base, data, filename, done, refuse)


# ------------------------------------------------------------------------------ the contract
def _reject_constant(token):
    raise ValueError(f"non-finite number {token} in JSON")


def strict_json(text: str) -> dict:
    """The one JSON object of ``text`` (one line); ValueError when there is anything else,
    or a NaN/Infinity that strict parsers reject."""
    lines = text.splitlines()
    if len(lines) != 1 or not text.endswith("\n"):
        raise ValueError(f"{len(lines)} lines on stdout, not one")
    data = json.loads(lines[0], parse_constant=_reject_constant)
    if not isinstance(data, dict):
        raise ValueError(f"a JSON {type(data).__name__}, not an object")
    return data


WARNING = re.compile(r"\b\w*Warning\b: ")


def contract_failure(code, stdout: str, stderr: str, *, json_out: bool, allowed=(0, 2)) -> str | None:
    """Why a run breaks the command-line contract, or None when it keeps it."""
    if code is None:
        return "hang (no exit within the time limit)"
    if "Traceback" in stderr:
        return f"traceback, exit {code}: {stderr.strip().splitlines()[-1][:300]}"
    if code not in allowed:
        return f"exit status {code}: {stderr.strip()[:300]!r}"
    if WARNING.search(stderr):
        return f"a Python warning on stderr: {stderr.strip()[:300]!r}"
    if code == 2:
        lines = stderr.splitlines()
        if len(lines) != 1:
            return f"exit 2 with {len(lines)} lines on stderr: {stderr[:300]!r}"
        if not lines[0].startswith("lowfold: error: "):
            return f"exit 2, stderr not a lowfold error: {lines[0][:300]!r}"
        if stdout:
            return f"exit 2 with output on stdout: {stdout[:200]!r}"
        return None
    if json_out:
        try:
            strict_json(stdout)
        except ValueError as exc:
            return f"exit {code}, --json output is not one strict JSON object: {exc}: {stdout[:200]!r}"
    return None

