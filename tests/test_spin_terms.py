"""Multi-spin model-file terms (ring, chirality, dm, anisotropy, pauli, constant) against their
explicit Kronecker-product matrices, and the site selectors (cycles, translated patterns).

References: the operators are written out from their definitions with S = sigma / 2 and
numpy Kronecker products (exact; the definitions are those of docs/model-files.md and of
lowfold.readout.couplings: ring exchange as in e.g. M. Takahashi, J. Phys. C 10, 1289
(1977); D.(S_i x S_j) as in T. Moriya, Phys. Rev. 120, 91 (1960)).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from helpers.exact import PAULI_X, PAULI_Y, PAULI_Z, label_index, site_op
from helpers.modelfiles import model_of, spin_text, term_text
from lowfold import ModelError
from lowfold.build.hamiltonian import build_basis
from lowfold.build.hamiltonian import Hamiltonian
from lowfold.build.labels import state_labels
from lowfold.model.lattice import make_lattice
from lowfold.model.patterns import pattern_of, translated_pattern

PAULIS = (PAULI_X, PAULI_Y, PAULI_Z)


def lowfold_dense(model):
    """The model's Hamiltonian as a dense matrix in the Kronecker basis of helpers.exact."""
    basis = build_basis(model)
    matrix = Hamiltonian.of(model, basis=basis).to_csr().toarray()
    order = [label_index(label) for label in state_labels(model, basis.states)]
    out = np.zeros((2 ** model.n_sites,) * 2, dtype=complex)
    out[np.ix_(order, order)] = matrix
    return out


def spins(n):
    return [[site_op(p, i, n) / 2 for p in PAULIS] for i in range(n)]


def dot(s, i, j):
    return sum(s[i][a] @ s[j][a] for a in range(3))


def graph_model(n, bonds, terms):
    text = (f"[lattice]\nshape = \"graph\"\nsites = {n}\nbonds = {bonds}\n"
            "[site]\ntype = \"spin\"\n" + terms)
    return model_of(text)


def test_ring_on_a_plaquette_is_its_definition():
    K = 0.37
    model = model_of(spin_text("square", [2, 2], "open", term_text("ring", K, cycles=4)))
    s = spins(4)
    i, j, k, l = 0, 1, 3, 2          # the plaquette of a 2 x 2 square cluster, cyclic order
    expected = K * (dot(s, i, j) @ dot(s, k, l) + dot(s, i, l) @ dot(s, j, k)
                    - dot(s, i, k) @ dot(s, j, l))
    assert np.allclose(lowfold_dense(model), expected, atol=1e-13)
    same = graph_model(4, [[0, 1], [1, 3], [3, 2], [2, 0]],
                       term_text("ring", K, sites=[[0, 1, 3, 2]]))
    assert np.allclose(lowfold_dense(same), expected, atol=1e-13)


def test_chirality_on_a_triangle_is_the_triple_product():
    chi = -0.8
    model = graph_model(3, [[0, 1], [1, 2], [0, 2]], term_text("chirality", chi, cycles=3))
    s = spins(3)
    expected = chi * sum(np.linalg.det(np.eye(3)[[a, b, c]]) * s[0][a] @ s[1][b] @ s[2][c]
                         for a, b, c in itertools.permutations(range(3)))
    assert np.allclose(lowfold_dense(model), expected, atol=1e-13)
    assert np.allclose(expected, expected.conj().T)


def test_dm_is_the_antisymmetric_exchange_matrix():
    D = np.array([0.3, -0.2, 0.5])
    model = graph_model(2, [[0, 1]], term_text("dm", 2.0, vector=D.tolist()))
    s = spins(2)
    # D.(S_0 x S_1) = sum_bc M_bc S^b_0 S^c_1 with M antisymmetric (cross product written out)
    M = np.array([[0, D[2], -D[1]], [-D[2], 0, D[0]], [D[1], -D[0], 0]])
    expected = 2.0 * sum(M[b, c] * s[0][b] @ s[1][c] for b in range(3) for c in range(3))
    assert np.allclose(lowfold_dense(model), expected, atol=1e-13)
    along_z = graph_model(2, [[0, 1]], term_text("dm", 0.5, axis="z"))
    assert np.allclose(lowfold_dense(along_z),
                       0.5 * (s[0][0] @ s[1][1] - s[0][1] @ s[1][0]), atol=1e-13)


