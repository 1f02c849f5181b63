"""Operator strings that cancel: equal operators written in different orders collect into
one string, and a term that sums to zero is neither "non-Hermitian" nor "non-conserving".

Exact: for spin 1/2, S^x S^z + S^z S^x = (sigma^x sigma^z + sigma^z sigma^x)/4 = 0 (the
Pauli matrices anticommute).  Found by the random-model property test.
"""

import numpy as np

import lowfold

SX_SZ_PLUS_CONJUGATE = """\
[lattice]
shape = "graph"
sites = 2
bonds = [[0, 1]]
[site]
type = "spin"
spin = 0.5
[sector]
sz = 0
[[term]]
type = "product"
strength = 1.0
operators = ["Sx", "Sz"]
conjugate = true
sites = "all"
"""


def test_anticommuting_product_plus_conjugate_is_zero_in_an_sz_sector(tmp_path):
    path = tmp_path / "zero.toml"
    path.write_text(SX_SZ_PLUS_CONJUGATE)
    model = lowfold.load_model(path)
    basis = lowfold.build_basis(model)
    matrix = lowfold.hamiltonian_matrix(model, basis)
    assert basis.size == 2
    assert np.abs(matrix.toarray()).max() <= 1e-15


def test_equal_operators_in_different_order_collect(tmp_path):
    # S+ S^z and S^z S+ on one spin-1/2 are -S+/2 and +S+/2: one string, coefficient 0
    text = SX_SZ_PLUS_CONJUGATE.replace('["Sx", "Sz"]', '["S+", "Sz"]').replace(
        "[sector]\nsz = 0\n", "") + ('[[term]]\ntype = "product"\nstrength = 1.0\n'
                                     'operators = ["Sz", "S+"]\nconjugate = true\n'
                                     'sites = "all"\nlabel = "reversed"\n')
    path = tmp_path / "cancel.toml"
    path.write_text(text)
    spectrum = lowfold.spectrum(lowfold.load_model(path), 4)
    np.testing.assert_allclose(spectrum.energies, 0.0, atol=1e-15)
