"""derive --export of local-operator readouts: the effective model on its kept local states.

Each case derives a model whose manifold is a product of local state sets, exports it
(jobs/export_local.py), reads the file back and checks:

- the couplings written are the published ones where there are published ones: the doped
  Hubbard model at large U is the t-J model with the projected hopping t, J = 4 t^2/U and
  the three-site term K = J/4 (Chao, Spalek & Oles, J. Phys. C 10, L271 (1977); MacDonald,
  Girvin & Yoshioka, Phys. Rev. B 37, 9753 (1988)); the Bose-Hubbard particle hopping at
  unit filling is (n + 1) t = 2 t at first order (strong-coupling expansion, e.g. Freericks
  & Monien, Phys. Rev. B 53, 2691 (1996), from memory; derived in test_boson_readout.py);
- a first-order derive of the file returns the same couplings, and its spectrum is the
  eigenvalues of the effective matrix of the derive (the round trip is exact by
  construction: the file's Hamiltonian on the kept states is the effective Hamiltonian);
- the exported spectrum approximates the exact low spectrum of the original model with an
  error that falls like the third power of the coupling (second order kept), checked with
  two coupling values: log2 of the error ratio near 3.

The exact spectra come from lowfold's own Lanczos/dense solver (checked against QuSpin in
test_spectrum_quspin.py) and, for the spin-2 chain, from QuSpin directly.  The exported
plaquette's levels are compared with QuSpin's t-J model (no double occupancy) at the
exported t, J, K (tests/helpers/quspin_tj.py).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from helpers.modelfiles import hubbard_text, lattice_text, model_of, term_text
from helpers.quspin_tj import quspin_tj_levels

from lowfold import ModelError
from lowfold.jobs.derive import derive
from lowfold.jobs.export import export_text
from lowfold.jobs.spectrum import spectrum

U = 1.0


def _values(result) -> dict:
    return {(c.kind, tuple(c.sites), c.operator if c.kind == "string" else ""): c.value
            for c in result.couplings}


def _same_matrix(result, again):
    """The first-order effective matrix of the exported model is the effective matrix of
    the derive, element by element (same manifold states, same order)."""
    np.testing.assert_array_equal(again.manifold.states, result.manifold.states)
    np.testing.assert_allclose(again.matrix().toarray() if hasattr(again.matrix(), "toarray")
                               else again.matrix(), np.asarray(result.matrix()), atol=1e-14)


def _round_trip(result):
    """The exported model, its first-order derive, and its levels next to the effective
    levels of ``result``."""
    model = model_of(export_text(result), source="exported")
    again = derive(model, 1, compare_exact=False)
    _same_matrix(result, again)
    before, after = _values(result), _values(again)
    assert before.keys() == after.keys()
    for key, value in before.items():
        np.testing.assert_allclose(np.asarray(after[key]), np.asarray(value), rtol=1e-9,
                                   atol=1e-13, err_msg=str(key))
    effective = np.linalg.eigvalsh(result.matrix())
    levels = np.sort(spectrum(model, effective.size).energies)
    np.testing.assert_allclose(levels, effective, rtol=0, atol=1e-12)
    return model, levels


def _hubbard(shape, size, particles, t, order=2):
    return model_of(hubbard_text(shape, size, t=t, U=U, particles=particles, order=order))


@pytest.mark.parametrize("shape, size, particles, bonds, paths", [
    ("chain", [3], 2, 2, 1),
    ("square", [2, 2], 3, 4, 4)])
def test_doped_hubbard_exports_as_t_j_model(shape, size, particles, bonds, paths):
    t = 0.1
    result = derive(_hubbard(shape, size, particles, t), 2, compare_exact=False)
    model, _ = _round_trip(result)
    assert model.site.type == "electron" and model.site.kept_labels() == ("0", "u", "d")
    assert model.sector.particles == particles
    by_label = {term.label: term for term in model.terms}
    j = 4 * t**2 / U
    assert model.parameters["t"] == pytest.approx(t, rel=1e-12)
    assert model.parameters["J"] == pytest.approx(j, rel=1e-9)
    assert model.parameters["J_density"] == pytest.approx(-j / 4, rel=1e-9)
    assert model.parameters["K"] == pytest.approx(j / 4, rel=1e-9)
    assert by_label["t"].type == "hopping" and by_label["t"].bonds == "nearest"
    assert by_label["K"].type == "three-site" and by_label["K"].sites is None   # every path
    assert sum(t.type not in ("constant",) for t in model.terms) == 4
    assert len(model.lattice.bonds("nearest")) == bonds
    assert sum(c.kind == "three-site" for c in result.couplings) == paths


def test_exported_plaquette_spectrum_against_quspin():
    # the exported file's levels against QuSpin's t-J model with the exported t, J, K
    pytest.importorskip("quspin")
    result = derive(_hubbard("square", [2, 2], 3, 0.1), 2, compare_exact=False)
    model = model_of(export_text(result))
    p = model.parameters
    bonds = sorted(map(tuple, model.lattice.bonds("nearest").tolist()))
    paths = [(1, 0, 2), (0, 1, 3), (0, 2, 3), (1, 3, 2)]
    reference = quspin_tj_levels(4, bonds, paths, 3, t=p["t"], j=p["J"], k=p["K"],
                                 constant=p["E0"])
    assert p["J_density"] == pytest.approx(-p["J"] / 4, rel=1e-12)
    levels = np.sort(spectrum(model, reference.size).energies)
    np.testing.assert_allclose(levels, reference, atol=1e-12)


@pytest.mark.parametrize("shape, size, particles", [("chain", [3], 2), ("square", [2, 2], 3)])
def test_exported_t_j_spectrum_error_falls_like_t_cubed(shape, size, particles):
    errors = []
    for t in (0.04, 0.02):
        result = derive(_hubbard(shape, size, particles, t), 2, compare_exact=False)
        _, levels = _round_trip(result)
        exact = np.sort(spectrum(_hubbard(shape, size, particles, t), levels.size).energies)
        errors.append(np.abs(levels - exact).max())
    assert np.log2(errors[0] / errors[1]) == pytest.approx(3, abs=0.25)


def _spin2_chain(j, order=2):
    """Spin-2 chain with H0 = D (S^z)^2 ((S^z)^2 - 1): the states |m| <= 1 of every site are
    degenerate at 0, |m| = 2 cost 12 D; V = J S.S."""
    terms = (term_text("product", "D", operators=["Sz"] * 4, sites="all", label="quartic")
             + term_text("product", "mD", operators=["Sz", "Sz"], sites="all", label="square")
             + term_text("exchange", "J", bonds="nearest", label="exchange"))
    text = lattice_text("chain", [3], "open", {"type": "spin", "spin": 2}, terms,
                        parameters={"D": 1.0, "mD": -1.0, "J": j})
    return model_of(text + f'\n[perturbation]\nunperturbed = ["quartic", "square"]\n'
                           f'order = {order}\n')


def _quspin_spin2_levels(j, k):
    """Exact levels of the spin-2 chain of :func:`_spin2_chain` (QuSpin, S = "2")."""
    from quspin.basis import spin_basis_1d
    from quspin.operators import hamiltonian
    basis = spin_basis_1d(3, S="2", pauli=0)
    bonds = [[j, 0, 1], [j, 1, 2]]
    static = [["zzzz", [[1.0, i, i, i, i] for i in range(3)]],
              ["zz", [[-1.0, i, i] for i in range(3)]],
              ["zz", bonds], ["+-", [[j / 2, a, b] for _, a, b in bonds]],
              ["-+", [[j / 2, a, b] for _, a, b in bonds]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_symm=False,
                    check_herm=False, check_pcon=False)
    return np.linalg.eigvalsh(h.toarray())[:k]


def test_spin2_window_exports_single_ion_and_biquadratic_terms():
    pytest.importorskip("quspin")
    errors = []
    for j in (0.04, 0.02):
        result = derive(_spin2_chain(j), 2, compare_exact=False)
        model, levels = _round_trip(result)
        assert model.site.kept_labels() == ("+1", "0", "-1") and model.site.radix == 5
        types = {term.type for term in model.terms}
        assert {"exchange", "biquadratic", "single-ion"} <= types
        exchange = [c for c in result.couplings if c.kind == "exchange" and c.sites == (0, 1)]
        assert exchange[0].orders[1] == pytest.approx(j, rel=1e-12)   # P V P = J P S.S P
        errors.append(np.abs(levels - _quspin_spin2_levels(j, levels.size)).max())
    assert np.log2(errors[0] / errors[1]) == pytest.approx(3, abs=0.25)


def _bose_ring(t, order=2, size=4):
    terms = (term_text("hopping", "t", bonds="nearest", label="hopping")
             + term_text("hubbard", "U", label="onsite"))
    text = lattice_text("chain", [size], "periodic", {"type": "boson", "max_occupation": 3},
                        terms, sector={"particles": size + 1}, parameters={"t": t, "U": U})
    return model_of(text + f'\n[perturbation]\nunperturbed = ["onsite"]\norder = {order}\n')


def test_bose_hubbard_particle_manifold_exports_on_occupations_one_and_two():
    errors = []
    for t in (0.04, 0.02):
        result = derive(_bose_ring(t), 2, compare_exact=False)
        model, levels = _round_trip(result)
        assert model.site.kept_labels() == ("1", "2") and model.sector.particles == 5
        first = [c for c in result.couplings if c.kind == "particle-hopping" and c.sites == (0, 1)]
        assert first[0].orders[1] == pytest.approx(2 * t, rel=1e-12)
        exact = np.sort(spectrum(_bose_ring(t), levels.size).energies)
        errors.append(np.abs(levels - exact).max())
    assert np.log2(errors[0] / errors[1]) == pytest.approx(3, abs=0.25)


def test_min_occupation_keeps_the_same_states():
    result = derive(_bose_ring(0.03), 2, compare_exact=False)
    text = export_text(result).replace('states = ["1", "2"]', "min_occupation = 1")
    text = text.replace("max_occupation = 3", "max_occupation = 2")
    model = model_of(text)
    assert model.site.kept_labels() == ("1", "2")
    effective = np.linalg.eigvalsh(result.matrix())
    np.testing.assert_allclose(np.sort(spectrum(model, effective.size).energies), effective,
                               atol=1e-12)


def test_coupling_classes_of_a_doped_ring_export_one_term_per_class():
    # the classes of a periodic ring (hopping and exchange on nearest bonds, the three-site
    # term as a translated pattern) written as they are on an infinite lattice
    t = 0.1
    model = model_of(hubbard_text("chain", [6], boundary="periodic", t=t, U=U, particles=5,
                                  order=2))
    result = derive(model, 2, compare_exact=False)
    assert {c.kind for c in result.classes} == {"hopping", "exchange", "three-site"}
    exported = model_of(export_text(result, use_classes=True))
    by_type = {term.type: term for term in exported.terms}
    assert by_type["three-site"].pattern == ((0,), (1,), (2,))
    assert by_type["hopping"].bonds == "nearest" and by_type["exchange"].bonds == "nearest"
    assert exported.parameters["K"] == pytest.approx(t**2 / U, rel=1e-9)
    effective = np.linalg.eigvalsh(result.matrix())
    levels = np.sort(spectrum(exported, effective.size).energies)
    np.testing.assert_allclose(levels, effective, atol=1e-12)


def test_strings_of_a_doped_chain_in_fields_export_exactly():
    # a transverse field on site 0 and a potential on site 1: the readout keeps spin-flip
    # X-operator strings (|u><d|_0) besides the t-J kinds.  The exported matrix is the
    # effective matrix; on a slice at fixed particle number the readout of a diagonal
    # operator is not unique (docs/local-readout.md), so the couplings read back may be
    # another expansion of the same operator, and only the matrix is compared
    fields = ('\n[[term]]\ntype = "field"\naxis = "x"\nstrength = 0.03\nsites = [0]\n'
              'label = "hx"\n[[term]]\ntype = "potential"\nstrength = 0.05\nsites = [1]\n'
              'label = "mu"\n')
    model = model_of(hubbard_text("chain", [4], t=0.1, U=U, particles=3, order=2, terms=fields))
    result = derive(model, 2, compare_exact=False)
    strings = {c.operator for c in result.couplings if c.kind == "string"}
    assert strings == {"|u><d|_0", "|d><u|_0"}
    text = export_text(result)
    assert 'operators = ["|u><d|"]' in text
    again = derive(model_of(text), 1, compare_exact=False)
    _same_matrix(result, again)


def test_export_refuses_kept_states_that_differ_between_sites():
    # U on sites 0 and 1 only: site 2 keeps its doubly occupied state as well
    text = hubbard_text("chain", [3], t=0.1, U=U, particles=2, order=2, hubbard_sites=[0, 1])
    result = derive(model_of(text), 2, compare_exact=False)
    assert result.manifold.readout.startswith("local operators")
    with pytest.raises(ModelError, match="differ from site to site"):
        export_text(result)


def test_export_needs_the_manifold_states():
    result = derive(_hubbard("chain", [3], 2, 0.1), 2, compare_exact=False)
    detached = dataclasses.replace(result, manifold=dataclasses.replace(result.manifold,
                                                                        states=None))
    with pytest.raises(ModelError, match="manifold states are not attached"):
        export_text(detached)


def test_spin1_with_every_state_kept_exports_without_states():
    # every spin-1 state in the window: P H P is H itself (no Q), read as exchange,
    # biquadratic and single-ion (AKLT-like couplings chosen here) and written back as such
    terms = (term_text("single-ion", 0.4, label="D") + term_text("exchange", 1.0, label="J")
             + term_text("biquadratic", 1.0 / 3.0, label="B"))
    text = lattice_text("chain", [4], "open", {"type": "spin", "spin": 1}, terms)
    result = derive(model_of(text + '\n[perturbation]\nunperturbed = ["D"]\n'
                                    'window = [0.0, 1.6]\norder = 1\n'), 1, compare_exact=False)
    model, _ = _round_trip(result)
    assert model.site.states is None and model.site.radix == 3
    values = {t.type: model.parameters[t.strength] for t in model.terms}
    assert values["exchange"] == pytest.approx(1.0, rel=1e-12)
    assert values["biquadratic"] == pytest.approx(1.0 / 3.0, rel=1e-12)
    assert values["single-ion"] == pytest.approx(0.4, rel=1e-12)
