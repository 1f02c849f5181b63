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

``result`` is the task's JSON output (see docs/output.md), read back through its typed
result object (:func:`point_result`).  Reading is forgiving and writing is careful:

* a file in ``points/`` that is not a record of its key, or an ``ok`` record whose result
  does not parse, is skipped and named in :attr:`ResultStore.warnings` (a resumed scan
  recomputes that point);
* files are created with mode ``0666`` less the umask (as ``open`` would), not ``0600``;
* a directory that cannot be written (read-only, full disk, a path below a file) raises
  :class:`~lowfold.errors.StoreError` with one line naming the path and the reason;
* one scan at a time writes a store: :meth:`ResultStore.lock` holds ``.lock`` (a
  ``filelock`` lock, released by the system when the process dies).

``deterministic`` is true for the project's own errors (an impossible point fails the same
way every time) and false for crashes (a killed worker, an unexpected exception), which a
resumed scan retries.
"""

from __future__ import annotations

import hashlib
import json
import os
import secrets
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterable, Iterator, Mapping, TextIO

import filelock

from lowfold.errors import ModelError, StoreError
from lowfold.results import (
    RESULT_TYPES,
    EffectiveModel,
    Spectrum,
    StateSeries,
    result_from_dict,
)

__all__ = ["RECORD_FORMAT", "ResultStore", "point_key", "canonical_json", "atomic_text_file",
           "write_json_atomic", "load_results", "open_results", "point_result", "store_error"]

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


def store_error(path: str | os.PathLike, exc: OSError, doing: str = "write") -> StoreError:
    """One line for an OS error on a results file: the path, what failed and why."""
    reason = exc.strerror or str(exc) or type(exc).__name__
    return StoreError(f"{path}: cannot {doing} ({reason})")


@contextmanager
def atomic_text_file(path: str | os.PathLike, *, newline: str | None = None) -> Iterator[TextIO]:
    """A UTF-8 text file that appears at ``path`` whole or not at all.

    The block writes to a temporary file in the same directory (created with mode ``0666``
    less the umask, like any new file), which is flushed, synced to disk and moved over
    ``path`` with :func:`os.replace` when the block ends; if the block raises, the
    temporary file is removed and ``path`` is left as it was.  An ``OSError`` of the file
    system (read-only, full, not a directory) becomes a :class:`StoreError`.
    """
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(6)}.tmp")
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except OSError as exc:
        raise store_error(path, exc) from None
    try:
        with os.fdopen(fd, "w", newline=newline, encoding="utf-8") as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException as exc:
        if os.path.exists(tmp):
            os.unlink(tmp)
        if isinstance(exc, OSError) and not isinstance(exc, StoreError):
            raise store_error(path, exc) from None
        raise


def write_json_atomic(path: str | os.PathLike, obj: Any) -> None:
    """Write ``obj`` as JSON to ``path`` atomically (:func:`atomic_text_file`)."""
    with atomic_text_file(path) as handle:
        json.dump(_to_jsonable(obj), handle, indent=1, sort_keys=True)
        handle.write("\n")


def point_result(record: Mapping[str, Any]) -> Spectrum | EffectiveModel | StateSeries:
    """The typed result object of a successful record (:func:`lowfold.results.result_from_dict`).

    Raises
    ------
    ModelError
        The record failed, its task is unknown or its ``result`` does not parse.
    """
    key = record.get("key", "?")
    if record.get("status") != "ok":
        raise ModelError(f"point {key} failed; it has no result")
    task = record.get("task", "")
    if task not in RESULT_TYPES:
        raise ModelError(f"point {key}: unknown task {task!r}")
    try:
        return result_from_dict(task, record.get("result"))
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
        raise ModelError(f"point {key}: its stored {task} result does not parse "
                         f"({type(exc).__name__}: {exc})") from None


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
    >>> key = point_key(parameters={"U": 8.0}, size=None, boundary=None, task="spectrum",
    ...                 options={})
    >>> record = {"key": key, "status": "ok", "task": "spectrum",
    ...           "result": {"dimension": 1, "energies": [0.0]}}
    >>> store.put(record).name == key + ".json"
    True
    >>> store.get(key)["status"], store.keys() == [key]
    ('ok', True)
    >>> _ = store.put({**record, "result": None})      # edited by hand: not a result
    >>> store.get(key) is None, len(store.warnings)
    (True, 1)
    >>> tmp.cleanup()
    """

    def __init__(self, directory: str | os.PathLike):
        self.directory = Path(directory)
        self.points_dir = self.directory / "points"
        self.warnings: list[str] = []
        try:
            self.points_dir.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise store_error(self.points_dir, exc, "create the results directory") from None

    def path_for(self, key: str) -> Path:
        """File of the record with ``key``."""
        return self.points_dir / f"{key}.json"

    def _read(self, key: str) -> tuple[dict | None, str | None]:
        """The record with ``key`` and, when the file is there but unusable, why."""
        path = self.path_for(key)
        try:
            with open(path, encoding="utf-8") as handle:
                record = json.load(handle)
        except FileNotFoundError:
            return None, None
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            return None, f"not JSON ({type(exc).__name__})"
        except OSError as exc:
            return None, exc.strerror or type(exc).__name__
        if not isinstance(record, dict) or record.get("key") != key:
            return None, "not a record of this key"
        if record.get("status") == "ok":
            try:
                point_result(record)
            except ModelError as exc:
                return None, str(exc)
        elif record.get("status") != "error":
            return None, f"status {record.get('status')!r} is neither 'ok' nor 'error'"
        return record, None

    def _skip(self, name: str, reason: str) -> None:
        note = f"{self.points_dir / name}: skipped, {reason}"
        if note not in self.warnings:
            self.warnings.append(note)

    def get(self, key: str) -> dict | None:
        """The stored record with ``key``, or None if absent or unusable.

        An unusable file (not JSON, not the record of ``key``, an ``ok`` record whose
        result does not parse into its result object) counts as missing and is named in
        :attr:`warnings`.
        """
        record, problem = self._read(key)
        if problem is not None:
            self._skip(self.path_for(key).name, problem + "; the point counts as not computed")
        return record

    def put(self, record: Mapping[str, Any]) -> Path:
        """Store ``record`` (which must carry its ``key``) atomically; return its path."""
        path = self.path_for(record["key"])
        write_json_atomic(path, dict(record))
        return path

    def keys(self) -> list[str]:
        """Keys of all stored record files, sorted (other files are named in :attr:`warnings`)."""
        keys = []
        for path in sorted(self.points_dir.iterdir()):
            if path.name.startswith("."):          # temporary files of atomic writes
                continue
            if path.suffix == ".json" and path.is_file():
                keys.append(path.stem)
            else:
                self._skip(path.name, "not a point record")
        return keys

    def records(self) -> list[dict]:
        """All usable records, sorted by key; unusable files are skipped (:attr:`warnings`)."""
        return [r for r in (self.get(key) for key in self.keys()) if r is not None]

    def manifest(self) -> dict | None:
        """The stored ``scan.json``, or None if absent or unreadable."""
        try:
            with open(self.directory / "scan.json", encoding="utf-8") as handle:
                data = json.load(handle)
        except (OSError, ValueError):
            return None
        return data if isinstance(data, dict) else None

    def write_manifest(self, manifest: Mapping[str, Any]) -> None:
        """Record which scan wrote here (``scan.json``)."""
        write_json_atomic(self.directory / "scan.json", dict(manifest))

    @contextmanager
    def lock(self) -> Iterator[None]:
        """Hold the store's write lock (``.lock``) for the block; StoreError if another
        process holds it.  The lock is an OS file lock (``filelock``): it is released when
        the holder exits, even when killed, so it never needs cleaning up by hand."""
        path = self.directory / ".lock"
        try:
            held = filelock.FileLock(path, timeout=0)
            held.acquire()
        except filelock.Timeout:
            raise StoreError(f"{self.directory}: another scan is writing to this results "
                             "directory; wait for it to finish or write to another directory") from None
        except OSError as exc:
            raise store_error(path, exc, "lock the results directory") from None
        try:
            yield
        finally:
            held.release()


def load_results(directory: str | os.PathLike) -> list[dict]:
    """Load every point record of a results directory (sorted by key).

    Parameters
    ----------
    directory : path
        A directory written by :func:`lowfold.scans.run.run_scan` (``--out``).

    Returns
    -------
    list of dict
        The usable records as described in the module docstring; :func:`open_results`
        gives the store, whose ``warnings`` name the files skipped.
    """
    return open_results(directory).records()


def open_results(directory: str | os.PathLike) -> ResultStore:
    """The store of an existing results directory, for reading (ModelError if it is none)."""
    directory = Path(directory)
    if not (directory / "points").is_dir():
        raise ModelError(f"{directory}: not a results directory (no points/ inside)")
    return ResultStore(directory)
