"""Application of compiled operator strings to basis states (numba).

An operator is a sum of *strings* ``coef[k] * F_1 F_2 ... F_m`` of single-slot factors
(see ``lowfold.build.compiled.CompiledOperator``).  Factor ``f`` of string ``k`` lives at
``ptr[k] <= f < ptr[k+1]``, acts on slot ``slot[f]`` through table ``table[f]``
(``table_new[t, digit]`` is the new digit or -1, ``table_amp[t, digit]`` the amplitude), and
``odd[f]`` marks a fermionic factor, which picks up ``(-1)**(occupied slots below)``.
Factors are applied right to left.  ``powers[slot] = radix**slot``.

Kernels that build matrices write row ``i`` from the images ``O|state_i>``: that gives
``<j|O|i>``, so the stored entry ``(i, j)`` is its complex conjugate.  For a Hermitian
operator this is the operator itself; the Python layer checks Hermiticity.

Radix-2 strings also have a *mask form* (:func:`string_masks`): with distinct slots in
ascending order, every factor either requires one bit value (``c``, ``c+``, ``n``, ``1-n``)
or keeps both (``Z``-like, amplitude per bit), so a string is ``(s & need_mask) ==
need_value`` as condition, ``s ^ flip`` as image, a constant times the amplitudes of its few
*variable* slots, and the Jordan-Wigner sign ``(-1)**popcount(s & sign_mask)``: factors are
applied from the highest slot down, so the bits below every fermionic factor are those of
the original state.  The mask kernels give the same images as :func:`apply_string`.
"""

import numpy as np
from numba import njit, prange

from lowfold._kernels.basis import lookup_fast, lookup_one


@njit(cache=True, inline="always")
def popcount(x):
    x = x - ((x >> 1) & 0x5555555555555555)
    x = (x & 0x3333333333333333) + ((x >> 2) & 0x3333333333333333)
    x = (x + (x >> 4)) & 0x0F0F0F0F0F0F0F0F
    return (x * 0x0101010101010101 & 0xFFFFFFFFFFFFFFFF) >> 56


