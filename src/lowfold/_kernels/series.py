"""Numba kernels of the Rayleigh-Schroedinger recursion with a diagonal H0.

Plain arrays in, preallocated arrays filled; nothing of lowfold is imported here.  The
Python wrapper that validates the arguments is :func:`lowfold.build.numerics.rs_state_update`.
"""

from numba import njit

__all__ = ["rs_state_update"]


@njit(cache=True)
def rs_state_update(w, states, energies, k, inv_denominators, out):
    """Fill ``out`` with the order-``k`` state correction of the diagonal recursion.

    ``out[m] = inv_denominators[m] * (w[m] - sum_{j=1}^{k-1} energies[j] * states[k-j, m])``

    Parameters
    ----------
    w : (N,) array
        ``V |psi_{k-1}>``.
    states : (K, N) array, K >= k
        Rows ``0 .. k-1`` hold ``|psi_0> .. |psi_{k-1}>``.
    energies : (M,) float64 array, M >= k
        ``energies[j]`` is the order-``j`` energy coefficient.
    k : int
        Order of the correction to build, ``k >= 1``.
    inv_denominators : (N,) float64 array
        ``1 / (E0 - E_m)``, zero on the reference and on its degenerate partners (this is
        the projector ``Q`` of the reduced resolvent).
    out : (N,) array
        Filled in place (may be ``states[k]``).
    """
    n = w.shape[0]
    for m in range(n):
        r = inv_denominators[m]
        if r == 0.0:
            out[m] = 0.0
            continue
        acc = w[m]
        for j in range(1, k):
            acc -= energies[j] * states[k - j, m]
        out[m] = r * acc
