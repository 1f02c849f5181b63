"""derive --export: the effective model written as a model file, read back and run.

References: the Hubbard ring's effective spin model at order 4, J1 = 4t^2/U - 16t^4/U^3 and
J2 = 4t^4/U^3 (M. Takahashi, J. Phys. C 10, 1289 (1977)); the round trip is exact by
construction: the exported file's Hamiltonian is the effective Hamiltonian, so its levels
are the eigenvalues of the effective matrix (numpy eigvalsh) and a first-order derive of it
(H0 a constant, V the couplings) returns the couplings written.
"""

from __future__ import annotations

import numpy as np
import pytest

from helpers.cli import one_json_object, one_line_error, run, succeeded
from helpers.derive_models import ISING_CHAIN
from helpers.modelfiles import hubbard_text, model_of, spin_text, term_text, write_models
from lowfold import ModelError, derive, load_model
from lowfold.jobs.export import export_text, write_export
from lowfold.jobs.spectrum import spectrum

T, U = 1.0, 10.0


@pytest.fixture(scope="module")
def hubbard_ring():
    model = model_of(hubbard_text("chain", [6], boundary="periodic", t=T, U=U, order=4))
    return derive(model, compare_exact=False)


def couplings(result):
    return {(c.kind, tuple(c.sites)): np.asarray(c.value, dtype=float) for c in result.couplings}


def test_export_writes_the_bond_classes_with_their_values(hubbard_ring, tmp_path):
    path = write_export(hubbard_ring, tmp_path / "ring.toml")
    model = load_model(path)
    by_label = {t.label: t for t in model.terms}
    assert by_label["J1"].bonds == "nearest" and by_label["J2"].bonds == "next-nearest"
    assert model.parameters["J1"] == pytest.approx(4 * T**2 / U - 16 * T**4 / U**3, rel=1e-12)
    assert model.parameters["J2"] == pytest.approx(4 * T**4 / U**3, rel=1e-12)
    assert model.lattice.size == (6,) and model.lattice.boundary == ("periodic",)


def test_round_trip_first_order_derive_and_spectrum(hubbard_ring, tmp_path):
    model = load_model(write_export(hubbard_ring, tmp_path / "ring.toml"))
    again = derive(model, 1, compare_exact=False)
    before, after = couplings(hubbard_ring), couplings(again)
    assert before.keys() == after.keys()
    for key, value in before.items():
        assert np.allclose(after[key], value, rtol=1e-12, atol=1e-14), key
    effective = np.linalg.eigvalsh(hubbard_ring.matrix())
    levels = spectrum(model, 12).energies
    assert np.allclose(levels, effective[:12], rtol=0, atol=1e-10)


def test_multi_spin_couplings_come_back_from_an_exported_spin_model(tmp_path):
    terms = (term_text("exchange", 1.0) + term_text("ring", 0.3, cycles=4)
             + term_text("dm", 0.2, vector=[0.0, 0.6, 0.8], bonds=[[0, 1]])
             + term_text("pauli", 0.05, operators=["Z", "X"], bonds=[[1, 3]])
             + term_text("pauli", -0.07, operators=["Z", "Y", "Z"], sites=[[0, 1, 3]], label="zyz")
             + term_text("field", 0.1, axis="x", sites=[2]))
    text = spin_text("square", [2, 2], "open", terms) + (
        '[[term]]\ntype = "constant"\nlabel = "zero"\nstrength = 0.0\n'
        '[perturbation]\nunperturbed = ["zero"]\norder = 1\nwindow = [-1.0, 1.0]\n')
    original = derive(model_of(text), compare_exact=False)
    exported = load_model(write_export(original, tmp_path / "plaquette.toml"))
    again = derive(exported, 1, compare_exact=False)
    before, after = couplings(original), couplings(again)
    assert before.keys() == after.keys() and ("ring", (0, 1, 3, 2)) in before
    for key, value in before.items():
        assert np.allclose(after[key], value, rtol=1e-12, atol=1e-14), key
    assert original.residual.keys() == again.residual.keys() and original.residual


def test_export_refuses_a_result_without_named_readout():
    # P = {uuu, ddd} of an Ising chain is no product of per-site sets: only a matrix
    result = derive(model_of(ISING_CHAIN), compare_exact=False)
    with pytest.raises(ModelError, match="no spin-1/2 form"):
        export_text(result)


def test_cli_export_then_spectrum_on_a_larger_periodic_ring(tmp_path):
    paths = write_models(tmp_path, {"hubbard": hubbard_text("chain", [4], boundary="periodic",
                                                            t=T, U=U, order=2)})
    exported = tmp_path / "spins.toml"
    succeeded(run("derive", str(paths["hubbard"]), "--no-check", "--export", str(exported)))
    out = succeeded(run("spectrum", str(exported), "--size", "8", "--json"))
    assert '"energies"' in out
    error = one_line_error(run("spectrum", str(exported), "--size", "2,x"))
    assert "--size" in error


def test_cli_size_and_boundary_overrides_on_derive(tmp_path):
    paths = write_models(tmp_path, {"hubbard": hubbard_text("chain", [4], boundary="periodic",
                                                            t=0.1, U=1.0, order=2)})
    data = one_json_object(run("derive", str(paths["hubbard"]), "--no-check", "--json",
                               "--size", "2", "--boundary", "open"))
    exchange = [c for c in data["couplings"] if c["kind"] == "exchange"]
    assert [c["sites"] for c in exchange] == [[0, 1]]
    assert exchange[0]["value"] == pytest.approx(4 * 0.1**2 / 1.0, rel=1e-12)
    error = one_line_error(run("derive", str(paths["hubbard"]), "--boundary", "twisted"))
    assert error.startswith("lowfold: error: --boundary")


def test_coupling_classes_become_one_term_each(hubbard_ring):
    import dataclasses

    from lowfold.results import CouplingClass
    j1, j2 = 4 * T**2 / U - 16 * T**4 / U**3, 4 * T**4 / U**3
    classes = (CouplingClass("exchange", "nearest", ((0.0,), (1.0,)), 1, {2: 4 * T**2 / U,
                                                                         4: -16 * T**4 / U**3}),
               CouplingClass("exchange", "next-nearest", ((0.0,), (2.0,)), 1, {4: j2}),
               CouplingClass("pauli", "three in a row", ((0.0,), (1.0,), (2.0,)), 1,
                             {4: 1e-3}, operator="Z X Z"))
    with_classes = dataclasses.replace(hubbard_ring, classes=classes)
    model = model_of(export_text(with_classes))
    by_label = {t.label: t for t in model.terms}
    assert by_label["J1"].bonds == "nearest" and by_label["J2"].bonds == "next-nearest"
    assert by_label["P"].pattern == ((0,), (1,), (2,)) and by_label["P"].operators == ("Z", "X", "Z")
    assert model.parameters["J1"] == pytest.approx(j1, rel=1e-12)
    assert len(model.products(["P"])[0][1]) == 6        # translated around the 6-site ring
