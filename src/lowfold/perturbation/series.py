"""Rayleigh-Schroedinger perturbation series for one state, to high order, matrix-free.

``H(lambda) = H0 + lambda V``; the series ``E(lambda) = sum_k E_k lambda^k`` of one
eigenvalue, with the coefficients reported at ``lambda = 1`` (i.e. V as given).  The
state corrections use intermediate normalisation, ``<psi0|psi_k> = 0`` for ``k >= 1``:

    |psi_k> = R [ V|psi_{k-1}> - sum_{j=1}^{k-1} E_j |psi_{k-j}> ],
    E_k     = <psi0|V|psi_{k-1}>,          R = Q / (E0 - H0),  Q = 1 - |psi0><psi0|.

Only products of H0 and V with vectors are used.  With a diagonal H0 the reduced
resolvent is elementwise (a numba kernel); with a general H0 each order solves
``(E0 - H0)|psi_k> = Q(...)`` on the complement of ``psi0`` with MINRES or GMRES
(Dalgarno-Lewis / Sternheimer style), so the spectrum of H0 is never needed.

By default the energies use Wigner's 2n+1 rule (E. P. Wigner, 1935), here in its
intermediate-normalisation form for Hermitian H0 and V (derived from the recursion by
moving V between bra and ket; the tests compare it with the direct formula):

    E_{2k}   = Re <psi_{k-1}|V|psi_k> - sum_{i=1..k} sum_{l=1..k-1} E_{2k-i-l}   Re <psi_i|psi_l>
    E_{2k+1} = Re <psi_k|V|psi_k>     - sum_{i=1..k} sum_{l=1..k}   E_{2k+1-i-l} Re <psi_i|psi_l>

so order ``n`` needs the states only up to ``floor(n/2)``; ``method="direct"`` uses
``E_k = <psi0|V|psi_{k-1}>`` instead.  V and H0 must be Hermitian.
"""

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from lowfold.build.numerics import rs_state_update as _state_update
from lowfold.errors import ConvergenceError, ModelError

__all__ = ["SeriesResult", "rayleigh_schrodinger", "rayleigh_schrodinger_general"]

_METHODS = ("wigner", "direct")
_TOP_CONTRIBUTIONS = 10
_HERMITICITY_TOL = 1e-10
_REFINEMENTS = 6


@dataclass(frozen=True, eq=False)
class SeriesResult:
    """Perturbation series of one eigenvalue of ``H0 + lambda V``.

    Attributes
    ----------
    energies : (order + 1,) float array
        ``E_0 .. E_n``, the coefficients of ``lambda^k`` (so their sum is the estimate at
        ``lambda = 1``, the coupling V was given at).
    states : list of arrays or None
        ``|psi_1> .. |psi_n>`` (intermediate normalisation) when asked for, else None.
    second_order_contributions : list of (int, float, float, float)
        ``(m, |V_mn|^2, E_n - E_m, |V_mn|^2 / (E_n - E_m))`` for the basis states m that
        contribute most to ``E_2`` (largest magnitude first, at most 10).  Empty for the
        general (non-diagonal H0) route, where no eigenbasis of H0 is at hand.
    first_order_norm : float
        ``|| |psi_1> ||``, a first measure of how perturbative the state is.
    method : str
        ``"wigner"`` (2n+1 rule) or ``"direct"``.
    warnings : tuple of str
        Things the caller should pass on to the user (e.g. an uncoupled degeneracy).
    degenerate_partners : int array
        Basis states with the reference's H0 energy (diagonal route); they are left out
        of the resolvent.
    smallest_denominator : float
        ``min |E_n - E_m|`` over the states in the resolvent (NaN on the general route).
    matvecs : int
        Number of products of V with a vector.
    solver_iterations : int
        Total iterations of the linear solver (general route; 0 otherwise).
    """

    energies: np.ndarray
    states: list | None
    second_order_contributions: list
    first_order_norm: float
    method: str
    warnings: tuple = ()
    degenerate_partners: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    smallest_denominator: float = float("nan")
    matvecs: int = 0
    solver_iterations: int = 0

    @property
    def order(self):
        """Highest order of the energy series."""
        return len(self.energies) - 1

    def energy(self, lam=1.0, *, order=None):
        """Partial sum ``sum_{k <= order} E_k lam^k`` (all orders by default)."""
        n = self.order if order is None else int(order)
        if not 0 <= n <= self.order:
            raise ModelError(f"order must lie in 0..{self.order}, got {order}")
        powers = lam ** np.arange(n + 1)
        return float(np.dot(self.energies[: n + 1], powers))


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
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order < 1:
        raise ModelError(f"order must be an integer >= 1, got {order!r}")
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


# -- the recursion, shared by both routes


@dataclass
class _Chain:
    """State corrections and the scalars the energy formulas need."""

    states: np.ndarray  # (K + 1, N): psi_0 .. psi_K
    direct: np.ndarray  # direct[t] = <psi0|V|psi_{t-1}>, t = 1 .. (K + 1 or K)
    lead_even: np.ndarray  # lead_even[k] = <V psi_{k-1}|psi_k>
    lead_odd: np.ndarray  # lead_odd[k] = <psi_k|V psi_k>
    length: int  # K actually reached
    matvecs: int
    first_w: np.ndarray  # V psi_0