@njit(cache=True)
def apply_string(state, k, ptr, slot, table, odd, table_new, table_amp, coef, radix, powers):
    """Image of ``state`` under string ``k``: ``(new_state, amplitude)``; amplitude 0 if the
    string annihilates the state."""
    amp = coef[k]
    s = state
    for f in range(ptr[k + 1] - 1, ptr[k] - 1, -1):
        sl = slot[f]
        if radix == 2:
            digit = (s >> sl) & 1
        else:
            digit = (s // powers[sl]) % radix
        t = table[f]
        new_digit = table_new[t, digit]
        if new_digit < 0:
            return state, amp * 0
        amp = amp * table_amp[t, digit]
        if odd[f]:
            if popcount(s & ((np.int64(1) << sl) - 1)) & 1:
                amp = -amp
        s = s + (new_digit - digit) * powers[sl]
    return s, amp


@njit(cache=True, parallel=True)
def diagonal(states, diag_strings, ptr, slot, table, odd, table_new, table_amp, coef, radix, powers):
    """Sum of the diagonal strings on each state."""
    out = np.zeros(states.shape[0], dtype=coef.dtype)
    for i in prange(states.shape[0]):
        acc = coef[0] * 0
        for k in diag_strings:
            _, amp = apply_string(states[i], k, ptr, slot, table, odd, table_new, table_amp,
                                  coef, radix, powers)
            acc += amp
        out[i] = acc
    return out


@njit(cache=True, parallel=True)
def count_images(states, offdiag_strings, ptr, slot, table, odd, table_new, table_amp, coef,
                 radix, powers):
    """Number of non-zero off-diagonal images of each state."""
    counts = np.zeros(states.shape[0], dtype=np.int64)
    for i in prange(states.shape[0]):
        c = 0
        for k in offdiag_strings:
            _, amp = apply_string(states[i], k, ptr, slot, table, odd, table_new, table_amp,
                                  coef, radix, powers)
            if amp != 0:
                c += 1
        counts[i] = c
    return counts


@njit(cache=True, parallel=True)
def fill_rows(states, diag, offdiag_strings, ptr, slot, table, odd, table_new, table_amp, coef,
              radix, powers, params, weights, sorted_states, indptr, indices, data):
    """Fill CSR rows (diagonal first, then images, conjugated); sort and merge each row.

    Returns the number of unique entries per row (for compaction) and the number of images
    that fell outside the basis (must be zero for a sector-conserving operator).
    """
    n = states.shape[0]
    unique = np.zeros(n, dtype=np.int64)
    missing = np.zeros(n, dtype=np.int64)
    for i in prange(n):
        pos = indptr[i]
        if diag[i] != 0:
            indices[pos] = i
            data[pos] = diag[i]
            pos += 1
        for k in offdiag_strings:
            new, amp = apply_string(states[i], k, ptr, slot, table, odd, table_new, table_amp,
                                    coef, radix, powers)
            if amp != 0:
                j = lookup_one(new, params, weights, sorted_states)
                if j < 0:
                    missing[i] += 1
                    j = i
                    amp = amp * 0
                indices[pos] = j
                data[pos] = np.conj(amp)
                pos += 1
        unique[i] = _sort_merge(indices, data, indptr[i], pos)
    return unique, missing.sum()


@njit(cache=True)
def _sort_merge(indices, data, start, stop):
    """Insertion-sort one row by column, sum duplicates, drop zeros; returns new length."""
    for a in range(start + 1, stop):
        col = indices[a]
        val = data[a]
        b = a - 1
        while b >= start and indices[b] > col:
            indices[b + 1] = indices[b]
            data[b + 1] = data[b]
            b -= 1
        indices[b + 1] = col
        data[b + 1] = val
    out = start
    a = start
    while a < stop:
        col = indices[a]
        val = data[a]
        a += 1
        while a < stop and indices[a] == col:
            val += data[a]
            a += 1
        if val != 0:
            indices[out] = col
            data[out] = val
            out += 1
    return out - start


@njit(cache=True)
def compact_rows(indptr, unique, indices, data):
    """Move each row's ``unique[i]`` leading entries together, in place; returns new indptr."""
    new_ptr = np.empty_like(indptr)
    new_ptr[0] = 0
    for i in range(unique.shape[0]):
        start = indptr[i]
        dest = new_ptr[i]
        for a in range(unique[i]):
            indices[dest + a] = indices[start + a]
            data[dest + a] = data[start + a]
        new_ptr[i + 1] = dest + unique[i]
    return new_ptr


@njit(cache=True, parallel=True)
def matvec(states, diag, offdiag_strings, ptr, slot, table, odd, table_new, table_amp, coef,
           radix, powers, params, weights, sorted_states, x, y):
    """``y = H x`` without storing H (row-parallel gather, valid for Hermitian H)."""
    for i in prange(states.shape[0]):
        acc = diag[i] * x[i]
        for k in offdiag_strings:
            new, amp = apply_string(states[i], k, ptr, slot, table, odd, table_new, table_amp,
                                    coef, radix, powers)
            if amp != 0:
                j = lookup_one(new, params, weights, sorted_states)
                if j >= 0:
                    acc += np.conj(amp) * x[j]
        y[i] = acc


@njit(cache=True, parallel=True)
def images(states, strings, ptr, slot, table, odd, table_new, table_amp, coef, radix, powers,
           counts_only):
    """All non-zero images ``(row, new_state, amplitude)`` of ``states`` under ``strings``
    (COO form of ``<new|O|state>``), used where the images may leave the given set."""
    n = states.shape[0]
    counts = np.zeros(n + 1, dtype=np.int64)
    for i in prange(n):
        c = 0
        for k in strings:
            _, amp = apply_string(states[i], k, ptr, slot, table, odd, table_new, table_amp,
                                  coef, radix, powers)
            if amp != 0:
                c += 1
        counts[i + 1] = c
    offsets = np.cumsum(counts)
    total = offsets[n]
    rows = np.empty(total, dtype=np.int64)
    new_states = np.empty(total, dtype=np.int64)
    amps = np.empty(total, dtype=coef.dtype)
    if counts_only:
        return rows[:0], new_states[:0], amps[:0]
    for i in prange(n):
        pos = offsets[i]
        for k in strings:
            new, amp = apply_string(states[i], k, ptr, slot, table, odd, table_new, table_amp,
                                    coef, radix, powers)
            if amp != 0:
                rows[pos] = i
                new_states[pos] = new
                amps[pos] = amp
                pos += 1
    return rows, new_states, amps


def string_masks(strings, ptr, slot, table, odd, table_new, table_amp, coef):
    """Mask form of the radix-2 ``strings`` (see the module docstring), or ``None`` if a
    string's slots are not distinct and ascending.  Returns ``(flip, need_mask, need_value,
    sign_mask, base, vptr, vslot, vamp)``; string ``a`` has variable slots
    ``vslot[vptr[a]:vptr[a+1]]`` with amplitudes ``vamp[v, bit]``."""
    n = len(strings)
    flip = np.zeros(n, np.int64)
    need_mask = np.zeros(n, np.int64)
    need_value = np.zeros(n, np.int64)
    sign_mask = np.zeros(n, np.int64)
    base = np.zeros(n, coef.dtype)
    vptr, vslot, vamp = [0], [], []
    for a, k in enumerate(strings):
        factors = range(ptr[k], ptr[k + 1])
        slots = [int(slot[f]) for f in factors]
        if any(q >= 63 for q in slots) or slots != sorted(set(slots)):
            return None
        amp = coef[k]
        for f in factors:
            bit = np.int64(1) << np.int64(slot[f])
            new, amps = table_new[table[f]], table_amp[table[f]]
            allowed = [d for d in (0, 1) if new[d] >= 0 and amps[d] != 0]
            if not allowed:
                amp = amp * 0
            elif len(allowed) == 1:
                d = allowed[0]
                need_mask[a] |= bit
                need_value[a] |= bit * d
                flip[a] |= bit * (new[d] != d)
                amp = amp * amps[d]
            elif new[0] != 0 or new[1] != 1:
                return None
            elif amps[0] == amps[1]:
                amp = amp * amps[0]
            else:
                vslot.append(int(slot[f]))
                vamp.append((amps[0], amps[1]))
            if odd[f]:
                sign_mask[a] ^= bit - 1
        base[a] = amp
        vptr.append(len(vslot))
    vamp = np.array(vamp, dtype=coef.dtype).reshape(-1, 2)
    return (flip, need_mask, need_value, sign_mask, base, np.array(vptr, np.int64),
            np.array(vslot, np.int64), vamp)


@njit(cache=True, inline="always")
def apply_mask(s, a, flip, need_mask, need_value, sign_mask, base, vptr, vslot, vamp):
    """Image of state ``s`` under mask-form string ``a``: ``(new_state, amplitude)``."""
    amp = base[a]
    if (s & need_mask[a]) != need_value[a]:
        return s, amp * 0
    for v in range(vptr[a], vptr[a + 1]):
        amp = amp * vamp[v, (s >> vslot[v]) & 1]
    if popcount(s & sign_mask[a]) & 1:
        amp = -amp
    return s ^ flip[a], amp


@njit(cache=True, parallel=True)
def count_images_mask(states, flip, need_mask, need_value, sign_mask, base, vptr, vslot, vamp):
    """:func:`count_images` for mask-form strings."""
    counts = np.zeros(states.shape[0], dtype=np.int64)
    for i in prange(states.shape[0]):
        c = 0
        for a in range(flip.shape[0]):
            _, amp = apply_mask(states[i], a, flip, need_mask, need_value, sign_mask, base,
                                vptr, vslot, vamp)
            if amp != 0:
                c += 1
        counts[i] = c
    return counts


@njit(cache=True, parallel=True)
def fill_rows_mask(states, diag, flip, need_mask, need_value, sign_mask, base, vptr, vslot,
                   vamp, params, table_a, table_b, weights, sorted_states, indptr, indices,
                   data):
    """:func:`fill_rows` for mask-form strings, with chunk-table lookup."""
    n = states.shape[0]
    unique = np.zeros(n, dtype=np.int64)
    missing = np.zeros(n, dtype=np.int64)
    for i in prange(n):
        pos = indptr[i]
        if diag[i] != 0:
            indices[pos] = i
            data[pos] = diag[i]
            pos += 1
        for a in range(flip.shape[0]):
            new, amp = apply_mask(states[i], a, flip, need_mask, need_value, sign_mask, base,
                                  vptr, vslot, vamp)
            if amp != 0:
                j = lookup_fast(new, params, table_a, table_b, weights, sorted_states)
                if j < 0:
                    missing[i] += 1
                    j = i
                    amp = amp * 0
                indices[pos] = j
                data[pos] = np.conj(amp)
                pos += 1
        unique[i] = _sort_merge(indices, data, indptr[i], pos)
    return unique, missing.sum()


@njit(cache=True, parallel=True)
def matvec_mask(states, diag, flip, need_mask, need_value, sign_mask, base, vptr, vslot, vamp,
                params, table_a, table_b, weights, sorted_states, x, y, add):
    """``y = H x`` (``add``: ``y += O x`` without the diagonal) for mask-form strings."""
    for i in prange(states.shape[0]):
        acc = y[i] if add else diag[i] * x[i]
        for a in range(flip.shape[0]):
            new, amp = apply_mask(states[i], a, flip, need_mask, need_value, sign_mask, base,
                                  vptr, vslot, vamp)
            if amp != 0:
                j = lookup_fast(new, params, table_a, table_b, weights, sorted_states)
                if j >= 0:
                    acc += np.conj(amp) * x[j]
        y[i] = acc
