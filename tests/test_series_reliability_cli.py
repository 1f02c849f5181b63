"""``lowfold series`` says when its series cannot be trusted, on the screen and in ``warnings``.

References (all exact):
- two-site Hubbard model, H0 = hopping, V = U (two electrons, S^z = 0): the ground energy is
  E(lambda) = (lambda U - sqrt(lambda^2 U^2 + 16 t^2)) / 2 (exact diagonalisation of the
  singlet block, common practice), with branch points at lambda = +-4it/U: the series in
  lambda converges at lambda = 1 only when U < 4t.  At U/t = 10 (radius 0.4) it must warn, at
  U/t = 0.5 (radius 8) it must not.
- one spin, H0 = -S^z, V = g S^x: E(lambda) = -sqrt(1 + lambda^2 g^2) / 2 (a two-level
  system), validity ratio |V_mn| / |E_n - E_m| = (g/2) / 1; g = 2e4 gives 1e4.
- one spin, H(lambda) = -sigma^z + lambda (r sigma^z + b sigma^x) with r = 2, b = 0.1: the
  diagonal levels cross at lambda = 1/r and b makes the crossing avoided.  The series
  continues the diabatic branch -(1 - lambda r) sqrt(1 + lambda^2 b^2 / (1 - lambda r)^2),
  +sqrt(1 + b^2) at lambda = 1, while the level followed adiabatically ends at
  -sqrt(1 + b^2): the two describe different levels and the series must say so.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from helpers.cli import run_all, succeeded
from helpers.series_models import ONE_SPIN, tunnelling_dimer_file


TWO_LEVELS = """
title = "one spin, transverse field"
[lattice]
shape = "chain"
size = [1]
[site]
type = "spin"
spin = 0.5
[[term]]
type = "field"
axis = "z"
strength = -1.0
label = "zeeman"
[[term]]
type = "field"
axis = "x"
strength = {g}
label = "transverse"
[perturbation]
unperturbed = ["zeeman"]
order = 8
"""

G = 2e4
R, B = 2.0, 0.1
CONVERGENCE_WORDS = ("ratio test puts the nearest singularity", "still grow",
                     "validity ratio", "Pade approximants", "different levels")


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("reliability")
    texts = {"strong": tunnelling_dimer_file(10.0, 12), "weak": tunnelling_dimer_file(0.5, 12),
             "two-levels": TWO_LEVELS.format(g=G),
             "avoided": ONE_SPIN.format(two_r=2 * R, two_b=2 * B)}
    jobs = {}
    for name, text in texts.items():
        path = directory / f"{name}.toml"
        path.write_text(text)
        jobs[name] = ["series", path]
        jobs[f"{name}-json"] = ["series", path, "--json"]
    jobs["weak-sweep-json"] = [*jobs["weak-json"], "--sweep", "lambda=0:10:3"]
    jobs["avoided"] += ["--order", "12"]
    jobs["avoided-json"] += ["--order", "12"]
    return run_all(jobs)


def data(runs, name) -> dict:
    return json.loads(succeeded(runs[f"{name}-json"]))


def test_strong_coupling_outside_the_radius_warns(runs):
    result = data(runs, "strong")
    assert result["energy"] == pytest.approx(sum(result["orders"].values()))
    assert result["diagnostics"]["exact"] == pytest.approx((10 - np.sqrt(100 + 16)) / 2, abs=1e-9)
    radius = result["diagnostics"]["ratio_test"]["radius"]
    assert radius == pytest.approx(0.4, rel=0.05)             # 4t/U
    said = " ".join(result["warnings"])
    assert "ratio test puts the nearest singularity" in said and "diverges" in said
    screen = " ".join(runs["strong"].stderr.split())
    assert "ratio test puts the nearest singularity" in screen
    assert "fit residual" in succeeded(runs["strong"])


def test_weak_coupling_inside_the_radius_does_not_warn(runs):
    result = data(runs, "weak")
    assert result["energy"] == pytest.approx((0.5 - np.sqrt(0.25 + 16)) / 2, abs=1e-9)
    assert result["diagnostics"]["ratio_test"]["radius"] == pytest.approx(8.0, rel=0.05)
    assert result["diagnostics"]["ratio_test"]["reliable"] is True
    for words in CONVERGENCE_WORDS:
        assert not any(words in w for w in result["warnings"]), result["warnings"]
        assert words not in " ".join(runs["weak"].stderr.split())
    # the one remaining warning says how the non-diagonal H0 was treated, truthfully
    assert any("direct solve" in w for w in result["warnings"])


def test_validity_ratio_of_ten_thousand_warns(runs):
    result = data(runs, "two-levels")
    assert result["diagnostics"]["validity_ratio"] == pytest.approx(G / 2)
    assert result["diagnostics"]["exact"] == pytest.approx(-np.sqrt(1 + G * G) / 2, rel=1e-12)
    assert any("validity ratio" in w and "1e+04" in w for w in result["warnings"])
    assert "validity ratio |V_mn| / |E_n - E_m| is 1e+04" in " ".join(runs["two-levels"].stderr.split())


def test_unreliable_ratio_fit_is_said_on_the_screen(runs):
    # order 8 of an even series leaves two ratios in lambda^2: the fit cannot be judged
    test = data(runs, "two-levels")["diagnostics"]["ratio_test"]
    assert test["structure"] == "even" and test["reliable"] is False and test["reason"]
    assert "estimate unreliable: only two ratios" in " ".join(succeeded(runs["two-levels"]).split())


def test_series_and_followed_level_on_different_branches_warn(runs):
    result = data(runs, "avoided")
    diag = result["diagnostics"]
    assert diag["exact"] == pytest.approx(-np.sqrt(1 + B * B), abs=1e-6)      # adiabatic
    assert diag["pade"]["value"] == pytest.approx(np.sqrt(1 + B * B), abs=1e-6)  # diabatic
    assert any("different levels" in w for w in result["warnings"])
    assert "different levels" in " ".join(runs["avoided"].stderr.split())


def test_sweep_past_the_radius_warns_at_its_largest_lambda(runs):
    # U/t = 0.5: radius 8 in lambda, so a sweep to lambda = 10 leaves it
    said = " ".join(data(runs, "weak-sweep")["warnings"])
    assert "not beyond lambda = 10" in said and "validity ratio" in said
