"""The installed ``lowfold`` command, run as a subprocess.

User errors give exactly one line on stderr naming the file and the key, exit status 2 and
no traceback; ``--json`` prints one JSON object on stdout and nothing else.  All commands
of this module are started at once (a thread pool of subprocesses), because each start-up
imports numpy, scipy and numba.  A representative set of bad inputs (one per code path:
load-time checks, compile-time checks, I/O and TOML errors) runs by default; the rest of the
bad inputs of ``helpers.bad_models.BAD_CASES`` are marked slow (about a second of CPU each).
"""

from __future__ import annotations

import json
from functools import reduce

import numpy as np
import pytest

import lowfold
from helpers.bad_models import BAD_CASES, SPIN_CHAIN, key_missing, write_case
from helpers.cli import one_line_error, run_all

FAST_CASES = {"unknown-top-level-key", "field-along-x-with-sz-fixed", "invalid-toml",
              "missing-file"}


def bad_case_runs(directory, fast: bool) -> dict:
    """``{case name: (path, CompletedProcess)}`` of ``lowfold spectrum`` on bad inputs."""
    paths = {c.name: write_case(c, directory) for c in BAD_CASES
             if (c.name in FAST_CASES) == fast}
    done = run_all({name: ["spectrum", path] for name, path in paths.items()})
    return {name: (paths[name], done[name]) for name in paths}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The representative bad inputs and the normal commands, run concurrently."""
    directory = tmp_path_factory.mktemp("models")
    good = str(directory / "spins.toml")
    (directory / "spins.toml").write_text(SPIN_CHAIN)
    paths = {c.name: write_case(c, directory) for c in BAD_CASES if c.name in FAST_CASES}
    jobs = {name: ["spectrum", path] for name, path in paths.items()}
    jobs.update({
        "levels-zero": ["spectrum", good, "--levels", "0"],
        "json": ["spectrum", good, "--levels", "3", "--json"],
        "table": ["spectrum", good, "--levels", "2"],
        "version": ["--version"],
        "help": ["--help"],
    })
    done = run_all(jobs)
    return {name: (paths.get(name), proc) for name, proc in done.items()}


@pytest.fixture(scope="module")
def slow_runs(tmp_path_factory):
    """The remaining bad inputs, run concurrently."""
    return bad_case_runs(tmp_path_factory.mktemp("more-models"), fast=False)


# ---------------------------------------------------------------------------------------
# user errors


def case_param(case):
    marks = [] if case.name in FAST_CASES else [pytest.mark.slow]
    return pytest.param(case, id=case.name, marks=marks)


def result_of(case, request):
    fixture = "runs" if case.name in FAST_CASES else "slow_runs"
    return request.getfixturevalue(fixture)[case.name]


@pytest.mark.parametrize("case", [case_param(c) for c in BAD_CASES])
def test_bad_input_one_line_exit_2(case, request):
    _, proc = result_of(case, request)
    one_line_error(proc)


@pytest.mark.parametrize("case", [case_param(c) for c in BAD_CASES])
def test_bad_input_line_names_file_and_key(case, request):
    path, proc = result_of(case, request)
    line = one_line_error(proc)
    assert path in line
    assert not key_missing(line, case.keys), line


def test_levels_below_one(runs):
    _, proc = runs["levels-zero"]
    assert "levels" in one_line_error(proc)


# ---------------------------------------------------------------------------------------
# normal use


def heisenberg_open_chain(n_sites: int) -> np.ndarray:
    """Eigenvalues of sum_i S_i . S_(i+1) on an open chain, by dense Kronecker products
    (the definition of the Heisenberg model; S = sigma / 2), in the S^z = 0 sector."""
    sx = np.array([[0, 1], [1, 0]]) / 2
    sy = np.array([[0, -1j], [1j, 0]]) / 2
    sz = np.array([[1, 0], [0, -1]]) / 2

    def at(op, i):
        return reduce(np.kron, [op if k == i else np.eye(2) for k in range(n_sites)])

    h = sum(at(s, i) @ at(s, i + 1) for i in range(n_sites - 1) for s in (sx, sy, sz))
    total_sz = sum(at(sz, i) for i in range(n_sites)).real.diagonal()
    keep = np.flatnonzero(np.isclose(total_sz, 0))
    return np.linalg.eigvalsh(h[np.ix_(keep, keep)])


def test_json_output(runs):
    _, proc = runs["json"]
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    assert proc.stdout.endswith("\n") and proc.stdout.count("\n") == 1
    data = json.loads(proc.stdout)
    assert isinstance(data, dict) and set(data) == {"dimension", "energies"}
    assert data["dimension"] == 6                          # C(4, 2) states with S^z = 0
    energies = np.array(data["energies"])
    assert energies.shape == (3,) and np.all(np.diff(energies) >= 0)
    np.testing.assert_allclose(energies, heisenberg_open_chain(4)[:3], atol=1e-10)


def test_table_output(runs):
    _, proc = runs["table"]
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""                     # progress goes to terminals only
    assert "four spins in a row" in proc.stdout
    e0 = heisenberg_open_chain(4)[0]
    assert f"{e0:.6f}"[:8] in proc.stdout


def test_version(runs):
    _, proc = runs["version"]
    assert proc.returncode == 0
    assert proc.stdout.strip() == f"lowfold {lowfold.__version__}"
    assert proc.stderr == ""


def test_help(runs):
    _, proc = runs["help"]
    assert proc.returncode == 0 and proc.stderr == ""
    assert "Usage" in proc.stdout and "spectrum" in proc.stdout
