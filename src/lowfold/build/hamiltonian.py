"""The Hamiltonian of a model on the basis of its sector: one object, every product.

:class:`Hamiltonian` holds what every consumer needs -- the model, the compiled operator
strings (:mod:`lowfold.build.compiled`) and the basis (:mod:`lowfold.build.basis`) -- and
offers the CSR matrix, the matrix-free ``LinearOperator``, the diagonal, the images of
arbitrary encoded states, the non-zero count and the Hermiticity check.  It compiles the
terms once; each product is built on request (nothing is cached, the object never changes).

The functions :func:`build_basis`, :func:`hamiltonian_matrix` and
:func:`hamiltonian_operator` are the long-standing public entry points; they are thin
wrappers of the object.

Examples
--------
>>> import lowfold
>>> model = lowfold.parse_model({
...     "lattice": {"shape": "chain", "size": [2], "boundary": "open"},
...     "site": {"type": "spin", "spin": 0.5},
...     "term": [{"type": "exchange", "strength": 1.0}]})
>>> h = Hamiltonian.of(model)
>>> h.size, h.diagonal().tolist()
(4, [0.25, -0.25, -0.25, 0.25])
>>> float(h.to_csr()[1, 2])
0.5
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

from lowfold.build.basis import Basis, sector_basis
from lowfold.build.compiled import CompiledOperator, StateImages, compile_operator
from lowfold.build.sparse import (ROUTES, available_memory, count_nonzeros, operator_linear,
                                  operator_matrix)
from lowfold.build.species import prefers_matrix_free
from lowfold.errors import ModelError
from lowfold.model.model import Model

__all__ = ["Hamiltonian", "build_basis", "hamiltonian_matrix", "hamiltonian_operator",
           "check_hermitian", "check_model_hermitian", "ROUTES"]


def build_basis(model: Model, *, max_states: int | None = None) -> Basis:
    """The basis of the model's sector (``SizeError`` above ``max_states`` states; default:
    what fits in the available memory at 64 bytes a state)."""
    if max_states is None:
        max_states = available_memory() // 64        # states + a few vectors, at the least
    return sector_basis(model.site, model.n_sites, model.sector, max_states=max_states)


@dataclass(frozen=True, eq=False)
class Hamiltonian:
    """The terms ``labels`` (``None``: all) of ``model`` on ``basis``.

    Make it with :meth:`of`.  Conventions: the basis states are ascending encoded integers
    (``lowfold.build.basis``); matrices and operators are indexed by basis position; the
    stored entry ``(i, j)`` is ``<i|H|j>`` for a Hermitian H.

    Attributes
    ----------
    model : Model
    basis : Basis
    operator : CompiledOperator
        The compiled strings (usable without the basis, on any encoded states).
    labels : tuple of str or None
    """

    model: Model
    basis: Basis
    operator: CompiledOperator
    labels: tuple[str, ...] | None = None

    @classmethod
    def of(cls, model: Model, labels=None, basis: Basis | None = None, *,
           max_states: int | None = None) -> "Hamiltonian":
        """Compile the terms ``labels`` (default: all) of ``model`` on ``basis`` (default:
        the basis of the model's sector, at most ``max_states`` states).

        Raises ``ModelError`` if a term leaves the sector, ``SizeError`` if the basis will
        not fit."""
        labels = None if labels is None else tuple(labels)
        basis = build_basis(model, max_states=max_states) if basis is None else basis
        return cls(model, basis, compile_operator(model, labels), labels)

    @property
    def size(self) -> int:
        """Number of basis states."""
        return self.basis.size

    @property
    def shape(self) -> tuple[int, int]:
        return (self.basis.size, self.basis.size)

    @property
    def dtype(self) -> np.dtype:
        """float64 for a real Hamiltonian, complex128 otherwise."""
        return self.operator.dtype

    def to_csr(self, *, memory_limit: int | None = None, route: str = "auto") -> sp.csr_matrix:
        """The CSR matrix (sorted indices, int32 indices where they fit).

        ``SizeError`` before allocating more than ``memory_limit`` bytes (default: 80 % of
        the available memory).  ``route``: the kernel route, one of ``ROUTES`` (a detail of
        speed, see :mod:`lowfold.build.sparse`; every route gives the same matrix)."""
        return operator_matrix(self.operator, self.basis, memory_limit=memory_limit,
                               route=route)

    def as_linear_operator(self, *, route: str = "auto") -> LinearOperator:
        """The matrix-free ``LinearOperator``: stores the basis and the diagonal only (and,
        for electrons at fixed N_up, N_dn, the small one-species matrices)."""
        return operator_linear(self.operator, self.basis, route=route)

    def diagonal(self) -> np.ndarray:
        """``<i|H|i>`` for each basis state (dtype of the Hamiltonian)."""
        return self.operator.diagonal(self.basis.states)

    def apply_to_states(self, states) -> StateImages:
        """Images of arbitrary encoded states (members of the basis or not): ``(rows,
        states, amplitudes)`` with ``amplitudes[i] = <states[i]|H|input[rows[i]]>``."""
        return self.operator.apply_to_states(states)

    def count_nonzeros(self, *, route: str = "auto") -> int:
        """Upper bound of the stored entries of :meth:`to_csr` (exact unless entries
        merge), without building it."""
        return count_nonzeros(self.operator, self.basis, route=route)

    def prefers_matrix_free(self) -> bool:
        """Whether the matrix-free product costs about what a CSR product does at any size
        (electrons at fixed N_up, N_dn with no string mixing the species)."""
        return prefers_matrix_free(self.operator, self.basis)

    def check_hermitian(self, matrix=None) -> None:
        """``ModelError`` unless H is Hermitian, naming the first term that is not Hermitian
        by itself.  ``matrix``: an already built :meth:`to_csr` or :meth:`as_linear_operator`
        (default: the matrix-free operator)."""
        matrix = self.as_linear_operator() if matrix is None else matrix
        check_model_hermitian(self.model, self.basis, matrix, self.labels,
                              coefficient_scale=_coefficient_scale(self.operator))


def hamiltonian_matrix(model: Model, basis: Basis | None = None, labels=None, *,
                       memory_limit: int | None = None, check: bool = True,
                       route: str = "auto") -> sp.csr_matrix:
    """Sparse CSR matrix of the terms ``labels`` (default: all) in ``basis``.

    Raises ``SizeError`` if the matrix would need more than ``memory_limit`` bytes
    (default: 80 % of the available memory) and, with ``check``, ``ModelError`` if it is
    not Hermitian.  ``route``: ``"auto"``, ``"split"``, ``"mask"`` or ``"general"``.
    """
    h = Hamiltonian.of(model, labels, basis)
    matrix = h.to_csr(memory_limit=memory_limit, route=route)
    if check:
        h.check_hermitian(matrix)
    return matrix


def hamiltonian_operator(model: Model, basis: Basis | None = None, labels=None, *,
                         check: bool = True, route: str = "auto") -> LinearOperator:
    """Matrix-free ``LinearOperator`` of the terms ``labels`` (default: all): nothing but
    the basis and the diagonal is stored (and, on two-species bases, the small species
    matrices).  ``route``: ``"auto"``, ``"split"``, ``"mask"`` or ``"general"``."""
    h = Hamiltonian.of(model, labels, basis)
    linear = h.as_linear_operator(route=route)
    if check:
        h.check_hermitian(linear)
    return linear


def _what(labels) -> str:
    return "the Hamiltonian" if labels is None else f"the terms {', '.join(labels)}"


def _coefficient_scale(operator) -> float:
    """The largest coefficient of the compiled strings: the scale of round-off in H, also
    when the strings cancel (a term that sums to zero is Hermitian, whatever its noise)."""
    return float(np.abs(operator.coef).max()) if operator.coef.size else 0.0


def check_model_hermitian(model: Model, basis: Basis, matrix, labels=None, *,
                          coefficient_scale: float | None = None) -> None:
    """``check_hermitian`` for a model's operator; on failure, name the first term that is
    not Hermitian by itself (the usual culprit: a product without ``conjugate = true``).
    ``coefficient_scale``: the largest compiled coefficient (default: compiled here)."""
    if coefficient_scale is None:
        coefficient_scale = _coefficient_scale(compile_operator(model, labels))
    try:
        check_hermitian(matrix, what=_what(labels), scale=coefficient_scale)
    except ModelError as exc:
        for label in (labels or [t.label for t in model.terms]):
            alone_operator = compile_operator(model, [label])
            alone = operator_linear(alone_operator, basis)
            try:
                check_hermitian(alone, scale=_coefficient_scale(alone_operator))
            except ModelError:
                raise ModelError(f"{model.source}: {model.term_key(label)} is not Hermitian; add "
                                 "conjugate = true or its Hermitian partner") from None
        raise ModelError(f"{model.source}: {exc}") from None


def check_hermitian(matrix, *, what: str = "the Hamiltonian", rtol: float = 1e-10,
                    scale: float = 0.0, rng: np.random.Generator | None = None) -> None:
    """Raise ``ModelError`` unless ``matrix`` (sparse or LinearOperator) is Hermitian.

    Compares ``<u, A v>`` with ``<A u, v>`` for random vectors: exact for small matrices
    (a full comparison), and a random test, wrong with probability zero, for large ones.
    Differences are measured against the size of the matrix, or ``scale`` (the size of the
    terms it was summed from) when that is larger: a matrix of pure round-off left by
    cancelling terms is zero, not "not Hermitian".
    """
    if sp.issparse(matrix) and matrix.shape[0] <= 4000:
        diff = abs(matrix - matrix.conj().T)
        bad = diff.max() if diff.nnz else 0.0
        size = max(abs(matrix).max() if matrix.nnz else 0.0, scale)
        if bad > rtol * max(size, 1e-300):
            raise ModelError(f"{what} is not Hermitian (largest |H - H^dagger| = {bad:.3g}); "
                             "add conjugate = true to product terms or their Hermitian partners")
        return
    rng = np.random.default_rng(20240601) if rng is None else rng
    u = rng.standard_normal(matrix.shape[0])
    v = rng.standard_normal(matrix.shape[0])
    av, au = matrix @ v, matrix @ u
    left, right = np.vdot(u, av), np.vdot(au, v)
    size = (np.linalg.norm(au) * np.linalg.norm(v) + np.linalg.norm(av) * np.linalg.norm(u)
            + scale * np.linalg.norm(u) * np.linalg.norm(v))
    if abs(left - right) > rtol * max(size, 1e-300):
        raise ModelError(f"{what} is not Hermitian; add conjugate = true to product terms or "
                         "their Hermitian partners")
