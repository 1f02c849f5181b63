"""Result store of a scan: one JSON file per point, written atomically.

A results directory holds ``points/<key>.json`` (one record per scan point), ``scan.json``
(the scan that last wrote to it) and ``results.csv`` (a tidy table of every point).  A
point's key is a stable hash of what determines its result: the model parameter values,
the lattice size and boundary, the task and its options.  Each file is written to a
temporary file in the same directory and moved into place with :func:`os.replace`, so a
reader (or a resumed scan) sees either the whole record or none of it.

Record layout (``format = 1``)::

    {"format": 1, "key": "...", "status": "ok" | "error",
     "task": "spectrum", "options": {...},
     "parameters": {"t": 1.0, "U": 8.0}, "scanned": ["U"],
     "size": [6] | null, "boundary": "open" | null, "n_sites": 6,
     "model": {"path": "...", "sha256": "...", "title": "..."},
     "lowfold_version": "0.1.0",
     "timing": {"started": "...", "finished": "...", "seconds": 1.2, "host": "...", "pid": 1},
     "result": {...} | null,
     "error": null | {"type": "ManifoldError", "message": "...", "deterministic": true}}

``result`` is the task's JSON output (see DESIGN.md).  ``deterministic`` is true for the
project's own errors (an impossible point fails the same way every time) and false for
crashes (a killed worker, an unexpected exception), which a resumed scan retries.

Selectors used by the plots and the finite-size fits read one number out of a record:

* axis values: a parameter name ``"U"``, a ratio ``"t/U"``, an inverse ``"1/U"``, the
  lattice length ``"L"`` (first size entry) or the number of sites ``"N"``;
* quantities: ``"energy"`` / ``"energy:k"`` (level k of a spectrum, or of a derive
  check's exact spectrum), ``"gap:i:j"`` (``E_j - E_i``), ``"series"`` (the summed series
  energy), ``"coupling:KIND[:SITES[:COMPONENT]]"`` (e.g. ``"coupling:exchange:0-1"``,
  ``"coupling:field:2:z"``) and ``"error"`` (a derive check's max_abs_error); ``order=n``
  sums a series or a coupling through order n.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import os
import tempfile
from pathlib import Path
from typing import Any, Iterable, Mapping

from lowfold.errors import LowfoldError, ModelError

__all__ = [
    "RECORD_FORMAT",
    "ResultStore",
    "point_key",
    "write_json_atomic",
    "load_results",
    "table_rows",
    "write_csv",
    "to_dataframe",
    "axis_value",
    "scalar",
    "cumulative_orders",
]

RECORD_FORMAT = 1
_COMPONENTS_3 = ("x", "y", "z")
TABLE_COLUMNS = (
    "key", "task", "status", "size", "boundary", "n_sites",
    "quantity", "kind", "sites", "component", "order", "index", "value", "error",
)


def _to_jsonable(obj: Any) -> Any:
    """Convert NumPy scalars and arrays (and tuples) into plain JSON types."""
    if isinstance(obj, Mapping):
        return {str(k): _to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_to_jsonable(v) for v in obj]
    if hasattr(obj, "tolist"):  # numpy arrays and scalars
        return _to_jsonable(obj.tolist())
    if isinstance(obj, complex):
        return {"re": obj.real, "im": obj.imag}
    return obj


def canonical_json(obj: Any) -> str:
    """Serialise ``obj`` with sorted keys and no whitespace (stable for hashing)."""
    return json.dumps(_to_jsonable(obj), sort_keys=True, separators=(",", ":"))


def point_key(
    *,
    parameters: Mapping[str, float],
    size: Iterable[int] | None,
    boundary: Any,
    task: str,
    options: Mapping[str, Any],
    sector: Mapping[str, Any] | None = None,
) -> str:
    """Stable hash (20 hex digits of SHA-256) identifying one scan point.

    Parameter values are normalised to floats, so ``U = 4`` and ``U = 4.0`` give the
    same key; ``sector`` is the point's sector (``particles``, ``sz``).  The model file
    itself is not part of the key (its checksum is stored in the record, and a changed
    model makes a resumed scan recompute the point).
    """
    payload = {
        "parameters": {str(k): float(v) for k, v in parameters.items()},
        "size": None if size is None else [int(n) for n in size],
        "boundary": boundary,
        "task": task,
        "options": dict(options),
        "sector": None if sector is None else dict(sector),
    }
    return hashlib.sha256(canonical_json(payload).encode()).hexdigest()[:20]


def write_json_atomic(path: str | os.PathLike, obj: Any) -> None:
    """Write ``obj`` as JSON to ``path`` atomically (temporary file, fsync, os.replace)."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix="." + path.name + ".", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            json.dump(_to_jsonable(obj), handle, indent=1, sort_keys=True)
            handle.write("\n")
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


