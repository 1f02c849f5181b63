"""The product-basis Hamiltonian of electrons (Psi[down, up]) against three outside references.

1. lowfold's CSR operator of the same model (a separate construction, string by string on
   encoded states): the same matrix after mapping every product state to its basis index,
   on chains, rings, 2x2, 2x3, triangular, ladder, honeycomb and kagome clusters, with
   potentials, interactions, fields along z, and N_up != N_dn;
2. free fermions at U = 0 for every cluster shape: the ground-state energy is the sum of the
   lowest N_up and N_dn eigenvalues of the one-body hopping matrix (second quantisation of a
   one-body operator, common practice), built here by hand from the lattice's bond list;
3. QuSpin (P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017)), an independent exact
   diagonalisation library, on 8- to 12-site clusters.
"""

from __future__ import annotations

import numba
import numpy as np
import pytest
import scipy.linalg as la
from scipy.sparse.linalg import eigsh

import lowfold
from helpers.cli import one_line_error, run
from helpers.modelfiles import hubbard_text, model_of, term_text
from lowfold._kernels import product as kernels
from lowfold.build.hamiltonian import Hamiltonian
from lowfold.build.product_basis import ProductHamiltonian
from lowfold.errors import ModelError, SizeError
from lowfold.solve.method import wants_product

POTENTIAL = term_text("potential", 0.37, sites=[1], label="gate")
INTERACTION = term_text("interaction", 0.6, bonds="nearest", label="V")
FIELD_Z = term_text("field", 0.25, axis="z", label="hz")

# (shape, size, boundary, particles, sz, extra terms)
CLUSTERS = [
    ("chain", [4], "open", 4, 0, POTENTIAL),
    ("chain", [5], "periodic", 4, 1, FIELD_Z),
    ("chain", [6], "periodic", 6, 0, ""),
    ("chain", [4], "periodic", 3, 0.5, INTERACTION),
    ("square", [2, 2], "periodic", 4, 0, POTENTIAL),
    ("square", [3, 2], "open", 5, 0.5, INTERACTION + FIELD_Z),
    ("triangular", [3, 2], "open", 6, 0, POTENTIAL),
    ("ladder", [3], "open", 5, -0.5, FIELD_Z),
    ("honeycomb", [1, 2], "open", 4, 0, INTERACTION),
    ("kagome", [1, 2], "open", 6, 1, POTENTIAL),
]


def cluster_model(shape, size, boundary, particles, sz, extra, *, t=0.7, U=3.1):
    return model_of(hubbard_text(shape, size, boundary=boundary, t=t, U=U,
                                 particles=particles, sz=sz, terms=extra))


def permuted_csr(model):
    """lowfold's CSR matrix, rows and columns in the product basis order."""
    h = Hamiltonian.of(model)
    product = ProductHamiltonian.of(model)
    positions = h.basis.index(product.encoded_states())
    assert np.all(positions >= 0) and np.unique(positions).size == h.size == product.size
    csr = h.to_csr()
    return product, csr[positions][:, positions]


@pytest.mark.parametrize("case", CLUSTERS, ids=lambda c: f"{c[0]}{c[1]}-{c[2]}-N{c[3]}-sz{c[4]}")
def test_same_matrix_as_the_csr_operator(case):
    product, csr = permuted_csr(cluster_model(*case))
    scale = abs(csr).max()
    assert abs(product.to_csr() - csr).max() <= 1e-13 * scale
    x = np.random.default_rng(3).standard_normal(product.size)
    np.testing.assert_allclose(product.matvec(x), csr @ x, rtol=0, atol=1e-12 * scale)


def test_the_basis_order_is_the_product_order():
    # the wave function Psi[down, up] flattened is the two-species basis itself
    model = cluster_model(*CLUSTERS[5])
    assert np.array_equal(Hamiltonian.of(model).basis.states,
                          ProductHamiltonian.of(model).encoded_states())


