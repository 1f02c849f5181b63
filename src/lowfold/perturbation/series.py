"""Rayleigh-Schroedinger perturbation series for one state, to high order, matrix-free.

``H(lambda) = H0 + lambda V``; the series ``E(lambda) = sum_k E_k lambda^k`` of one
eigenvalue, with the coefficients reported at ``lambda = 1`` (i.e. V as given).  The
state corrections use intermediate normalisation, ``<psi0|psi_k> = 0`` for ``k >= 1``:

    |psi_k> = R [ V|psi_{k-1}> - sum_{j=1}^{k-1} E_j |psi_{k-j}> ],
    E_k     = <psi0|V|psi_{k-1}>,          R = Q / (E0 - H0),  Q = 1 - |psi0><psi0|.

Only products of H0 and V with vectors are used.  With a diagonal H0 the reduced
resolvent is elementwise (a numba kernel); with a general H0 each order solves
``(E0 - H0)|psi_k> = Q(...)`` on the complement of ``psi0`` (Dalgarno-Lewis / Sternheimer
style): densely for small problems, with MINRES or GMRES for large ones, where the
spectrum of H0 is never needed.

By default the energies use Wigner's 2n+1 rule (E. P. Wigner, 1935), here in its
intermediate-normalisation form for Hermitian H0 and V (derived from the recursion by
moving V between bra and ket; the tests compare it with the direct formula):

    E_{2k}   = Re <psi_{k-1}|V|psi_k> - sum_{i=1..k} sum_{l=1..k-1} E_{2k-i-l}   Re <psi_i|psi_l>
    E_{2k+1} = Re <psi_k|V|psi_k>     - sum_{i=1..k} sum_{l=1..k}   E_{2k+1-i-l} Re <psi_i|psi_l>

so order ``n`` needs the states only up to ``floor(n/2)``; ``method="direct"`` uses
``E_k = <psi0|V|psi_{k-1}>`` instead.  V and H0 must be Hermitian.

The recursion and :class:`SeriesResult` live in :mod:`lowfold.perturbation.recursion`, the
solvers of the general route in :mod:`lowfold.perturbation.resolvent`; this module holds
the two routes and their input checks.
"""

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lowfold.build.numerics import rs_state_update as _state_update
from lowfold.errors import ModelError
from lowfold.perturbation.orders import MAX_SERIES_ORDER, validate_order
from lowfold.perturbation.recursion import (
    SeriesResult,
    chain_request,
    finish_series,
    run_chain,
)
from lowfold.perturbation.resolvent import (
    DENSE_LIMIT,
    DenseResolvent,
    KrylovResolvent,
    dense_matrix,
)

__all__ = ["SeriesResult", "rayleigh_schrodinger", "rayleigh_schrodinger_general"]

_METHODS = ("wigner", "direct")
_TOP_CONTRIBUTIONS = 10
_HERMITICITY_TOL = 1e-10
_SOLVERS = ("auto", "dense", "minres", "gmres")


# -- input handling


def _matvec(op, n, name):
    """Return ``x -> op @ x`` for a dense array, sparse matrix or LinearOperator."""
    if isinstance(op, spla.LinearOperator):
        if op.shape != (n, n):
            raise ModelError(f"{name} has shape {op.shape}, expected {(n, n)}")
        return op.matvec, np.dtype(op.dtype)
    if sp.issparse(op) or isinstance(op, np.ndarray):
        if op.ndim != 2 or op.shape != (n, n):
            raise ModelError(f"{name} has shape {op.shape}, expected {(n, n)}")
        if sp.issparse(op):
            op = op.tocsr()
        return (lambda x: op @ x), np.dtype(op.dtype)
    raise ModelError(f"{name} must be a NumPy array, a SciPy sparse matrix or a LinearOperator")


def _probe_vectors(n):
    """Two fixed, generic real unit vectors (no random state needed)."""
    idx = np.arange(n, dtype=np.float64)
    x = np.cos(0.7 * idx + 0.3) + 0.1
    y = np.sin(1.3 * idx + 0.1) - 0.2
    return x / np.linalg.norm(x), y / np.linalg.norm(y)


