"""Running a scan on dask.distributed, storing each point as it finishes.

The scan-file format is described in :mod:`lowfold.scans.scanfile`, the planning of the
points in :mod:`lowfold.scans.plan` and the clusters in :mod:`lowfold.scans.cluster`.
Points run as dask tasks (``pure=False``, with retries), biggest basis first; each finished
point is written at once to the result store (:mod:`lowfold.scans.store`).  Running the
same scan again skips every stored success and every stored deterministic failure (an
impossible point: a lowfold error), recomputes points whose model file changed, and retries
crashed points (killed workers, unexpected exceptions); ``retry_failed=True`` retries the
deterministic failures too.  The process running the scan writes the store; workers only
compute.  This module holds :func:`run_scan`, :func:`evaluate_point` (one point, on a
worker) and :class:`ScanSummary` with :func:`format_summary`.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import socket
import sys
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Callable, Mapping

import numpy as np

from lowfold.errors import LowfoldError
from lowfold.model.model import Model
from lowfold.scans.cluster import available_cores, limit_threads, quiet_worker_plugin, start_local_cluster
from lowfold.scans.plan import ScanPoint, order_by_cost, plan_scan
from lowfold.scans.progress import ScanDisplay
from lowfold.scans.scanfile import ScanSpec, load_scan
from lowfold.scans.store import RECORD_FORMAT, ResultStore, canonical_json
from lowfold.scans.table import write_csv

__all__ = ["ScanSummary", "ScanInterrupted", "run_scan", "evaluate_point", "format_summary",
           "model_fingerprint"]


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds")


def evaluate_point(task: str, model, options: Mapping[str, Any], compute: Callable | None = None) -> dict:
    """Run one point (on a worker): the task result, or the lowfold error it raised.

    Parameters
    ----------
    task : str
    model : Model
        The point's model.
    options : dict
        The task's options.
    compute : callable, optional
        ``compute(task, model, options) -> result object`` (with ``to_dict()``); default
        :func:`lowfold.jobs.tasks.run_task`.

    Returns
    -------
    dict
        ``{"status", "result", "error", "timing"}``.  Other exceptions propagate (dask
        retries them).
    """
    limit_threads()
    if compute is None:
        compute = _run_task_here
    started, clock = _now(), time.perf_counter()
    result, error = None, None
    try:
        result = compute(task, model, dict(options)).to_dict()
    except LowfoldError as exc:
        error = {"type": type(exc).__name__, "message": str(exc), "deterministic": True}
    seconds = time.perf_counter() - clock
    timing = {"started": started, "finished": _now(), "seconds": seconds,
              "host": socket.gethostname(), "pid": os.getpid()}
    return {"status": "ok" if error is None else "error", "result": result, "error": error,
            "timing": timing}


def _run_task_here(task: str, model, options: dict):
    """:func:`lowfold.jobs.tasks.run_task`; inside a Dask task, the distinct cluster graphs
    of an infinite lattice go to the same cluster (:func:`lowfold.scans.graphs.worker_graph_map`)."""
    from lowfold.jobs.tasks import run_task
    from lowfold.scans.graphs import on_dask_worker, worker_graph_map

    if getattr(model.lattice, "infinite", False) and on_dask_worker():
        return run_task(task, model, options, graph_map=worker_graph_map)
    return run_task(task, model, options)


# --------------------------------------------------------------------------- execution
@dataclass
class ScanSummary:
    """What a scan run did.  ``ok`` is False when any point failed or was not finished."""

    scan: str
    out: str
    total: int
    computed: int = 0
    skipped: int = 0
    failed: int = 0
    lost: int = 0
    elapsed: float = 0.0
    failures: list = field(default_factory=list)
    warnings: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.failed == 0 and self.lost == 0

    def to_dict(self) -> dict:
        """The JSON object printed by ``lowfold scan --json``."""
        return {"scan": self.scan, "out": self.out, "points": self.total, "computed": self.computed,
                "skipped": self.skipped, "failed": self.failed, "lost": self.lost,
                "elapsed": self.elapsed, "ok": self.ok, "failures": self.failures,
                "warnings": list(self.warnings)}


class ScanInterrupted(KeyboardInterrupt):
    """Ctrl-C during a scan: ``stored`` of ``total`` points are in the store ``out``.

    A :class:`KeyboardInterrupt`, so ``except KeyboardInterrupt`` keeps working; the
    message says how many points are stored and how to resume.
    """

    def __init__(self, stored: int, total: int, out: str):
        super().__init__(f"interrupted: {stored} of {total} points are stored in {out}; run "
                         "the scan again with the same results directory to compute the other "
                         f"{total - stored} (stored points are not recomputed)")
        self.stored, self.total, self.out = stored, total, out


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def model_fingerprint(model: Model) -> str:
    """SHA-256 of a model object's full ``repr`` (every array element, floats exact).

    Stands in for the file checksum when the model is given as an object: a resumed scan
    recomputes its points when the model changed.  Stable across processes and runs (the
    model is made of frozen dataclasses, tuples, ordered mappings and NumPy arrays).
    """
    with np.printoptions(threshold=sys.maxsize, floatmode="unique"):
        text = repr(model)
    return hashlib.sha256(text.encode()).hexdigest()


def _model_meta(spec: ScanSpec, model: Model) -> dict:
    """The ``model`` entry of the records: file path and checksum, or the object's fingerprint."""
    if spec.model is None:
        return {"path": str(spec.model_path), "sha256": _sha256(Path(spec.model_path)),
                "title": spec.title or model.title}
    return {"path": None, "sha256": model_fingerprint(model), "title": spec.title or model.title}


