"""Dask clusters for scans: a local cluster, batch-scheduler clusters, worker settings.

Every worker runs one thread: :data:`WORKER_ENV` pins the thread pools of numba, OpenMP,
MKL and OpenBLAS to one, and :data:`WORKER_MALLOC` restores glibc's dynamic allocation
thresholds (see there).  :func:`quiet_worker_plugin` makes local workers ignore Ctrl-C, and
a killed scan leaves no "leaked semaphore" warning (:func:`_start_quiet_resource_tracker`).
"""

from __future__ import annotations

import os
import sys

from lowfold.errors import LowfoldError, ModelError

__all__ = ["WORKER_ENV", "WORKER_MALLOC", "available_cores", "limit_threads", "start_local_cluster",
           "start_batch_cluster", "quiet_worker_plugin"]

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


def limit_threads() -> None:
    """One thread per worker: environment for libraries not yet imported, numba if it is."""
    for name, value in WORKER_ENV.items():
        os.environ.setdefault(name, value)
    numba = sys.modules.get("numba")
    if numba is not None and numba.get_num_threads() > 1:
        numba.set_num_threads(1)


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
               "processes": True, "env": dict(WORKER_ENV), "dashboard_address": ":0",
               "silence_logs": logging.CRITICAL}
    # CRITICAL, not ERROR: a worker whose heartbeat meets the scheduler already closing at
    # the end of a scan logs "Failed to communicate with scheduler during heartbeat" at
    # ERROR, with a traceback, about a shutdown that succeeded; failures of points reach
    # the scan through their futures and are stored with the point.
    # ":0": any free port for the scheduler's web server; the default (8787) makes a second
    # scan on the same machine fail to start ("Port 8787 is already in use").
    options.update(kwargs)
    _start_quiet_resource_tracker()
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


def _start_quiet_resource_tracker() -> None:
    """Start multiprocessing's resource tracker of this process, told not to warn.

    Each nanny of a LocalCluster makes two ``multiprocessing`` queues (three named
    semaphores each) in this process, registered with the resource tracker, a helper
    process that unlinks what a dying process leaves behind.  When the scan process is
    killed (SIGKILL, out-of-memory killer) the tracker does unlink them, but first warns
    "There appear to be 6 leaked semaphore objects" on the terminal, about a cleanup that
    has in fact been done.  The tracker takes its warning filters from ``PYTHONWARNINGS``
    when it starts (it is started once per process, on the first semaphore), so it is
    started here with that one warning ignored; the environment of this process is
    restored at once.  A tracker already running (started earlier by other code) is
    left as it is.
    """
    from multiprocessing import resource_tracker

    saved = os.environ.get("PYTHONWARNINGS")
    quiet = "ignore:resource_tracker:UserWarning"
    os.environ["PYTHONWARNINGS"] = quiet if not saved else f"{saved},{quiet}"
    try:
        resource_tracker.ensure_running()
    finally:
        if saved is None:
            os.environ.pop("PYTHONWARNINGS", None)
        else:
            os.environ["PYTHONWARNINGS"] = saved


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


def quiet_worker_plugin():
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
