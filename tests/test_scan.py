"""Scans: scan-file validation, grid expansion, execution on a LocalCluster, resume,
killed workers and impossible points."""

import csv
import functools
import json
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from lowfold.errors import ModelError
from lowfold.scans.cluster import WORKER_ENV, WORKER_MALLOC, start_local_cluster
from lowfold.scans.plan import plan_scan
from lowfold.scans.run import run_scan
from lowfold.scans.scanfile import load_scan, parse_scan
from lowfold.scans.store import load_results
from lowfold.jobs.tasks import run_task

TESTS = Path(__file__).resolve().parent

DOTS = """
title = "double-dot and dot-chain test model"
[lattice]
shape = "chain"
size = [2]
boundary = "open"
[site]
type = "electron"
[sector]
particles = 2
sz = 0
[parameters]
t = 1.0
U = 10.0
[[term]]
type = "hopping"
strength = "t"
label = "tunnelling"
[[term]]
type = "hubbard"
strength = "U"
label = "charging"
"""


def write_scan(directory, body, model=DOTS):
    """Write ``dots.toml`` and ``scan.toml`` (body after the model line) into ``directory``."""
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    (directory / "dots.toml").write_text(model)
    (directory / "scan.toml").write_text('model = "dots.toml"\n' + textwrap.dedent(body))
    return directory / "scan.toml"


def counting_compute(task, model, options, *, counter, delay=0.0, kill_marker=None, kill_U=None):
    """Compute hook for the tests: the real task, plus a line per finished computation.

    With ``kill_marker``, the first attempt at the point with ``U == kill_U`` kills its own
    worker process (SIGKILL) after creating the marker file.
    """
    U = model.parameters["U"]
    if kill_marker is not None and U == kill_U and not os.path.exists(kill_marker):
        Path(kill_marker).touch()
        os.kill(os.getpid(), signal.SIGKILL)
    time.sleep(delay)
    result = run_task(task, model, options)
    with open(counter, "a") as handle:                      # O_APPEND: one line per write
        handle.write(f"{U!r} {model.n_sites} {os.getpid()}\n")
    return result


def counted(counter):
    path = Path(counter)
    return [] if not path.exists() else [tuple(line.split()[:2]) for line in path.read_text().splitlines()]


def label(record):
    return (repr(record["parameters"]["U"]), str(record["n_sites"]))


@pytest.fixture(scope="module")
def client():
    from distributed import Client

    with start_local_cluster(2) as cluster, Client(cluster) as c:
        yield c


# ------------------------------------------------------------------ scan file and grid
def test_ranges_lists_and_product(tmp_path):
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        levels = 2
        [grid]
        U = {start = 4, stop = 20, num = 9}
        size = [2, [4]]
        boundary = "open"
    """)
    spec = load_scan(scan)
    assert spec.task == "spectrum" and dict(spec.options) == {"levels": 2}
    assert spec.model_path == tmp_path / "dots.toml"
    axes = dict(spec.axes)
    assert axes["U"] == (4.0, 6.0, 8.0, 10.0, 12.0, 14.0, 16.0, 18.0, 20.0)
    assert axes["size"] == ((2,), (4,))
    points = plan_scan(spec)
    assert len(points) == 18
    assert len({p.key for p in points}) == 18
    assert {p.n_sites for p in points} == {2, 4}


def test_log_range_and_zip(tmp_path):
    scan = write_scan(tmp_path, """
        [task]
        name = "series"
        [grid]
        U = {start = 1, stop = 100, num = 3, spacing = "log"}
        t = [0.5, 1.0, 2.0]
        size = [[2]]
        combine = "zip"
    """)
    spec = load_scan(scan)
    assert dict(spec.axes)["U"] == (1.0, 10.0, 100.0)
    points = plan_scan(spec)
    assert [(p.parameters["U"], p.parameters["t"]) for p in points] == [(1.0, 0.5), (10.0, 1.0), (100.0, 2.0)]


@pytest.mark.parametrize("data, key", [
    ({"task": {"name": "spectrum"}}, "model"),
    ({"model": "m.toml"}, "task"),
    ({"model": "m.toml", "task": {"name": "sweep"}}, "task.name"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "grid": {"U": {"start": 1, "stop": 2}}}, "grid.U"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "grid": {"U": {"start": 1, "stop": 2, "step": 1}}},
     "grid.U"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "grid": {"U": ["a"]}}, "grid.U"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "grid": {"size": [[0]]}}, "grid.size"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "grid": {"boundary": ["closed"]}}, "grid.boundary"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "grid": {"combine": "all"}}, "grid.combine"),
    ({"model": "m.toml", "task": {"name": "spectrum"},
      "grid": {"U": [1, 2], "t": [1, 2, 3], "combine": "zip"}}, "grid.combine"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "sector": {"filling": 1, "particles": 2}},
     "sector.filling"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "sector": {"sz": 0.3}}, "sector.sz"),
    ({"model": "m.toml", "task": {"name": "spectrum"}, "runs": 3}, "runs"),
])
def test_invalid_scan_files_name_file_and_key(data, key):
    with pytest.raises(ModelError, match=f"^scan.toml: {key}: "):
        parse_scan(data, source="scan.toml")


def test_grid_must_name_model_parameters_and_valid_sizes(tmp_path):
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        [grid]
        V = [1.0]
    """)
    with pytest.raises(ModelError, match=r"scan.toml: grid.V: not a parameter of .*dots.toml \(parameters: t, U\)"):
        plan_scan(load_scan(scan))
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        [grid]
        size = [[2, 2]]
    """)
    with pytest.raises(ModelError, match="scan.toml: grid.size"):
        plan_scan(load_scan(scan))


# ------------------------------------------------------------------ execution
def test_workers_run_single_threaded(client):
    wanted = {**WORKER_ENV, **WORKER_MALLOC}
    env = client.run(lambda: {k: os.environ.get(k) for k in wanted})
    assert len(env) == 2
    assert all(values == wanted for values in env.values())
    assert set(client.nthreads().values()) == {1}


def test_cluster_scan_equals_plain_loop_and_dimer_formula(tmp_path, client):
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        levels = 3
        [grid]
        U = [2.0, 8.0, 20.0]
        size = [[2], [4]]
        [sector]
        filling = 1
        sz = 0
    """)
    summary = run_scan(scan, out=tmp_path / "out", client=client, progress=False)
    assert summary.ok and summary.computed == 6 and summary.skipped == 0
    records = {r["key"]: r for r in load_results(tmp_path / "out")}
    for point in plan_scan(load_scan(scan)):
        direct = run_task("spectrum", point.model, {"levels": 3}).to_dict()
        stored = records[point.key]["result"]
        assert stored["dimension"] == direct["dimension"]
        np.testing.assert_allclose(stored["energies"], direct["energies"], rtol=0, atol=1e-10)
        if point.n_sites == 2:
            # Hubbard dimer at half filling: E0 = (U - sqrt(U^2 + 16 t^2)) / 2
            # (e.g. Essler et al., "The One-Dimensional Hubbard Model", CUP (2005))
            U = point.parameters["U"]
            assert stored["energies"][0] == pytest.approx((U - math.sqrt(U * U + 16)) / 2, abs=1e-10)
    # the CSV export has one energy row per level and point
    with open(tmp_path / "out" / "results.csv", newline="") as handle:
        rows = [r for r in csv.DictReader(handle) if r["quantity"] == "energy"]
    assert len(rows) == 6 * 3


