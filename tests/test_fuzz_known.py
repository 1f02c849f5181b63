"""The open defects the fuzz suite found, each as its smallest input (helpers/fuzz_report.py,
``KNOWN_DEFECTS``).

Each case runs the installed ``lowfold`` script and checks the contract of every command
(exit 0 with one strict JSON object under ``--json``, or exit 2 with one line on stderr; no
traceback, no leaked warning).  They are marked ``xfail(strict=True)`` with the defect
named: when a fix lands the case passes, strict xfail turns that into a failure, and whoever
fixed it deletes the mark here and the entry in ``KNOWN_DEFECTS``, so that the fuzz tests
count the defect as a failure again if it returns.
"""

from __future__ import annotations

import json

import pytest
from helpers.cli import run_all
from helpers.fuzz import contract_failure, dumps, small_model
from helpers.fuzz_report import KNOWN_DEFECTS
from lowfold.errors import ModelError


def defect(name):
    # raises=AssertionError: only the contract's check is the expected failure; an error
    # in a fixture or the harness is reported as an error, never hidden as "xfailed"
    return pytest.mark.xfail(strict=True, raises=AssertionError, reason=KNOWN_DEFECTS[name][0])


def spin_pair() -> dict:
    """Two spins 1/2: Ising H0 in a field, transverse exchange as V (helpers.fuzz.small_model)."""
    model = small_model("chain", "spin")
    model["lattice"]["size"] = [2]
    return model


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    """A finished spectrum scan: two spin chains (2 and 3 sites) at two fields."""
    from distributed import Client

    from lowfold.scans.cluster import start_local_cluster
    from lowfold.scans.run import run_scan

    root = tmp_path_factory.mktemp("store")
    (root / "model.toml").write_text(dumps(spin_pair()))
    (root / "scan.toml").write_text(dumps({"model": "model.toml",
                                           "task": {"name": "spectrum", "levels": 2},
                                           "grid": {"size": [[2], [3]], "h": [0.5, 1.0]}}))
    # worker processes: a point run in this process would set its thread limits here
    with start_local_cluster(1) as cluster, Client(cluster) as client:
        summary = run_scan(root / "scan.toml", out=root / "results", client=client, progress=False)
    if not (summary.ok and summary.computed == 4):      # not an AssertionError: see defect()
        raise RuntimeError(f"the scan of the fixture failed: {summary.to_dict()}")
    return root


@pytest.fixture(scope="module")
def runs(store, tmp_path_factory):
    root = tmp_path_factory.mktemp("known")
    model = root / "pair.toml"
    model.write_text(dumps(spin_pair()))
    results = store / "results"
    broken = root / "broken"                 # a copy whose first record has a null result
    broken.mkdir()
    (broken / "points").mkdir()
    for path in (results / "points").glob("*.json"):
        record = json.loads(path.read_text())
        if path == min((results / "points").glob("*.json")):
            record["result"] = None
        (broken / "points" / path.name).write_text(json.dumps(record))
    (broken / "scan.json").write_text((results / "scan.json").read_text())
    markup = root / "markup.toml"
    markup.write_text(dumps({**spin_pair(), "title": "a [/bold] b"}))
    nul_scan = root / "nul.toml"
    nul_scan.write_text(dumps({"model": "pair\x00.toml", "task": {"name": "spectrum"},
                               "grid": {"h": [0.5]}}))
    jobs = {
        "series-plot-unwritable": ["series", model, "--plot", root / "missing" / "sweep.png"],
        "sweep-overflow-warning": ["series", model, "--sweep", "lambda=0:1e300:3", "--json"],
        "plot-output-unwritable": ["plot", results, "--kind", "levels", "--x", "h", "--where",
                                   "size=3", "--output", root / "missing" / "f.png"],
        "finite-size-json-nan": ["plot", results, "--kind", "finite-size", "--quantity",
                                 "energy:0", "--output", root / "fit.png", "--json"],
        "plot-legend-warning": ["plot", results, "--kind", "finite-size", "--quantity",
                                "energy:0", "--degree", "2", "--output", root / "fit2.png"],
        "null-result-record": ["plot", broken, "--kind", "levels", "--x", "h", "--where",
                               "size=3", "--output", root / "levels.png"],
        "finite-size-unknown-unit": ["plot", results, "--kind", "finite-size", "--quantity",
                                     "energy:0", "--unit", "U", "--output", root / "fit3.png"],
        "scan-out-not-a-directory": ["scan", store / "scan.toml", "--out", model, "--json"],
        "spectrum-levels-beyond-dimension": ["spectrum", model, "--levels", "1000000000", "--json"],
        "scan-model-path-nul": ["scan", nul_scan, "--out", root / "nul-results", "--json"],
        "text-markup": ["spectrum", markup],
        "plot-title-control-glyph": ["plot", results, "--kind", "levels", "--x", "h", "--where",
                                     "size=3", "--title", "bell\x07", "--output", root / "t.png"],
    }
    return run_all(jobs)


def check(proc):
    failure = contract_failure(proc.returncode, proc.stdout, proc.stderr,
                               json_out="--json" in proc.args,
                               allowed=(0, 1, 2) if proc.args[1] == "scan" else (0, 2))
    assert failure is None, failure


OPEN: tuple[str, ...] = ()                                  # none known at present
FIXED = ("null-result-record", "scan-out-not-a-directory",   # found by the fuzz, now fixed
         "series-plot-unwritable", "sweep-overflow-warning", "plot-output-unwritable",
         "finite-size-json-nan", "text-markup", "scan-model-path-nul", "plot-legend-warning",
         "finite-size-unknown-unit", "plot-title-control-glyph")


@pytest.mark.parametrize("name", [pytest.param(name, marks=defect(name)) for name in OPEN]
                         + list(FIXED))
def test_known_defect_keeps_the_contract(runs, name):
    check(runs[name])


def test_more_levels_than_states_gives_every_level(runs):
    # four states (two spins 1/2, no sector): asking for more levels than states gives all
    # of them, as --levels 100 does; not a refusal that quotes a negative memory budget
    proc = runs["spectrum-levels-beyond-dimension"]
    check(proc)
    assert proc.returncode == 0, proc.stderr
    assert len(json.loads(proc.stdout)["energies"]) == 4


@pytest.mark.parametrize("levels", ["level:0", "2", 2.5, True])
def test_scan_task_levels_must_be_an_integer(levels):
    # found by the scan fuzz: a scan file's [task] levels = "level:0" raised ValueError
    # inside a worker (a crash, retried and logged) instead of a ModelError stored as a
    # deterministic failure of the point
    from lowfold.jobs.tasks import run_task
    from lowfold.model.modelfile import parse_model

    with pytest.raises(ModelError, match="levels must be an integer"):
        run_task("spectrum", parse_model(spin_pair()), {"levels": levels})
