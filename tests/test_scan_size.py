"""``lowfold scan --size/--boundary``: one lattice for every point, replacing the model file's.

Check from outside (exact, common practice): the Heisenberg ring of four spins 1/2,
H = J sum S_i.S_(i+1) = (J/2)(S^2 - S_A^2 - S_B^2) with A, B the two pairs of opposite sites,
has the ground-state energy -2J (S_A = S_B = 1, S = 0), and the two-site bond -3J/4 (singlet).
"""

from __future__ import annotations

import json

import pytest

from helpers.cli import one_json_object, one_line_error, run_all
from lowfold.scans.plan import plan_scan
from lowfold.scans.scanfile import load_scan, with_lattice

RING = """
[lattice]
shape = "chain"
size = [6]
boundary = "{boundary}"
[site]
type = "spin"
[parameters]
J = 1.0
[[term]]
label = "J"
type = "exchange"
strength = "J"
bonds = "nearest"
"""

INFINITE = RING.replace("size = [6]\n", "")

HUBBARD = """
[lattice]
shape = "chain"
size = [6]
[site]
type = "electron"
[parameters]
t = 1.0
U = 8.0
[[term]]
label = "t"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
[sector]
particles = 6
"""


def write(tmp_path, model_text, grid="J = [1.0, 2.0]"):
    (tmp_path / "model.toml").write_text(model_text)
    scan = tmp_path / "scan.toml"
    scan.write_text(f'model = "model.toml"\n[task]\nname = "spectrum"\nlevels = 1\n[grid]\n{grid}\n')
    return scan


def test_size_becomes_an_axis_of_one_value(tmp_path):
    spec = with_lattice(load_scan(write(tmp_path, RING.format(boundary="periodic"))), (4,))
    points = plan_scan(spec)
    assert [p.n_sites for p in points] == [4, 4]
    assert all(p.size == (4,) for p in points)


def test_infinite_lattice_given_a_size_is_periodic(tmp_path):
    spec = with_lattice(load_scan(write(tmp_path, INFINITE.format(boundary="infinite"))), (4,))
    points = plan_scan(spec)
    assert all(p.model.lattice.boundary == ("periodic",) or p.model.lattice.boundary == "periodic"
               for p in points)
    assert [p.n_sites for p in points] == [4, 4]


def test_fixed_particle_number_keeps_its_filling(tmp_path):
    spec = with_lattice(load_scan(write(tmp_path, HUBBARD, grid="U = [8.0]")), (4,))
    (point,) = plan_scan(spec)
    assert point.n_sites == 4 and point.model.sector.particles == 4


def test_a_scanned_size_cannot_be_replaced(tmp_path):
    spec = load_scan(write(tmp_path, RING.format(boundary="open"), grid="size = [[2], [4]]"))
    with pytest.raises(Exception, match="grid.size"):
        with_lattice(spec, (4,))


def warm_kernels(tmp_path):
    """Compile (and cache) the kernels of these models here first: a Dask worker that has to
    compile a numba kernel itself can fail on the thread-count setting of its environment
    ("Cannot set NUMBA_NUM_THREADS ..."), which has nothing to do with the scan."""
    import lowfold
    for text in (RING.format(boundary="periodic"), RING.format(boundary="open")):
        (tmp_path / "warm.toml").write_text(text)
        for size in ([4], [2]):
            lowfold.spectrum(lowfold.load_model(tmp_path / "warm.toml").with_lattice(size=size), 1)


@pytest.fixture(scope="module")
def cli(tmp_path_factory):
    warm_kernels(tmp_path_factory.mktemp("warm"))
    runs = {}
    jobs = {}
    for name, text, grid, args in [
        ("ring", RING.format(boundary="periodic"), "J = [1.0, 2.0]", ["--size", "4"]),
        ("infinite", INFINITE.format(boundary="infinite"), "J = [1.0]", ["--size", "4"]),
        ("bond", RING.format(boundary="periodic"), "J = [1.0]", ["--size", "2", "--boundary", "open"]),
        ("twice", RING.format(boundary="open"), "size = [[2], [4]]", ["--size", "4"]),
        ("badsize", RING.format(boundary="open"), "J = [1.0]", ["--size", "x"]),
        ("badboundary", RING.format(boundary="open"), "J = [1.0]", ["--boundary", "twisted"]),
    ]:
        d = tmp_path_factory.mktemp(name)
        scan = write(d, text, grid)
        runs[name] = d
        jobs[name] = ["scan", scan, "--json", "--workers", "1", "--out", d / "out", *args]
    return {name: (proc, runs[name]) for name, proc in run_all(jobs).items()}


def energies(directory):
    out = {}
    for path in (directory / "out" / "points").glob("*.json"):
        record = json.loads(path.read_text())
        assert record["status"] == "ok", record["error"]
        out[record["parameters"]["J"]] = (record["n_sites"], record["result"]["energies"][0])
    return out


def test_scan_size_runs_the_four_site_ring(cli):
    proc, directory = cli["ring"]
    assert one_json_object(proc)["computed"] == 2
    found = energies(directory)
    assert found[1.0] == (4, pytest.approx(-2.0, abs=1e-10))
    assert found[2.0] == (4, pytest.approx(-4.0, abs=1e-10))


def test_scan_size_on_an_infinite_lattice_is_a_periodic_ring(cli):
    proc, directory = cli["infinite"]
    one_json_object(proc)
    assert energies(directory)[1.0] == (4, pytest.approx(-2.0, abs=1e-10))


def test_scan_size_and_boundary_open_bond(cli):
    proc, directory = cli["bond"]
    one_json_object(proc)
    assert energies(directory)[1.0] == (2, pytest.approx(-0.75, abs=1e-12))


def test_scan_size_bad_input_is_one_line(cli):
    assert "grid.size" in one_line_error(cli["twice"][0])
    assert "--size" in one_line_error(cli["badsize"][0])
    assert "--boundary" in one_line_error(cli["badboundary"][0])