def test_parallel_tiled_kernel_matches_the_matrix():
    # the numba kernel on two threads with tiles narrower than a row, and the two-vector
    # recurrence form out <- s H x - beta out with the Lanczos alpha x . out
    product, csr = permuted_csr(cluster_model("square", [3, 2], "open", 6, 0, INTERACTION))
    rng = np.random.default_rng(8)
    x = rng.standard_normal(product.shape2d)
    old = rng.standard_normal(product.shape2d)
    out = old.copy()
    previous = numba.get_num_threads()
    numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
    try:
        t_up, t_dn = product.t_up, product.t_dn
        alpha = kernels.lanczos_product(product.diag, t_up.indptr, t_up.indices, t_up.data,
                                        t_dn.indptr, t_dn.indices, t_dn.data, x, 1.3, out,
                                        0.75, 3)
    finally:
        numba.set_num_threads(previous)
    expected = 1.3 * (csr @ x.reshape(-1)) - 0.75 * old.reshape(-1)
    np.testing.assert_allclose(out.reshape(-1), expected, rtol=0, atol=1e-12)
    assert abs(alpha - x.reshape(-1) @ expected) < 1e-10


@pytest.mark.parametrize("case", CLUSTERS[:6], ids=lambda c: f"{c[0]}{c[1]}-N{c[3]}")
def test_product_spectrum_and_vectors_equal_dense(case):
    model = cluster_model(*case)
    _, csr = permuted_csr(model)
    found = lowfold.spectrum(model, levels=3, vectors=True, method="product")
    dense = la.eigvalsh(Hamiltonian.of(model).to_csr().toarray())[:3]
    np.testing.assert_allclose(found.energies, dense, rtol=0, atol=1e-9)
    matrix = Hamiltonian.of(model).to_csr()        # vectors come in the model's basis order
    residual = matrix @ found.vectors - found.vectors * found.energies
    assert np.abs(residual).max() < 1e-7
    np.testing.assert_allclose(found.vectors.T @ found.vectors, np.eye(3), atol=1e-9)


def test_degenerate_levels_come_with_their_multiplicity():
    # the 8-site ring: levels at momenta +k and -k are degenerate pairs, which one Krylov
    # space would give once; the product Lanczos finds them one by one by deflation
    model = cluster_model("chain", [8], "periodic", 8, 0, "", t=1.0, U=4.0)
    matrix = Hamiltonian.of(model).to_csr()
    reference = np.sort(eigsh(matrix, k=10, which="SA", ncv=40, tol=0,
                              return_eigenvectors=False))[:6]
    assert np.min(np.diff(reference)) < 1e-9                 # a degenerate pair among them
    found = lowfold.spectrum(model, levels=6)
    assert found.method == "product"
    np.testing.assert_allclose(found.energies, reference, rtol=0, atol=1e-9)


def test_h0_plus_scaled_v_equals_the_model_at_scaled_couplings():
    # what the exact check of derive needs: H0 + lambda V from the two sets of terms
    text = hubbard_text("square", [3, 2], boundary="open", t=0.7, U=3.1, particles=6, sz=0,
                        order=2, terms=POTENTIAL)
    model = model_of(text)
    h0 = ProductHamiltonian.of(model, model.unperturbed_labels)
    v = ProductHamiltonian.of(model, model.perturbation_labels)
    h = Hamiltonian.of(model)
    positions = h.basis.index(h0.encoded_states())
    csr0 = Hamiltonian.of(model, model.unperturbed_labels).to_csr()[positions][:, positions]
    csr_v = Hamiltonian.of(model, model.perturbation_labels).to_csr()[positions][:, positions]
    combined = h0.plus(v, 0.64)
    assert abs(combined.to_csr() - (csr0 + 0.64 * csr_v)).max() < 1e-13
    x = np.random.default_rng(4).standard_normal(combined.size)
    np.testing.assert_allclose(combined.matvec(x), (csr0 + 0.64 * csr_v) @ x, atol=1e-12)
    np.testing.assert_allclose(combined.diagonal(), (csr0 + 0.64 * csr_v).diagonal())
    operator = combined.as_linear_operator()           # as the check's eigensolvers take it
    block = np.random.default_rng(5).standard_normal((combined.size, 3))
    np.testing.assert_allclose(operator @ block, (csr0 + 0.64 * csr_v) @ block, atol=1e-12)
    np.testing.assert_allclose(operator.toarray(), (csr0 + 0.64 * csr_v).toarray(), atol=1e-13)
    np.testing.assert_allclose(operator.diagonal(), combined.diagonal())