def _lowfold_version() -> str:
    from lowfold import __version__

    return __version__


def _record(point: ScanPoint, spec: ScanSpec, meta: Mapping[str, Any], outcome: Mapping[str, Any]) -> dict:
    return {
        "format": RECORD_FORMAT, "key": point.key, "status": outcome["status"],
        "task": spec.task, "options": dict(spec.options),
        "parameters": dict(point.parameters),
        "scanned": [n for n, _ in spec.axes if n not in ("size", "boundary")],
        "values": {k: (list(v) if isinstance(v, tuple) else v) for k, v in point.values.items()},
        "size": None if point.size is None else list(point.size), "boundary": point.boundary,
        "sector": dict(point.sector), "n_sites": point.n_sites,
        "model": dict(meta["model"]), "lowfold_version": meta["version"],
        "timing": outcome.get("timing"), "result": outcome.get("result"), "error": outcome.get("error"),
    }


def _needs_run(stored: Mapping[str, Any] | None, model_sha: str, retry_failed: bool) -> bool:
    if stored is None or stored.get("model", {}).get("sha256") != model_sha:
        return True
    if stored.get("status") == "ok":
        return False
    deterministic = (stored.get("error") or {}).get("deterministic", False)
    return retry_failed or not deterministic


def _crash_outcome(exc: BaseException) -> dict:
    return {"status": "error", "result": None, "timing": None,
            "error": {"type": type(exc).__name__, "message": str(exc) or repr(exc),
                      "deterministic": False}}


def _run_points(client, todo, spec, meta, store, summary, display, compute, retries):
    from distributed import as_completed

    total_threads, checked = max(1, sum(client.nthreads().values())), time.monotonic()
    ranked = order_by_cost(todo)
    futures = {}
    for rank, point in enumerate(ranked):
        future = client.submit(evaluate_point, spec.task, point.model, dict(spec.options), compute,
                               pure=False, retries=retries, priority=len(ranked) - rank)
        futures[future] = point
    pending = set(futures)
    display.update(running=min(len(pending), total_threads))
    try:
        for future in as_completed(list(futures)):
            point = futures[future]
            pending.discard(future)
            if future.status == "finished":
                outcome = future.result()
            elif future.status == "error":
                outcome = _crash_outcome(future.exception())
            else:                        # cancelled: scheduler or client went away
                summary.lost += 1
                continue
            record = _record(point, spec, meta, outcome)
            store.put(record)
            future.release()
            summary.computed += 1
            if record["status"] != "ok":
                summary.failed += 1
                summary.failures.append(_failure(record))
            if time.monotonic() - checked > 2.0:          # workers come and go on a cluster
                total_threads, checked = max(1, sum(client.nthreads().values())), time.monotonic()
            display.update(advance=1, failed=summary.failed,
                           running=min(len(pending), total_threads))
    finally:
        if pending:
            client.cancel(list(pending))


