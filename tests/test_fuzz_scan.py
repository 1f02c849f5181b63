"""Fuzz: mutated scan files through ``lowfold scan``, and ``lowfold plot`` on scan results
(good ones and damaged copies) with options drawn at random.

The contract is that of ``tests/test_fuzz.py``; ``lowfold scan`` may also exit 1 when a
point failed or was lost (docs/scans.md), with its one JSON summary under ``--json``.  The
scans send their points to one small cluster started for this module (``--scheduler``);
a few start their own local cluster, as a user's first scan does.  ``LOWFOLD_FUZZ_RUNS``
scales the number of runs as in ``tests/test_fuzz.py`` (a sixth of them scans, a sixth
plots).
"""

from __future__ import annotations

import collections
import copy
import os
import random
import shutil

import pytest
from helpers.fuzz import (
    EXTREME_NUMBERS,
    NASTY_TEXT,
    contract_failure,
    dumps,
    make_mutant,
    small_model,
)
from helpers.fuzz_report import report, split_known
from helpers.fuzz_runner import Pool

SEED = int(os.environ.get("LOWFOLD_FUZZ_SEED", "1010"))
RUNS = int(os.environ.get("LOWFOLD_FUZZ_RUNS", "0"))
SCANS = RUNS // 6 if RUNS else 24
PLOTS = RUNS // 6 if RUNS else 40
TIMEOUT = float(os.environ.get("LOWFOLD_FUZZ_TIMEOUT", "90"))

# small scans of each task: a two- and three-site Hubbard chain (derive), spin chains of
# three sizes (spectrum, for finite-size plots) and a field sweep (series)
SCAN_DOCS = {
    "derive": {"model": "model.toml", "title": "exchange", "task": {"name": "derive", "order": 2},
               "grid": {"U": {"start": 8, "stop": 16, "num": 2}, "size": [[2], [3]]},
               "sector": {"filling": 1}},
    "spectrum": {"model": "model.toml", "task": {"name": "spectrum", "levels": 2},
                 "grid": {"size": [[2], [3], [4]], "h": [0.5, 1.0]}},
    "series": {"model": "model.toml", "task": {"name": "series", "order": 3},
               "grid": {"h": {"start": 0.5, "stop": 1.0, "num": 3}}},
}
MODELS = {"derive": small_model("chain", "electron"), "spectrum": small_model("chain", "spin"),
          "series": small_model("chain", "spin")}
for _doc in MODELS.values():
    _doc["lattice"]["size"] = [2]
MODELS["derive"]["sector"] = {"particles": 2}


def mild_scan_mutation(doc, rng) -> str:
    kind = rng.choice(("title", "option", "grid", "grid", "model", "sector", "none"))
    if kind == "title":
        doc["title"] = rng.choice(NASTY_TEXT)
        return f"title = {doc['title']!r}"
    if kind == "option":
        key = rng.choice(("order", "levels", "check", "state", "colour"))
        doc["task"][key] = rng.choice((0, -1, 1, 2, 41, 10**9, 2**63, "level:0", "[/bold]", True))
        return f"task.{key} = {doc['task'][key]!r}"
    if kind == "grid":
        name = rng.choice(sorted(doc["grid"]))
        doc["grid"][name] = rng.choice(([rng.choice(EXTREME_NUMBERS)], [[64]], [[2], [2]], [],
                                        {"start": 1, "stop": 1e308, "num": 3},
                                        {"start": 1, "stop": 2, "num": 10**9},
                                        {"start": 0, "stop": 1, "num": 3, "spacing": "log"}))
        return f"grid.{name} = {doc['grid'][name]!r}"
    if kind == "model":
        doc["model"] = rng.choice(("missing.toml", ".", "scan.toml", "/dev/null", "[/bold].toml",
                                   "../model.toml", ""))
        return f"model = {doc['model']!r}"
    if kind == "sector":
        doc["sector"] = rng.choice(({"filling": 0.5}, {"particles": 10**9}, {"sz": 0.25},
                                    {"filling": 1, "particles": 2}, {"sz": [0, 1]}))
        return f"sector = {doc['sector']!r}"
    return "unchanged"


