"""The Rayleigh-Schroedinger recursion shared by both routes of ``series.py``, and its result.

Given ``w = V|psi_{k-1}>`` and a way to apply the reduced resolvent (``correction``), the
chain builds ``|psi_1> .. |psi_K>`` in intermediate normalisation and collects the scalars
that the energy formulas need: ``E_k = <psi0|V|psi_{k-1}>`` (direct) or Wigner's 2n+1 rule
(see the docstring of :mod:`lowfold.perturbation.series` for the formulas).
"""

from dataclasses import dataclass, field

import numpy as np

from lowfold.errors import ModelError

__all__ = ["SeriesResult", "chain_request", "finish_series", "run_chain"]


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


def run_chain(apply_v, correction, psi0, e0, length, need_last_w, inspect=None):
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


def chain_request(order, method, keep_states):
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


def finish_series(chain, order, method, keep_states, **extra):
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