def test_anisotropy_tensor_on_bonds():
    G = np.array([[0.2, 0.1, 0.0], [0.1, -0.5, 0.3], [0.0, 0.3, 0.3]])
    model = model_of(spin_text("chain", [3], "open", term_text("anisotropy", 1.5,
                                                               tensor=G.tolist())))
    s = spins(3)
    expected = 1.5 * sum(G[a, b] * s[i][a] @ s[j][b]
                         for i, j in [(0, 1), (1, 2)] for a in range(3) for b in range(3))
    assert np.allclose(lowfold_dense(model), expected, atol=1e-13)
    with pytest.raises(ModelError, match="symmetric"):
        model_of(spin_text("chain", [2], "open",
                           term_text("anisotropy", 1.0, tensor=[[0, 1, 0], [0, 0, 0], [0, 0, 0]])))


def test_pauli_string_on_a_translated_pattern_and_a_constant():
    text = spin_text("square", [2, 3], "open",
                     term_text("pauli", 0.25, operators=["Z", "X", "Y", "Z"],
                               pattern=[[0, 0], [1, 0], [1, 1], [0, 1]])
                     + term_text("constant", -1.5))
    model = model_of(text)
    n = 6
    plaquettes = [(0, 1, 3, 2), (2, 3, 5, 4)]      # site = x + 2 y
    expected = -1.5 * np.eye(2 ** n) + 0.25 * sum(
        site_op(PAULI_Z, a, n) @ site_op(PAULI_X, b, n) @ site_op(PAULI_Y, c, n)
        @ site_op(PAULI_Z, d, n) for a, b, c, d in plaquettes)
    assert np.allclose(lowfold_dense(model), expected, atol=1e-13)


def test_patterns_wrap_on_periodic_lattices_and_say_when_they_do_not_fit():
    ring = make_lattice("chain", [4], "periodic")
    assert translated_pattern([[0], [2]], ring) == [(0, 2), (1, 3), (2, 0), (3, 1)]
    assert translated_pattern([[0], [1]], make_lattice("chain", [3], "open")) == [(0, 1), (1, 2)]
    with pytest.raises(ModelError, match="does not fit"):
        translated_pattern([[0], [3]], make_lattice("chain", [3], "open"))
    with pytest.raises(ModelError, match="coincide"):
        translated_pattern([[0], [2]], make_lattice("chain", [2], "periodic"))
    honeycomb = make_lattice("honeycomb", [2, 2], "periodic")
    assert translated_pattern([[0, 0, 0], [0, 0, 1]], honeycomb)[:2] == [(0, 1), (2, 3)]
    assert pattern_of((3, 0), ring) == [[0], [1]]
    # a pattern landing on the same pair twice (periodic 4-ring, distance 2) counts once
    model = model_of(spin_text("chain", [4], "periodic",
                               term_text("anisotropy", 1.0, pattern=[[0], [2]],
                                         tensor=np.diag([1.0, -1.0, 0.0]).tolist())))
    assert len(model.products()[0][1]) == 2 * 2


def test_spin_kinds_need_spin_half_sites():
    with pytest.raises(ModelError, match="spin-1/2"):
        model_of(spin_text("chain", [2], "open", term_text("dm", 1.0, axis="z"), spin=1))
    with pytest.raises(ModelError, match="cycles"):
        model_of(spin_text("chain", [3], "open", term_text("chirality", 1.0, cycles=4)))
    with pytest.raises(ModelError, match="only used by"):
        model_of(spin_text("chain", [3], "open", term_text("exchange", 1.0, cycles=4)))
