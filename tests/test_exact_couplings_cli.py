"""``lowfold derive --exact-couplings`` as a user runs it, and the exact couplings of a scan.

Physics reference: the Hubbard dimer at half filling has the exact exchange
``J = (sqrt(U^2 + 16 t^2) - U)/2`` at every U/t (its singlet-triplet gap; exact two-site
solution, common practice).  The contract (DESIGN.md, PREAMBLE): ``--json`` prints one strict
JSON object (no NaN / Infinity); a user error is one line on stderr and exit status 2.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from helpers.cli import one_json_object, one_line_error, run, run_all, succeeded
from helpers.modelfiles import hubbard_text
from lowfold.plots.exact_figure import plot_exact_couplings
from lowfold.scans.store import load_results
from lowfold.scans.table import table_rows


def dimer_exchange(t, U):
    return 8 * t * t / (math.sqrt(U * U + 16 * t * t) + U)


def strict(text: str) -> dict:
    def refuse(name):
        raise ValueError(f"non-finite number {name} in JSON")
    return json.loads(text, parse_constant=refuse)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = tmp_path_factory.mktemp("exact_cli")
    files = {
        "dimer": hubbard_text("chain", (2,), t=1.0, U=0.5, order=4),
        "ring": hubbard_text("chain", (4,), boundary="periodic", t=1.0, U=6.0, order=4),
        "ring_mixed": hubbard_text("chain", (4,), boundary="periodic", t=1.0, U=3.0, order=2),
        "big": hubbard_text("chain", (12,), t=0.1, U=1.0, order=2),
        "doped": hubbard_text("chain", (3,), t=0.1, U=1.0, particles=2, order=2),
    }
    paths = {}
    for name, text in files.items():
        paths[name] = d / f"{name}.toml"
        paths[name].write_text(text)
    return run_all({
        "dimer_json": ["derive", paths["dimer"], "--exact-couplings", "--json"],
        "ring_json": ["derive", paths["ring"], "--exact-couplings", "--json", "--no-check"],
        "ring_screen": ["derive", paths["ring"], "--exact-couplings", "--no-check"],
        "mixed": ["derive", paths["ring_mixed"], "--exact-couplings", "--json"],
        "big": ["derive", paths["big"], "--exact-couplings", "--json"],
        "doped_json": ["derive", paths["doped"], "--exact-couplings", "--json", "--no-check"],
        "doped_screen": ["derive", paths["doped"], "--exact-couplings", "--no-check"],
    })


def test_dimer_json_is_strict_and_has_the_exact_exchange(runs):
    data = one_json_object(runs["dimer_json"])
    strict(runs["dimer_json"].stdout)
    J = dimer_exchange(1.0, 0.5)
    exchange = next(c for c in data["couplings"] if c["kind"] == "exchange")
    assert abs(exchange["exact"] - J) < 1e-10
    # at U/t = 0.5 the series is far off, the exact value is not
    assert abs(exchange["value"] - J) > 1
    assert all("exact" in term for term in data["terms"])
    assert data["exact"]["smallest_singular_value"] > 0.5 and data["exact"]["gap"] > 0


def test_ring_json_and_screen_show_exact_beside_the_orders(runs):
    data = one_json_object(runs["ring_json"])
    for coupling in data["couplings"]:
        assert set(coupling) >= {"kind", "sites", "value", "orders", "exact"}
    nearest = [c for c in data["couplings"] if c["kind"] == "exchange" and c["sites"] == [0, 1]]
    assert nearest and 0 < nearest[0]["exact"] < 4 / 6      # below the order-2 4t^2/U
    screen = succeeded(runs["ring_screen"])
    assert "exact" in screen and "direct rotation of the 16 exact levels" in screen


def test_mixed_manifold_is_one_line_exit_2(runs):
    line = one_line_error(runs["mixed"])
    assert line.startswith("lowfold: error: ") and "left the manifold" in line and "U = 3" in line


def test_too_large_cluster_is_one_line_size_error(runs):
    line = one_line_error(runs["big"])
    assert "exact eigenvectors" in line and "more than the limit of" in line


def test_local_readout_json_and_screen(runs):
    """A doped chain ({0, up, down} per site at fixed N): its local-operator couplings and its
    matrix both carry the exact values."""
    data = one_json_object(runs["doped_json"])
    assert data["manifold"]["readout"].startswith("local operators") and "exact" in data["effective"]
    kinds = {c["kind"] for c in data["couplings"]}
    assert {"hopping", "exchange", "three-site"} <= kinds
    assert all(isinstance(c["exact"], float) for c in data["couplings"])
    assert "exact: direct rotation" in succeeded(runs["doped_screen"])


def test_scan_with_exact_couplings_and_its_plot(tmp_path):
    (tmp_path / "dimer.toml").write_text(hubbard_text("chain", (2,), t=1.0, U=1.0, order=6))
    (tmp_path / "scan.toml").write_text(
        'model = "dimer.toml"\n[task]\nname = "derive"\norder = 6\ncheck = false\n'
        'exact_couplings = true\n[grid]\nU = [6.0, 8.0, 12.0, 16.0, 24.0]\n')
    scan = run("scan", str(tmp_path / "scan.toml"), "--out", str(tmp_path / "res"),
               "--workers", "1", "--json")
    assert strict(succeeded(scan))
    records = load_results(tmp_path / "res")
    assert len(records) == 5 and all(r["status"] == "ok" for r in records)
    # in units of U the coupling is U f(t/U), and J - J_{<=n} = U O((t/U)^(n+2))
    fig = plot_exact_couplings(records, x="t/U", quantity="coupling:exchange:0-1", unit="U")
    top, bottom = fig.axes
    exact = next(line for line in top.get_lines() if "exact" in line.get_label())
    xs, ys = exact.get_data()
    assert np.allclose(ys, [dimer_exchange(1.0, 1.0 / x) * x for x in xs], atol=1e-10)
    # the differences fall like (t/U)^(n+2) after order n (the labels carry the slopes)
    slopes = {line.get_label().split()[1]: float(line.get_label().split("slope ")[1][:-1])
              for line in bottom.get_lines()}
    assert set(slopes) == {"2", "4", "6"}
    for n, slope in slopes.items():
        assert abs(slope - (int(n) + 2)) < 0.3, slopes
    table = table_rows(records)
    assert any(row["order"] == "exact" and row["kind"] == "exchange" for row in table)
    plot = run("plot", str(tmp_path / "res"), "--kind", "exact-couplings", "--x", "t/U",
               "--quantity", "coupling:exchange:0-1", "--output", str(tmp_path / "ex.png"),
               "--json")
    assert one_json_object(plot)["kind"] == "exact-couplings"
    assert (tmp_path / "ex.png").stat().st_size > 10_000
    no_exact = run("plot", str(tmp_path / "res"), "--kind", "exact-couplings", "--x", "t/U",
                   "--quantity", "energy", "--output", str(tmp_path / "bad.png"))
    assert "draws a coupling" in one_line_error(no_exact)
