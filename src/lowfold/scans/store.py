"""Result store of a scan: one JSON file per point, written atomically.

A results directory holds ``points/<key>.json`` (one record per scan point), ``scan.json``
(the scan that last wrote to it) and ``results.csv`` (a tidy table of every point, see
:mod:`lowfold.scans.table`).  A point's key is a stable hash of what determines its result:
the model parameter values, the lattice size and boundary, the sector, the task and its
options.  Each file is written to a temporary file in the same directory and moved into
place with :func:`os.replace`, so a reader (or a resumed scan) sees either the whole record
or none of it.  Reading one number out of a record is :mod:`lowfold.scans.select`.

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

``result`` is the task's JSON output (see docs/output.md).  ``deterministic`` is true for the
project's own errors (an impossible point fails the same way every time) and false for
crashes (a killed worker, an unexpected exception), which a resumed scan retries.
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, TextIO

from lowfold.errors import LowfoldError, ModelError

__all__ = ["RECORD_FORMAT", "ResultStore", "point_key", "canonical_json", "atomic_text_file",
           "write_json_atomic", "load_results"]

RECORD_FORMAT = 1


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


@contextmanager
def atomic_text_file(path: str | os.PathLike, *, newline: str | None = None) -> Iterator[TextIO]:
    """A UTF-8 text file that appears at ``path`` whole or not at all.

    The block writes to a temporary file in the same directory, which is flushed, synced
    to disk and moved over ``path`` with :func:`os.replace` when the block ends; if the
    block raises, the temporary file is removed and ``path`` is left as it was.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix="." + path.name + ".", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", newline=newline, encoding="utf-8") as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_json_atomic(path: str | os.PathLike, obj: Any) -> None:
    """Write ``obj`` as JSON to ``path`` atomically (:func:`atomic_text_file`)."""
    with atomic_text_file(path) as handle:
        json.dump(_to_jsonable(obj), handle, indent=1, sort_keys=True)
        handle.write("\n")


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
        A directory written by :func:`lowfold.scans.run.run_scan` (``--out``).

    Returns
    -------
    list of dict
        The records as described in the module docstring.
    """
    directory = Path(directory)
    if not (directory / "points").is_dir():
        raise ModelError(f"{directory}: not a results directory (no points/ inside)")
    return ResultStore(directory).records()