def test_impossible_point_is_stored_as_error_and_reported(tmp_path, client):
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        levels = 1
        [grid]
        particles = [2, 9]
        U = [4.0, 8.0]
    """)
    counter = tmp_path / "count.txt"
    compute = functools.partial(counting_compute, counter=str(counter))
    summary = run_scan(scan, out=tmp_path / "out", client=client, progress=False, compute=compute)
    assert not summary.ok
    assert summary.failed == 2 and summary.computed == 4
    records = load_results(tmp_path / "out")
    bad = [r for r in records if r["status"] == "error"]
    assert {r["sector"]["particles"] for r in bad} == {9}
    for r in bad:
        assert r["error"]["type"] == "ModelError"
        assert "impossible" in r["error"]["message"] and r["error"]["deterministic"]
    assert all(r["result"]["dimension"] == 4 for r in records if r["status"] == "ok")
    assert json.dumps(summary.to_dict())                     # JSON-able for --json
    assert len(counted(counter)) == 2
    # a second run recomputes nothing and still reports the failures
    again = run_scan(scan, out=tmp_path / "out", client=client, progress=False, compute=compute)
    assert (again.computed, again.skipped, again.failed, again.ok) == (0, 4, 2, False)
    assert len(counted(counter)) == 2
    # retry_failed recomputes only the failed points (which fail again)
    retried = run_scan(scan, out=tmp_path / "out", client=client, progress=False, compute=compute,
                       retry_failed=True)
    assert (retried.computed, retried.skipped, retried.failed) == (2, 2, 2)


def test_changed_model_file_recomputes(tmp_path, client):
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        levels = 1
        [grid]
        U = [4.0, 8.0]
    """)
    first = run_scan(scan, out=tmp_path / "out", client=client, progress=False)
    assert first.computed == 2
    (tmp_path / "dots.toml").write_text(DOTS.replace("t = 1.0", "t = 0.5"))
    second = run_scan(scan, out=tmp_path / "out", client=client, progress=False)
    assert second.computed == 2 and second.skipped == 0
    # the fixed parameter t is part of each point's key: the new points are stored beside
    # the old ones, and the records say which model file made them
    assert len(load_results(tmp_path / "out")) == 4


RESUME_SCAN = """
    [task]
    name = "spectrum"
    levels = 2
    [grid]
    U = {start = 2, stop = 24, num = 12}
    size = [[2]]
"""


def _table(directory):
    with open(Path(directory) / "results.csv", newline="") as handle:
        return list(csv.DictReader(handle))


