"""Numba kernel: Pauli-string coefficients of a matrix on N qubits.

Convention: bit k of a basis index is qubit k; bit value 0 is Pauli Z = +1.  A Pauli string
is a pair of bit masks ``(x, z)``: qubit k carries X if only bit k of ``x`` is set, Z if only
bit k of ``z`` is set, Y if both are set.  With ``Y = i X Z`` the string is
``sigma(x, z) = i^{|x & z|} X^x Z^z`` and ``<r| X^x Z^z |c> = (-1)^{|z & c|} delta(r, c ^ x)``.

Its coefficient in ``H = sum_s c_s sigma_s`` is

    c(x, z) = tr(sigma(x, z) H) / 2^N = i^{|x & z|} / 2^N * sum_r (-1)^{|z & r|} H[r, r ^ x],

so for each flip pattern ``x = row ^ col`` present in H, a Walsh-Hadamard transform of the
vector ``g_x[r] = H[r, r ^ x]`` gives the coefficients of every string with that pattern.
Cost: O(nnz + 2^N + P 2^N N) for P distinct flip patterns.

This module imports nothing from lowfold; the validating wrapper is
:func:`lowfold.build.numerics.pauli_strings` (used by ``lowfold.readout.pauli``).
"""

import numpy as np
from numba import njit

__all__ = ["pauli_transform"]


@njit(cache=True)
def _popcount(v):
    count = 0
    while v:
        v &= v - 1
        count += 1
    return count


@njit(cache=True)
def _walsh_hadamard(buf):
    """In place: buf[z] <- sum_r (-1)^{popcount(z & r)} buf[r] (len(buf) a power of two)."""
    n = buf.shape[0]
    h = 1
    while h < n:
        for start in range(0, n, 2 * h):
            for j in range(start, start + h):
                a = buf[j]
                b = buf[j + h]
                buf[j] = a + b
                buf[j + h] = a - b
        h *= 2


@njit(cache=True)
def _group_by_flip(rows, cols, dim):
    """Counting sort of the elements by flip pattern ``row ^ col``.

    Elements of pattern x are ``order[starts[x]:starts[x + 1]]``.
    """
    starts = np.zeros(dim + 1, dtype=np.int64)
    for k in range(rows.shape[0]):
        starts[(rows[k] ^ cols[k]) + 1] += 1
    for x in range(dim):
        starts[x + 1] += starts[x]
    fill = starts[:-1].copy()
    order = np.empty(rows.shape[0], dtype=np.int64)
    for k in range(rows.shape[0]):
        x = rows[k] ^ cols[k]
        order[fill[x]] = k
        fill[x] += 1
    return starts, order


@njit(cache=True)
def _grow(xs, zs, cs, size):
    new_xs = np.empty(2 * size, dtype=np.int64)
    new_zs = np.empty(2 * size, dtype=np.int64)
    new_cs = np.empty(2 * size, dtype=np.complex128)
    new_xs[:size] = xs[:size]
    new_zs[:size] = zs[:size]
    new_cs[:size] = cs[:size]
    return new_xs, new_zs, new_cs


@njit(cache=True)
def pauli_transform(rows, cols, values, n_sites, tol, max_terms):
    """Pauli coefficients of the matrix given by COO triplets (duplicates are summed).

    Parameters
    ----------
    rows, cols : int64 arrays
        Row and column indices, each in ``[0, 2**n_sites)``.
    values : complex128 array
        Matrix elements.
    n_sites : int
        Number of qubits N.
    tol : float
        Coefficients with ``abs(c) <= tol`` are dropped.
    max_terms : int
        Stop once this many coefficients are kept (the output would not fit).

    Returns
    -------
    xs, zs : int64 arrays
        Flip mask and phase mask of each kept string.
    coefficients : complex128 array
        ``tr(sigma H) / 2^N`` for each kept string (real when H is Hermitian).
    complete : bool
        False if the scan stopped at ``max_terms`` strings.
    """
    dim = 1 << n_sites
    starts, order = _group_by_flip(rows, cols, dim)
    phases = np.array([1.0 + 0.0j, 1.0j, -1.0 + 0.0j, -1.0j])
    buf = np.empty(dim, dtype=np.complex128)
    capacity = 1024
    xs = np.empty(capacity, dtype=np.int64)
    zs = np.empty(capacity, dtype=np.int64)
    cs = np.empty(capacity, dtype=np.complex128)
    count = 0
    for x in range(dim):
        if starts[x] == starts[x + 1]:
            continue
        buf[:] = 0.0
        for j in range(starts[x], starts[x + 1]):
            k = order[j]
            buf[rows[k]] += values[k]
        _walsh_hadamard(buf)
        for z in range(dim):
            c = buf[z] * phases[_popcount(x & z) & 3] / dim
            if abs(c) > tol:
                if count == max_terms:
                    return xs[:count].copy(), zs[:count].copy(), cs[:count].copy(), False
                if count == capacity:
                    xs, zs, cs = _grow(xs, zs, cs, capacity)
                    capacity *= 2
                xs[count] = x
                zs[count] = z
                cs[count] = c
                count += 1
    return xs[:count].copy(), zs[:count].copy(), cs[:count].copy(), True