def scan_mutant(index, rng, root, scheduler):
    """A scan directory (scan file and model file, one of them mutated) and its command."""
    task = rng.choice(sorted(SCAN_DOCS))
    directory = root / f"scan{index}"
    directory.mkdir()
    doc, model = copy.deepcopy(SCAN_DOCS[task]), MODELS[task]
    notes = [task]
    if rng.random() < 0.2:
        mutant = make_mutant(f"model-{index}", task, model, rng)
        (directory / "model.toml").write_bytes(mutant.data)
        notes += ["model: " + "; ".join(mutant.mutations)]
    else:
        (directory / "model.toml").write_text(dumps(model))
    if rng.random() < 0.5:
        notes.append(mild_scan_mutation(doc, rng))
        data = dumps(doc).encode()
    else:
        mutant = make_mutant(f"scan-{index}", task, doc, rng)
        data = mutant.data
        notes += mutant.mutations
    (directory / "scan.toml").write_bytes(data)
    json_out = rng.random() < 0.5
    argv = ["scan", str(directory / "scan.toml"), "--out",
            str(rng.choice((directory / "out", directory / "deep" / "er" / "out",
                            directory / "scan.toml", directory / "[/bold]")))]
    argv += ["--scheduler", scheduler] if rng.random() < 0.9 else ["--workers", "1"]
    argv += (["--json"] if json_out else []) + (["--retry-failed"] if rng.random() < 0.2 else [])
    return argv, json_out, notes


def judge(argv, json_out, outcome) -> str | None:
    allowed = (0, 1, 2) if argv[0] == "scan" else (0, 2)
    return contract_failure(outcome.code, outcome.stdout, outcome.stderr, json_out=json_out,
                            allowed=allowed)


@pytest.fixture(scope="module")
def pool():
    workers = Pool(2, timeout=TIMEOUT)
    yield workers
    workers.close()


@pytest.fixture(scope="module")
def scheduler():
    from distributed import Client

    from lowfold.scans.cluster import start_local_cluster

    with start_local_cluster(1) as cluster, Client(cluster):
        yield cluster.scheduler_address


def test_mutated_scan_files_keep_the_contract(pool, scheduler, tmp_path):
    rng = random.Random(SEED)
    jobs = {index: scan_mutant(index, rng, tmp_path, scheduler) for index in range(SCANS)}
    # a second run of a third of them: the resume path (nothing or only failures recomputed)
    again = {f"{index}-again": jobs[index] for index in list(jobs)[::3]}
    outcomes = pool.run_all({index: (argv, None) for index, (argv, _, _) in jobs.items()})
    outcomes.update(pool.run_all({name: (argv, None) for name, (argv, _, _) in again.items()}))
    jobs.update(again)
    failures, known = split_known([(jobs[name][0], jobs[name][2], failure)
                                   for name, outcome in outcomes.items()
                                   if (failure := judge(jobs[name][0], jobs[name][1], outcome))])
    codes = collections.Counter(outcome.code for outcome in outcomes.values())
    print(f"scan fuzz: seed {SEED}, {len(outcomes)} runs, exit statuses "
          f"{dict(codes)}, {len(failures)} new failures, "
          f"known defects {known}")
    assert not failures, report(failures)
    assert codes[0] and codes[2]


# --------------------------------------------------------------------------------- plots
@pytest.fixture(scope="module")
def results(pool, scheduler, tmp_path_factory):
    """``{task: results directory}`` of the three good scans."""
    root = tmp_path_factory.mktemp("results")
    jobs = {}
    for task, doc in SCAN_DOCS.items():
        (root / task).mkdir()
        (root / task / "model.toml").write_text(dumps(MODELS[task]))
        (root / task / "scan.toml").write_text(dumps(doc))
        jobs[task] = (["scan", str(root / task / "scan.toml"), "--out", str(root / task / "out"),
                       "--scheduler", scheduler], None)
    done = pool.run_all(jobs)
    assert all(outcome.code == 0 for outcome in done.values()), done
    return {task: root / task / "out" for task in SCAN_DOCS}


def damaged_copy(source, rng, directory) -> tuple:
    """A copy of a results directory, damaged in one way: ``(path, what was done)``."""
    kind = "none" if rng.random() < 0.6 else rng.choice((
        "stray", "truncated", "null-result", "latin1", "empty", "missing", "file", "no-manifest"))
    target = directory / "results"
    if kind == "missing":
        return target, kind
    if kind == "file":
        target.write_text("not a directory\n")
        return target, kind
    if kind == "empty":
        target.mkdir()
        return target, kind
    shutil.copytree(source, target)
    records = sorted((target / "points").glob("*.json"))
    if kind == "stray":
        (target / "points" / rng.choice(("notes.txt", "x.json", ".hidden"))).write_text("{}")
    elif kind == "truncated" and records:
        records[0].write_bytes(records[0].read_bytes()[:40])
    elif kind == "null-result" and records:
        text = records[0].read_text()
        records[0].write_text(text.replace('"result": {', '"result": null, "was": {', 1))
    elif kind == "latin1" and records:
        records[0].write_bytes(b'{"status": "\xe9"}')
    elif kind == "no-manifest":
        (target / "scan.json").unlink()
    return target, kind