def _check_hermitian(apply, n, name):
    """Raise ModelError unless ``<x|Ay> = <Ax|y>`` on two generic probe vectors."""
    x, y = _probe_vectors(n)
    ax, ay = apply(x), apply(y)
    scale = np.linalg.norm(ax) + np.linalg.norm(ay)
    if abs(np.vdot(x, ay) - np.vdot(ax, y)) > _HERMITICITY_TOL * max(scale, 1e-300):
        raise ModelError(f"{name} is not Hermitian; the series needs Hermitian H0 and V")


def _check_order_method(order, method):
    validate_order(order, maximum=MAX_SERIES_ORDER)
    if method not in _METHODS:
        raise ModelError(f"method must be one of {_METHODS}, got {method!r}")


def _diagonal_of(h0):
    """The diagonal of H0 as a float array, or ModelError if H0 is not diagonal."""
    if sp.issparse(h0):
        coo = sp.coo_array(h0)
        if h0.shape[0] != h0.shape[1] or np.any((coo.row != coo.col) & (coo.data != 0)):
            raise ModelError(
                "H0 is not diagonal; use rayleigh_schrodinger_general with a reference vector"
            )
        d = coo.diagonal()
    else:
        d = np.asarray(h0)
        if d.ndim != 1:
            raise ModelError(
                "H0 must be the 1-D array of its diagonal; for a non-diagonal H0 use "
                "rayleigh_schrodinger_general"
            )
    if np.iscomplexobj(d):
        if np.any(d.imag != 0):
            raise ModelError("the diagonal of H0 must be real")
        d = d.real
    d = np.ascontiguousarray(d, dtype=np.float64)
    if d.size == 0 or not np.all(np.isfinite(d)):
        raise ModelError("the diagonal of H0 must be a non-empty array of finite numbers")
    return d


# -- diagonal H0


def _second_order_terms(w0, gaps, usable):
    """Top contributions ``(m, |V_mn|^2, E_n - E_m, contribution)`` to ``E_2``."""
    idx = np.flatnonzero(usable & (w0 != 0))
    weights = np.abs(w0[idx]) ** 2
    contrib = weights / gaps[idx]
    top = np.argsort(-np.abs(contrib), kind="stable")[:_TOP_CONTRIBUTIONS]
    return [(int(idx[t]), float(weights[t]), float(gaps[idx[t]]), float(contrib[t])) for t in top]


class _CouplingProbe:
    """Watch the components of ``V psi_k`` on the degenerate partners of the reference."""

    def __init__(self, partners, order, tol):
        self.partners, self.order, self.tol = partners, order, tol
        self.first_order = None  # order at which V first couples a partner

    def __call__(self, k, w):
        amplitude = np.max(np.abs(w[self.partners]))
        if amplitude <= self.tol * max(np.linalg.norm(w), 1e-300):
            return False
        self.first_order = k + 1
        partner = int(self.partners[np.argmax(np.abs(w[self.partners]))])
        if k + 1 <= self.order:
            raise ModelError(
                f"the reference level is degenerate in H0 with {self.partners.size} other basis "
                f"state(s) (e.g. state {partner}), and V couples them to it at order {k + 1} "
                f"<= the requested order {self.order}: a single-state series does not apply; "
                "treat the degenerate manifold with `lowfold derive`"
            )
        return True

    def warning(self, checked):
        names = ", ".join(str(int(m)) for m in self.partners[:5])
        more = ", ..." if self.partners.size > 5 else ""
        head = (
            f"the reference level is degenerate in H0 with {self.partners.size} basis state(s) "
            f"({names}{more}), which V does not couple to it up to order {self.order}; they are "
            "left out of the resolvent"
        )
        if self.first_order is None:
            return head + f"; no coupling found up to order {checked} (checked)"
        return head + (
            f"; V first couples them at order {self.first_order}, where the degeneracy would "
            "split and the degenerate treatment (`lowfold derive`) is needed"
        )