class ResultStore:
    """A results directory: ``points/<key>.json`` records plus ``scan.json``.

    Parameters
    ----------
    directory : path
        Created (with parents) if missing.

    Examples
    --------
    >>> import tempfile
    >>> tmp = tempfile.TemporaryDirectory()
    >>> store = ResultStore(tmp.name)
    >>> store.put({"key": "abc", "status": "ok", "result": {"energies": [-1.0]}}).name
    'abc.json'
    >>> store.get("abc")["status"], store.keys()
    ('ok', ['abc'])
    >>> tmp.cleanup()
    """

    def __init__(self, directory: str | os.PathLike):
        self.directory = Path(directory)
        self.points_dir = self.directory / "points"
        self.points_dir.mkdir(parents=True, exist_ok=True)

    def path_for(self, key: str) -> Path:
        """File of the record with ``key``."""
        return self.points_dir / f"{key}.json"

    def get(self, key: str) -> dict | None:
        """The stored record with ``key``, or None if absent or unreadable."""
        try:
            with open(self.path_for(key), encoding="utf-8") as handle:
                record = json.load(handle)
        except (FileNotFoundError, json.JSONDecodeError, UnicodeDecodeError):
            return None
        return record if isinstance(record, dict) and record.get("key") == key else None

    def put(self, record: Mapping[str, Any]) -> Path:
        """Store ``record`` (which must carry its ``key``) atomically; return its path."""
        path = self.path_for(record["key"])
        write_json_atomic(path, dict(record))
        return path

    def keys(self) -> list[str]:
        """Keys of all stored records, sorted."""
        return sorted(p.stem for p in self.points_dir.glob("*.json") if not p.name.startswith("."))

    def records(self) -> list[dict]:
        """All stored records, sorted by key; an unreadable file raises LowfoldError."""
        out = []
        for key in self.keys():
            record = self.get(key)
            if record is None:
                raise LowfoldError(
                    f"{self.path_for(key)}: not a valid result record; delete it and run "
                    "the scan again to recompute that point")
            out.append(record)
        return out

    def write_manifest(self, manifest: Mapping[str, Any]) -> None:
        """Record which scan wrote here (``scan.json``)."""
        write_json_atomic(self.directory / "scan.json", dict(manifest))


def load_results(directory: str | os.PathLike) -> list[dict]:
    """Load every point record of a results directory (sorted by key).

    Parameters
    ----------
    directory : path
        A directory written by :func:`lowfold.scan.run_scan` (``--out``).

    Returns
    -------
    list of dict
        The records as described in the module docstring.
    """
    directory = Path(directory)
    if not (directory / "points").is_dir():
        raise ModelError(f"{directory}: not a results directory (no points/ inside)")
    return ResultStore(directory).records()


# --------------------------------------------------------------------------- tidy table
def _sites_label(sites: Iterable[int]) -> str:
    return "-".join(str(int(s)) for s in sites)


def _size_label(size: Iterable[int] | None) -> str:
    return "" if size is None else "x".join(str(int(n)) for n in size)


def _flatten(value: Any) -> list[tuple[str, float]]:
    """(component, number) pairs of a scalar, a 3-vector or a 3x3 matrix."""
    if isinstance(value, Mapping) and set(value) == {"re", "im"}:
        return [("re", value["re"]), ("im", value["im"])]
    if isinstance(value, (list, tuple)):
        if all(isinstance(v, (list, tuple)) for v in value):
            names = _COMPONENTS_3 if len(value) == 3 else [str(i) for i in range(len(value))]
            return [(names[i] + (names[j] if len(row) == 3 else str(j)), v)
                    for i, row in enumerate(value) for j, v in enumerate(row)]
        names = _COMPONENTS_3 if len(value) == 3 else [str(i) for i in range(len(value))]
        return list(zip(names, value))
    return [("", value)]


