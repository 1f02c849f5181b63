"""Parameter and lattice-size scans on dask.distributed, with a resumable result store.

The scan-file format is described in :mod:`lowfold.scanfile`.  Points run as dask tasks
(``pure=False``, with retries), biggest basis first; each finished point is written at
once to the result store (:mod:`lowfold.store`).  Running the same scan again skips every
stored success and every stored deterministic failure (an impossible point: a lowfold
error), recomputes points whose model file changed, and retries crashed points (killed
workers, unexpected exceptions); ``retry_failed=True`` retries the deterministic failures
too.  The process running the scan writes the store; workers only compute.
"""

from __future__ import annotations

import hashlib
import itertools
import os
import socket
import sys
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from fractions import Fraction
from pathlib import Path
from typing import Any, Callable, Mapping

from lowfold.model.sector import Sector
from lowfold.build.basis import sector_size
from lowfold.errors import LowfoldError, ModelError
from lowfold.model.modelfile import load_model
from lowfold.scans.scanfile import SECTOR_AXES, TASK_NAMES, ScanSpec, load_scan, parse_scan, scan_error
from lowfold.scans.store import RECORD_FORMAT, ResultStore, point_key, write_csv

__all__ = [
    "TASK_NAMES", "WORKER_ENV", "WORKER_MALLOC", "ScanSpec", "ScanPoint", "ScanSummary",
    "load_scan", "parse_scan", "plan_scan", "run_scan", "start_local_cluster", "evaluate_point",
    "available_cores", "format_summary", "start_batch_cluster",
]

WORKER_ENV = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1",
              "OPENBLAS_NUM_THREADS": "1"}
# dask's nanny sets MALLOC_TRIM_THRESHOLD_=65536 by default, which also switches off
# glibc's dynamic mmap threshold: every NumPy temporary above 128 KiB then costs an
# mmap/munmap pair and fresh zeroed pages, and Lanczos points ran 1.5-2x slower on a
# worker than in a plain loop (measured with benchmarks/bench_scan.py).  These values
# restore the upper end of glibc's own dynamic behaviour (mmap above 32 MiB, trim above
# 64 MiB; mallopt(3)).
WORKER_MALLOC = {"MALLOC_MMAP_THRESHOLD_": str(32 * 2**20),
                 "MALLOC_TRIM_THRESHOLD_": str(64 * 2**20)}


# --------------------------------------------------------------------------- planning
@dataclass(frozen=True)
class ScanPoint:
    """One point of a scan, ready to run.

    ``model`` is the base model with the point's lattice, sector and parameters applied;
    ``error`` is set instead when the point is impossible before anything runs (e.g. a
    filling that gives a fractional particle number).
    """

    key: str
    values: Mapping[str, Any]
    parameters: Mapping[str, float]
    size: tuple[int, ...] | None
    boundary: Any
    sector: Mapping[str, Any]
    n_sites: int
    cost: float
    model: Any = None
    error: Mapping[str, Any] | None = None


def _combinations(spec: ScanSpec):
    names = [n for n, _ in spec.axes]
    values = [v for _, v in spec.axes]
    if not names:
        return [{}]
    if spec.combine == "product":
        return [dict(zip(names, combo)) for combo in itertools.product(*values)]
    length = max(len(v) for v in values)
    return [{n: (v[i] if len(v) > 1 else v[0]) for n, v in zip(names, values)} for i in range(length)]


def _point_sector(base: Sector, fixed: Mapping[str, Any], values: Mapping[str, Any], n_sites: int):
    """The sector of a point, or an error message when it cannot be formed."""
    wanted = {**fixed, **{k: v for k, v in values.items() if k in SECTOR_AXES}}
    particles, sz = base.particles, base.sz
    if "particles" in wanted:
        particles = int(wanted["particles"])
    if "filling" in wanted:
        count = wanted["filling"] * n_sites
        if abs(count - round(count)) > 1e-9:
            return None, f"filling {wanted['filling']:g} on {n_sites} sites gives {count:g} particles, not an integer"
        particles = int(round(count))
    if "sz" in wanted:
        sz = Fraction(wanted["sz"]).limit_denominator(2)
    return Sector(particles, sz), None


