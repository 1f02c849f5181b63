"""The tidy table of a results directory: rows, CSV file, pandas DataFrame.

One row per point and per scalar (energy level, coupling order, ...); the columns are
described in :func:`table_rows`.  A vector or matrix value is spread over rows with
component names ``x``/``y``/``z`` (``xy``, ... for a 3x3 matrix; indices otherwise), which
are also the component names of the selectors in :mod:`lowfold.scans.select`.
"""

from __future__ import annotations

import csv
import os
from typing import Any, Iterable, Mapping

from lowfold.errors import ModelError
from lowfold.results import EffectiveModel, Spectrum, StateSeries
from lowfold.scans.store import atomic_text_file, load_results, point_result

__all__ = ["TABLE_COLUMNS", "table_rows", "write_csv", "to_dataframe", "flatten_components",
           "sites_label"]

_COMPONENTS_3 = ("x", "y", "z")
TABLE_COLUMNS = (
    "key", "task", "status", "size", "boundary", "n_sites",
    "quantity", "kind", "sites", "component", "order", "index", "value", "error",
)


def sites_label(sites: Iterable[int]) -> str:
    """``[0, 1]`` -> ``"0-1"``."""
    return "-".join(str(int(s)) for s in sites)


def _size_label(size: Iterable[int] | None) -> str:
    return "" if size is None else "x".join(str(int(n)) for n in size)


def flatten_components(value: Any) -> list[tuple[str, float]]:
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


def _result_rows(result: Spectrum | EffectiveModel | StateSeries) -> list[dict]:
    """The scalars of one result object, as table rows."""
    rows: list[dict] = []

    def add(quantity, value, **extra):
        for component, number in flatten_components(value):
            rows.append({"quantity": quantity, "component": component, "value": number, **extra})

    if isinstance(result, Spectrum):
        add("dimension", result.dimension)
        for k, energy in enumerate(result.energies):
            add("energy", float(energy), index=k)
    elif isinstance(result, StateSeries):
        for order, value in enumerate(result.energies):
            add("series", float(value), order=str(order))
        add("series", result.energy, order="total")
        for name, value in sorted(result.scalar_diagnostics().items()):
            add("diagnostic", value, kind=name)
    elif isinstance(result, EffectiveModel):
        for coupling in result.couplings:
            label = {"kind": coupling.kind, "sites": sites_label(coupling.sites)}
            add("coupling", coupling.value, order="total", **label)
            for order, value in coupling.orders.items():
                add("coupling", value, order=str(order), **label)
            if result.exact is not None:        # derive with exact couplings
                add("coupling", result.exact.coupling_value(
                    coupling.kind, coupling.sites, coupling.value,
                    getattr(coupling, "operator", None)), order="exact", **label)
        for term in result.terms:
            add("term", term.coefficient, kind=term.operator, order="total")
            if result.exact is not None:
                add("term", result.exact.term_value(term.operator), kind=term.operator,
                    order="exact")
        if result.check is not None:
            for k, energy in enumerate(result.check.exact):
                add("exact", energy, index=k)
            for order, error in result.check.max_abs_error.items():
                add("max_abs_error", error, order=str(order))
        manifold = result.manifold
        for name, value in (("dimension", manifold.dimension), ("energy", manifold.energy),
                            ("gap", manifold.gap)):
            add("manifold_" + name, value)
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
            try:
                result = point_result(record)
            except ModelError as exc:
                rows.append({**base, "error": f"ModelError: {exc}"})
                continue
            for row in _result_rows(result):
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
    with atomic_text_file(path, newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=_column_order(records))
        writer.writeheader()
        writer.writerows(rows)
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
