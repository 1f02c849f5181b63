"""Product-basis kernels (numba): H on a wave function stored as a matrix Psi[down, up].

Electrons at fixed N_up, N_dn whose strings each act on one spin species have

    H Psi = Psi T_up^T + T_dn Psi + D o Psi        (Psi[r, u]: r the rank of the down
                                                    configuration, u of the up one)

with ``T_up`` (``size_up`` square) and ``T_dn`` (``size_dn`` square) CSR matrices without
diagonal and ``D`` the diagonal as a ``(size_dn, size_up)`` array.  Flattened in C order,
``Psi`` is the vector of the two-species basis (index ``r * size_up + u``), so these kernels
and ``lowfold._kernels.species.split_matvec`` compute the same product.

The down-spin part streams whole rows ``Psi[c, :]`` into ``out[r, :]``; it runs over column
tiles of ``tile`` entries so that one tile of every row (``size_dn * tile`` numbers) stays in
the shared cache while the rows of the tile are visited (cache blocking, common practice).
Every kernel takes 2-D C-contiguous arrays of one dtype (float64 or complex128) and plain
CSR arrays; the sweeps work on the flattened views.
"""

import numpy as np
from numba import njit, prange


@njit(cache=True, parallel=True)
def lanczos_product(diag, a_ptr, a_idx, a_val, b_ptr, b_idx, b_val, x, x_scale, out, beta,
                    tile):
    """``out <- x_scale H x - beta out`` (``out`` not read when ``beta == 0``); returns
    ``Re x^H out`` (``x`` as stored), summed tile by tile while the tile is in cache.
    ``x_scale`` lets the Lanczos keep its vectors unnormalised (no sweep to scale them)."""
    size_b, size_a = x.shape
    for r in prange(size_b):
        for u in range(size_a):
            acc = diag[r, u] * x[r, u]
            for p in range(a_ptr[u], a_ptr[u + 1]):
                acc += a_val[p] * x[r, a_idx[p]]
            acc = x_scale * acc
            if beta != 0.0:
                acc -= beta * out[r, u]
            out[r, u] = acc
    total = 0.0
    for start in range(0, size_a, tile):
        stop = min(start + tile, size_a)
        part = 0.0
        for r in prange(size_b):
            for p in range(b_ptr[r], b_ptr[r + 1]):
                value = x_scale * b_val[p]
                c = b_idx[p]
                for u in range(start, stop):
                    out[r, u] += value * x[c, u]
            local = 0.0
            for u in range(start, stop):
                local += (np.conj(x[r, u]) * out[r, u]).real
            part += local
        total += part
    return total


@njit(cache=True, parallel=True)
def subtract_norm(out, x, alpha):
    """``out <- out - alpha x`` (flattened views); returns ``||out||^2``."""
    o = out.reshape(-1)
    v = x.reshape(-1)
    total = 0.0
    for i in prange(o.shape[0]):
        value = o[i] - alpha * v[i]
        o[i] = value
        total += (np.conj(value) * value).real
    return total


@njit(cache=True, parallel=True)
def scale(out, factor):
    """``out <- factor out``."""
    o = out.reshape(-1)
    for i in prange(o.shape[0]):
        o[i] = factor * o[i]


@njit(cache=True, parallel=True)
def add_scaled(y, x, factor):
    """``y <- y + factor x``."""
    a = y.reshape(-1)
    b = x.reshape(-1)
    for i in prange(a.shape[0]):
        a[i] += factor * b[i]
