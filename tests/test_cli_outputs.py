"""Requests that cannot be met are refused up front, in one line, with exit status 2.

- ``--plot`` / ``--output`` / ``--export`` files that cannot be written are refused before any computation
  (the sweep used to run to its end and then fail with a traceback).  The order is shown
  with a model the series job itself refuses (a degenerate H0 ground level): the output
  check speaks first.
- ``spectrum --levels`` beyond the machine names the levels and the sector's dimension (it
  used to say "more than the -77.1 GiB allowed"); beyond the dimension on a small sector it
  gives every level, checked against the closed form of the two-site Hubbard model
  (E = (U -+ sqrt(U^2 + 16 t^2)) / 2, 0 and U for two electrons at S^z = 0: exact
  diagonalisation of the 4-state block, common practice).
"""

from __future__ import annotations

import json
import re
from math import comb

import numpy as np
import pytest

from helpers.cli import one_line_error, run_all, succeeded
from helpers.modelfiles import exchange, hubbard_text, spin_text

T, U = 1.0, 10.0
CHAIN = 22                  # sites of the spin chain at S^z = 0: C(22, 11) = 705,432 states


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("outputs")
    two = directory / "two.toml"               # U as H0: a degenerate ground level
    two.write_text(hubbard_text("chain", [2], t=T, U=U, sz=0, order=2))
    chain = directory / "chain.toml"
    chain.write_text(spin_text("chain", [CHAIN], "open", exchange(1.0), sz=0))
    (directory / "taken.png").mkdir()
    missing = directory / "missing" / "a.png"
    return run_all({
        "plot-missing-dir": ["series", two, "--plot", missing],
        "plot-is-directory": ["series", two, "--plot", directory / "taken.png"],
        "sweep-plot-missing-dir": ["series", two, "--sweep", "lambda=0:1:5", "--plot", missing],
        "figure-missing-dir": ["plot", directory, "--kind", "couplings", "--output", missing],
        "export-missing-dir": ["derive", two, "--export", directory / "missing" / "h.toml"],
        "series-without-plot": ["series", two],
        "levels-beyond-memory": ["spectrum", chain, "--levels", "1000000000"],
        "levels-beyond-dimension": ["spectrum", two, "--levels", "1000000000", "--json"],
    })


@pytest.mark.parametrize("name, flag", [("plot-missing-dir", "--plot"),
                                        ("sweep-plot-missing-dir", "--plot"),
                                        ("figure-missing-dir", "--output"),
                                        ("export-missing-dir", "--export")])
def test_missing_output_directory_is_refused_first(runs, name, flag):
    line = one_line_error(runs[name])
    assert flag in line and "missing" in line and "does not exist" in line


def test_output_that_is_a_directory_is_refused(runs):
    line = one_line_error(runs["plot-is-directory"])
    assert "--plot" in line and "taken.png" in line and "directory" in line


def test_the_model_alone_is_refused_for_another_reason(runs):
    # without --plot the same command fails in the computation: the check above came first
    line = one_line_error(runs["series-without-plot"])
    assert "degenerate" in line and "--plot" not in line


def test_levels_beyond_memory_name_the_levels_and_the_dimension(runs):
    line = one_line_error(runs["levels-beyond-memory"])
    assert "1,000,000,000 levels" in line
    assert f"{comb(CHAIN, CHAIN // 2):,} states" in line
    assert re.search(r"more than the \d+\.\d GiB available", line), line


def test_levels_beyond_a_small_dimension_give_every_level(runs):
    data = json.loads(succeeded(runs["levels-beyond-dimension"]))
    root = np.sqrt(U * U + 16 * T * T)
    expected = sorted([(U - root) / 2, 0.0, U, (U + root) / 2])
    assert data["dimension"] == 4
    np.testing.assert_allclose(data["energies"], expected, atol=1e-10)
