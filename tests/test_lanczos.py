"""Low-memory Lanczos (``lowfold.lanczos``) against independent eigensolvers.

References: ``scipy.linalg.eigh`` (LAPACK dense Hermitian solver) for random sparse
Hermitian matrices, the exact spectrum of diagonal test matrices, and
``scipy.sparse.linalg.eigsh`` (ARPACK implicitly restarted Lanczos) for a Hubbard ring
built by lowfold.  Degenerate spectra are made by direct sums of copies of one matrix, so
every level's multiplicity is known exactly.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as la
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator, eigsh

import lowfold
from lowfold.errors import ConvergenceError, ModelError
from lowfold.solve.lanczos import LanczosResult, lanczos_lowest

ATOL = 1e-10


def random_hermitian(n, *, density, complex_entries=False, seed=0):
    rng = np.random.default_rng(seed)
    a = sp.random(n, n, density=density, random_state=rng, format="csr")
    if complex_entries:
        a = a + 1j * sp.random(n, n, density=density, random_state=rng, format="csr")
    return (a + a.conj().T).tocsr()


def subspace_projector(vectors):
    return vectors @ vectors.conj().T


def check_vectors(matrix, result, exact_values, exact_vectors, levels):
    """Orthonormal, small residuals, and the same eigenspaces as the reference."""
    dense = matrix.toarray() if sp.issparse(matrix) else np.asarray(matrix)
    v = result.vectors
    assert v.shape == (dense.shape[0], levels)
    np.testing.assert_allclose(v.conj().T @ v, np.eye(levels), atol=1e-10)
    residual = dense @ v - v * result.energies
    assert np.linalg.norm(residual, axis=0).max() < 1e-8 * np.abs(exact_values).max()
    # compare eigenspaces of the levels that are complete (not cut by the last level)
    cut = exact_values[levels - 1]
    complete = exact_values[:levels] < cut - 1e-8
    if complete.any():
        k = int(complete.sum())
        p_got = subspace_projector(v[:, :k])
        p_exact = subspace_projector(exact_vectors[:, :k])
        np.testing.assert_allclose(p_got, p_exact, atol=1e-7)


@pytest.mark.parametrize("levels", [1, 4])
@pytest.mark.parametrize("complex_entries", [False, True])
def test_random_sparse_against_eigh(levels, complex_entries):
    matrix = random_hermitian(400, density=0.03, complex_entries=complex_entries, seed=levels)
    values, vectors = la.eigh(matrix.toarray())          # reference: LAPACK
    result = lanczos_lowest(matrix, levels, vectors=True)
    assert isinstance(result, LanczosResult)
    np.testing.assert_allclose(result.energies, values[:levels], rtol=0, atol=ATOL)
    check_vectors(matrix, result, values, vectors, levels)
    no_vectors = lanczos_lowest(matrix, levels)
    assert no_vectors.vectors is None
    np.testing.assert_allclose(no_vectors.energies, values[:levels], rtol=0, atol=ATOL)


def test_degenerate_levels_have_their_multiplicity():
    block = random_hermitian(150, density=0.05, seed=11)
    matrix = sp.block_diag([block, block, block], format="csr")      # every level 3-fold
    values, vectors = la.eigh(matrix.toarray())
    result = lanczos_lowest(matrix, 5, vectors=True)
    np.testing.assert_allclose(result.energies, values[:5], rtol=0, atol=ATOL)
    assert result.energies[2] - result.energies[0] < 1e-10
    assert result.energies[3] - result.energies[2] > 1e-3
    check_vectors(matrix, result, values, vectors, 5)


def test_accepts_dense_arrays_and_linear_operators():
    matrix = random_hermitian(120, density=0.1, seed=3)
    dense = matrix.toarray()
    operator = LinearOperator(matrix.shape, matvec=lambda x: matrix @ x, dtype=float)
    values = la.eigvalsh(dense)
    for form in (matrix, dense, operator):
        result = lanczos_lowest(form, 2)
        np.testing.assert_allclose(result.energies, values[:2], rtol=0, atol=ATOL)


def test_strakos_matrix_with_ghosts():
    # Diagonal test matrix whose plain Lanczos vectors lose orthogonality quickly, so that
    # copies of converged Ritz values appear (Strakos, Linear Algebra Appl. 154-156, 535
    # (1991)): lambda_i = l1 + (i-1)/(n-1) (ln - l1) rho**(n-i).
    n, l1, ln, rho = 300, 0.1, 100.0, 0.9
    i = np.arange(1, n + 1)
    spectrum = -(l1 + (i - 1) / (n - 1) * (ln - l1) * rho ** (n - i))   # lowest are sparse
    matrix = sp.diags(spectrum, format="csr")
    exact = np.sort(spectrum)
    result = lanczos_lowest(matrix, 4, vectors=True)
    np.testing.assert_allclose(result.energies, exact[:4], rtol=0, atol=ATOL * ln)
    np.testing.assert_allclose(np.abs(result.vectors.T @ result.vectors), np.eye(4), atol=1e-10)


@pytest.mark.parametrize("n", [1, 2, 5])
def test_tiny_matrices_whole_spectrum(n):
    matrix = random_hermitian(n, density=1.0, seed=n) + sp.diags(np.arange(n, dtype=float))
    values = la.eigvalsh(matrix.toarray())
    result = lanczos_lowest(matrix.tocsr(), n, vectors=True)
    np.testing.assert_allclose(result.energies, values, rtol=0, atol=ATOL)


def hubbard_ring(L, U):
    return lowfold.parse_model({
        "lattice": {"shape": "chain", "size": [L], "boundary": "periodic"},
        "site": {"type": "electron"},
        "sector": {"particles": L, "sz": 0},
        "parameters": {"t": 1.0, "U": U},
        "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
                 {"type": "hubbard", "strength": "U"}],
    }, source="<test>")


def test_hubbard_ring_against_eigsh():
    # 8-site Hubbard ring at half filling, S^z = 0 (4,900 states); its excited levels come
    # in momentum pairs +-k, so the six lowest include degenerate ones.
    model = hubbard_ring(8, 4.0)
    basis = lowfold.build_basis(model)
    matrix = lowfold.hamiltonian_matrix(model, basis)
    rng = np.random.default_rng(5)
    reference = np.sort(eigsh(matrix, k=10, which="SA", ncv=40, tol=0,
                              v0=rng.standard_normal(basis.size), return_eigenvectors=False))
    levels = 6
    assert np.min(np.diff(reference[:levels])) < 1e-9      # a degenerate pair is included
    result = lanczos_lowest(matrix, levels, vectors=True)
    np.testing.assert_allclose(result.energies, reference[:levels], rtol=0, atol=ATOL)
    residual = matrix @ result.vectors - result.vectors * result.energies
    assert np.linalg.norm(residual, axis=0).max() < 1e-8
    operator = lowfold.hamiltonian_operator(model, basis)             # matrix-free
    ground = lanczos_lowest(operator, 1)
    np.testing.assert_allclose(ground.energies, reference[:1], rtol=0, atol=ATOL)


def test_not_converged_raises_with_partial_results():
    matrix = random_hermitian(400, density=0.03, seed=8)
    with pytest.raises(ConvergenceError) as info:
        lanczos_lowest(matrix, 2, maxiter=5)
    assert info.value.partial is not None and len(info.value.partial) >= 1


@pytest.mark.parametrize("kwargs", [{"levels": 0}, {"levels": 11}, {"tol": 0.0},
                                    {"maxiter": 0}, {"v0": np.ones(3)}])
def test_bad_input(kwargs):
    matrix = random_hermitian(10, density=0.5, seed=1)
    with pytest.raises(ModelError):
        lanczos_lowest(matrix, **kwargs)


def test_non_square_and_unknown_types():
    with pytest.raises(ModelError):
        lanczos_lowest(np.ones((3, 4)))
    with pytest.raises(ModelError):
        lanczos_lowest([[1.0, 0.0], [0.0, 2.0]])


def test_start_vector_and_counts():
    matrix = random_hermitian(200, density=0.05, seed=4)
    values = la.eigvalsh(matrix.toarray())
    v0 = np.ones(200)
    result = lanczos_lowest(matrix, 1, v0=v0)
    np.testing.assert_allclose(result.energies, values[:1], rtol=0, atol=ATOL)
    assert result.matvecs == result.steps[0]             # one pass, one product per step
    with_vectors = lanczos_lowest(matrix, 1, v0=v0, vectors=True)
    assert with_vectors.matvecs == 2 * with_vectors.steps[0]   # second pass + residual check