def _cost(model) -> float:
    """Estimated cost of a point: its basis dimension (0 if it cannot be formed)."""
    try:
        return float(sector_size(model.site, model.n_sites, model.sector))
    except (LowfoldError, ValueError, TypeError):
        return 0.0


def _sector_dict(sector: Sector) -> dict:
    return {"particles": sector.particles, "sz": None if sector.sz is None else float(sector.sz)}


def plan_scan(spec: ScanSpec, model=None) -> list[ScanPoint]:
    """Expand the grid into points (in grid order), each with its model, key and cost.

    Parameters
    ----------
    spec : ScanSpec
    model : Model, optional
        The base model (default: read from ``spec.model_path``).

    Raises
    ------
    ModelError
        A grid parameter the model does not define, or a lattice size / boundary the
        model's lattice cannot take (naming the scan file and the key).
    """
    model = load_model(spec.model_path) if model is None else model
    for name, _ in spec.axes:
        if name not in ("size", "boundary", *SECTOR_AXES) and name not in model.parameters:
            raise scan_error(spec.source, f"grid.{name}",
                             f"not a parameter of {spec.model_path} "
                             f"(parameters: {', '.join(model.parameters) or 'none'})")
    lattices: dict = {}
    points = []
    for values in _combinations(spec):
        size, boundary = values.get("size"), values.get("boundary")
        if (size, boundary) not in lattices:
            try:
                lattices[size, boundary] = (model if size is None and boundary is None
                                            else model.with_lattice(size=size, boundary=boundary))
            except ModelError as exc:
                key = "grid.size" if size is not None else "grid.boundary"
                raise scan_error(spec.source, key, f"{size or ''} {boundary or ''}: {exc}") from None
        point_model = lattices[size, boundary]
        params = {k: v for k, v in values.items() if k in model.parameters}
        point_model = point_model.with_parameters(params)
        sector, problem = _point_sector(model.sector, spec.sector, values, point_model.n_sites)
        parameters = {k: float(v) for k, v in point_model.parameters.items()}
        sector_dict = _sector_dict(sector) if sector is not None else {"error": problem}
        key = point_key(parameters=parameters, size=size,
                        boundary=list(boundary) if isinstance(boundary, tuple) else boundary,
                        task=spec.task, options=spec.options, sector=sector_dict)
        if sector is not None:
            point_model = point_model.with_sector(sector)
        points.append(ScanPoint(
            key=key, values=values, parameters=parameters, size=size,
            boundary=list(boundary) if isinstance(boundary, tuple) else boundary,
            sector=sector_dict, n_sites=point_model.n_sites,
            cost=_cost(point_model) if sector is not None else 0.0, model=point_model,
            error=None if problem is None else {"type": "ModelError", "message": problem,
                                                "deterministic": True}))
    keys = [p.key for p in points]
    if len(set(keys)) != len(keys):
        raise scan_error(spec.source, "grid", "the grid lists the same point more than once")
    return points


# --------------------------------------------------------------------------- one point
def _limit_threads() -> None:
    """One thread per worker: environment for libraries not yet imported, numba if it is."""
    for name, value in WORKER_ENV.items():
        os.environ.setdefault(name, value)
    numba = sys.modules.get("numba")
    if numba is not None and numba.get_num_threads() > 1:
        numba.set_num_threads(1)


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
    _limit_threads()
    if compute is None:
        from lowfold.jobs.tasks import run_task as compute
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

    @property
    def ok(self) -> bool:
        return self.failed == 0 and self.lost == 0

    def to_dict(self) -> dict:
        """The JSON object printed by ``lowfold scan --json``."""
        return {"scan": self.scan, "out": self.out, "points": self.total, "computed": self.computed,
                "skipped": self.skipped, "failed": self.failed, "lost": self.lost,
                "elapsed": self.elapsed, "ok": self.ok, "failures": self.failures}


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


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


