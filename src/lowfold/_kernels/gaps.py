"""Energy-denominator sweeps over product-basis wave functions (numba), for the
preconditioner of the exact check (``lowfold.jobs.check_product``): the diagonal of H minus a
shift, floored, divides a wave function, without an array of the sector's size for the
denominators.  Arrays of one shape, C-contiguous; the sweeps work on the flattened views."""

from numba import njit, prange


@njit(cache=True, parallel=True)
def divide_by_gap(y, diag, sigma, floor):
    """``y <- y / max(diag - sigma, floor)``."""
    a = y.reshape(-1)
    d = diag.reshape(-1)
    for i in prange(a.shape[0]):
        a[i] = a[i] / max(d[i] - sigma, floor)


@njit(cache=True, parallel=True)
def subtract_hopping_over_gap(y, hy, diag, sigma, floor):
    """``y <- y - (hy - diag y) / max(diag - sigma, floor)``: one Neumann term of
    ``(D + T)^-1`` with ``T y = H y - D y``."""
    a = y.reshape(-1)
    h = hy.reshape(-1)
    d = diag.reshape(-1)
    for i in prange(a.shape[0]):
        a[i] = a[i] - (h[i] - d[i] * a[i]) / max(d[i] - sigma, floor)
