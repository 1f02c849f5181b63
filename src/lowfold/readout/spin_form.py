"""The spin-1/2 form of an effective Hamiltonian: electron or spin states -> qubits -> couplings.

When the manifold P is one spin-1/2 per site (a spin-1/2 site, or one electron per site of
an electron model, the Mott manifold of a half-filled Hubbard model), each state of P is a
qubit basis state of :mod:`lowfold.readout.pauli` (bit k = site k, bit 0 = spin up) and the
effective Hamiltonian reads as Pauli strings and named couplings
(:mod:`lowfold.readout.couplings`).

Conventions
-----------
An electron state is the occupation-number integer of :mod:`lowfold.model.sites`: bits
``0..N-1`` hold the spin-up slots of sites ``0..N-1`` and bits ``N..2N-1`` the spin-down
slots (Jordan-Wigner order = slot order), and the state is
``prod_{i up} c+_{i up} prod_{j down} c+_{j down} |0>``, all up operators first, each
group in ascending site order.  The spin state ``|s_0 s_1 ...>`` of one electron per site
is ``c+_{0 s_0} c+_{1 s_1} ... |0>`` in site order, so the two differ by the sign of the
reordering, ``(-1)^#{(i up, j down): j < i}``.  The qubit index of an electron state is its
spin-down bit pattern (bit k set = site k down).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from lowfold.model.cycles import lattice_cycles
from lowfold.model.model import Model
from lowfold.readout.couplings import Coupling, spin_couplings
from lowfold.readout.pauli import pauli_coefficients_by_order

__all__ = ["SpinForm", "read_spin_form", "spin_half_map"]

TERM_TOL = 1e-12      # Pauli coefficients at or below this are left out
COUPLING_TOL = 1e-10  # couplings and residual strings at or below this are left out


@dataclass(frozen=True)
class SpinForm:
    """The spin-1/2 reading of the orders of an effective Hamiltonian.

    Attributes
    ----------
    terms : dict of str to list of float
        Pauli string (``"X0 X1"``, ``"I"``) -> coefficient of each order ``m = 0..n``.
    couplings : list of Coupling
        Named couplings (integer order keys), as from
        :func:`lowfold.readout.couplings.spin_couplings`.
    residual : dict of str to list of float
        Pauli strings the couplings leave unexplained, coefficient per order.
    """

    terms: dict[str, list[float]]
    couplings: list[Coupling]
    residual: dict[str, list[float]]


def spin_half_map(model: Model, states: np.ndarray):
    """Qubit index and reordering sign of each manifold state, or the reason there is none.

    Parameters
    ----------
    model : Model
        The model whose basis states ``states`` are.
    states : ndarray of int64
        The manifold's basis states (occupation integers), ascending.

    Returns
    -------
    mapping : tuple of ndarray or None
        ``(qubit, sign)``: ``qubit[a]`` is the qubit basis index of ``states[a]`` and
        ``sign[a]`` (+1 or -1) the sign relating the two (module conventions); ``None`` when
        the manifold is not one spin-1/2 per site.
    reason : str
        ``""`` with a mapping, else why there is none (e.g. ``"the manifold has 2 states,
        not 2^2"``).
    """
    site, n = model.site, model.n_sites
    if states.size != 2**n:
        return None, f"the manifold has {states.size} states, not 2^{n}"
    if site.type == "spin" and site.radix == 2:
        return (states, np.ones(states.size)), ""
    if site.type != "electron":
        return None, f"no spin-1/2 reading for {site.type} sites"
    mask = (1 << n) - 1
    up, dn = states & mask, states >> n
    if np.any((up ^ dn) != mask):
        return None, "the manifold is not one electron per site"
    # sign of reordering c+_{up sites} c+_{down sites} into site order: pairs (i up, j down, j < i)
    inversions = np.zeros(states.size, dtype=np.int64)
    for i in range(n):
        below = (1 << i) - 1
        is_up = (up >> i) & 1
        inversions += is_up * np.array([bin(x).count("1") for x in (dn & below)])
    return (dn, np.where(inversions % 2, -1.0, 1.0)), ""


def read_spin_form(model: Model, orders: list, states: np.ndarray
                   ) -> tuple[SpinForm | None, str]:
    """Pauli strings and named couplings of the orders of an effective Hamiltonian.

    Parameters
    ----------
    model : Model
        The model; its lattice's nearest-neighbour 4-cycles and triangles
        (:func:`lowfold.model.lattice.lattice_cycles`) are where ring exchange and scalar
        chirality are fitted.
    orders : list of scipy.sparse matrix
        ``H_eff,m`` for ``m = 0..n`` on the manifold, rows and columns in the order of
        ``states``.
    states : ndarray of int64
        The manifold's basis states.

    Returns
    -------
    form : SpinForm or None
        ``None`` when the manifold is not one spin-1/2 per site.
    reason : str
        ``""`` with a form, else why there is none (from :func:`spin_half_map`).

    Notes
    -----
    Pauli coefficients at or below ``TERM_TOL`` and couplings at or below ``COUPLING_TOL``
    (absolute, in the model's energy unit) are left out.
    """
    mapping, reason = spin_half_map(model, states)
    if mapping is None:
        return None, reason
    qubit, sign = mapping
    n = model.n_sites
    perm = sp.csr_matrix((sign, (qubit, np.arange(qubit.size))), shape=(2**n, 2**n))
    matrices = [perm @ h @ perm.T for h in orders]
    terms = pauli_coefficients_by_order(matrices, n, tol=TERM_TOL)
    rings, triangles = lattice_cycles(model.lattice)
    couplings, residual = spin_couplings(terms, n, orders=list(range(len(orders))),
                                         tol=COUPLING_TOL, ring_cycles=rings,
                                         triangles=triangles)
    return SpinForm(terms, couplings, residual), ""
