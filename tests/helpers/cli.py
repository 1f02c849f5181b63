"""The installed ``lowfold`` script, run as a user runs it: a subprocess with pipes.

Each start-up imports numpy, scipy and numba (about a second of CPU), so a test module
starts all its commands at once with :func:`run_all` in a module-scoped fixture.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from concurrent.futures import ThreadPoolExecutor

import pytest

LOWFOLD = shutil.which("lowfold")


def run(*args: str) -> subprocess.CompletedProcess:
    """Run the installed script with pipes (not a terminal), no forced colours and one BLAS
    thread (several run at once on few cores)."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("FORCE_COLOR", "TTY_COMPATIBLE", "TTY_INTERACTIVE", "COLUMNS")}
    env["OPENBLAS_NUM_THREADS"] = env["OMP_NUM_THREADS"] = "1"
    return subprocess.run([LOWFOLD, *args], capture_output=True, text=True, timeout=300,
                          check=False, env=env, stdin=subprocess.DEVNULL)


def run_all(jobs: dict) -> dict:
    """Run ``{name: args}`` concurrently; ``{name: CompletedProcess}``."""
    if LOWFOLD is None:
        pytest.fail("the lowfold script is not on PATH; install the package (pip install -e .)")
    with ThreadPoolExecutor(max_workers=4) as pool:
        futures = {name: pool.submit(run, *map(str, args)) for name, args in jobs.items()}
        return {name: future.result() for name, future in futures.items()}


def succeeded(proc: subprocess.CompletedProcess) -> str:
    """The standard output of a command that exited 0 without a traceback."""
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    return proc.stdout


def one_json_object(proc: subprocess.CompletedProcess) -> dict:
    """The single JSON object that ``--json`` prints: one line on stdout, nothing else."""
    out = succeeded(proc)
    data, end = json.JSONDecoder().raw_decode(out)
    assert out[end:] == "\n"
    assert len(out.strip().splitlines()) == 1
    assert isinstance(data, dict)
    return data


def one_line_error(proc: subprocess.CompletedProcess) -> str:
    """The message of a user error: exit status 2, nothing on stdout, exactly one line on
    stderr and no traceback (the contract of every command)."""
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stderr
    assert proc.stdout == ""
    lines = proc.stderr.splitlines()
    assert len(lines) == 1, proc.stderr
    return lines[0]
