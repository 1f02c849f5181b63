"""derive --export of a doped Hubbard cluster from the command line, and the file it writes.

``lowfold derive doped.toml --export out.toml`` writes the t-J model on the kept states
{0, u, d}; ``lowfold spectrum out.toml`` gives the effective levels and ``lowfold derive
out.toml --order 1`` the couplings written: t, J = 4 t^2/U and the three-site K = J/4 (Chao,
Spalek & Oles, J. Phys. C 10, L271 (1977); MacDonald, Girvin & Yoshioka, Phys. Rev. B 37,
9753 (1988)).  A readout with no export form (a manifold that is no product of local state
sets, only a matrix) is one line on stderr and exit status 2, as are bad kept states.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.cli import one_json_object, one_line_error, run_all, succeeded
from helpers.derive_models import ISING_CHAIN
from helpers.modelfiles import hubbard_text, model_of, write_models

from lowfold.jobs.derive import derive

T, U = 0.1, 1.0


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    directory = tmp_path_factory.mktemp("export-local")
    files = write_models(directory, {
        "doped": hubbard_text("square", [2, 2], t=T, U=U, particles=3, order=2),
        "ising": ISING_CHAIN,
        "bad": hubbard_text("chain", [3], t=T, U=U, particles=2, order=2).replace(
            'type = "electron"', 'type = "electron"\nstates = ["0", "x"]')})
    out = directory / "out.toml"
    first = run_all({
        "export": ["derive", files["doped"], "--no-check", "--export", out],
        "ising": ["derive", files["ising"], "--no-check", "--export", directory / "no.toml"],
        "bad": ["spectrum", files["bad"]]})
    second = run_all({"spectrum": ["spectrum", out, "--json"],
                      "again": ["derive", out, "--order", "1", "--json", "--no-check"]})
    return {**first, **second, "doped": files["doped"], "out": out}


def test_export_then_spectrum_gives_the_effective_levels(runs):
    succeeded(runs["export"])
    text = runs["out"].read_text()
    assert 'states = ["0", "u", "d"]' in text and 'type = "three-site"' in text
    levels = one_json_object(runs["spectrum"])["energies"]
    result = derive(model_of(runs["doped"].read_text()), 2, compare_exact=False)
    effective = np.linalg.eigvalsh(result.matrix())
    np.testing.assert_allclose(levels, effective[:len(levels)], atol=1e-10)


def test_derive_of_the_exported_file_returns_the_t_j_couplings(runs):
    data = one_json_object(runs["again"])
    j = 4 * T**2 / U
    for c in data["couplings"]:
        expected = {"hopping": T, "exchange": j, "three-site": j / 4}.get(c["kind"])
        if expected is not None:
            assert c["value"] == pytest.approx(expected, rel=1e-9), c
    kinds = {c["kind"] for c in data["couplings"]}
    assert {"hopping", "exchange", "three-site"} <= kinds


def test_a_readout_without_export_form_is_one_line(runs):
    assert "no spin-1/2 form" in one_line_error(runs["ising"])


def test_unknown_kept_state_is_one_line(runs):
    error = one_line_error(runs["bad"])
    assert "site" in error and "'x'" in error and "0 u d 2" in error