def _result_rows(task: str, result: Mapping[str, Any]) -> list[dict]:
    rows: list[dict] = []

    def add(quantity, value, **extra):
        for component, number in _flatten(value):
            rows.append({"quantity": quantity, "component": component, "value": number, **extra})

    if task == "spectrum":
        add("dimension", result.get("dimension"))
        for k, energy in enumerate(result.get("energies", [])):
            add("energy", energy, index=k)
    elif task == "series":
        for order, value in sorted(result.get("orders", {}).items(), key=lambda kv: int(kv[0])):
            add("series", value, order=order)
        add("series", result.get("energy"), order="total")
        for name, value in sorted(result.get("diagnostics", {}).items()):
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                add("diagnostic", value, kind=name)
    elif task == "derive":
        for coupling in result.get("couplings", []):
            label = {"kind": coupling.get("kind", ""), "sites": _sites_label(coupling.get("sites", []))}
            add("coupling", coupling.get("value"), order="total", **label)
            for order, value in sorted(coupling.get("orders", {}).items(), key=lambda kv: int(kv[0])):
                add("coupling", value, order=order, **label)
        for term in result.get("terms", []):
            add("term", term.get("coefficient"), kind=term.get("operator", ""), order="total")
        check = result.get("check") or {}
        for k, energy in enumerate(check.get("exact", [])):
            add("exact", energy, index=k)
        for order, entry in sorted(check.get("by_order", {}).items(), key=lambda kv: int(kv[0])):
            add("max_abs_error", entry.get("max_abs_error"), order=order)
        manifold = result.get("manifold") or {}
        for name in ("dimension", "energy", "gap"):
            if name in manifold:
                add("manifold_" + name, manifold[name])
    return rows


def _parameter_columns(records: list[Mapping[str, Any]]) -> dict[str, str]:
    """Map parameter name -> column name (prefixed when it clashes with a fixed column)."""
    names: list[str] = []
    for record in records:
        for name in record.get("parameters", {}):
            if name not in names:
                names.append(name)
    return {n: (f"parameter_{n}" if n in TABLE_COLUMNS else n) for n in names}


def table_rows(records: Iterable[Mapping[str, Any]]) -> list[dict]:
    """Tidy table: one row per point and per scalar (energy level, coupling order, ...).

    Columns: ``key, task, status``, one column per model parameter, ``size`` (``"6"`` or
    ``"4x2"``), ``boundary``, ``n_sites``, ``quantity`` (``energy``, ``dimension``,
    ``series``, ``coupling``, ``term``, ``exact``, ``max_abs_error``, ``manifold_*``,
    ``diagnostic``), ``kind`` (coupling kind, term operator, diagnostic name), ``sites``
    (``"0-1"``), ``component`` (``x``/``y``/``z``, ``xy``, ... for vector and matrix
    couplings), ``order`` (perturbative order or ``total``), ``index`` (level), ``value``
    and ``error`` (``"Type: message"`` on the single row of a failed point).
    """
    records = list(records)
    columns = _parameter_columns(records)
    rows = []
    for record in sorted(records, key=lambda r: r["key"]):
        base = {c: "" for c in TABLE_COLUMNS}
        base.update({
            "key": record["key"], "task": record.get("task", ""), "status": record.get("status", ""),
            "size": _size_label(record.get("size")),
            "boundary": record.get("boundary") if isinstance(record.get("boundary"), str)
            else "/".join(record.get("boundary") or []),
            "n_sites": record.get("n_sites", ""),
        })
        for name, column in columns.items():
            base[column] = record.get("parameters", {}).get(name, "")
        if record.get("status") == "ok":
            for row in _result_rows(record.get("task", ""), record.get("result") or {}):
                rows.append({**base, **row})
        else:
            error = record.get("error") or {}
            rows.append({**base, "error": f"{error.get('type', 'Error')}: {error.get('message', '')}"})
    return rows


def _column_order(records: list[Mapping[str, Any]]) -> list[str]:
    params = list(_parameter_columns(records).values())
    return list(TABLE_COLUMNS[:3]) + params + list(TABLE_COLUMNS[3:])


def write_csv(source: str | os.PathLike | Iterable[Mapping[str, Any]], path: str | os.PathLike) -> int:
    """Write the tidy table of ``source`` (a results directory or records) to a CSV file.

    Returns the number of rows written.  The file is replaced atomically.
    """
    records = load_results(source) if isinstance(source, (str, os.PathLike)) else list(source)
    rows = table_rows(records)
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix="." + path.name + ".", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", newline="", encoding="utf-8") as handle:
            writer = csv.DictWriter(handle, fieldnames=_column_order(records))
            writer.writeheader()
            writer.writerows(rows)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return len(rows)


def to_dataframe(source: str | os.PathLike | Iterable[Mapping[str, Any]]):
    """The tidy table as a pandas DataFrame (pandas is optional: ``pip install pandas``)."""
    try:
        import pandas as pd
    except ImportError as exc:  # pragma: no cover - depends on the environment
        raise ModelError("to_dataframe needs pandas; install it or use write_csv/table_rows") from exc
    records = load_results(source) if isinstance(source, (str, os.PathLike)) else list(source)
    rows = table_rows(records)
    return pd.DataFrame(rows, columns=_column_order(records))


