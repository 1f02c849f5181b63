"""The distinct cluster graphs of an infinite lattice on Dask: the same numbers as serially.

The reference is lowfold's own serial linked-cluster sum, itself checked against published
results in tests/test_linked_clusters.py (Takahashi, J. Phys. C 10, 1289 (1977)) and
tests/test_lattice_classes.py (MacDonald, Girvin & Yoshioka, Phys. Rev. B 37, 9753 (1988);
Pfeuty, Ann. Phys. 57, 79 (1970)); here the graphs run as Dask tasks of an in-process
LocalCluster (``lowfold.scans.graphs``), through ``derive --scheduler`` and inside a scan.
"""

from __future__ import annotations

import json
import os

import numpy as np
import pytest

import lowfold
from helpers.cli import one_json_object, one_line_error, run_all
from helpers.exact import pfeuty_per_site
from helpers.lattice_models import hubbard_text, ising_chain_text, parse
from lowfold.jobs.lattice import derive_infinite, linked_cluster_sum, series_infinite
from lowfold.scans.graphs import client_graph_map, on_dask_worker

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def client():
    # The workers are threads of this process, and a graph task pins the thread settings of
    # its process (lowfold.scans.cluster.limit_threads).  NUMBA_NUM_THREADS is set here to
    # the count numba has (or will launch) its threads with, so that it stays consistent for
    # the tests that follow (numba refuses a later change), and both are restored after.
    import numba
    saved, threads = os.environ.get("NUMBA_NUM_THREADS"), numba.get_num_threads()
    os.environ["NUMBA_NUM_THREADS"] = str(numba.config.NUMBA_NUM_THREADS)
    try:
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                      protocol="tcp", dashboard_address=":0") as cluster, \
                distributed.Client(cluster) as c:
            yield c
    finally:
        if saved is None:
            os.environ.pop("NUMBA_NUM_THREADS", None)
        else:
            os.environ["NUMBA_NUM_THREADS"] = saved
        numba.set_num_threads(threads)


def classes(result):
    return {(c.kind, c.name, c.operator): (c.multiplicity, c.orders) for c in result.classes}


def assert_same_classes(a, b):
    assert set(a) == set(b)
    for key, (count, orders) in a.items():
        assert b[key][0] == count
        assert set(b[key][1]) == set(orders)
        for m, value in orders.items():
            assert b[key][1][m] == pytest.approx(value, rel=1e-12, abs=1e-14), (key, m)


def test_square_lattice_classes_on_dask_equal_the_serial_ones(client):
    model = parse(hubbard_text("square", order=4))
    serial = derive_infinite(model, 4)
    on_dask = derive_infinite(model, 4, graph_map=client_graph_map(client))
    assert_same_classes(classes(serial), classes(on_dask))
    ring = classes(on_dask)[("ring", "4-cycle", None)][1]
    assert ring[4] == pytest.approx(80 / 10**3, rel=1e-9)     # MacDonald et al. (from memory)


def test_every_distinct_graph_is_one_task(client):
    model = parse(hubbard_text("honeycomb", order=6))
    calls = []

    def counted(function, graphs):
        calls.append(list(graphs))
        return client_graph_map(client)(function, graphs)
    run = linked_cluster_sum(model, 6, graph_map=counted)
    assert len(calls) == 1 and len(calls[0]) == run.total.distinct == 6
    sizes = [(g[0], len(g[1])) for g in calls[0]]
    assert sizes == sorted(sizes, reverse=True)            # biggest graphs first
    serial = linked_cluster_sum(model, 6)
    for key in set(run.total.terms) | set(serial.total.terms):
        np.testing.assert_allclose(run.total.terms.get(key, 0.0), serial.total.terms.get(key, 0.0),
                                   rtol=1e-12, atol=1e-15)


def test_energy_series_on_dask_is_pfeuty(client):
    order = 8
    result = series_infinite(parse(ising_chain_text(order)), order,
                             graph_map=client_graph_map(client))
    want = [float(c) for c in pfeuty_per_site(order)]   # Pfeuty (1970)
    np.testing.assert_allclose(result.energies, want, atol=1e-10)


