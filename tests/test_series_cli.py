"""``lowfold series`` as a command.

User errors give exactly one line on stderr, exit status 2 and no traceback; ``--json``
prints one JSON object on stdout and nothing else.  A few commands run the installed script
as subprocesses, started at once (a thread pool), since each start-up imports numpy, scipy
and numba; the other cases call the same entry point, ``lowfold.cli.main``, in this
process.  The model files and the exact references come from ``helpers/series_models.py`` and
``helpers/exact.py``.
"""

from __future__ import annotations

import subprocess

import numpy as np
import pytest

from lowfold import cli
from helpers.cli import one_json_object, one_line_error, run_all
from helpers.modelfiles import write_models
from helpers.exact import label_index, ring_coefficients, ring_energy, spin_z_total
from helpers.series_models import (DIMER_AND_FREE_SPIN, GRADED_FIELDS, NO_SPLIT, ZEEMAN_CHAIN,
                                   graded_dense, tfim_file)



MODELS = {"ring": tfim_file(6, 1.0, 14), "trimer": DIMER_AND_FREE_SPIN, "nosplit": NO_SPLIT,
          "graded": GRADED_FIELDS.format(J=2.0), "zeeman": ZEEMAN_CHAIN.format(L=2)}

ERRORS = {  # name: (model, extra arguments, a phrase the message must contain)
    "degenerate-diagonal": ("ring", ["--state", "dduuuu"], "lowfold derive"),
    "degenerate-nondiagonal": ("trimer", [], "lowfold derive"),
    "unknown-state": ("ring", ["--state", "uxuuuu"], "not a basis state"),
    "level-out-of-range": ("ring", ["--state", "level:99"], "level:99"),
    "order-zero": ("ring", ["--order", "0"], "order"),
    "order-1000": ("ring", ["--order", "1000"], "order"),
    "sweep-two-fields": ("ring", ["--sweep", "lambda=0:2"], "--sweep"),
    "sweep-not-lambda": ("ring", ["--sweep", "mu=0:2:41"], "--sweep"),
    "sweep-one-point": ("ring", ["--sweep", "lambda=0:2:1"], "--sweep"),
    "no-perturbation": ("nosplit", [], "[perturbation]"),
    "plot-suffix": ("ring", ["--plot", "figure.txt"], "--plot"),
}


SUBPROCESS_ERRORS = ("degenerate-diagonal", "no-perturbation")


@pytest.fixture(scope="module")
def models(tmp_path_factory):
    return write_models(tmp_path_factory.mktemp("models"), MODELS)


@pytest.fixture
def call(models, monkeypatch, capsys):
    """``call(model, *args)``: run ``lowfold series`` through ``cli.main`` in this process;
    returns a CompletedProcess-like object (returncode, stdout, stderr)."""
    def _call(model, *args):
        monkeypatch.setattr("sys.argv", ["lowfold", "series", str(models[model]), *args])
        code = 0
        try:
            cli.main()
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        captured = capsys.readouterr()
        return subprocess.CompletedProcess(["lowfold"], code, captured.out, captured.err)
    return _call


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """Every command of this module, run concurrently: ``{name: (dir, CompletedProcess)}``."""
    directory = tmp_path_factory.mktemp("series")
    paths = write_models(directory, MODELS)
    jobs = {name: (model, extra) for name, (model, extra, _) in ERRORS.items()
            if name in SUBPROCESS_ERRORS}
    jobs.update({"json": ("ring", ["--json"]), "table": ("ring", [])})
    jobs["plot"] = ("zeeman", ["--sweep", "lambda=0:2:21", "--plot", str(directory / "sweep.png")])
    done = run_all({name: ["series", paths[model], *extra] for name, (model, extra) in jobs.items()})
    return {name: (directory, proc) for name, proc in done.items()}


# ---------------------------------------------------------------------------------------
# user errors


def check_one_line_error(proc, phrase):
    line = one_line_error(proc)
    assert line.startswith("lowfold: error:")
    assert phrase in line


@pytest.mark.parametrize("name", SUBPROCESS_ERRORS)
def test_user_error_is_one_line_exit_2_script(runs, name):
    check_one_line_error(runs[name][1], ERRORS[name][2])


