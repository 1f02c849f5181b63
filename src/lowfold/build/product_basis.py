"""The product-basis Hamiltonian of electrons: the wave function as a matrix Psi[down, up].

For electrons at fixed N_up and N_dn whose operator strings each act on one spin species
(hopping that does not flip spin, and any diagonal term: Hubbard U, interactions, potentials,
fields along z), a state is a pair (up configuration, down configuration) and

    H Psi = Psi T_up^T + T_dn Psi + D o Psi,

``T_up`` and ``T_dn`` the one-species matrices on the fixed-N_up and fixed-N_dn spaces
(``lowfold.build.species``: all up slots come before the down slots, slot ``site + mode *
n_sites``, so an up string never passes a down electron and a down string passes all N_up up
electrons, a constant sign that ``T_dn`` carries) and ``D`` the diagonal.

``Psi`` flattened in C order is the vector of the model's own two-species basis (index
``rank_dn * size_up + rank_up``, the ascending encoded states), so eigenvectors need no
permutation.  Nothing of the size of the sector is built but ``D`` (one number a state); the
basis array of encoded states is never made.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from math import comb

import numba
import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

from lowfold._kernels import product as kernels
from lowfold.build.basis import fixed_sum_basis
from lowfold.build.compiled import CompiledOperator, compile_operator
from lowfold.build.species import _species_matrix, _without_diagonal, species_strings
from lowfold.errors import ModelError
from lowfold.model.model import Model
from lowfold.model.sector import sector_totals

__all__ = ["ProductHamiltonian", "ProductOperator", "product_species", "product_route_reason",
           "product_size", "check_product_hermitian", "product_threads", "subtract_and_norm",
           "add_scaled", "scale"]

CACHE_BLOCK = 16 << 20           # bytes of one column tile of Psi (all rows), kept in cache
PARALLEL_MIN_STATES = 1 << 20    # below this, a step's sweeps take microseconds and waking
                                 # the thread pool (on shared cores) costs more
_DIAGONAL_CHUNK = 1 << 22        # encoded states made at once while the diagonal is filled


@contextlib.contextmanager
def product_threads(size: int):
    """Run the product kernels on one thread for sectors of fewer than
    ``PARALLEL_MIN_STATES`` states (nested uses keep the outer setting)."""
    previous = numba.get_num_threads()
    if size < PARALLEL_MIN_STATES:
        numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(previous)


def product_species(model: Model) -> tuple[int, int] | None:
    """``(N_up, N_dn)`` when the model's sector is electrons at fixed N_up and N_dn, else
    ``None`` (no model of another site type or sector has a product basis)."""
    if model.site.type != "electron" or model.lattice.infinite or model.site.is_restricted:
        return None
    totals = sector_totals(model.site, model.n_sites, model.sector)
    if not isinstance(totals, list) or len(totals) != 2:
        return None
    return int(totals[0][1]), int(totals[1][1])


def product_route_reason(model: Model, operator: CompiledOperator | None = None) -> str | None:
    """Why the product basis does not apply to ``model`` (``None``: it applies)."""
    if model.site.is_restricted:
        return "the product basis holds every local state, and the site keeps only some ([site] states)"
    if product_species(model) is None:
        return "the product basis needs electrons at fixed particle number and S^z"
    operator = compile_operator(model) if operator is None else operator
    if species_strings(operator, model.n_sites)["mixed"].size:
        return "a term moves or flips both spin species at once (spin flips, pair hopping)"
    return None


def product_size(model: Model) -> int:
    """States of the sector, ``C(L, N_up) C(L, N_dn)`` (exact Python integer)."""
    n_up, n_dn = product_species(model)
    return comb(model.n_sites, n_up) * comb(model.n_sites, n_dn)


@dataclass(frozen=True, eq=False)
class ProductHamiltonian:
    """H of one sector in the product basis (see the module doc); make it with :meth:`of`.

    Attributes
    ----------
    t_up, t_dn : csr_matrix
        The one-species hopping matrices (int64 indices, sorted, no diagonal).
    up_states, dn_states : ndarray of int64
        The up and down configurations (bit i: site i), ascending.
    diag : ndarray of float64, shape (size_dn, size_up)
        ``<s|H|s>``, real (H is Hermitian).
    dtype : numpy dtype
        float64, or complex128 when a hopping amplitude is complex.
    n_sites : int
    """

    t_up: sp.csr_matrix
    t_dn: sp.csr_matrix
    up_states: np.ndarray
    dn_states: np.ndarray
    diag: np.ndarray
    dtype: np.dtype
    n_sites: int

    @classmethod
    def of(cls, model: Model, labels=None, *, operator: CompiledOperator | None = None,
           ) -> "ProductHamiltonian":
        """The terms ``labels`` (default: all) of ``model``.  ``ModelError`` if the product
        basis does not apply (:func:`product_route_reason` says why)."""
        if operator is None:
            operator = compile_operator(model, None if labels is None else tuple(labels))
        reason = product_route_reason(model, operator)
        if reason is not None:
            raise ModelError(f"{model.source}: {reason}")
        n = model.n_sites
        t_up, d_up, t_dn, d_dn, up, dn = _species_matrices(model, operator)
        dtype = np.result_type(operator.dtype, t_up.dtype, t_dn.dtype, np.float64)
        diag = _diagonal(operator, up, dn, n)
        if np.any(d_up):
            diag += d_up.real[None, :]           # in place: no temporary of the sector's size
        if np.any(d_dn):
            diag += d_dn.real[:, None]
        return cls(t_up.astype(dtype), t_dn.astype(dtype), up, dn, diag, np.dtype(dtype), n)

    @property
    def shape2d(self) -> tuple[int, int]:
        """``(size_dn, size_up)``: the shape of a wave function."""
        return self.diag.shape

    @property
    def size(self) -> int:
        return int(self.diag.size)

    def product_into(self, x: np.ndarray, out: np.ndarray, beta: float = 0.0,
                     x_scale: float = 1.0) -> float:
        """``out <- x_scale H x - beta out`` on wave functions of shape :attr:`shape2d`;
        returns ``Re x^H out`` (``x`` as given, without ``x_scale``)."""
        t_up, t_dn = self.t_up, self.t_dn
        with product_threads(self.size):
            return float(kernels.lanczos_product(
                self.diag, t_up.indptr, t_up.indices, t_up.data, t_dn.indptr, t_dn.indices,
                t_dn.data, x, float(x_scale), out, float(beta),
                _tile(*self.shape2d, out.itemsize)))

    def plus(self, other: "ProductHamiltonian", factor: float = 1.0) -> "ProductHamiltonian":
        """``self + factor * other`` on the same sector (``H0 + lambda V`` from the terms of
        H0 and of V, as the exact check of ``derive`` scales them); a new diagonal is made."""
        if self.shape2d != other.shape2d or self.n_sites != other.n_sites:
            raise ModelError("the two product-basis Hamiltonians live on different sectors")
        dtype = np.result_type(self.dtype, other.dtype)
        t_up = (self.t_up + factor * other.t_up).astype(dtype).tocsr()
        t_dn = (self.t_dn + factor * other.t_dn).astype(dtype).tocsr()
        for t in (t_up, t_dn):
            t.sort_indices()
            t.indptr, t.indices = t.indptr.astype(np.int64), t.indices.astype(np.int64)
        diag = self.diag + factor * other.diag
        return ProductHamiltonian(t_up, t_dn, self.up_states, self.dn_states, diag,
                                  np.dtype(dtype), self.n_sites)

    def diagonal(self) -> np.ndarray:
        """``<i|H|i>`` in the order of the two-species basis (a flat view of :attr:`diag`)."""
        return self.diag.reshape(-1)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """``H x`` for a flat vector of the two-species basis (a new array)."""
        psi = np.ascontiguousarray(np.asarray(x).reshape(self.shape2d), dtype=self.dtype)
        out = np.empty_like(psi)
        self.product_into(psi, out)
        return out.reshape(np.shape(x))

    def as_linear_operator(self) -> "ProductOperator":
        """H as a ``LinearOperator`` on flat vectors of the two-species basis, with the
        ``diagonal()`` and ``toarray()`` of a sparse matrix (what the eigensolvers of the
        exact check ask of their matrix)."""
        return ProductOperator(self)

    def to_csr(self) -> sp.csr_matrix:
        """The CSR matrix in the two-species basis order (small sectors: tests)."""
        size_dn, size_up = self.shape2d
        h = (sp.kron(sp.identity(size_dn), self.t_up) + sp.kron(self.t_dn, sp.identity(size_up))
             + sp.diags(self.diag.reshape(-1)))
        return sp.csr_matrix(h, dtype=self.dtype)

    def encoded_states(self) -> np.ndarray:
        """The encoded states in wave-function order, ``up + (down << L)`` (small sectors)."""
        return (self.up_states[None, :] + (self.dn_states[:, None] << self.n_sites)).reshape(-1)


def subtract_and_norm(out: np.ndarray, x: np.ndarray, alpha: float) -> float:
    """``out <- out - alpha x`` on wave functions; returns ``||out||^2`` (for the Lanczos of
    ``lowfold.solve.product_lanczos``, which reaches the kernels through here)."""
    return float(kernels.subtract_norm(out, x, alpha))


def add_scaled(y: np.ndarray, x: np.ndarray, factor) -> None:
    """``y <- y + factor x`` on wave functions."""
    kernels.add_scaled(y, x, factor)


def scale(out: np.ndarray, factor: float) -> None:
    """``out <- factor out`` on a wave function."""
    kernels.scale(out, factor)


class ProductOperator(LinearOperator):
    """A :class:`ProductHamiltonian` as a scipy ``LinearOperator`` on flat vectors."""

    def __init__(self, hamiltonian: ProductHamiltonian):
        super().__init__(dtype=hamiltonian.dtype, shape=(hamiltonian.size, hamiltonian.size))
        self.hamiltonian = hamiltonian

    def _matvec(self, x):
        return self.hamiltonian.matvec(np.asarray(x).reshape(-1))

    def _matmat(self, block):
        block = np.asarray(block)
        return np.column_stack([self._matvec(block[:, j]) for j in range(block.shape[1])])

    def _adjoint(self):
        return self                                   # H is Hermitian (checked on reading)

    def diagonal(self) -> np.ndarray:
        return self.hamiltonian.diagonal()

    def toarray(self) -> np.ndarray:
        return self.hamiltonian.to_csr().toarray()


def check_product_hermitian(model: Model, labels=None) -> None:
    """``ModelError`` unless the one-species matrices and the diagonal of the terms
    ``labels`` (default: all) are Hermitian, naming the first term that is not Hermitian by
    itself (the usual culprit: a product written without ``conjugate = true``).  Builds only
    the one-species matrices and the diagonal of one up and one down configuration set."""
    labels = [t.label for t in model.terms] if labels is None else list(labels)
    if _hermitian(model, compile_operator(model, tuple(labels))):
        return
    for label in labels:
        if not _hermitian(model, compile_operator(model, (label,))):
            raise ModelError(f"{model.source}: {model.term_key(label)} is not Hermitian; add "
                             "conjugate = true or its Hermitian partner")
    raise ModelError(f"{model.source}: the Hamiltonian is not Hermitian; add conjugate = true "
                     "to product terms or their Hermitian partners")


def _hermitian(model: Model, operator: CompiledOperator) -> bool:
    t_up, d_up, t_dn, d_dn, _, _ = _species_matrices(model, operator)
    scale = max(float(np.abs(operator.coef).max()) if operator.coef.size else 0.0, 1e-300)
    for t, d in ((t_up, d_up), (t_dn, d_dn)):
        difference = abs(t - t.conj().T)
        if (difference.max() if difference.nnz else 0.0) > 1e-10 * scale:
            return False
        if np.any(np.abs(np.imag(d)) > 1e-10 * scale):
            return False
    diagonal_coefficients = operator.coef[operator.diagonal_strings]
    return not np.any(np.abs(np.imag(diagonal_coefficients)) > 1e-10 * scale)


def _species_matrices(model: Model, operator: CompiledOperator):
    """``(T_up, d_up, T_dn, d_dn, up_states, dn_states)``: the one-species matrices without
    their diagonal ``d``, on the fixed-N_up and fixed-N_dn configurations."""
    n_up, n_dn = product_species(model)
    n = model.n_sites
    sub_up, sub_dn = fixed_sum_basis(n, 2, n_up), fixed_sum_basis(n, 2, n_dn)
    by_side = species_strings(operator, n)
    # up strings see one fixed down part; down strings pass the N_up up electrons below them
    t_up, d_up = _without_diagonal(_species_matrix(operator, by_side["a"], sub_up, 0,
                                                   int(sub_dn.states[0]) << n))
    t_dn, d_dn = _without_diagonal(_species_matrix(operator, by_side["b"], sub_dn, n,
                                                   int(sub_up.states[0])))
    return t_up, d_up, t_dn, d_dn, sub_up.states, sub_dn.states


def _tile(size_dn: int, size_up: int, itemsize: int) -> int:
    """Columns per tile of the down-spin product: ``CACHE_BLOCK`` bytes over all rows, at
    least 256 columns (shorter rows stream poorly), at most the whole row."""
    return int(min(size_up, max(256, CACHE_BLOCK // max(size_dn * itemsize, 1))))


def _diagonal(operator: CompiledOperator, up: np.ndarray, dn: np.ndarray, n: int) -> np.ndarray:
    """``D[r, u] = <u, r|H|u, r>`` filled a block of rows at a time (real part)."""
    diag = np.empty((dn.size, up.size), dtype=np.float64)
    rows = max(1, _DIAGONAL_CHUNK // max(up.size, 1))
    for start in range(0, dn.size, rows):
        stop = min(start + rows, dn.size)
        states = (up[None, :] + (dn[start:stop, None] << n)).reshape(-1)
        diag[start:stop] = operator.diagonal(states).real.reshape(stop - start, up.size)
    return diag