# --------------------------------------------------------------------------------------
# free fermions at U = 0


FREE_CLUSTERS = [
    ("chain", [10], "periodic", 10, 0),
    ("chain", [9], "open", 8, 1),
    ("ladder", [4], "periodic", 8, 0),
    ("square", [3, 3], "periodic", 8, 0),
    ("square", [4, 2], "open", 7, 0.5),
    ("triangular", [3, 3], "periodic", 8, 0),
    ("honeycomb", [2, 2], "periodic", 8, 0),
    ("kagome", [2, 1], "open", 6, 0),
    ("cubic", [2, 2, 2], "open", 8, 0),
]


def one_body_levels(model, t):
    """Eigenvalues of h_ij = -t per nearest-neighbour bond (bonds listed twice add up)."""
    h = np.zeros((model.n_sites, model.n_sites))
    for i, j in model.lattice.bonds("nearest"):
        h[i, j] -= t
        h[j, i] -= t
    return la.eigvalsh(h)


@pytest.mark.parametrize("case", FREE_CLUSTERS, ids=lambda c: f"{c[0]}{c[1]}-{c[2]}")
def test_free_fermions_at_zero_u(case):
    shape, size, boundary, particles, sz = case
    t = 0.9
    model = cluster_model(shape, size, boundary, particles, sz, "", t=t, U=0.0)
    n_up = int(particles / 2 + sz)
    n_dn = particles - n_up
    levels = one_body_levels(model, t)
    exact = levels[:n_up].sum() + levels[:n_dn].sum()
    found = lowfold.spectrum(model, levels=1, method="product")
    assert found.method == "product"
    assert abs(found.energies[0] - exact) < 1e-9


# --------------------------------------------------------------------------------------
# QuSpin


def quspin_levels(n_sites, bonds, t, U, n_up, n_dn, potential, k):
    from quspin.basis import spinful_fermion_basis_1d
    from quspin.operators import hamiltonian
    from scipy.sparse.linalg import eigsh

    basis = spinful_fermion_basis_1d(n_sites, Nf=(n_up, n_dn))
    hop = [[-t, i, j] for i, j in bonds] + [[-t, j, i] for i, j in bonds]
    onsite = [[mu, i] for i, mu in potential.items()]
    static = [["+-|", hop], ["|+-", hop], ["n|n", [[U, i, i] for i in range(n_sites)]],
              ["n|", onsite], ["|n", onsite]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_herm=False,
                    check_pcon=False, check_symm=False).tocsr()
    v0 = np.random.default_rng(2).standard_normal(h.shape[0])
    return np.sort(eigsh(h, k=k, which="SA", v0=v0, tol=1e-12, return_eigenvectors=False))


QUSPIN_CASES = [
    pytest.param("chain", [8], "periodic", 8, 0, id="ring8-half"),
    pytest.param("chain", [10], "periodic", 9, 0.5, id="ring10-N9"),
    pytest.param("square", [4, 2], "periodic", 8, 0, id="square4x2"),
    pytest.param("chain", [12], "periodic", 12, 0, id="ring12-half", marks=pytest.mark.slow),
]