def _same_table(a, b):
    assert len(a) == len(b)
    for ra, rb in zip(a, b):
        assert {k: v for k, v in ra.items() if k != "value"} == {k: v for k, v in rb.items() if k != "value"}
        assert float(ra["value"]) == pytest.approx(float(rb["value"]), abs=1e-10)


def test_interrupted_scan_resumes_without_recomputing(tmp_path, client):
    scan = write_scan(tmp_path, RESUME_SCAN)
    out = tmp_path / "out"
    address = client.scheduler.address
    # a shell without job control starts background jobs with SIGINT ignored, and Python then
    # keeps it ignored: restore the usual Ctrl-C behaviour in the child explicitly
    script = textwrap.dedent(f"""
        import functools, signal, sys
        signal.signal(signal.SIGINT, signal.default_int_handler)
        sys.path.insert(0, {str(TESTS)!r})
        import test_scan
        from lowfold.scans.run import run_scan
        compute = functools.partial(test_scan.counting_compute, counter=sys.argv[1], delay=1.5)
        summary = run_scan({str(scan)!r}, out={str(out)!r}, scheduler={address!r},
                           compute=compute, progress=False)
        print(summary.computed)
    """)
    first_counter, second_counter = tmp_path / "first.txt", tmp_path / "second.txt"
    proc = subprocess.Popen([sys.executable, "-c", script, str(first_counter)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and len(list((out / "points").glob("*.json"))) < 3:
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode != 0 and "ScanInterrupted" in err and "points are stored in" in err
    stored = load_results(out)
    assert 3 <= len(stored) < 12
    before = {r["key"]: r["timing"]["started"] for r in stored}

    proc = subprocess.run([sys.executable, "-c", script, str(second_counter)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert int(proc.stdout.split()[-1]) == 12 - len(stored)
    records = load_results(out)
    assert len(records) == 12 == len(list((out / "points").glob("*.json")))
    # nothing stored by the first run was computed again, nor rewritten
    assert not {label(r) for r in stored} & set(counted(second_counter))
    assert all(r["timing"]["started"] == before[r["key"]] for r in records if r["key"] in before)
    # every point computed by the second run was computed exactly once there
    assert sorted(counted(second_counter)) == sorted(label(r) for r in records if r["key"] not in before)

    fresh = tmp_path / "fresh"
    write_scan(fresh, RESUME_SCAN)
    assert run_scan(fresh / "scan.toml", out=fresh / "out", client=client, progress=False).ok
    _same_table(_table(out), _table(fresh / "out"))


def test_killed_worker_does_not_lose_or_duplicate_points(tmp_path, client):
    scan = write_scan(tmp_path, """
        [task]
        name = "spectrum"
        levels = 1
        [grid]
        U = [3.0, 5.0, 7.0, 9.0, 11.0, 13.0]
    """)
    counter, marker = tmp_path / "count.txt", tmp_path / "killed"
    compute = functools.partial(counting_compute, counter=str(counter), delay=0.1,
                                kill_marker=str(marker), kill_U=7.0)
    summary = run_scan(scan, out=tmp_path / "out", client=client, progress=False, compute=compute)
    assert marker.exists()                      # a worker really died mid-task
    assert summary.ok and summary.computed == 6
    records = load_results(tmp_path / "out")
    assert sorted(r["parameters"]["U"] for r in records) == [3.0, 5.0, 7.0, 9.0, 11.0, 13.0]
    assert len(list((tmp_path / "out" / "points").glob("*.json"))) == 6
    # every stored point was really computed; a result that was finished but not yet
    # fetched from the dying worker may legitimately have been computed twice by dask
    assert set(counted(counter)) == {label(r) for r in records}
    client.wait_for_workers(2, timeout=60)      # the nanny restarted the worker


def test_batch_cluster_job_script_runs_single_threaded_workers():
    pytest.importorskip("dask_jobqueue")        # optional extra lowfold[cluster]
    from lowfold.scans.cluster import start_batch_cluster

    cluster = start_batch_cluster("slurm", jobs=0, cores=8, memory="16GB", walltime="02:00:00",
                                  queue="cpu", job_script_prologue=["module load python"],
                                  scheduler_options={"dashboard_address": ":0"})
    try:
        script = cluster.job_script()
    finally:
        cluster.close()
    assert "#SBATCH -t 02:00:00" in script and "#SBATCH -p cpu" in script
    assert "--nthreads 1" in script and "--nworkers 8" in script
    for name, value in {**WORKER_ENV, **WORKER_MALLOC}.items():
        assert f"export {name}={value}" in script
    assert "module load python" in script
    with pytest.raises(ModelError, match="unknown batch system"):
        start_batch_cluster("lsf", jobs=0, cores=1, memory="1GB", walltime="00:10:00")


def test_example_scan_file_plans():
    spec = load_scan(TESTS.parent / "examples" / "scan_hubbard_exchange.toml")
    points = plan_scan(spec)
    assert spec.task == "derive" and len(points) == 25
    assert all(p.error is None and p.model.sector.particles == p.n_sites for p in points)
    # biggest first: the cost is the dimension of the sector, C(2L, L) at half filling
    assert {p.n_sites: p.cost for p in points}[6] == math.comb(12, 6)
