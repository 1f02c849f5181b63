"""Enumeration and ranking of many-body basis states (numba).

States are integers whose base-``radix`` digits are the slots (see ``lowfold.sites``).
A basis is described to the kernels by ``params`` (int64 array)::

    params = [kind, radix, n_a, total_a, n_b, total_b, size_a]

``kind``: ``FULL`` (every state, index = state), ``FIXED_SUM`` (digits of slots
``0 .. n_a-1`` sum to ``total_a``), ``TWO_SPECIES`` (additionally the digits of slots
``n_a .. n_a+n_b-1`` sum to ``total_b``; electrons with fixed N_up and N_dn), ``SORTED``
(an explicit ascending list searched by bisection).

Fixed-sum sectors are ranked by the combinatorial number system generalised to any radix:
``weights[m, r]`` counts the fillings of ``m`` slots with digit sum ``r``, and the rank of a
state is the number of sector states that are smaller integers.  For radix 2 this is the
classic ``sum_k C(position_k, k)`` ranking of fixed-popcount bit strings.  Every basis is
in ascending integer order, so all kinds agree with bisection in the sorted state list.

Radix-2 fixed-sum ranks have a faster form: the rank ``sum_j C(p_j, j)`` over the set bits
``p_1 < p_2 < ...`` splits into chunks of ``CHUNK`` bits, and :func:`rank_tables` tabulates
each chunk's share for every chunk value and number of ones below the chunk, so a rank is
one table read and one popcount per chunk (:func:`lookup_fast`).
"""

import numpy as np
from numba import njit, prange

FULL, FIXED_SUM, TWO_SPECIES, SORTED = 0, 1, 2, 3
CHUNK = 8


def weight_table(n_slots, radix, total):
    """``w[m, r]`` = number of ways ``m`` slots of ``radix`` digits sum to ``r`` (int64).

    Entries that would overflow int64 raise ``OverflowError``; callers turn that into a
    size error long before it matters.
    """
    w = [[0] * (total + 1) for _ in range(n_slots + 1)]
    w[0][0] = 1
    for m in range(1, n_slots + 1):
        for r in range(total + 1):
            w[m][r] = sum(w[m - 1][r - u] for u in range(min(radix - 1, r) + 1))
    if w[n_slots][total] >= 2**62:
        raise OverflowError("sector too large for 64-bit indices")
    return np.array(w, dtype=np.int64)


