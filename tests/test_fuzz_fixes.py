"""Regression checks of defects the fuzz suite found (tests/test_fuzz_known.py holds their
contract-level reproductions): the series of a degenerate reference, the unit of a
finite-size fit, and the text drawn in figures."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from math import comb

import matplotlib
import numpy as np
import pytest

from lowfold.errors import ModelError
from lowfold.plots.style import legend, new_figure, visible_text
from lowfold.scans.extrapolate import extrapolate_records

HUBBARD_FOUR = """
title = "open Hubbard chain of four sites at half filling"
[lattice]
shape = "chain"
size = [4]
boundary = "open"
[site]
type = "electron"
[sector]
particles = 4
sz = 0
[parameters]
t = 1.0
U = 10.0
[[term]]
type = "hopping"
strength = "t"
bonds = "nearest"
label = "hop"
[[term]]
type = "hubbard"
strength = "U"
label = "onsite"
[perturbation]
unperturbed = ["onsite"]
order = 4
"""


def test_series_of_a_degenerate_reference_finishes_without_an_exact_value(tmp_path):
    # found by the fuzz: with order 1 the series accepts a reference inside the degenerate
    # lowest U level (the hopping couples it to its partners only at order 2), and the exact
    # following shrank its step to 1e-5 for minutes.  No single exact level grows out of a
    # degenerate level, so the comparison is skipped with a warning, in seconds.
    # The lowest level of H0 = U sum n_up n_down at half filling, S^z = 0, is every singly
    # occupied configuration: C(4, 2) = 6 states (common practice), the reference and 5 more.
    path = tmp_path / "hubbard4.toml"
    path.write_text(HUBBARD_FOUR)
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1"}
    proc = subprocess.run([shutil.which("lowfold"), "series", str(path), "--order", "1",
                           "--json"], capture_output=True, text=True, timeout=60, check=False,
                          env=env, stdin=subprocess.DEVNULL)
    assert proc.returncode == 0, proc.stderr
    result = json.loads(proc.stdout)
    assert result["diagnostics"]["exact"] is None
    skipped = [w for w in result["warnings"] if w.startswith("exact comparison skipped")]
    assert len(skipped) == 1
    assert f"degenerate with {comb(4, 2) - 1} other state(s)" in skipped[0]


def test_unknown_unit_of_a_finite_size_fit_names_the_parameters():
    records = [{"key": f"p{n}", "status": "ok", "task": "spectrum", "size": [n], "n_sites": n,
                "parameters": {"J": 1.0, "h": 0.5}, "values": {"size": [n]},
                "result": {"dimension": 2 ** n, "energies": [-0.25 * n]}}
               for n in (2, 3)]
    with pytest.raises(ModelError, match=r"unit 'U' is not a parameter of the scan.*J, h"):
        extrapolate_records(records, "energy:0", unit="U")


@pytest.mark.parametrize("text, shown", [("a\tb", "a\\tb"), ("bell\x07", "bell\\a"),
                                         ("esc\x1b", "esc\\x1b"), ("two\nlines", "two\nlines"),
                                         ("plain", "plain")])
def test_control_characters_of_titles_are_shown_as_escapes(text, shown):
    assert visible_text(text) == shown


def test_no_legend_without_labelled_artists(recwarn):
    with matplotlib.rc_context():
        ax = new_figure().axes[0]
        ax.plot([0, 1], [0, 1])
        legend(ax)
        assert ax.get_legend() is None
        ax.plot([0, 1], [1, 0], label="line")
        legend(ax)
        assert ax.get_legend() is not None
    assert not [w for w in recwarn if "legend" in str(w.message)]


def test_level_selectors_that_are_not_integers_are_model_errors():
    # found by the large plot fuzz (seed 1010): `--quantity energy:x` raised ValueError
    from lowfold.results import Spectrum
    from lowfold.scans.select import scalar
    record = {"status": "ok", "task": "spectrum", "key": "k",
              "result": Spectrum(3, np.array([-1.0, 0.0, 2.0])).to_dict()}
    assert scalar(record, "gap:0:2") == 3.0          # exact: 2 - (-1)
    for bad in ("energy:x", "gap:0", "gap:0:-1", "energy:0:1"):
        with pytest.raises(ModelError, match="gap|level"):
            scalar(record, bad)