def _failure(record: Mapping[str, Any]) -> dict:
    return {"key": record["key"], "values": record["values"], "error": record["error"]}


def run_scan(
    scan: ScanSpec | str | os.PathLike,
    *,
    model: Model | None = None,
    out: str | os.PathLike | None = None,
    scheduler: str | None = None,
    workers: int | None = None,
    client=None,
    retry_failed: bool = False,
    retries: int = 2,
    progress: bool | None = None,
    compute: Callable | None = None,
) -> ScanSummary:
    """Run a scan, storing each point as it finishes; resumes a previous run in ``out``.

    Parameters
    ----------
    scan : ScanSpec or path
        The scan (a path is read with :func:`load_scan`).  A ScanSpec whose ``model`` is
        an object runs that model and reads no model file.
    model : Model, optional
        Run the scan on this model instead of the scan's model (nothing is read from the
        model file).  Records then store ``model.path = null`` and, as ``sha256``, the
        :func:`model_fingerprint` of the model: a resumed scan recomputes its points when
        the model object changed, or when switching between a file and an object.
    out : path, optional
        Results directory (default: ``<scan file stem>-results`` beside the scan file).
    scheduler : str, optional
        Address of a running dask scheduler (``tcp://host:8786``) or its scheduler file
        (``*.json``, from ``dask scheduler --scheduler-file``); default: start a
        LocalCluster on this machine.
    workers : int, optional
        LocalCluster workers (default: all cores); with ``scheduler``, wait until this many
        workers have connected before submitting.
    client : distributed.Client, optional
        Use this client (and its cluster) instead.
    retry_failed : bool
        Also recompute points stored as deterministic failures.
    retries : int
        Dask retries of a point whose task raised an unexpected exception.  A point whose
        worker died is rescheduled by the scheduler (``distributed.scheduler.allowed-failures``).
    progress : bool, optional
        Show a rich progress bar on stderr (default: only when stderr is a terminal).
    compute : callable, optional
        ``compute(task, model, options) -> result object`` replacing :func:`lowfold.jobs.tasks.run_task`
        (must be importable by the workers).

    Returns
    -------
    ScanSummary
        ``summary.ok`` is False if any point failed (the CLI exits non-zero).

    Raises
    ------
    ModelError
        Invalid scan file, model file or grid (nothing runs).
    StoreError
        ``out`` cannot be written (read-only, full, below a file), or another scan is
        writing to it (the store is locked while a scan writes; a scan with nothing to
        compute writes nothing and needs no lock).
    ScanInterrupted
        On Ctrl-C (a KeyboardInterrupt), after cancelling the outstanding points; finished
        points are stored, and the message says how many and how to resume.
    """
    clock = time.perf_counter()
    spec = load_scan(scan) if not isinstance(scan, ScanSpec) else scan
    if model is not None:
        spec = dataclasses.replace(spec, model=model)       # ScanSpec checks its type
    if out is None:
        source = Path(spec.source)
        out = source.with_name(source.stem + "-results")
    model = spec.base_model()
    points = plan_scan(spec, model)
    meta = {"model": _model_meta(spec, model), "version": _lowfold_version()}
    manifest = {"scan": spec.source, "task": spec.task, "options": dict(spec.options),
                "axes": {n: [list(v) if isinstance(v, tuple) else v for v in vals]
                         for n, vals in spec.axes},
                "combine": spec.combine, "sector": dict(spec.sector), **meta,
                "points": [p.key for p in points]}
    store = ResultStore(out)
    summary, todo = _sort_points(points, spec, store, meta, retry_failed)
    csv_path = Path(out) / "results.csv"
    if todo or summary.computed or not csv_path.exists() or not _same_manifest(store, manifest):
        with store.lock():      # another scan may have stored points meanwhile: sort again
            summary, todo = _sort_points(points, spec, store, meta, retry_failed, write=True)
            if not _same_manifest(store, manifest):
                store.write_manifest({**manifest, "written": _now()})
            try:
                _run_todo(todo, points, spec, meta, store, summary, model, progress, compute,
                          retries, client=client, scheduler=scheduler, workers=workers)
            finally:
                write_csv(store.records(), csv_path)
    summary.warnings = list(store.warnings)
    summary.elapsed = time.perf_counter() - clock
    return summary