@njit(cache=True, inline="always")
def _digit(state, slot, radix):
    if radix == 2:
        return (state >> slot) & 1
    return (state // radix**slot) % radix


@njit(cache=True)
def _rank_fixed_sum(state, first_slot, n_slots, radix, total, weights):
    """Rank of ``state``'s slots ``first_slot ..`` among fillings with digit sum ``total``;
    -1 if the digits do not sum to ``total``."""
    remaining = total
    rank = 0
    for k in range(n_slots - 1, -1, -1):
        digit = _digit(state, first_slot + k, radix)
        for u in range(digit):
            if remaining - u >= 0:
                rank += weights[k, remaining - u]
        remaining -= digit
        if remaining < 0:
            return -1
    if remaining != 0:
        return -1
    return rank


@njit(cache=True)
def _unrank_fixed_sum(rank, first_slot, n_slots, radix, total, weights):
    state = 0
    remaining = total
    for k in range(n_slots - 1, -1, -1):
        for u in range(radix):
            if remaining - u < 0:
                break
            count = weights[k, remaining - u]
            if rank < count:
                state += u * radix ** (first_slot + k)
                remaining -= u
                break
            rank -= count
    return state


@njit(cache=True)
def lookup_one(state, params, weights, sorted_states):
    """Index of ``state`` in the basis, or -1 if it is not a member."""
    kind = params[0]
    radix = params[1]
    n_a = params[2]
    if kind == SORTED:
        pos = np.searchsorted(sorted_states, state)
        if pos < sorted_states.shape[0] and sorted_states[pos] == state:
            return pos
        return -1
    if state < 0 or state >= radix ** (n_a + params[4]):
        return -1
    if kind == FULL:
        return state
    rank_a = _rank_fixed_sum(state, 0, n_a, radix, params[3], weights)
    if rank_a < 0:
        return -1
    if kind == FIXED_SUM:
        return rank_a
    rank_b = _rank_fixed_sum(state, n_a, params[4], radix, params[5], weights)
    if rank_b < 0:
        return -1
    return rank_b * params[6] + rank_a


@njit(cache=True, parallel=True)
def lookup_many(states, params, weights, sorted_states):
    out = np.empty(states.shape[0], dtype=np.int64)
    for i in prange(states.shape[0]):
        out[i] = lookup_one(states[i], params, weights, sorted_states)
    return out


@njit(cache=True, parallel=True)
def enumerate_states(params, weights, size):
    """All states of a FULL / FIXED_SUM / TWO_SPECIES basis, in ascending order."""
    kind = params[0]
    radix = params[1]
    n_a = params[2]
    out = np.empty(size, dtype=np.int64)
    for i in prange(size):
        if kind == FULL:
            out[i] = i
        elif kind == FIXED_SUM:
            out[i] = _unrank_fixed_sum(i, 0, n_a, radix, params[3], weights)
        else:
            size_a = params[6]
            low = _unrank_fixed_sum(i % size_a, 0, n_a, radix, params[3], weights)
            high = _unrank_fixed_sum(i // size_a, n_a, params[4], radix, params[5], weights)
            out[i] = low + high
    return out


def rank_tables(n_bits, total):
    """Chunk tables of the radix-2 fixed-popcount rank (int64, shape
    ``(chunks, 2**CHUNK, total + 1)``): ``t[c, v, b]`` is the share of rank of the bits
    ``v`` of chunk ``c`` when ``b`` ones lie below the chunk."""
    from math import comb

    chunks = max((n_bits + CHUNK - 1) // CHUNK, 1)
    t = np.zeros((chunks, 1 << CHUNK, total + 1), dtype=np.int64)
    for c in range(chunks):
        width = min(CHUNK, n_bits - c * CHUNK)
        for v in range(1 << max(width, 0)):
            for b in range(total + 1):
                r, j = 0, b
                for i in range(width):
                    if (v >> i) & 1:
                        j += 1
                        r += comb(c * CHUNK + i, j)
                t[c, v, b] = r if j <= total else 0
    return t


@njit(cache=True, inline="always")
def _popcount(x):
    x = x - ((x >> 1) & 0x5555555555555555)
    x = (x & 0x3333333333333333) + ((x >> 2) & 0x3333333333333333)
    x = (x + (x >> 4)) & 0x0F0F0F0F0F0F0F0F
    return (x * 0x0101010101010101 & 0xFFFFFFFFFFFFFFFF) >> 56


@njit(cache=True, inline="always")
def _rank_bits(bits, n_bits, total, table):
    """Rank of ``bits`` (``n_bits`` wide) among bit strings with ``total`` ones, or -1."""
    if _popcount(bits) != total:
        return -1
    rank = 0
    below = 0
    c = 0
    offset = 0
    while offset < n_bits:
        v = (bits >> offset) & ((1 << CHUNK) - 1)
        rank += table[c, v, below]
        below += _popcount(v)
        offset += CHUNK
        c += 1
    return rank


@njit(cache=True)
def lookup_fast(state, params, table_a, table_b, weights, sorted_states):
    """:func:`lookup_one` with chunk-table ranks for radix-2 FIXED_SUM and TWO_SPECIES
    bases (``table_a``, ``table_b`` from :func:`rank_tables`; unused for other kinds)."""
    kind = params[0]
    if params[1] != 2 or (kind != FIXED_SUM and kind != TWO_SPECIES):
        return lookup_one(state, params, weights, sorted_states)
    n_a = params[2]
    if state < 0 or (state >> (n_a + params[4])) != 0:
        return -1
    low = state & ((np.int64(1) << n_a) - 1)
    rank_a = _rank_bits(low, n_a, params[3], table_a)
    if rank_a < 0 or kind == FIXED_SUM:
        return rank_a
    rank_b = _rank_bits(state >> n_a, params[4], params[5], table_b)
    if rank_b < 0:
        return -1
    return rank_b * params[6] + rank_a


@njit(cache=True, parallel=True)
def lookup_many_fast(states, params, table_a, table_b, weights, sorted_states):
    out = np.empty(states.shape[0], dtype=np.int64)
    for i in prange(states.shape[0]):
        out[i] = lookup_fast(states[i], params, table_a, table_b, weights, sorted_states)
    return out
