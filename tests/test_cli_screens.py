"""What the human-readable screens say: help texts, the sweep summary, effective matrices
with their basis labels, and the recognised rationals (screen and ``--latex``).

References:
- two-site Hubbard model at half filling: the singlet-triplet gap is
  (sqrt(U^2 + 16 t^2) - U) / 2 = 4 t^2/U - 16 t^4/U^3 + ... (exact diagonalisation of the
  two-electron problem, common practice), so the exchange to order 4 reads
  ``4 t^2/U - 16 t^4/U^3``;
- an Ising pair ``S^z_0 S^z_1`` perturbed by a field ``h S^z_0``: V is diagonal, so first-order
  degenerate perturbation theory is exact: ``H_eff,1 = h S^z_0`` on the two Neel states, i.e.
  ``-h m`` on the state where site 0 has ``S^z = -m`` (spin m = 1/2 and m = 1).
All commands run the installed ``lowfold`` script at once (a thread pool of subprocesses).
"""

from __future__ import annotations

import json

import pytest

from helpers.cli import run_all, succeeded
from helpers.modelfiles import hubbard_text

H = 0.1

ISING_PAIR = """
title = "Ising pair, field on one site"
[lattice]
shape = "chain"
size = [2]
[site]
type = "spin"
spin = {spin}
[[term]]
type = "product"
operators = ["Sz", "Sz"]
strength = 1.0
bonds = "nearest"
label = "ising"
[[term]]
type = "field"
axis = "z"
strength = {h}
sites = [0]
label = "field"
[perturbation]
unperturbed = ["ising"]
order = 2
"""


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("screens")
    paths = {}
    texts = {"dimer": hubbard_text("chain", [2], t=0.1, U=1.0, order=4),
             "two-sites": hubbard_text("chain", [2], t=1.0, U=10.0, sz=0, order=6,
                                       unperturbed=("hopping",)),
             "half": ISING_PAIR.format(spin=0.5, h=H), "one": ISING_PAIR.format(spin=1, h=H)}
    for name, text in texts.items():
        paths[name] = directory / f"{name}.toml"
        paths[name].write_text(text)
    sweep = ["--sweep", "lambda=0:1:11"]
    return run_all({
        "help-derive": ["derive", "--help"], "help-series": ["series", "--help"],
        "latex": ["derive", paths["dimer"], "--latex", "--no-check"],
        "screen": ["derive", paths["dimer"], "--no-check"],
        "matrix-half": ["derive", paths["half"], "--no-check"],
        "matrix-one": ["derive", paths["one"], "--no-check"],
        "sweep": ["series", paths["two-sites"], *sweep],
        "sweep-json": ["series", paths["two-sites"], *sweep, "--json"],
    })


@pytest.mark.parametrize("command", ["derive", "series"])
def test_help_keeps_square_brackets_and_shows_no_bool_type(runs, command):
    out = succeeded(runs[f"help-{command}"])
    assert "with a [perturbation] table" in out
    assert "<bool>" not in out
    assert "--json" in out and "MODEL" in out


def test_latex_prints_the_recognised_fractions(runs):
    out = succeeded(runs["latex"])
    row = next(line for line in out.splitlines() if line.startswith("exchange"))
    assert r"$\frac{4 t^{2}}{U} - \frac{16 t^{4}}{U^{3}}$" in row
    rows = [line for line in out.splitlines() if line.endswith(r"\\")]
    assert all(r.count("&") == rows[0].count("&") for r in rows)   # the last column everywhere


def test_screen_prints_the_recognised_formula(runs):
    assert "4 t^2/U - 16 t^4/U^3" in succeeded(runs["screen"])


@pytest.mark.parametrize("name, low, high, legend", [
    ("half", "du", "ud", "u is S^z = +1/2, d is S^z = -1/2"),
    ("one", "20", "02", "0 is S^z = +1, 1 is S^z = 0, 2 is S^z = -1"),
])
def test_small_effective_matrix_is_printed_with_labels(runs, name, low, high, legend):
    out = succeeded(runs[f"matrix-{name}"])
    assert legend in " ".join(out.split())              # the legend (rich may wrap it)
    order_one = out[out.index("order 1"):]
    m = 0.5 if name == "half" else 1.0
    rows = {line.split("│")[1].strip(): line.split("│")[2:4] for line in order_one.splitlines()
            if line.count("│") == 4}
    # site 0 down (S^z = -m) in the first label: -h m on the diagonal, nothing off it
    assert float(rows[low][0]) == pytest.approx(-H * m) and float(rows[low][1]) == 0
    assert float(rows[high][1]) == pytest.approx(H * m) and float(rows[high][0]) == 0


def test_sweep_summary_reads_as_a_sentence_with_its_numbers(runs):
    out = " ".join(succeeded(runs["sweep"]).split())
    useful = json.loads(succeeded(runs["sweep-json"]))["sweep"]["useful_up_to"]
    assert "lambda = order" not in out
    assert "the partial sums stay within 1% of the smallest denominator" in out
    for n, value in useful.items():
        assert f"order {n} up to lambda = {value:.3g}" in out