def rayleigh_schrodinger(h0, v, reference, order, *, method="wigner", keep_states=False,
                         degeneracy_tol=1e-9, coupling_tol=1e-10):
    """Perturbation series of the eigenvalue of ``H0 + V`` that grows out of a basis state.

    Parameters
    ----------
    h0 : (N,) array or diagonal sparse matrix
        Diagonal of H0 in the basis (H0 is diagonal in it).
    v : (N, N) array, sparse matrix or LinearOperator
        The Hermitian perturbation; only products with vectors are used.
    reference : int
        Index of the unperturbed basis state.
    order : int
        Highest order of the energy, 1 .. ``MAX_SERIES_ORDER`` (200).
    method : {"wigner", "direct"}
        Energies by the 2n+1 rule (states up to ``order // 2``) or by ``<psi0|V|psi_{k-1}>``.
    keep_states : bool
        Return ``|psi_1> .. |psi_order>`` (the chain is then run to ``order``).
    degeneracy_tol : float
        Basis states with ``|E_m - E_ref| <= degeneracy_tol`` are degenerate partners.
    coupling_tol : float
        A partner component of ``V|psi_k>`` above ``coupling_tol * ||V|psi_k>||`` counts as
        a coupling.

    Returns
    -------
    SeriesResult

    Raises
    ------
    ModelError
        Bad input, non-Hermitian V, or a degenerate partner that V couples to the
        reference at an order ``<= order`` (the message points to ``lowfold derive``).

    Notes
    -----
    Degenerate partners that V does not couple to the reference up to ``order`` are left
    out of the resolvent and the series goes on, with a warning; to say at which order
    they would be coupled, the chain is then continued up to ``2 * order``.

    Examples
    --------
    >>> import numpy as np
    >>> h0 = np.array([0.0, 1.0])
    >>> v = 0.1 * np.array([[0.0, 1.0], [1.0, 0.0]])
    >>> res = rayleigh_schrodinger(h0, v, 0, 4)
    >>> float(round(res.energies[2], 12))
    -0.01
    """
    _check_order_method(order, method)
    d = _diagonal_of(h0)
    n = d.size
    if isinstance(reference, bool) or not isinstance(reference, (int, np.integer)):
        raise ModelError(f"reference must be a basis-state index, got {reference!r}")
    if not 0 <= reference < n:
        raise ModelError(f"reference {reference} is outside the basis of {n} states")
    apply_v, v_dtype = _matvec(v, n, "V")
    _check_hermitian(apply_v, n, "V")
    dtype = np.result_type(v_dtype, np.float64)

    e0 = float(d[reference])
    gaps = e0 - d
    degenerate = np.abs(gaps) <= degeneracy_tol
    partners = np.flatnonzero(degenerate)
    partners = partners[partners != reference]
    usable = ~degenerate
    inv = np.zeros(n)
    inv[usable] = 1.0 / gaps[usable]
    smallest = float(np.min(np.abs(gaps[usable]))) if usable.any() else float("nan")

    length, need_last_w = chain_request(order, method, keep_states)
    probe = None
    if partners.size:
        probe = _CouplingProbe(partners, order, coupling_tol)
        length, need_last_w = max(length, 2 * order - 1), True

    psi0 = np.zeros(n, dtype=dtype)
    psi0[reference] = 1.0

    def correction(w, states, energies, k, out):
        _state_update(w, states, energies, k, inv, out)

    chain = run_chain(apply_v, correction, psi0, e0, length, need_last_w, probe)
    warnings = (probe.warning(chain.length + 1),) if probe is not None else ()
    w0 = np.asarray(chain.first_w)
    return finish_series(
        chain, order, method, keep_states,
        second_order_contributions=_second_order_terms(w0, gaps, usable),
        warnings=warnings,
        degenerate_partners=partners.astype(np.int64),
        smallest_denominator=smallest,
    )


# -- general H0


