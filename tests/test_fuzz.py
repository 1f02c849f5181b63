"""Fuzz: mutated model files through ``spectrum``, ``derive`` and ``series``.

The contract of every command (README, docs/reliability.md): exit 0 and, with ``--json``,
exactly one strict JSON object on stdout; or exit 2 with one line on stderr; never a
traceback, another status or a hang.  Mutants come from a seeded generator
(``helpers/fuzz.py``): the shipped examples and a small model of every site type on every
lattice shape, each damaged in one to three places.  Runs go through a pool of worker
processes that import lowfold once (``helpers/fuzz_runner.py``), each with a time limit;
a few run as real ``lowfold`` processes.

The normal run takes a sample (``SAMPLE`` mutants, one command line each per command);
``LOWFOLD_FUZZ_RUNS=3000`` runs about that many command lines, every command with and
without ``--json``; ``LOWFOLD_FUZZ_SEED`` changes the seed.  A failure names the mutant
(seed and index), what was done to it and the command line; the mutant's file is kept in
pytest's temporary directory.
"""

from __future__ import annotations

import collections
import os
import random

import pytest
from helpers.cli import run_all
from helpers.fuzz import base_documents, contract_failure, make_mutant
from helpers.fuzz_report import report, split_known
from helpers.fuzz_runner import Outcome, Pool

SEED = int(os.environ.get("LOWFOLD_FUZZ_SEED", "1010"))
RUNS = int(os.environ.get("LOWFOLD_FUZZ_RUNS", "0"))
SAMPLE = 70                     # mutants of the normal run (three command lines each)
TIMEOUT = float(os.environ.get("LOWFOLD_FUZZ_TIMEOUT", "60"))
COMMANDS = ("spectrum", "derive", "series")
ORDERS = ("1", "2", "3", "0", "-1", "201", "1000000000", str(2**63))


def extra_arguments(command: str, rng: random.Random, directory, json_out: bool) -> list:
    """Options of the command, valid or out of range (integers, as the option types say)."""
    if rng.random() < 0.5:
        return []
    if command == "spectrum":
        return ["--levels", rng.choice(("1", "2", "0", "-1", "1000000000", str(2**63)))]
    if command == "derive":
        options = [["--order", rng.choice(ORDERS)], ["--no-check"], ["--check-scaling"]]
        if not json_out:
            options.append(["--latex"])
        return rng.choice(options)
    return rng.choice([
        ["--order", rng.choice(ORDERS)],
        ["--state", rng.choice(("level:0", "level:1", "level:99", "level:-1", "uudd", "xyz",
                                "[/bold]", "0202", "ud", "line\nbreak"))],
        ["--sweep", rng.choice(("lambda=0:1:3", "lambda=0:1e300:3", "lambda=nan:1:3",
                                "lambda=0:inf:3", "lambda=0:1:1", "lambda=0:1:100000000000",
                                "lambda=1:0:3", "mu=0:1:3", "lambda=[/bold]"))],
        ["--plot", str(rng.choice((directory / "sweep.png", directory / "sweep.txt",
                                   directory / "missing" / "sweep.png",
                                   directory / "[bold red.png")))],
    ])


def write_mutant(mutant, root):
    directory = root / mutant.name
    directory.mkdir()
    path = directory / mutant.filename
    path.write_bytes(mutant.data)
    return directory, path


def plan(root, seed: int, runs: int) -> dict:
    """``{job name: (argv, mutant, command, json_out)}``: ``runs`` > 0 gives every command
    with and without ``--json`` for ``runs // 6`` mutants, else the sample."""
    rng = random.Random(seed)
    docs = base_documents()
    names = sorted(docs)
    count = runs // 6 if runs else SAMPLE
    jobs = {}
    for index in range(count):
        base = names[index % len(names)] if index < len(names) else rng.choice(names)
        mutant = make_mutant(f"s{seed}-{index}", base, docs[base], rng)
        directory, path = write_mutant(mutant, root)
        for command in COMMANDS:
            modes = (True, False) if runs else (rng.random() < 0.5,)
            for json_out in modes:
                argv = [command, str(path), *(["--json"] if json_out else []),
                        *extra_arguments(command, rng, directory, json_out)]
                jobs[f"{mutant.name}/{command}/{'json' if json_out else 'text'}"] = (
                    argv, mutant, command, json_out)
    return jobs


def judge(job, outcome) -> str | None:
    _, mutant, command, json_out = job
    failure = contract_failure(outcome.code, outcome.stdout, outcome.stderr, json_out=json_out)
    if failure is None and command in mutant.refused_by and outcome.code == 0:
        failure = "accepted a file that must be refused"
    return failure


@pytest.fixture(scope="module")
def pool():
    workers = Pool(2, timeout=TIMEOUT)
    yield workers
    workers.close()


def test_mutated_model_files_keep_the_contract(pool, tmp_path):
    jobs = plan(tmp_path, SEED, RUNS)
    outcomes = pool.run_all({name: (job[0], None) for name, job in jobs.items()})
    failures, known = split_known([(job[0], job[1].describe(), failure)
                                   for name, job in jobs.items()
                                   if (failure := judge(job, outcomes[name])) is not None])
    codes = collections.Counter(outcome.code for outcome in outcomes.values())
    print(f"fuzz: seed {SEED}, {len(jobs)} runs, exit statuses {dict(codes)}, "
          f"{len(failures)} new failures, known defects {known}")
    assert not failures, report(failures)
    # the generator reaches both sides of the contract
    assert codes[0] > len(jobs) // 10 and codes[2] > len(jobs) // 10


def test_a_sample_as_real_processes(tmp_path):
    """The script itself (imports, entry point, exit status) on a few mutants."""
    jobs = plan(tmp_path, SEED + 1, 0)
    chosen = dict(sorted(jobs.items())[:: max(1, len(jobs) // 8)])
    done = run_all({name: job[0] for name, job in chosen.items()})
    outcomes = {name: Outcome(proc.args, proc.returncode, proc.stdout, proc.stderr, 0.0)
                for name, proc in done.items()}
    failures, _ = split_known([(job[0], job[1].describe(), failure) for name, job in chosen.items()
                               if (failure := judge(job, outcomes[name])) is not None])
    assert not failures, report(failures)