def test_a_lowfold_error_on_a_worker_keeps_its_type(client):
    # without the potential in H0 each site's ground state is a spin doublet: the energy
    # series has no non-degenerate reference, a ModelError raised by the graphs' tasks
    text = hubbard_text("chain", order=4).replace('unperturbed = ["U", "mu"]', 'unperturbed = ["U"]')
    sent = []

    def counted(function, graphs):
        sent.extend(graphs)
        return client_graph_map(client)(function, graphs)
    with pytest.raises(lowfold.ModelError, match="degenerate"):
        series_infinite(parse(text), 4, graph_map=counted)
    assert len(sent) > 1


def test_not_on_a_worker_here():
    assert not on_dask_worker()


# ------------------------------------------------------------------ inside a scan
def test_scan_point_on_an_infinite_lattice_equals_derive(tmp_path, client, monkeypatch):
    from lowfold.scans import graphs
    from lowfold.scans.run import run_scan
    sent = []                # the workers are threads of this process: the patch reaches them

    real = graphs.worker_graph_map

    def counted(function, items):
        sent.append(len(items))
        return real(function, items)
    monkeypatch.setattr(graphs, "worker_graph_map", counted)
    (tmp_path / "chain.toml").write_text(hubbard_text("chain", order=6))
    (tmp_path / "scan.toml").write_text(
        'model = "chain.toml"\n[task]\nname = "derive"\ncheck = false\n[grid]\nU = [8.0, 12.0]\n')
    summary = run_scan(tmp_path / "scan.toml", out=tmp_path / "out", client=client,
                       progress=False)
    assert summary.ok and summary.computed == 2
    assert sent == [4, 4]                 # each point's distinct graphs went to the cluster
    for path in sorted((tmp_path / "out").rglob("*.json")):
        record = json.loads(path.read_text())
        if record.get("status") != "ok":
            continue
        text = hubbard_text("chain", order=6).replace("U = 10.0", f"U = {record['parameters']['U']}")
        want = lowfold.derive(parse(text.replace("mu = -5.0", f"mu = {record['parameters']['mu']}")))
        got = {(c["kind"], c["class"], c.get("operator"), tuple(map(tuple, c["positions"]))):
               c["orders"] for c in record["result"]["classes"]}
        assert len(got) == len(want.classes)
        for c in want.classes:
            key = (c.kind, c.name, c.operator, tuple(map(tuple, c.positions)))
            for m, value in c.orders.items():
                assert got[key][str(m)] == pytest.approx(value, rel=1e-12)


# ------------------------------------------------------------------ command line
@pytest.fixture(scope="module")
def cli(tmp_path_factory, client):
    d = tmp_path_factory.mktemp("lattice_dask")
    (d / "square.toml").write_text(hubbard_text("square", order=4))
    (d / "open.toml").write_text(hubbard_text("chain", boundary="open", size=[4], order=2))
    (d / "ising.toml").write_text(ising_chain_text(8))
    address = client.scheduler.address
    return run_all({
        "serial": ["derive", d / "square.toml", "--json"],
        "dask": ["derive", d / "square.toml", "--json", "--scheduler", address],
        "finite": ["derive", d / "open.toml", "--scheduler", address],
        "nowhere": ["derive", d / "square.toml", "--scheduler", "tcp://127.0.0.1:9"],
        "series": ["series", d / "ising.toml", "--json", "--scheduler", address],
    })


def test_derive_scheduler_gives_the_serial_json(cli):
    serial, dask = one_json_object(cli["serial"]), one_json_object(cli["dask"])
    assert dask["classes"] == serial["classes"]


def test_derive_scheduler_bad_input_is_one_line(cli):
    assert "infinite lattice" in one_line_error(cli["finite"])
    assert "Dask scheduler" in one_line_error(cli["nowhere"])


def test_series_scheduler_is_pfeuty(cli):
    data = one_json_object(cli["series"])
    want = [float(c) for c in pfeuty_per_site(8)]                 # Pfeuty (1970)
    np.testing.assert_allclose([data["orders"][str(m)] for m in range(9)], want, atol=1e-10)
