"""Scans of a model given as a Python object: nothing is read from a model file.

Reference: the ground-state energy of the Hubbard dimer at half filling,
``E0 = (U - sqrt(U^2 + 16 t^2)) / 2`` (exact; e.g. Essler et al., "The One-Dimensional
Hubbard Model", CUP (2005)).
"""

from __future__ import annotations

import errno
import math
import socket
import warnings

import pytest

from lowfold.errors import ModelError
from lowfold.model.modelfile import parse_model
from lowfold.scans.cluster import start_local_cluster
from lowfold.scans.plan import plan_scan
from lowfold.scans.run import run_scan
from lowfold.scans.scanfile import ScanSpec, parse_scan
from lowfold.scans.store import load_results

DIMER = {
    "title": "Hubbard dimer",
    "lattice": {"shape": "chain", "size": [2], "boundary": "open"},
    "site": {"type": "electron"},
    "sector": {"particles": 2, "sz": 0},
    "parameters": {"t": 1.0, "U": 10.0},
    "term": [{"type": "hopping", "strength": "t", "label": "tunnelling"},
             {"type": "hubbard", "strength": "U", "label": "charging"}],
}
SCAN = {"task": {"name": "spectrum", "levels": 1}, "grid": {"U": [2.0, 8.0]}}


def dimer_ground_energy(t: float, U: float) -> float:
    return (U - math.sqrt(U * U + 16 * t * t)) / 2


@pytest.fixture(scope="module")
def client():
    from distributed import Client

    with start_local_cluster(1) as cluster, Client(cluster) as c:
        yield c


def test_scan_spec_with_a_model_object_reads_no_file(tmp_path, client):
    model = parse_model(DIMER)
    spec = parse_scan(SCAN, source="dimer scan", model=model)
    assert spec.model_path is None and spec.model is model
    summary = run_scan(spec, out=tmp_path / "out", client=client, progress=False)
    assert summary.ok and summary.computed == 2
    records = load_results(tmp_path / "out")
    for record in records:
        U = record["parameters"]["U"]
        assert record["result"]["energies"][0] == pytest.approx(dimer_ground_energy(1.0, U), abs=1e-10)
        assert record["model"]["path"] is None and record["model"]["title"] == "Hubbard dimer"
    # the same model object again: every point is already stored
    again = run_scan(spec, out=tmp_path / "out", client=client, progress=False)
    assert (again.computed, again.skipped) == (0, 2)
    # an equal model made afresh has the same fingerprint
    fresh = run_scan(parse_scan(SCAN, model=parse_model(DIMER)), out=tmp_path / "out", client=client,
                     progress=False)
    assert (fresh.computed, fresh.skipped) == (0, 2)


def test_model_argument_replaces_the_scan_files_model(tmp_path, client):
    scan = tmp_path / "scan.toml"
    scan.write_text('model = "nowhere.toml"\n[task]\nname = "spectrum"\nlevels = 1\n'
                    '[grid]\nU = [4.0]\n')
    model = parse_model(DIMER).with_parameters(t=0.5)
    summary = run_scan(scan, model=model, out=tmp_path / "out", client=client, progress=False)
    assert summary.ok and summary.computed == 1
    (record,) = load_results(tmp_path / "out")
    assert record["parameters"] == {"t": 0.5, "U": 4.0}
    assert record["result"]["energies"][0] == pytest.approx(dimer_ground_energy(0.5, 4.0), abs=1e-10)
    # a changed model object changes the fingerprint: its point is recomputed
    changed = run_scan(scan, model=model.with_parameters(t=0.25), out=tmp_path / "out", client=client,
                       progress=False)
    assert changed.computed == 1 and changed.skipped == 0


def test_progress_on_stderr_only_when_asked(tmp_path, client, capsys):
    spec = parse_scan(SCAN, source="dimer scan", model=parse_model(DIMER))
    run_scan(spec, out=tmp_path / "quiet", client=client, progress=False)
    assert capsys.readouterr().err == ""
    run_scan(spec, out=tmp_path / "shown", client=client, progress=True)
    err = capsys.readouterr().err
    assert "Hubbard dimer" in err and "2 points" in err


def test_bad_model_objects_are_model_errors():
    with pytest.raises(ModelError, match="must be a lowfold Model"):
        parse_scan(SCAN, model={"title": "not a model"})
    with pytest.raises(ModelError, match="needs model ="):
        parse_scan(SCAN)
    spec = parse_scan(SCAN, model=parse_model(DIMER))
    with pytest.raises(ModelError, match="must be a lowfold Model"):
        run_scan(spec, model="dimer.toml", out="unused")
    with pytest.raises(ModelError, match="not a parameter of Hubbard dimer"):
        plan_scan(ScanSpec(source="s", model_path=None, task="spectrum", options={},
                           axes=(("V", (1.0,)),), model=parse_model(DIMER)))


def test_local_cluster_starts_quietly_while_port_8787_is_taken():
    """dask's default HTTP port may be held by another cluster; the scan must not warn."""
    holder = socket.socket()
    try:
        holder.bind(("127.0.0.1", 8787))
        holder.listen()
    except OSError as exc:                     # already held by someone else: just as good
        assert exc.errno == errno.EADDRINUSE
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            with start_local_cluster(1) as cluster:
                assert cluster.scheduler_address.startswith("tcp://")
    finally:
        holder.close()