@pytest.mark.parametrize(("shape", "size", "boundary", "particles", "sz"), QUSPIN_CASES)
def test_against_quspin(shape, size, boundary, particles, sz):
    t, U, k = 1.0, 4.0, 3
    potential = {0: 0.3, 3: -0.2}
    extra = "".join(term_text("potential", mu, sites=[i], label=f"mu{i}")
                    for i, mu in potential.items())
    model = cluster_model(shape, size, boundary, particles, sz, extra, t=t, U=U)
    assert wants_product(model, "auto")
    bonds = [tuple(map(int, b)) for b in model.lattice.bonds("nearest")]
    n_up = int(particles / 2 + sz)
    expected = quspin_levels(model.n_sites, bonds, t, U, n_up, particles - n_up, potential, k)
    found = lowfold.spectrum(model, levels=k)
    assert found.method == "product"
    np.testing.assert_allclose(found.energies, expected, rtol=0, atol=1e-8)


# --------------------------------------------------------------------------------------
# route choice and bad input


def test_auto_takes_the_product_route_only_where_it_applies():
    assert wants_product(cluster_model("chain", [8], "periodic", 8, 0, ""), "auto")
    small = cluster_model("chain", [4], "open", 4, 0, "")
    assert not wants_product(small, "auto")          # dense-sized: CSR and eigh
    free_sz = model_of(hubbard_text("chain", [8], boundary="periodic"))   # N fixed, S^z free
    assert not wants_product(free_sz, "auto")
    with pytest.raises(ModelError, match="fixed particle number and S\\^z"):
        wants_product(free_sz, "product")


SPIN_FLIP = """
[[term]]
type = "product"
operators = ["S+", "S-"]
bonds = "nearest"
conjugate = true
strength = 0.2
label = "flip"
"""

ONE_WAY_HOP = """
[[term]]
type = "product"
operators = ["c+_up", "c_up"]
bonds = "nearest"
strength = 0.2
label = "one_way"
"""


def test_spin_flips_are_refused_by_the_product_method_and_solved_otherwise():
    model = cluster_model("chain", [6], "periodic", 6, 0, SPIN_FLIP)
    with pytest.raises(ModelError, match="both spin species"):
        lowfold.spectrum(model, levels=1, method="product")
    assert not wants_product(model, "auto")
    auto = lowfold.spectrum(model, levels=2)
    dense = la.eigvalsh(Hamiltonian.of(model).to_csr().toarray())[:2]
    np.testing.assert_allclose(auto.energies, dense, atol=1e-9)


def test_a_term_that_is_not_hermitian_is_named():
    # refused when the model is read, before any route is chosen
    with pytest.raises(ModelError, match="one_way.*not Hermitian"):
        cluster_model("chain", [8], "open", 8, 0, ONE_WAY_HOP)


def test_eighteen_sites_are_refused_before_anything_is_built(monkeypatch):
    def never(*args, **kwargs):
        raise AssertionError("built although it cannot fit")

    monkeypatch.setattr(ProductHamiltonian, "of", never)
    monkeypatch.setattr(Hamiltonian, "of", never)
    model = cluster_model("chain", [18], "periodic", 18, 0, "")
    with pytest.raises(SizeError) as info:
        lowfold.spectrum(model, levels=1, memory_limit=16 * 2**30)
    message = str(info.value)
    assert "2,363,904,400 states" in message and "52.8 GiB" in message
    assert "16.0 GiB available" in message


def test_more_levels_than_the_memory_allows_are_refused():
    model = cluster_model("chain", [12], "periodic", 12, 0, "")
    # one wave function: 853,776 x 8 bytes = 6.5 MiB; 4 levels need 2 + 3 + the diagonal
    with pytest.raises(SizeError, match="fewer levels"):
        lowfold.spectrum(model, levels=4, memory_limit=30 * 2**20)


def test_cli_refuses_eighteen_sites_in_one_line(tmp_path):
    path = tmp_path / "ring18.toml"
    path.write_text(hubbard_text("chain", [18], boundary="periodic", t=1.0, U=4.0, sz=0))
    proc = run("spectrum", str(path))
    assert proc.returncode == 2
    line = one_line_error(proc)
    assert "GiB" in line and "2,363,904,400 states" in line