def available_cores() -> int:
    """CPU cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def start_local_cluster(workers: int | None = None, **kwargs):
    """A LocalCluster of ``workers`` processes (default: all cores), one thread each.

    The workers get ``NUMBA_NUM_THREADS = OMP_NUM_THREADS = ... = 1`` in their
    environment before they import anything, so points never oversubscribe the cores, and
    the malloc settings of :data:`WORKER_MALLOC` (see there).  Extra keyword arguments go
    to :class:`distributed.LocalCluster`.
    """
    import logging

    import dask
    from distributed import LocalCluster

    options = {"n_workers": workers or available_cores(), "threads_per_worker": 1,
               "processes": True, "env": dict(WORKER_ENV), "dashboard_address": None,
               "silence_logs": logging.ERROR}
    options.update(kwargs)
    # The nanny sets its pre-spawn variables before starting a worker process (and again
    # when it restarts one), taking a value from os.environ before the dask config: set
    # both while the nannies are made, then restore the environment of this process.
    config = {f"distributed.nanny.pre-spawn-environ.{k}": v for k, v in WORKER_MALLOC.items()}
    saved = {k: os.environ.get(k) for k in WORKER_MALLOC}
    try:
        os.environ.update(WORKER_MALLOC)
        with dask.config.set(config):
            return LocalCluster(**options)
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value


def start_batch_cluster(system: str, *, jobs: int, cores: int, memory: str, walltime: str, **options):
    """Workers in batch jobs through dask-jobqueue (optional: ``pip install 'lowfold[cluster]'``).

    Each job runs ``cores`` single-threaded worker processes sharing ``memory``, with
    :data:`WORKER_ENV` and :data:`WORKER_MALLOC` exported in the job script (the job's
    exports come after dask's defaults, so they win).

    Parameters
    ----------
    system : {"slurm", "pbs"}
    jobs : int
        Batch jobs to submit now (0: none yet; ``cluster.scale(jobs=...)`` later).
    cores, memory, walltime
        Per job, e.g. ``cores=32, memory="64GB", walltime="04:00:00"``.
    **options
        Passed to ``SLURMCluster`` / ``PBSCluster`` (``queue``, ``account``,
        ``job_extra_directives``, ``job_script_prologue``, ``local_directory``, ...).

    Returns
    -------
    dask_jobqueue.JobQueueCluster
        Use with ``distributed.Client(cluster)`` and ``run_scan(..., client=client)``.
    """
    try:
        import dask_jobqueue
    except ImportError:
        raise LowfoldError("batch clusters need dask-jobqueue: pip install 'lowfold[cluster]'") from None
    classes = {"slurm": dask_jobqueue.SLURMCluster, "pbs": dask_jobqueue.PBSCluster}
    if system not in classes:
        raise ModelError(f"unknown batch system {system!r} (known: {', '.join(classes)})")
    prologue = [f"export {k}={v}" for k, v in {**WORKER_ENV, **WORKER_MALLOC}.items()]
    prologue += list(options.pop("job_script_prologue", []))
    cluster = classes[system](cores=cores, processes=cores, memory=memory, walltime=walltime,
                              job_script_prologue=prologue, **options)
    if jobs:
        cluster.scale(jobs=jobs)
    return cluster


class _Display:
    """Rich progress bar on stderr (done/total, failed, running, elapsed, time left)."""

    def __init__(self, enabled: bool, total: int, done: int, title: str):
        self.progress = None
        if not enabled:
            return
        from rich.console import Console
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                                   TimeElapsedColumn, TimeRemainingColumn)

        console = Console(stderr=True)
        console.print(f"[bold]{title}[/]: {total} points, {done} already stored")
        self.progress = Progress(
            TextColumn("points"), BarColumn(), MofNCompleteColumn(),
            TextColumn("failed [red]{task.fields[failed]}[/]  running {task.fields[running]}"),
            TimeElapsedColumn(), TextColumn("left"), TimeRemainingColumn(),
            console=console)
        self.task = self.progress.add_task("scan", total=total, completed=done, failed=0, running=0)
        self.progress.start()

    def update(self, *, advance: int = 0, **fields):
        if self.progress is not None:
            self.progress.update(self.task, advance=advance, **fields)

    def close(self):
        if self.progress is not None:
            self.progress.stop()


def _crash_outcome(exc: BaseException) -> dict:
    return {"status": "error", "result": None, "timing": None,
            "error": {"type": type(exc).__name__, "message": str(exc) or repr(exc),
                      "deterministic": False}}


def _run_points(client, todo, spec, meta, store, summary, display, compute, retries):
    from distributed import as_completed

    total_threads, checked = max(1, sum(client.nthreads().values())), time.monotonic()
    ranked = sorted(todo, key=lambda p: p.cost, reverse=True)
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
        The scan (a path is read with :func:`load_scan`).
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
    KeyboardInterrupt
        On Ctrl-C, after cancelling the outstanding points; finished points are stored.
    """
    clock = time.perf_counter()
    spec = load_scan(scan) if not isinstance(scan, ScanSpec) else scan
    if out is None:
        source = Path(spec.source)
        out = source.with_name(source.stem + "-results")
    model = load_model(spec.model_path)
    points = plan_scan(spec, model)
    model_sha = _sha256(Path(spec.model_path))
    meta = {"model": {"path": str(spec.model_path), "sha256": model_sha,
                      "title": spec.title or model.title},
            "version": _lowfold_version()}
    store = ResultStore(out)
    store.write_manifest({"scan": spec.source, "task": spec.task, "options": dict(spec.options),
                          "axes": {n: [list(v) if isinstance(v, tuple) else v for v in vals]
                                   for n, vals in spec.axes},
                          "combine": spec.combine, "sector": dict(spec.sector), **meta,
                          "points": [p.key for p in points], "written": _now()})
    summary = ScanSummary(scan=spec.source, out=str(out), total=len(points))
    todo = []
    for point in points:
        stored = store.get(point.key)
        if not _needs_run(stored, model_sha, retry_failed):
            summary.skipped += 1
            if stored["status"] != "ok":
                summary.failed += 1
                summary.failures.append(_failure(stored))
        elif point.error is not None:
            record = _record(point, spec, meta, {"status": "error", "error": dict(point.error)})
            store.put(record)
            summary.computed += 1
            summary.failed += 1
            summary.failures.append(_failure(record))
        else:
            todo.append(point)
    show = sys.stderr.isatty() if progress is None else progress
    display = _Display(show and bool(todo), len(points), len(points) - len(todo),
                       spec.title or model.title or spec.task)
    display.update(failed=summary.failed)
    try:
        if todo:
            _execute(todo, spec, meta, store, summary, display, compute, retries,
                     client=client, scheduler=scheduler, workers=workers)
    finally:
        display.close()
        write_csv(store.records(), Path(out) / "results.csv")
        summary.elapsed = time.perf_counter() - clock
    return summary


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
        own.register_plugin(_make_quiet_plugin())
        _run_points(own, todo, spec, meta, store, summary, display, compute, retries)


def _make_quiet_plugin():
    """A worker plugin making local workers ignore Ctrl-C: the terminal sends SIGINT to
    the whole process group, and the scan process shuts its own cluster down anyway."""
    from distributed.diagnostics.plugin import WorkerPlugin

    class IgnoreInterrupt(WorkerPlugin):
        name = "lowfold-ignore-interrupt"

        def setup(self, worker):
            import signal
            import threading

            if threading.current_thread() is threading.main_thread():
                signal.signal(signal.SIGINT, signal.SIG_IGN)

    return IgnoreInterrupt()


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
    return "\n".join(lines)