def _run_chain(apply_v, correction, psi0, e0, length, need_last_w, inspect=None):
    """Build ``psi_1 .. psi_length``; ``inspect(k, V psi_k)`` may stop the chain early.

    ``correction(w, states, energies, k, out)`` writes ``psi_k`` into ``out`` from
    ``w = V psi_{k-1}`` and the direct energies ``energies[1 .. k]``.
    """
    n = psi0.size
    states = np.zeros((length + 1, n), dtype=psi0.dtype)
    states[0] = psi0
    direct = np.zeros(length + 2)
    direct[0] = e0
    lead_even = np.zeros(length + 1)
    lead_odd = np.zeros(length + 1)
    w = apply_v(psi0)
    first_w = w
    matvecs = 1
    direct[1] = np.vdot(psi0, w).real
    lead_odd[0] = direct[1]
    reached = length
    if inspect is not None and inspect(0, w):
        reached = 0
    for k in range(1, reached + 1):
        correction(w, states, direct, k, states[k])
        lead_even[k] = np.vdot(w, states[k]).real
        if k == length and not need_last_w:
            break
        w = apply_v(states[k])
        matvecs += 1
        direct[k + 1] = np.vdot(psi0, w).real
        lead_odd[k] = np.vdot(states[k], w).real
        if inspect is not None and inspect(k, w):
            reached = k
            break
    return _Chain(states[: reached + 1], direct, lead_even, lead_odd, reached, matvecs, first_w)


def _wigner_energies(chain, order):
    """Energies ``E_0 .. E_order`` by the 2n+1 rule from ``psi_0 .. psi_{order // 2}``."""
    m = order // 2
    block = chain.states[1 : m + 1]
    overlap = (block.conj() @ block.T).real if m else np.zeros((0, 0))
    energies = np.zeros(order + 1)
    energies[0] = chain.direct[0]
    energies[1] = chain.lead_odd[0]
    for t in range(2, order + 1):
        k = t // 2
        if t % 2 == 0:
            value, l_max = chain.lead_even[k], k - 1
        else:
            value, l_max = chain.lead_odd[k], k
        for i in range(1, k + 1):
            for l in range(1, l_max + 1):
                value -= energies[t - i - l] * overlap[i - 1, l - 1]
        energies[t] = value
    return energies


def _chain_request(order, method, keep_states):
    """Chain length and whether ``V psi_K`` is needed, for the energies and states asked."""
    if method == "direct":
        length, need_last_w = order - 1, True
    else:
        length, need_last_w = order // 2, order % 2 == 1
    if keep_states and order > length:
        length, need_last_w = order, False
    if length < 1:
        length, need_last_w = 1, order > 1
    return length, need_last_w


def _finish(chain, order, method, keep_states, **extra):
    if method == "direct":
        energies = chain.direct[: order + 1].copy()
    else:
        energies = _wigner_energies(chain, order)
    states = [chain.states[k].copy() for k in range(1, order + 1)] if keep_states else None
    return SeriesResult(
        energies=energies,
        states=states,
        first_order_norm=float(np.linalg.norm(chain.states[1])),
        method=method,
        matvecs=chain.matvecs,
        **extra,
    )


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
        Highest order of the energy, ``>= 1``.
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

    length, need_last_w = _chain_request(order, method, keep_states)
    probe = None
    if partners.size:
        probe = _CouplingProbe(partners, order, coupling_tol)
        length, need_last_w = max(length, 2 * order - 1), True

    psi0 = np.zeros(n, dtype=dtype)
    psi0[reference] = 1.0

    def correction(w, states, energies, k, out):
        _state_update(w, states, energies, k, inv, out)

    chain = _run_chain(apply_v, correction, psi0, e0, length, need_last_w, probe)
    warnings = (probe.warning(chain.length + 1),) if probe is not None else ()
    w0 = np.asarray(chain.first_w)
    return _finish(
        chain, order, method, keep_states,
        second_order_contributions=_second_order_terms(w0, gaps, usable),
        warnings=warnings,
        degenerate_partners=partners.astype(np.int64),
        smallest_denominator=smallest,
    )


# -- general H0