def rayleigh_schrodinger_general(h0, v, psi0, e0, order, *, method="wigner", keep_states=False,
                                 solver="auto", rtol=1e-12, maxiter=None, preconditioner=None,
                                 degeneracy_tol=1e-6, eigen_tol=1e-8):
    """Perturbation series of the eigenvalue of ``H0 + V`` that grows out of ``psi0``.

    H0 need not be diagonal: each order solves a linear system on the complement of
    ``psi0`` with MINRES (or GMRES), so only products of H0 and V with vectors are used.

    Parameters
    ----------
    h0, v : (N, N) arrays, sparse matrices or LinearOperators
        Hermitian H0 and V.
    psi0 : (N,) array
        Eigenvector of H0 (normalised here).
    e0 : float
        Its eigenvalue.
    order : int
        Highest order of the energy, 1 .. ``MAX_SERIES_ORDER`` (200).
    method : {"wigner", "direct"}
        As in :func:`rayleigh_schrodinger`.
    keep_states : bool
        Return ``|psi_1> .. |psi_order>``.
    solver : {"auto", "dense", "minres", "gmres"}
        ``"dense"`` diagonalises H0 once and applies the reduced resolvent exactly (small
        problems); ``"minres"`` / ``"gmres"`` solve each order iteratively (MINRES suits the
        Hermitian, indefinite ``E0 - H0``); ``"auto"`` takes the dense route up to
        ``resolvent.DENSE_LIMIT`` states, MINRES above (Krylov solvers stall on tiny
        problems).
    rtol : float
        Relative residual asked of the solver at each order.
    maxiter : int, optional
        Iteration cap per solve.
    preconditioner : LinearOperator, optional
        Passed to the solver as ``M`` (for MINRES it must be Hermitian positive definite).
    degeneracy_tol : float
        Levels of H0 within ``degeneracy_tol * max(1, ||H0||)`` of ``e0`` count as degenerate
        with it (dense route); a failed iterative solve whose residual is carried by a level
        of ``E0 - H0`` within ``degeneracy_tol`` times its scale of zero is read as a coupled
        degenerate level (iterative routes).
    eigen_tol : float
        Allowed ``||H0 psi0 - e0 psi0||``, relative to ``max(1, |e0|)``.

    Returns
    -------
    SeriesResult
        With ``second_order_contributions`` empty and ``solver_iterations`` filled.

    Raises
    ------
    ModelError
        Bad input, ``psi0`` not an eigenvector of H0, or a degenerate level of H0 coupled
        to the reference (the message points to ``lowfold derive``).
    ConvergenceError
        The solver did not converge.

    Notes
    -----
    Degenerate levels of H0 that V never couples to the reference are harmless here (the
    Krylov spaces stay orthogonal to them; the dense route drops their rounding-level
    components) but, unlike on the diagonal route, they are not reported.  See
    :mod:`lowfold.perturbation.resolvent` for the two solvers.
    """
    _check_order_method(order, method)
    if solver not in _SOLVERS:
        raise ModelError(f"solver must be one of {_SOLVERS}, got {solver!r}")
    psi0 = np.asarray(psi0)
    if psi0.ndim != 1 or psi0.size == 0:
        raise ModelError("psi0 must be a non-empty 1-D array")
    n = psi0.size
    norm = np.linalg.norm(psi0)
    if not np.isfinite(norm) or norm == 0.0:
        raise ModelError("psi0 must be a finite, non-zero vector")
    apply_h0, h_dtype = _matvec(h0, n, "H0")
    apply_v, v_dtype = _matvec(v, n, "V")
    _check_hermitian(apply_h0, n, "H0")
    _check_hermitian(apply_v, n, "V")
    dtype = np.result_type(h_dtype, v_dtype, psi0.dtype, np.float64)
    psi0 = (psi0 / norm).astype(dtype)
    e0 = float(np.real(e0))
    if np.linalg.norm(apply_h0(psi0) - e0 * psi0) > eigen_tol * max(1.0, abs(e0)):
        raise ModelError("psi0 is not an eigenvector of H0 with eigenvalue e0 (within eigen_tol)")

    if solver == "dense" or (solver == "auto" and n <= DENSE_LIMIT):
        solve = DenseResolvent(dense_matrix(h0, apply_h0, n, dtype), psi0, e0,
                               degeneracy_tol=degeneracy_tol)
    else:
        solve = KrylovResolvent(apply_h0, psi0, e0, dtype,
                                solver="minres" if solver == "auto" else solver, rtol=rtol,
                                maxiter=maxiter, preconditioner=preconditioner,
                                degeneracy_tol=degeneracy_tol)

    def correction(w, states, energies, k, out):
        b = w - energies[1:k] @ states[k - 1 : 0 : -1]
        b = b - psi0 * np.vdot(psi0, b)
        scale = np.linalg.norm(w) + np.abs(energies[1:k]) @ np.linalg.norm(states[k - 1 : 0 : -1],
                                                                           axis=1)
        out[:] = solve(b, k, scale)

    length, need_last_w = chain_request(order, method, keep_states)
    chain = run_chain(apply_v, correction, psi0, e0, length, need_last_w)
    return finish_series(chain, order, method, keep_states, second_order_contributions=[],
                   solver_iterations=solve.iterations)
