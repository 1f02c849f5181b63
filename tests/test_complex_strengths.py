"""Complex parameters and strengths in model files: the two TOML forms, a real model written
in complex form, complex products, and every malformed or non-Hermitian input refused with
one line (API: ``ModelError``; CLI: exit status 2).

Reference for the real-model identity: the same model with plain numbers (the results must
be bit-for-bit the same, as both take the real route).  Reference for the complex product:
``-t (e^{i phi} c+_0 c_1 + h.c.)`` written as a product with ``conjugate = true`` is the
``hopping`` of docs/model-files.md with ``phases = [phi]``; both have the levels of the real
dimer (a phase on a single bond is a gauge, common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from helpers.cli import one_json_object, one_line_error, run_all
from helpers.modelfiles import model_of
from lowfold import ModelError, derive, spectrum
from lowfold.build.hamiltonian import Hamiltonian

DIMER = """
title = "two quantum dots"
[lattice]
shape = "chain"
size = [2]
[site]
type = "electron"
[sector]
particles = 2
[parameters]
t = {t}
U = {U}
[[term]]
type = "hopping"
strength = "t"
{hopping}
[[term]]
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["hubbard"]
order = 4
"""


def dimer(t="0.1", U="8.0", hopping=""):
    return DIMER.format(t=t, U=U, hopping=hopping)


def test_complex_form_with_zero_imaginary_part_is_the_real_model():
    plain = model_of(dimer())
    forms = [model_of(dimer(t="{re = 0.1, im = 0.0}", U="{abs = 8.0, phase = 0.0}")),
             model_of(dimer(t="{abs = 0.1, phase = 0.0}", U="{re = 8, im = 0}"))]
    reference = derive(plain)
    for model in forms:
        assert model.parameters == plain.parameters
        assert all(isinstance(v, float) for v in model.parameters.values())
        assert Hamiltonian.of(model).dtype == np.float64
        assert np.array_equal(spectrum(model, 6).energies, spectrum(plain, 6).energies)
        result = derive(model)
        assert [c.to_dict() for c in result.couplings] == [c.to_dict() for c in reference.couplings]
        assert result.check.max_abs_error == reference.check.max_abs_error


def test_polar_form_snaps_the_round_off_of_pi():
    model = model_of(dimer(t="{abs = 0.1, phase = 3.141592653589793}"))
    assert model.parameters["t"] == -0.1
    assert Hamiltonian.of(model).dtype == np.float64


def test_complex_hopping_strength_is_a_gauge_on_one_bond():
    phi = 0.7
    complex_t = model_of(dimer(t=f"{{abs = 0.1, phase = {phi}}}"))
    cartesian = model_of(dimer(t=f"{{re = {0.1 * math.cos(phi)!r}, im = {0.1 * math.sin(phi)!r}}}"))
    plain = model_of(dimer())
    assert Hamiltonian.of(complex_t).dtype == np.complex128
    np.testing.assert_allclose(spectrum(complex_t, 6).energies, spectrum(plain, 6).energies,
                               atol=1e-13)
    np.testing.assert_allclose(spectrum(cartesian, 6).energies, spectrum(plain, 6).energies,
                               atol=1e-13)
    exchange = [c for c in derive(complex_t).couplings if c.kind == "exchange"][0]
    assert exchange.orders[2] == pytest.approx(4 * 0.1**2 / 8.0, rel=1e-10)


def test_complex_product_with_conjugate_equals_the_hopping_with_a_phase():
    """``s c+_0 c_1 + conj(s) c+_1 c_0`` per spin with ``s = -t e^{i phi}`` is the hopping with
    ``phases = [phi]``: the same matrix, and the levels of the real dimer."""
    phi = 0.4
    products = "".join(
        f'[[term]]\ntype = "product"\nlabel = "{spin}"\n'
        f"strength = {{abs = 0.1, phase = {phi + math.pi!r}}}\n"
        f'bonds = [[0, 1]]\noperators = ["c+_{spin}", "c_{spin}"]\nconjugate = true\n'
        for spin in ("up", "dn"))
    as_product = model_of(dimer().replace('[[term]]\ntype = "hopping"\nstrength = "t"\n', products))
    as_hopping = model_of(dimer(hopping=f"bonds = [[0, 1]]\nphases = [{phi!r}]"))
    a = Hamiltonian.of(as_product).to_csr().toarray()
    b = Hamiltonian.of(as_hopping).to_csr().toarray()
    assert np.abs(b.imag).max() > 0.03
    np.testing.assert_allclose(a, b, atol=1e-15)
    np.testing.assert_allclose(spectrum(as_hopping, 6).energies,
                               spectrum(model_of(dimer()), 6).energies, atol=1e-13)


def test_complex_product_with_its_partner_term_is_hermitian():
    """``s c+_0 c_1`` and ``conj(s) c+_1 c_0`` as two terms are Hermitian together; with
    ``s`` instead of ``conj(s)`` in the second they are not (formal adjoint, common practice)."""
    def pair(second):
        return dimer().replace('[[term]]\ntype = "hubbard"', (
            '[[term]]\ntype = "product"\nlabel = "forth"\nstrength = {re = 0.1, im = 0.2}\n'
            'bonds = [[0, 1]]\noperators = ["c+_up", "c_up"]\n'
            f'[[term]]\ntype = "product"\nlabel = "back"\nstrength = {second}\n'
            'bonds = [[1, 0]]\noperators = ["c+_up", "c_up"]\n[[term]]\ntype = "hubbard"'))
    model = model_of(pair("{re = 0.1, im = -0.2}"))
    assert model.is_complex and Hamiltonian.of(model).dtype == np.complex128
    assert not model_of(dimer()).is_complex
    with pytest.raises(ModelError, match="is not Hermitian"):
        model_of(pair("{re = 0.1, im = 0.2}"))


BAD = {
    "missing_im": (dimer(t="{re = 0.1}"), "parameters.t: a complex number is"),
    "mixed_forms": (dimer(t="{re = 0.1, im = 0.0, phase = 1.0}"), "a complex number is"),
    "negative_modulus": (dimer(t="{abs = -0.1, phase = 0.5}"), "parameters.t.abs"),
    "text_part": (dimer(t='{re = "a", im = 0.0}'),
                  "parameters.t.re: parameter 'a' is not defined in [parameters]"),
    "infinite_part": (dimer(t="{re = inf, im = 0.0}"), "must be a finite number"),
    "complex_hubbard": (dimer(U="{re = 8.0, im = 0.1}"), "needs a real strength"),
    "phases_on_a_class": (dimer(hopping="phases = [0.3]"), "phases need explicit bonds"),
    "phases_count": (dimer(hopping="bonds = [[0, 1]]\nphases = [0.3, 0.1]"), "2 phases for 1 bonds"),
    "phases_on_hubbard": (dimer().replace('strength = "U"', 'strength = "U"\nphases = [1.0]'),
                          "only used by hopping terms"),
    "soc_shape": (dimer(hopping="soc = [0.1, 0.2]"), "soc: must be a list [lx, ly, lz]"),
    "soc_complex": (dimer(hopping='soc = [0.0, 0.0, "t"]').replace("t = 0.1", "t = {re = 0.1, im = 0.1}"),
                    "must be a real number"),
    "soc_breaks_fixed_sz": (dimer(hopping="soc = [0.02, 0.0, 0.0]").replace(
        "particles = 2", "particles = 2\nsz = 0"), "does not conserve S^z"),
    "flux_on_a_chain": (dimer(hopping="flux = 0.1"), "needs a two-dimensional lattice"),
    "flux_periodic": (dimer(hopping="flux = 0.1").replace('shape = "chain"\nsize = [2]',
                      'shape = "square"\nsize = [2, 2]\nboundary = "periodic"').replace(
                      "particles = 2", "particles = 4"), "whole number of flux quanta"),
    "flux_and_phases": (dimer(hopping="bonds = [[0, 1]]\nphases = [0.1]\nflux = 0.2"),
                        "either phases or flux"),
    "product_without_partner": (dimer().replace(
        '[[term]]\ntype = "hubbard"',
        '[[term]]\ntype = "product"\nlabel = "odd"\nstrength = {re = 0.0, im = 0.1}\n'
        'bonds = [[0, 1]]\noperators = ["c+_up", "c_up"]\n[[term]]\ntype = "hubbard"'),
        "is not Hermitian"),
    "imaginary_product_on_one_site": (dimer().replace(
        '[[term]]\ntype = "hubbard"',
        '[[term]]\ntype = "product"\nlabel = "density"\nstrength = {re = 0.0, im = 0.1}\n'
        'sites = [0]\noperators = ["n"]\n[[term]]\ntype = "hubbard"'), "is not Hermitian"),
}


@pytest.mark.parametrize("name", sorted(BAD))
def test_bad_complex_input_is_a_model_error(name):
    text, message = BAD[name]
    with pytest.raises(ModelError) as info:
        model_of(text, source=f"{name}.toml")
    assert message in str(info.value)
    assert str(info.value).startswith(f"{name}.toml: ")
    assert "\n" not in str(info.value)


@pytest.fixture(scope="module")
def cli(tmp_path_factory):
    directory = tmp_path_factory.mktemp("complex")
    jobs = {}
    for name in ("missing_im", "complex_hubbard", "soc_breaks_fixed_sz", "product_without_partner"):
        path = directory / f"{name}.toml"
        path.write_text(BAD[name][0])
        jobs[name] = ("spectrum", path)
    good = directory / "soc.toml"
    good.write_text(dimer(t="{re = 0.1, im = 0.0}",
                          hopping="bonds = [[0, 1]]\nphases = [0.3]\nsoc = [0.02, 0.0, 0.01]"))
    jobs["derive_json"] = ("derive", good, "--json")
    jobs["spectrum_json"] = ("spectrum", good, "--json")
    return run_all(jobs)


@pytest.mark.parametrize("name", ["missing_im", "complex_hubbard", "soc_breaks_fixed_sz",
                                  "product_without_partner"])
def test_cli_bad_complex_input_is_one_line_exit_2(cli, name):
    line = one_line_error(cli[name])
    assert BAD[name][1] in line


def test_cli_json_of_a_complex_model_is_one_strict_object(cli):
    derived = one_json_object(cli["derive_json"])
    kinds = {c["kind"] for c in derived["couplings"]}
    assert {"exchange", "dm", "anisotropy"} <= kinds
    assert any("S^z is not conserved" in w for w in derived["warnings"])
    levels = one_json_object(cli["spectrum_json"])["energies"]
    # hidden isotropy: T = e^{0.3 i} (t + i lambda.sigma) is a spin rotation times
    # sqrt(t^2 + lambda^2), so the levels are the Hubbard dimer's with that hopping
    t2 = 0.1**2 + 0.02**2 + 0.01**2
    np.testing.assert_allclose(levels, [(8.0 - math.sqrt(64.0 + 16 * t2)) / 2, 0, 0, 0][:len(levels)],
                               atol=1e-12)
