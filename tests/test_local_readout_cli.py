"""The local-operator readout as a user meets it: screen, JSON, LaTeX, export, bad input.

Contract (docs/local-readout.md): a product manifold prints its named couplings (X-operator
strings as ``string |a><b|_i ...``); ``--json`` is one strict JSON object whose couplings
have the shape ``{"kind", "sites", "value", "orders"}`` (``"operator"`` added for strings) and
which keeps the ``effective`` matrices; ``--export`` of a local readout writes the model on
its kept local states (test_export_local*.py); a manifold that is not a product keeps the matrix output and one
warning line says why there is no named readout.  Physics of the values: test_tj_readout.py.
"""

from __future__ import annotations

import pytest
from helpers.cli import one_json_object, run_all, succeeded
from helpers.derive_models import ISING_CHAIN
from helpers.lattice_models import tj_text
from helpers.modelfiles import hubbard_text, model_of, write_models

from lowfold.jobs.derive import derive

T, U = 0.1, 1.0
FIELD = '\n[[term]]\ntype = "field"\naxis = "z"\nstrength = 0.03\nsites = [0]\n'


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("local-readout")
    files = write_models(directory, {
        "tj": hubbard_text("chain", [3], t=T, U=U, particles=2, order=2),
        "field": hubbard_text("chain", [3], t=T, U=U, particles=2, order=1, terms=FIELD),
        "ising": ISING_CHAIN,
        "ring": hubbard_text("chain", [6], boundary="periodic", t=T, U=U, particles=5,
                             order=2),
        "infinite": tj_text("chain", order=3, t=T, u=U)})
    return run_all({
        "screen": ["derive", files["tj"], "--no-check"],
        "json": ["derive", files["tj"], "--json", "--no-check"],
        "latex": ["derive", files["field"], "--latex", "--no-check"],
        "strings": ["derive", files["field"], "--no-check"],
        "export": ["derive", files["tj"], "--no-check", "--export", directory / "out.toml"],
        "ising": ["derive", files["ising"], "--no-check"],
        "ring-latex": ["derive", files["ring"], "--no-check", "--latex"],
        "infinite-latex": ["derive", files["infinite"], "--no-check", "--latex"]})


def test_screen_names_the_t_j_couplings(runs):
    out = succeeded(runs["screen"])
    assert "readout local" in out
    for kind in ("hopping", "exchange", "three-site"):
        assert kind in out
    assert "4 t^2/U" in out and "t^2/U" in out


def test_json_couplings_keep_their_shape(runs):
    data = one_json_object(runs["json"])
    assert data["manifold"]["readout"].startswith("local operators")
    three = [c for c in data["couplings"] if c["kind"] == "three-site"]
    assert len(three) == 1 and set(three[0]) >= {"kind", "sites", "value", "orders"}
    assert three[0]["sites"] == [0, 1, 2] and three[0]["value"] == pytest.approx(T**2 / U)
    assert data["effective"]["orders"]


def test_strings_on_the_screen_and_in_latex(runs):
    assert "string |u><u|_0" in succeeded(runs["strings"])
    latex = succeeded(runs["latex"])
    assert r"string $|u\rangle\langle u|_{0}$" in latex
    assert "|_0" not in latex                      # no bare subscript outside math


def test_export_of_a_local_readout_writes_the_t_j_model(runs):
    # the CLI round trip (spectrum, derive --order 1 of the file): test_export_local_cli.py
    assert "effective model written to" in runs["export"].stderr
    succeeded(runs["export"])


def test_non_product_manifold_keeps_the_matrix_with_one_warning(runs):
    # P = {uuu, ddd} of an Ising chain is no product of per-site sets
    proc = runs["ising"]
    out = succeeded(proc)
    assert "effective Hamiltonian on 2 basis states" in out
    lines = [line for line in proc.stderr.splitlines() if "no named readout" in line]
    assert len(lines) == 1 and "not a product of per-site state sets" in lines[0]


def test_non_product_manifold_api():
    result = derive(model_of(ISING_CHAIN), 2, compare_exact=False)
    assert result.manifold.readout.startswith("matrix (")
    assert not result.couplings
    assert sum("no named readout" in w for w in result.warnings) == 1


def test_classes_of_a_doped_ring_in_latex(runs):
    # a periodic 6-site ring with 5 electrons: one class per kind, with the formulas
    latex = succeeded(runs["ring-latex"])
    assert r"(\mathbf{S}_i \cdot \mathbf{S}_j - n_i n_j / 4)" in latex
    assert r"J_{1} &= \frac{4 t^{2}}{U}" in latex
    assert r"K_3 &= \frac{t^{2}}{U}" in latex


def test_classes_of_the_infinite_t_j_chain_in_latex(runs):
    # an infinite lattice has classes and no couplings: the tabular lists the classes (with
    # their formulas), and the string classes of the third order are x_n times X-operators
    latex = succeeded(runs["infinite-latex"])
    table = latex.split(r"\end{tabular}")[0]
    assert r"kind & class & per site & order 1 & order 2 & order 3 & value & formula \\" in table
    assert r"exchange & nearest & $1$ &  & $0.04$ &  & $0.04$ & $4 t^2/U$ \\" in table
    assert table.count("\nstring ") >= 16
    assert r"J_{1} &= \frac{4 t^{2}}{U}" in latex
    assert r"x_{1} \sum_{\text{3 sites (1, 1, 2)}} X^{0d}_{0} X^{d0}_{1} X^{uu}_{2}" in latex
