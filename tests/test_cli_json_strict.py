"""``--json`` is strict JSON: never ``NaN`` or ``Infinity`` (RFC 8259 has no such numbers and
strict parsers reject them), and NumPy's ``RuntimeWarning`` never reaches stderr.

The overflow case of the reliability report: the two-site Hubbard series (H0 = hopping,
V = U) swept to lambda = 1e300, where the partial sums ``sum_n E_n lambda^n`` overflow.
The numbers that stay finite are checked against the closed form
E(lambda) = (lambda U - sqrt(lambda^2 U^2 + 16 t^2)) / 2 (exact diagonalisation of the
two-electron singlet block, common practice).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from helpers.cli import run_all, succeeded
from helpers.series_models import tunnelling_dimer_file
from lowfold.results.common import null_non_finite

T, U = 1.0, 10.0

TWO_SITES = tunnelling_dimer_file(U, 6, t=T)


def strict_json(text: str) -> dict:
    """Parse as a strict parser does: NaN, Infinity and -Infinity are errors."""
    def refuse(constant):
        raise ValueError(f"not JSON: {constant}")
    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    path = tmp_path_factory.mktemp("strict") / "two.toml"
    path.write_text(TWO_SITES)
    return run_all({"json": ["series", path, "--sweep", "lambda=0:1e300:3", "--json"],
                    "screen": ["series", path, "--sweep", "lambda=0:1e300:3"]})


def closed_form(lam: float) -> float:
    """The closed form, written without cancellation or overflow for lambda U >= 0."""
    a, b = lam * U, 4 * T
    return -b * b / (2 * (a + np.hypot(a, b)))


def test_overflowing_sweep_prints_strict_json(runs):
    data = strict_json(succeeded(runs["json"]))
    sweep = data["sweep"]
    assert sweep["lambda"] == [0.0, 5e299, 1e300]
    for n, sums in sweep["series"].items():
        assert sums[0] == pytest.approx(-2 * T, abs=1e-12)      # lambda = 0: E_0 = -2t
        assert sums[1] is None and sums[2] is None             # overflowed: null
    # the exact level followed from lambda = 0 stays finite: -4t^2/(lambda U) -> 0
    for lam, value in zip(sweep["lambda"], sweep["followed"]):
        assert value == pytest.approx(closed_form(lam), abs=1e-9)
    said = " ".join(data["warnings"])
    assert "overflow" in said and "lambda = 5e+299" in said
    assert "sweep.series.2[1]" in said                  # where the nulls are


@pytest.mark.parametrize("name", ["json", "screen"])
def test_no_runtime_warning_reaches_stderr(runs, name):
    proc = runs[name]
    succeeded(proc)
    assert "RuntimeWarning" not in proc.stderr
    if name == "json":
        assert proc.stderr == ""


def test_null_non_finite_names_every_replaced_number():
    data = {"a": [1.0, float("nan"), {"b": float("-inf")}], "c": "text", "d": None, "e": 3}
    clean, where = null_non_finite(data)
    assert clean == {"a": [1.0, None, {"b": None}], "c": "text", "d": None, "e": 3}
    assert where == ["a[1]", "a[2].b"]
    assert data["a"][1] != data["a"][1]            # the input is left as it was (NaN)