@pytest.mark.parametrize("name", sorted(set(ERRORS) - set(SUBPROCESS_ERRORS)))
def test_user_error_is_one_line_exit_2(call, name):
    model, extra, phrase = ERRORS[name]
    check_one_line_error(call(model, *extra), phrase)


# ---------------------------------------------------------------------------------------
# --json


def test_json_keys_and_values(runs):
    # docs/output.md: {"orders": {"0": E0, ...}, "energy": sum, "diagnostics": {...}}; the
    # coefficients against the exact finite-ring solution (Lieb, Schultz and Mattis, Ann.
    # Phys. 16, 407 (1961); Pfeuty, Ann. Phys. 57, 79 (1970)).
    data = one_json_object(runs["json"][1])
    assert {"orders", "energy", "diagnostics"} <= set(data)
    assert set(data) <= {"orders", "energy", "diagnostics", "warnings"}
    assert list(data["orders"]) == [str(n) for n in range(15)]
    orders = np.array(list(data["orders"].values()))
    ring = np.array([float(c) for c in ring_coefficients(6, 14)])
    np.testing.assert_allclose(orders, ring, rtol=0, atol=1e-11)
    assert data["energy"] == pytest.approx(orders.sum(), abs=1e-12)
    diag = data["diagnostics"]
    assert diag["reference"] == "uuuuuu"
    assert diag["partial_sums"][-1] == pytest.approx(data["energy"], abs=1e-12)
    assert diag["exact"] == pytest.approx(ring_energy(6, 1.0), abs=1e-11)
    errors = [diag["error_by_order"][str(n)] for n in range(15)]
    np.testing.assert_allclose(errors, np.abs(np.array(diag["partial_sums"]) - diag["exact"]),
                               atol=1e-14)
    assert diag["pade"]["value"] == pytest.approx(diag["exact"], abs=0.1)
    assert diag["ratio_test"]["variable"] == "lambda^2"


def test_json_excited_state_by_label(call):
    # Exact level in the reference's S^z sector at the same rank (non-crossing rule, von
    # Neumann and Wigner 1929), numpy on the Kronecker build; see test_state_series.py.
    data = one_json_object(call("graded", "--state", "duud", "--json"))
    assert data["diagnostics"]["reference"] == "duud"
    h0, v = graded_dense(2.0)
    d = h0.diagonal()
    k = label_index("duud")
    sz = spin_z_total(4)
    block = np.flatnonzero(sz == sz[k])
    rank = int(np.sum(d[block] < d[k]))
    expected = np.linalg.eigvalsh((h0 + v)[np.ix_(block, block)])[rank]
    assert data["orders"]["0"] == pytest.approx(d[k], abs=1e-14)
    assert data["diagnostics"]["exact"] == pytest.approx(expected, abs=1e-12)


def test_json_sweep(call):
    # Two spins in a field with exchange: |uu> at -1 + lambda/4 crosses the singlet at
    # -3 lambda/4 at lambda = 1 (elementary two-spin algebra).
    data = one_json_object(call("zeeman", "--sweep", "lambda=0:2:41", "--json"))
    sweep = data["sweep"]
    assert len(sweep["lambda"]) == 41
    assert [c["sectors"] for c in sweep["crossings"]] == [["Sz=0", "Sz=1"]]
    assert sweep["crossings"][0]["lambda"] == pytest.approx(1.0, abs=0.025)
    np.testing.assert_allclose(sweep["followed"], -1 + np.array(sweep["lambda"]) / 4,
                               atol=1e-12)


# ---------------------------------------------------------------------------------------
# terminal output and figure


def test_terminal_output_runs(runs):
    _, proc = runs["table"]
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr
    for phrase in ("series of the state uuuuuu", "energy by order", "exact eigenvalue",
                   "Pade", "Domb-Sykes", "second-order contributions"):
        assert phrase in proc.stdout, phrase
    assert not proc.stdout.lstrip().startswith("{")


def test_plot_writes_a_png(runs):
    directory, proc = runs["plot"]
    assert proc.returncode == 0, proc.stderr
    figure = directory / "sweep.png"
    assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "figure written to" in proc.stdout
