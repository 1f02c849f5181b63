"""Run many ``lowfold`` command lines fast, each with a time limit: a pool of worker processes
that import lowfold once and call its entry point, ``lowfold.cli.main``, with ``sys.argv``
set and stdout/stderr captured (as ``tests/test_series_cli.py`` does in the test process).

A fresh ``lowfold`` process pays ~1-2 s of imports (numpy, scipy, numba); a worker pays it
once.  A worker runs one command at a time; a command still running at its time limit is a
hang: the worker is killed (with its children) and replaced.  Workers cap their address
space (:data:`MEMORY_CAP`), so a size guard that does not fire ends in a MemoryError, not in
the machine's out-of-memory killer.  An exception that escapes ``main`` is reported as the
script would show it: a traceback on stderr and exit status 1.  Python warnings are shown
as the script shows them (once per place), not turned into errors as in the test process.
"""

from __future__ import annotations

import io
import multiprocessing
import os
import resource
import signal
import sys
import threading
import time
import traceback
import warnings
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

MEMORY_CAP = 6 * 2**30          # bytes of address space per worker


@dataclass
class Outcome:
    """What a command did: ``code`` None for a hang."""

    argv: list
    code: int | None
    stdout: str
    stderr: str
    seconds: float


def _run(argv, cwd):
    from lowfold import cli

    saved = sys.argv, sys.stdout, sys.stderr, os.getcwd()
    out, err = io.StringIO(), io.StringIO()
    sys.argv, sys.stdout, sys.stderr = ["lowfold", *argv], out, err
    code = 0
    clock = time.perf_counter()
    try:
        if cwd:
            os.chdir(cwd)
        cli.main()
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    except BaseException:                         # what the script would print
        err.write(traceback.format_exc())
        code = 1
    finally:
        sys.argv, sys.stdout, sys.stderr = saved[:3]
        os.chdir(saved[3])
    return code, out.getvalue(), err.getvalue(), time.perf_counter() - clock


def _serve(conn) -> None:
    os.setpgrp()                                   # its own group: killed with its children
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_CAP, MEMORY_CAP))
    os.environ.update({"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"})
    for name in ("FORCE_COLOR", "TTY_COMPATIBLE", "TTY_INTERACTIVE", "COLUMNS"):
        os.environ.pop(name, None)
    warnings.resetwarnings()
    warnings.simplefilter("default")
    import lowfold.cli  # noqa: F401  (the imports, once)
    conn.send("ready")
    while True:
        job = conn.recv()
        if job is None:
            return
        conn.send(_run(*job))


class Worker:
    """One worker process (spawned: nothing of the test process is inherited)."""

    def __init__(self):
        context = multiprocessing.get_context("spawn")
        self.conn, child = context.Pipe()
        self.process = context.Process(target=_serve, args=(child,), daemon=False)
        self.process.start()
        child.close()
        if not self.conn.poll(120) or self.conn.recv() != "ready":
            self.kill()
            raise RuntimeError("a fuzz worker did not start")

    def run(self, argv, cwd, timeout) -> Outcome:
        self.conn.send((list(argv), cwd))
        if self.conn.poll(timeout):
            try:
                code, out, err, seconds = self.conn.recv()
            except EOFError:                       # the worker died (a signal, a crash)
                self.process.join(10)
                return Outcome(list(argv), self.process.exitcode, "", "worker died", 0.0)
            return Outcome(list(argv), code, out, err, seconds)
        self.kill()
        return Outcome(list(argv), None, "", "", timeout)

    def kill(self) -> None:
        try:
            os.killpg(self.process.pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
        self.process.join(10)

    def close(self) -> None:
        try:
            self.conn.send(None)
        except (BrokenPipeError, OSError):
            pass
        self.process.join(10)
        if self.process.is_alive():
            self.kill()


class Pool:
    """``n`` workers; :meth:`run_all` runs ``{name: (argv, cwd)}`` and returns ``{name: Outcome}``."""

    def __init__(self, n: int = 2, timeout: float = 60.0):
        self.timeout = timeout
        self.idle = [Worker() for _ in range(n)]
        self.lock = threading.Lock()
        self.n = n

    def _one(self, argv, cwd):
        with self.lock:
            worker = self.idle.pop()
        outcome = worker.run(argv, cwd, self.timeout)
        if outcome.code is None or not worker.process.is_alive():
            worker.kill()
            worker = Worker()
        with self.lock:
            self.idle.append(worker)
        return outcome

    def run_all(self, jobs: dict) -> dict:
        with ThreadPoolExecutor(max_workers=self.n) as threads:
            futures = {name: threads.submit(self._one, argv, cwd) for name, (argv, cwd) in jobs.items()}
            return {name: future.result() for name, future in futures.items()}

    def close(self) -> None:
        for worker in self.idle:
            worker.close()
