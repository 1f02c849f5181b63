"""The Hamiltonian object against the functions it replaces and the Kronecker reference.

For a small model of every site type (spin 1/2, spin 1, spinless fermions, bosons, electrons
in each kind of sector basis), ``Hamiltonian.of(model)`` must give the same CSR matrix as
``hamiltonian_matrix`` (the same arrays), the same products as ``hamiltonian_operator``,
and a diagonal and state images that agree with the dense full-space matrix of
``tests/helpers/reference.py`` (explicit Kronecker products with written-out Jordan-Wigner strings,
common practice).  Images of states outside the sector are checked too: the compiled
strings act on any encoded state.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import lowfold
from helpers import reference as ref
from lowfold import Hamiltonian, ModelError
from lowfold.build.labels import state_labels, twice_sz

ATOL = 1e-12

# name: (site table, ref kwargs, length, sector, [(file term, reference term kwargs)])
CASES = {
    "spin-1/2 complex": ({"type": "spin", "spin": 0.5}, {}, 4, None, [
        ({"type": "exchange", "strength": 1.0}, {}),
        ({"type": "field", "strength": 0.3, "axis": "y"}, {"axis": "y"}),
        ({"type": "field", "strength": -0.2, "axis": "z"}, {"axis": "z"})]),
    "spin-1/2 sz": ({"type": "spin", "spin": 0.5}, {}, 5, {"sz": 0.5}, [
        ({"type": "exchange", "strength": 0.7}, {})]),
    "spin-1": ({"type": "spin", "spin": 1.0}, {"spin": 1.0}, 4, {"sz": 0}, [
        ({"type": "exchange", "strength": 1.0}, {}),
        ({"type": "field", "strength": 0.4, "axis": "z"}, {"axis": "z"})]),
    "fermion": ({"type": "fermion"}, {}, 5, {"particles": 2}, [
        ({"type": "hopping", "strength": 1.0}, {}),
        ({"type": "interaction", "strength": 0.6}, {})]),
    "boson": ({"type": "boson", "max_occupation": 2}, {"max_occupation": 2}, 4,
              {"particles": 3}, [
        ({"type": "hopping", "strength": 1.0}, {}),
        ({"type": "hubbard", "strength": 2.5}, {})]),
    "electron two-species": ({"type": "electron"}, {}, 4, {"particles": 4, "sz": 0}, [
        ({"type": "hopping", "strength": 1.0}, {}),
        ({"type": "hubbard", "strength": 4.0}, {})]),
    "electron mixing species": ({"type": "electron"}, {}, 3, {"particles": 3, "sz": 0.5}, [
        ({"type": "hopping", "strength": 1.0}, {}),
        ({"type": "exchange", "strength": 0.5}, {})]),
    "electron particles": ({"type": "electron"}, {}, 3, {"particles": 3}, [
        ({"type": "hopping", "strength": 1.0}, {}),
        ({"type": "hubbard", "strength": 3.0}, {})]),
    "electron sz only": ({"type": "electron"}, {}, 3, {"sz": 0.5}, [
        ({"type": "hopping", "strength": 1.0}, {}),
        ({"type": "potential", "strength": -0.5}, {})]),
}

ONE_SITE = ("hubbard", "potential", "field")


def case_model(name):
    site, kw, length, sector, terms = CASES[name]
    data = {"lattice": {"shape": "chain", "size": [length], "boundary": "open"},
            "site": site, "term": [dict(t, label=f"t{i}") for i, (t, _) in enumerate(terms)]}
    if sector:
        data["sector"] = sector
    model = lowfold.parse_model(data, source=f"<{name}>")
    bonds = [(i, i + 1) for i in range(length - 1)]
    ref_terms = []
    for term, extra in terms:
        where = {"sites": range(length)} if term["type"] in ONE_SITE else {"bonds": bonds}
        ref_terms += ref.expand_term(site["type"], term["type"], term["strength"], **where,
                                     **extra)
    full = ref.sparse_hamiltonian(site["type"], length, ref_terms, **kw)
    return model, full


def from_images(images, index, size):
    """The matrix ``M[new, row] = amplitude`` of ``apply_to_states`` images."""
    cols = index(images.states)
    assert np.all(cols >= 0)
    m = sp.coo_matrix((images.amplitudes, (cols, images.rows)), shape=(size, size))
    return m.toarray()


@pytest.mark.parametrize("name", sorted(CASES))
def test_csr_and_diagonal_match_functions_and_reference(name):
    model, full = case_model(name)
    h = Hamiltonian.of(model)
    basis = lowfold.build_basis(model)
    np.testing.assert_array_equal(h.basis.states, basis.states)
    csr = h.to_csr()
    old = lowfold.hamiltonian_matrix(model, basis)
    for attr in ("indptr", "indices", "data"):
        np.testing.assert_array_equal(getattr(csr, attr), getattr(old, attr))
    expected = ref.restrict(full, basis.states)
    np.testing.assert_allclose(csr.toarray(), expected, rtol=0, atol=ATOL)
    np.testing.assert_allclose(h.diagonal(), np.diag(expected), rtol=0, atol=ATOL)
    assert h.count_nonzeros() >= csr.nnz
    assert h.shape == csr.shape and h.dtype == csr.dtype
    h.check_hermitian(csr)
    h.check_hermitian()


@pytest.mark.parametrize("name", sorted(CASES))
def test_linear_operator_matches_function_and_csr(name):
    model, _ = case_model(name)
    h = Hamiltonian.of(model)
    csr = h.to_csr()
    linear = h.as_linear_operator()
    old = lowfold.hamiltonian_operator(model, h.basis)
    rng = np.random.default_rng(11)
    block = rng.standard_normal((h.size, 3)) + 1j * rng.standard_normal((h.size, 3))
    np.testing.assert_allclose(linear.matmat(block), csr @ block, rtol=0, atol=ATOL)
    np.testing.assert_allclose(linear @ block[:, 0], old @ block[:, 0], rtol=0, atol=ATOL)


@pytest.mark.parametrize("name", sorted(CASES))
def test_images_of_basis_and_of_all_states(name):
    model, full = case_model(name)
    h = Hamiltonian.of(model)
    expected = ref.restrict(full, h.basis.states)
    got = from_images(h.apply_to_states(h.basis.states), h.basis.index, h.size)
    np.testing.assert_allclose(got, expected, rtol=0, atol=ATOL)
    # every state of the full space, most of them outside the sector
    dim = full.shape[0]
    images = h.apply_to_states(np.arange(dim))
    got = from_images(images, lambda s: np.asarray(s), dim)
    np.testing.assert_allclose(got, full.toarray(), rtol=0, atol=ATOL)


def test_labels_restrict_the_terms():
    model, _ = case_model("electron two-species")
    hop = Hamiltonian.of(model, ["t0"])
    hub = Hamiltonian.of(model, ["t1"], hop.basis)
    both = Hamiltonian.of(model, basis=hop.basis)
    total = hop.to_csr() + hub.to_csr()
    np.testing.assert_allclose(total.toarray(), both.to_csr().toarray(), rtol=0, atol=ATOL)
    assert hub.operator.is_diagonal and not hop.operator.is_diagonal
    # fixed N_up, N_dn with one-species hopping: the split product is the cheap one
    assert hop.prefers_matrix_free()


def test_hermiticity_check_refuses_a_non_hermitian_matrix():
    # models are checked term by term when made (lowfold.model.hermiticity); the build-layer
    # check compares <u, A v> with <A u, v> (exactly, for small matrices)
    model, _ = case_model("fermion")
    h = Hamiltonian.of(model)
    csr = h.to_csr()
    one_way = (csr + 0.5 * sp.triu(csr, 1)).tocsr()
    with pytest.raises(ModelError, match="not Hermitian"):
        h.check_hermitian(one_way)
    h.check_hermitian(csr)


def test_labels_and_twice_sz_of_electron_states():
    # slot k = site + mode * n_sites, mode 0 up (from the basis conventions)
    model, _ = case_model("electron sz only")
    states = np.array([0b000_001, 0b001_001, 0b010_000, 0b000_110])
    assert state_labels(model, states) == ["u00", "200", "0d0", "0uu"]
    np.testing.assert_array_equal(twice_sz(model, states), [1, 0, -1, 2])