class _ComplementSolver:
    """Solve ``(E0 - H0) x = b`` for ``b`` orthogonal to ``psi0``, with ``x`` orthogonal too."""

    def __init__(self, apply_h0, psi0, e0, dtype, *, solver, rtol, maxiter, preconditioner,
                 degeneracy_tol):
        n = psi0.size
        self.psi0, self.e0, self.apply_h0 = psi0, e0, apply_h0
        self.operator = spla.LinearOperator((n, n), matvec=self._apply, dtype=dtype)
        self.solver, self.rtol, self.maxiter = solver, rtol, maxiter
        self.preconditioner, self.degeneracy_tol = preconditioner, degeneracy_tol
        self.iterations = 0
        self.accept = max(1e3 * rtol, 1e-13)

    def _project(self, x):
        return x - self.psi0 * np.vdot(self.psi0, x)

    def _apply(self, x):
        x = self._project(np.ravel(x))
        return self._project(self.e0 * x - self.apply_h0(x))

    def _count(self, *_):
        self.iterations += 1

    def _krylov(self, b):
        if self.solver == "minres":
            x, info = spla.minres(self.operator, b, rtol=self.rtol, maxiter=self.maxiter,
                                  M=self.preconditioner, callback=self._count)
        else:
            x, info = spla.gmres(self.operator, b, rtol=self.rtol, atol=0.0,
                                 maxiter=self.maxiter, M=self.preconditioner,
                                 callback=self._count, callback_type="pr_norm")
        return self._project(x), info

    def _near_null(self, r, steps=40):
        """True if ``E0 - H0`` has an eigenvalue within ``degeneracy_tol`` of zero seen by
        ``r``: a Lanczos Ritz pair ``(theta, y)`` from ``r`` with ``|theta| +
        ||A y - theta y|| <= degeneracy_tol`` proves one (Kahan's residual bound)."""
        basis = [r / np.linalg.norm(r)]
        for _ in range(min(steps, r.size - 1)):
            q = self._apply(basis[-1])
            for u in basis:  # full reorthogonalisation, twice
                q = q - u * np.vdot(u, q)
            for u in basis:
                q = q - u * np.vdot(u, q)
            norm_q = np.linalg.norm(q)
            if norm_q <= 1e-14 * max(1.0, abs(self.e0)):
                break
            basis.append(q / norm_q)
        vectors = np.array(basis)
        images = np.array([self._apply(u) for u in vectors])
        theta, coef = np.linalg.eigh(vectors.conj() @ images.T)
        for t, c in zip(theta, coef.T):
            y = c @ vectors
            if abs(t) + np.linalg.norm(c @ images - t * y) <= self.degeneracy_tol:
                return True
        return False

    def __call__(self, b, k):
        """Solve at order ``k``, refining on the true residual (rounding drifts the
        recurrence residual of the Krylov solvers away from it)."""
        norm_b = np.linalg.norm(b)
        if norm_b == 0.0:
            return np.zeros_like(b)
        x = np.zeros_like(b)
        residual, rel = b, 1.0
        for _ in range(_REFINEMENTS):
            dx, info = self._krylov(residual)
            x = x + dx
            new_residual = b - self._apply(x)
            new_rel = np.linalg.norm(new_residual) / norm_b
            stalled = new_rel > 0.5 * rel
            residual, rel = new_residual, new_rel
            if rel <= self.accept or stalled:
                break
        if rel <= self.accept:
            return x
        if self._near_null(residual):
            raise ModelError(
                f"at order {k} the right-hand side has a component on a level of H0 within "
                "degeneracy_tol of the reference energy, so V couples the reference to a "
                "degenerate partner: a single-state series does not apply; treat the "
                "degenerate manifold with `lowfold derive`"
            )
        raise ConvergenceError(
            f"{self.solver} did not reach relative residual {self.rtol:g} at order {k} "
            f"(got {rel:.3g}, info={info}); raise maxiter or pass a preconditioner",
            partial={"order": k, "relative_residual": rel},
        )


def rayleigh_schrodinger_general(h0, v, psi0, e0, order, *, method="wigner", keep_states=False,
                                 solver="minres", rtol=1e-12, maxiter=None, preconditioner=None,
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
        Highest order of the energy, ``>= 1``.
    method : {"wigner", "direct"}
        As in :func:`rayleigh_schrodinger`.
    keep_states : bool
        Return ``|psi_1> .. |psi_order>``.
    solver : {"minres", "gmres"}
        Iterative solver; MINRES suits the Hermitian, indefinite ``E0 - H0``.
    rtol : float
        Relative residual asked of the solver at each order.
    maxiter : int, optional
        Iteration cap per solve.
    preconditioner : LinearOperator, optional
        Passed to the solver as ``M`` (for MINRES it must be Hermitian positive definite).
    degeneracy_tol : float
        If a solve fails and ``(E0 - H0)`` shrinks its residual below ``degeneracy_tol``
        times its norm, the failure is read as a coupled degenerate level of H0.
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
    Krylov spaces stay orthogonal to them) but, unlike on the diagonal route, they cannot
    be reported without the spectrum of H0.
    """
    _check_order_method(order, method)
    if solver not in ("minres", "gmres"):
        raise ModelError(f"solver must be 'minres' or 'gmres', got {solver!r}")
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

    solve = _ComplementSolver(apply_h0, psi0, e0, dtype, solver=solver, rtol=rtol,
                              maxiter=maxiter, preconditioner=preconditioner,
                              degeneracy_tol=degeneracy_tol)

    def correction(w, states, energies, k, out):
        b = w - energies[1:k] @ states[k - 1 : 0 : -1]
        b = b - psi0 * np.vdot(psi0, b)
        out[:] = solve(b, k)

    length, need_last_w = _chain_request(order, method, keep_states)
    chain = _run_chain(apply_v, correction, psi0, e0, length, need_last_w)
    return _finish(chain, order, method, keep_states, second_order_contributions=[],
                   solver_iterations=solve.iterations)