PLOT_CHOICES = {
    "--x": ("U", "t/U", "1/U", "h", "L", "N", "nope", "[/bold]", "U/0", "/U"),
    "--quantity": ("energy", "energy:0", "energy:9", "gap:0:1", "gap:5:6", "series",
                   "coupling:exchange:0-1", "coupling:exchange", "coupling:field:0:z", "error",
                   "bogus", "coupling:[/bold]", "energy:-1", "energy:x"),
    "--order": ("0", "1", "2", "-1", "99", str(2**63)),
    "--unit": ("t", "U", "h", "nope", ""),
    "--where": ("size=2", "size=3", "U=8", "U=8.0", "h=0.5", "nope=1", "size", "U=nan", "=",
                "size=[/bold]"),
    "--exact-gap": ("0,1", "1,0", "0,99", "a,b", "0", "0,1,2", ""),
    "--levels": ("1", "2", "0", "-1", "1000000000"),
    "--variable": ("L", "N", "Q"),
    "--degree": ("0", "1", "2", "5", "-1", "1000000000"),
    "--power": ("1", "2", "0", "-1", "0.5", "nan", "inf", "1e308"),
    "--title": NASTY_TEXT[:8],
}


SENSIBLE = {  # plots that suit each scan (docs/scans.md), which random options then vary
    "derive": (["--kind", "couplings", "--x", "t/U", "--quantity", "coupling:exchange:0-1",
                "--where", "size=2"],
               ["--kind", "errors", "--x", "t/U", "--unit", "t", "--where", "size=3"],
               ["--kind", "finite-size", "--quantity", "coupling:exchange:0-1"]),
    "spectrum": (["--kind", "finite-size", "--quantity", "energy:0", "--where", "h=0.5"],
                 ["--kind", "levels", "--x", "h", "--where", "size=3"],
                 ["--kind", "finite-size", "--quantity", "gap:0:1", "--per-site"]),
    "series": (["--kind", "couplings", "--x", "h", "--quantity", "series"],
               ["--kind", "levels", "--x", "h"]),
}


def plot_job(index, rng, results, root):
    task = rng.choice(sorted(results))
    directory = root / f"plot{index}"
    directory.mkdir()
    target, damage = damaged_copy(results[task], rng, directory)
    output = directory / rng.choice(("f.png", "f.svg", "f.pdf", "f.png", "f.svg", "f.txt", "f",
                                     "[bold red.png", "missing/f.png", "f.PNG"))
    json_out = rng.random() < 0.5
    argv = ["plot", str(target), "--output", str(output)]
    if rng.random() < 0.7:
        argv += rng.choice(SENSIBLE[task])
    else:
        argv += ["--kind", rng.choice(("couplings", "errors", "finite-size", "levels", "bogus",
                                       "[/bold]"))]
    for option in rng.sample(sorted(PLOT_CHOICES), rng.choice((0, 0, 1, 2, 3))):
        argv += [option, rng.choice(PLOT_CHOICES[option])]
    if rng.random() < 0.2:
        argv.append("--per-site")
    if rng.random() < 0.2:
        argv += ["--series", str(rng.choice((results["series"], directory / "none")))]
    return argv + (["--json"] if json_out else []), json_out, [task, damage]


def test_plots_of_scan_results_keep_the_contract(pool, results, tmp_path):
    rng = random.Random(SEED + 2)
    jobs = {index: plot_job(index, rng, results, tmp_path) for index in range(PLOTS)}
    outcomes = pool.run_all({index: (argv, None) for index, (argv, _, _) in jobs.items()})
    failures, known = split_known([(jobs[name][0], jobs[name][2], failure)
                                   for name, outcome in outcomes.items()
                                   if (failure := judge(jobs[name][0], jobs[name][1], outcome))])
    codes = collections.Counter(outcome.code for outcome in outcomes.values())
    print(f"plot fuzz: seed {SEED}, {len(outcomes)} runs, exit statuses "
          f"{dict(codes)}, {len(failures)} new failures, "
          f"known defects {known}")
    assert not failures, report(failures)
    assert codes[0] and codes[2]