def _same_manifest(store: ResultStore, manifest: Mapping[str, Any]) -> bool:
    """Whether ``scan.json`` already describes this scan (its time stamp aside)."""
    stored = store.manifest()
    return stored is not None and {k: v for k, v in stored.items() if k != "written"} == _jsonable(manifest)


def _jsonable(obj: Any) -> Any:
    import json

    return json.loads(canonical_json(obj))


def _sort_points(points, spec, store, meta, retry_failed, *, write=False):
    """A fresh summary counting the stored points, and the points still to compute.

    Impossible points (``point.error``) are counted as computed; with ``write`` their
    records are stored.
    """
    summary = ScanSummary(scan=spec.source, out=str(store.directory), total=len(points))
    todo = []
    for point in points:
        stored = store.get(point.key)
        if not _needs_run(stored, meta["model"]["sha256"], retry_failed):
            summary.skipped += 1
            if stored["status"] != "ok":
                summary.failed += 1
                summary.failures.append(_failure(stored))
        elif point.error is not None:
            record = _record(point, spec, meta, {"status": "error", "error": dict(point.error)})
            if write:
                store.put(record)
            summary.computed += 1
            summary.failed += 1
            summary.failures.append(_failure(record))
        else:
            todo.append(point)
    return summary, todo


def _run_todo(todo, points, spec, meta, store, summary, model, progress, compute, retries, **where):
    """Compute ``todo`` with a progress display; Ctrl-C becomes :class:`ScanInterrupted`."""
    show = sys.stderr.isatty() if progress is None else progress
    display = ScanDisplay(show and bool(todo), len(points), len(points) - len(todo),
                          spec.title or model.title or spec.task)
    display.update(failed=summary.failed)
    try:
        if todo:
            _execute(todo, spec, meta, store, summary, display, compute, retries, **where)
    except KeyboardInterrupt:
        raise ScanInterrupted(summary.skipped + summary.computed, len(points),
                              str(store.directory)) from None
    finally:
        display.close()


def _execute(todo, spec, meta, store, summary, display, compute, retries, *, client, scheduler, workers):
    if client is not None:
        _run_points(client, todo, spec, meta, store, summary, display, compute, retries)
        return
    from distributed import Client

    if scheduler is not None:
        target = ({"scheduler_file": scheduler} if str(scheduler).endswith(".json")
                  else {"address": scheduler})
        with Client(**target) as own:
            if workers:
                own.wait_for_workers(workers)
            _run_points(own, todo, spec, meta, store, summary, display, compute, retries)
        return
    n_workers = min(workers or available_cores(), len(todo))
    with start_local_cluster(n_workers) as cluster, Client(cluster) as own:
        own.register_plugin(quiet_worker_plugin())
        _run_points(own, todo, spec, meta, store, summary, display, compute, retries)


def format_summary(summary: ScanSummary) -> str:
    """A few human-readable lines about a finished scan (for the terminal)."""
    lines = [f"{summary.total} points in {summary.out}: {summary.computed} computed, "
             f"{summary.skipped} already stored, {summary.failed} failed"
             + (f", {summary.lost} not finished" if summary.lost else "")
             + f" ({summary.elapsed:.1f} s)"]
    for failure in summary.failures[:10]:
        values = ", ".join(f"{k}={v}" for k, v in failure["values"].items())
        error = failure["error"] or {}
        lines.append(f"  failed: {values}: {error.get('type')}: {error.get('message')}")
    if len(summary.failures) > 10:
        lines.append(f"  ... and {len(summary.failures) - 10} more (see {summary.out}/results.csv)")
    lines.extend(f"  warning: {note}" for note in summary.warnings)
    return "\n".join(lines)