# --------------------------------------------------------------------------- selectors
def axis_value(record: Mapping[str, Any], spec: str) -> float:
    """Value of an axis selector (``"U"``, ``"t/U"``, ``"1/U"``, ``"L"``, ``"N"``, ``"1/L"``).

    ``L`` is the first entry of the lattice size and ``N`` the number of sites; a model
    parameter of the same name takes precedence.
    """
    spec = spec.replace(" ", "")
    if "/" in spec:
        num, den = spec.split("/", 1)
        numerator = 1.0 if num == "1" else axis_value(record, num)
        return numerator / axis_value(record, den)
    parameters = record.get("parameters", {})
    if spec in parameters:
        return float(parameters[spec])
    if spec == "L" and record.get("size"):
        return float(record["size"][0])
    if spec == "N" and record.get("n_sites") is not None:
        return float(record["n_sites"])
    raise ModelError(
        f"axis {spec!r}: not a parameter ({', '.join(parameters) or 'none'}), 'L' or 'N' "
        f"of point {record.get('key', '?')}")


def cumulative_orders(orders: Mapping[str, Any], through: int | None = None) -> float:
    """Sum of the per-order contributions ``{"2": c2, "4": c4}`` through order ``through``."""
    return math.fsum(float(v) for k, v in orders.items() if through is None or int(k) <= through)


def _component(value: Any, component: str | None, what: str) -> float:
    if component is None or component == "":
        if isinstance(value, (list, tuple)):
            raise ModelError(f"{what} is a vector or matrix; name a component (x, y, z, xy, ...)")
        return float(value)
    for name, number in _flatten(value):
        if name == component:
            return float(number)
    raise ModelError(f"{what}: no component {component!r}")


def _coupling(result: Mapping[str, Any], kind: str, sites: str | None) -> Mapping[str, Any]:
    matches = [c for c in result.get("couplings", []) if c.get("kind") == kind
               and (sites is None or _sites_label(c.get("sites", [])) == sites)]
    if len(matches) == 1:
        return matches[0]
    available = sorted({f"{c.get('kind')}:{_sites_label(c.get('sites', []))}"
                        for c in result.get("couplings", [])})
    reason = "no" if not matches else "more than one"
    raise ModelError(f"{reason} coupling {kind}{':' + sites if sites else ''}; "
                     f"available: {', '.join(available) or 'none'}")


def scalar(record: Mapping[str, Any], quantity: str, *, order: int | None = None) -> float:
    """One number out of a successful record, by quantity selector (module docstring).

    Parameters
    ----------
    record : dict
        A point record with ``status == "ok"``.
    quantity : str
        ``energy[:k]``, ``gap:i:j``, ``series``, ``coupling:KIND[:SITES[:COMPONENT]]``,
        ``error``.
    order : int, optional
        Sum a series or a coupling through this order only (for ``error``: the check at
        this order, default the highest).
    """
    if record.get("status") != "ok":
        raise ModelError(f"point {record.get('key', '?')} failed; it has no {quantity}")
    result = record.get("result") or {}
    head, *rest = quantity.split(":")
    if head in ("energy", "gap"):
        levels = result.get("energies")
        if levels is None:
            levels = (result.get("check") or {}).get("exact")
        if levels is None:
            raise ModelError(f"{quantity}: the {record.get('task')} result holds no energy levels")
        idx = [int(i) for i in rest] or ([0] if head == "energy" else [0, 1])
        if max(idx) >= len(levels):
            raise ModelError(f"{quantity}: only {len(levels)} levels stored (raise 'levels')")
        return float(levels[idx[0]]) if head == "energy" else float(levels[idx[1]]) - float(levels[idx[0]])
    if head == "series":
        if order is None:
            return float(result["energy"])
        return cumulative_orders(result["orders"], order)
    if head == "coupling":
        if not rest:
            raise ModelError("coupling selector needs a kind: coupling:KIND[:SITES[:COMPONENT]]")
        kind = rest[0]
        sites = rest[1] if len(rest) > 1 and rest[1] else None
        component = rest[2] if len(rest) > 2 else None
        coupling = _coupling(result, kind, sites)
        what = f"coupling {kind}"
        if order is None:
            return _component(coupling["value"], component, what)
        return math.fsum(_component(v, component, what)
                         for k, v in coupling.get("orders", {}).items() if int(k) <= order)
    if head == "error":
        by_order = (result.get("check") or {}).get("by_order") or {}
        if not by_order:
            raise ModelError(f"{quantity}: the result holds no check (run derive with check)")
        key = str(order) if order is not None else max(by_order, key=int)
        if key not in by_order:
            raise ModelError(f"{quantity}: no check at order {key}")
        return float(by_order[key]["max_abs_error"])
    raise ModelError(f"unknown quantity {quantity!r}: use energy[:k], gap:i:j, series, "
                     "coupling:KIND[:SITES[:COMPONENT]] or error")
