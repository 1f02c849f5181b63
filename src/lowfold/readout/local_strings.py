"""An operator on a product manifold as a sum of strings of X-operators, found by projection.

A *string* is an ordered product, site by site ascending, of local X-operators
``X^{ab}_i = |a><b|_i`` (codes of :mod:`lowfold.readout.local_basis`); a fermion-parity-odd
factor carries the Jordan-Wigner string ``prod_{k<i} (-1)^{n_k}``, so every string is a
physical operator.  A string is written as its factors ``((site, a, b), ...)``: the sites
where it changes the state (``a != b``) and diagonal projectors ``|a><a|_i`` onto states
other than the site's reference state.  Sites not named carry the identity.

The scheme (no string is ever enumerated that the operator cannot contain):

1. Every nonzero matrix element ``<A|H|B>`` of P is put in the site-ordered basis and divided
   by the Jordan-Wigner sign of the string that changes B into A; A and B differ on a set D
   of sites.  Elements are grouped by ``(D, A_D, B_D)``: each group is one off-diagonal
   string ``prod_{i in D} X^{A_i B_i}_i`` times a diagonal function ``f`` of the other sites
   (the group ``D = {}`` is the diagonal).  Only groups that occur are visited, so the
   conserved quantities of H (particle number, S^z) decide which strings are projected on.
2. ``f`` is expanded in products of projectors on the other sites.  On the hull (P a full
   product) the expansion is unique: ``f`` is a dense table over the other sites, the missing
   entries are zeros of H, and a Moebius transform per site (``|a><a| -> f(a) - f(ref)``)
   gives the coefficients.  On a slice at fixed particle number (and S^z) ``f`` is known only
   where both ends lie in P and the expansion is not unique: the fewest-site expansion that
   reproduces every known entry is kept (supports grown one site at a time), and among those
   the one with the smallest sum of ``|coefficients|`` (basis pursuit, a linear programme),
   which returns a single projector where one suffices (the three-site term of the t-J
   model on an always occupied middle site) rather than spreading it over equivalent forms.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.optimize import linprog

from lowfold.errors import SizeError
from lowfold.readout.local_basis import LocalBasis

__all__ = [
    "MAX_SLICE_COLUMNS",
    "matrix_of_strings",
    "string_label",
    "strings_of_entries",
    "strings_of_orders",
]

MAX_SLICE_COLUMNS = 4000   # projector products tried per group on a slice
MAX_TABLE = 50_000_000     # entries of one group's dense table on the hull


def string_label(basis: LocalBasis, key) -> str:
    """``"|u><0|_0 |0><u|_1 |d><d|_2"`` (``"1"`` for the identity)."""
    return " ".join(f"|{basis.label(i, a)}><{basis.label(i, b)}|_{i}" for i, a, b in key) or "1"


def _site_table(basis: LocalBasis, per_site) -> np.ndarray:
    width = int(basis.sizes.max())
    out = np.zeros((basis.n_sites, width), dtype=np.int8)
    for i, values in enumerate(per_site):
        out[i, :values.size] = values
    return out


def _jordan_wigner(basis: LocalBasis, ca, cb) -> np.ndarray:
    """Sign ``<A| string |B>`` of the X-string changing B into A (site-ordered basis)."""
    if not basis.fermionic:
        return np.ones(ca.shape[0])
    parity = _site_table(basis, basis.parity)
    sign = np.zeros(ca.shape[0], dtype=np.int8)     # parity of the fermions on sites < i
    flips = np.zeros(ca.shape[0], dtype=np.int8)
    for i in range(basis.n_sites):
        pa, pb = parity[i, ca[:, i]], parity[i, cb[:, i]]
        flips ^= (pa != pb) & (sign == 1)
        sign ^= pb
    return np.where(flips, -1.0, 1.0)


def _group_keys(basis: LocalBasis, ca, cb) -> np.ndarray:
    """One integer per (D, A_D, B_D)."""
    width = int(basis.sizes.max())
    base = width * width + 1

    def digit(i):
        a, b = ca[:, i].astype(np.int64), cb[:, i].astype(np.int64)
        return np.where(a != b, 1 + a * width + b, 0)

    if base ** basis.n_sites < 2**62:
        keys = np.zeros(ca.shape[0], dtype=np.int64)
        for i in range(basis.n_sites):
            keys += digit(i) * base ** i
        return keys
    digits = np.stack([digit(i).astype(np.int32) for i in range(basis.n_sites)], axis=1)
    return np.unique(digits, axis=0, return_inverse=True)[1].ravel()


def strings_of_orders(basis: LocalBasis, orders, *, tol: float = 1e-12) -> dict:
    """Strings of the matrices ``orders`` (each on P, in the order of ``basis.codes``).

    Returns ``{key: ndarray of one coefficient per order}`` with coefficients above ``tol``.
    """
    pieces = [sp.coo_matrix(h) for h in orders]
    rows = np.concatenate([h.row for h in pieces]).astype(np.int64)
    cols = np.concatenate([h.col for h in pieces]).astype(np.int64)
    which = np.concatenate([np.full(h.nnz, m) for m, h in enumerate(pieces)])
    data = np.concatenate([h.data for h in pieces])
    dim = basis.codes.shape[0]
    pair, inverse = np.unique(rows * dim + cols, return_inverse=True)
    dtype = complex if np.iscomplexobj(data) else float
    values = np.zeros((pair.size, len(pieces)), dtype=dtype)
    np.add.at(values, (inverse.ravel(), which), data)
    return strings_of_entries(basis, pair // dim, pair % dim, values, tol=tol)


def strings_of_entries(basis: LocalBasis, ia, ib, values, *, tol: float = 1e-12) -> dict:
    """Strings of the operator with ``<P[ia]|H|P[ib]> = values`` (rows: entries, columns:
    orders); every other element between states of P is zero."""
    if len(ia) == 0:
        return {}
    ca, cb = basis.codes[ia], basis.codes[ib]
    f = values * (basis.signs[ia] * basis.signs[ib] * _jordan_wigner(basis, ca, cb))[:, None]
    keys = _group_keys(basis, ca, cb)
    order = np.argsort(keys)
    keys = keys[order]
    ca, cb, f = ca[order], cb[order], f[order]       # each group one contiguous block
    del order
    starts = np.flatnonzero(np.r_[True, keys[1:] != keys[:-1]])
    out = {}
    member_keys = basis.key_of(basis.codes) if not basis.is_hull else None
    for start, stop in zip(starts, np.r_[starts[1:], keys.size]):
        members = slice(start, stop)
        d_sites = np.flatnonzero(ca[start] != cb[start])
        head = tuple((int(i), int(ca[start, i]), int(cb[start, i])) for i in d_sites)
        rest = np.setdiff1d(np.arange(basis.n_sites), d_sites)
        if basis.is_hull:
            found = _moebius(basis, rest, ca[members][:, rest], f[members], tol)
        else:
            found = _slice_fit(basis, d_sites, head, rest, ca[members], f[members],
                               member_keys, tol)
        for projectors, coefficients in found:
            key = tuple(sorted(head + projectors))
            out[key] = out.get(key, 0) + coefficients
    return {k: v for k, v in out.items() if np.max(np.abs(v)) > tol}


def _moebius(basis: LocalBasis, rest, rest_codes, f, tol):
    """Projector expansion of ``f`` on the hull: [(projector factors, coefficients)]."""
    dims = tuple(int(basis.sizes[i]) for i in rest)
    size = int(np.prod(dims, dtype=np.int64))
    if size * f.shape[1] > MAX_TABLE:
        raise SizeError(f"a table of {size:,} configurations of {len(rest)} sites is needed "
                        f"to read out one group of matrix elements (limit {MAX_TABLE:,})")
    table = np.zeros((size, f.shape[1]), dtype=f.dtype)
    flat = np.ravel_multi_index(tuple(rest_codes.T.astype(np.int64)), dims) if dims else \
        np.zeros(rest_codes.shape[0], dtype=np.int64)
    table[flat] = f
    table = table.reshape(dims + (f.shape[1],))
    for axis, site in enumerate(rest):
        ref = int(basis.reference[site])
        base = np.take(table, [ref], axis=axis)
        table = table - base
        index = [slice(None)] * table.ndim
        index[axis] = ref
        table[tuple(index)] = base.squeeze(axis)
    flat_table = table.reshape(size, f.shape[1])
    nonzero = np.flatnonzero(np.abs(flat_table).max(axis=1) > tol)
    found = []
    for position in nonzero:
        idx = np.unravel_index(position, dims) if dims else ()
        factors = tuple((int(site), int(c), int(c)) for site, c in zip(rest, idx)
                        if c != basis.reference[site])
        found.append((factors, flat_table[position]))
    return found


def _domain(basis, d_sites, head, rest, member_keys):
    """Codes on ``rest`` of the configurations where both ends of the group lie in P."""
    codes = basis.codes
    a_d = np.array([a for _, a, _ in head], dtype=codes.dtype)
    b_d = np.array([b for _, _, b in head], dtype=codes.dtype)
    starts = codes[np.all(codes[:, d_sites] == a_d, axis=1)] if d_sites.size else codes
    ends = starts.copy()
    ends[:, d_sites] = b_d
    sorted_keys = np.sort(member_keys)
    k = basis.key_of(ends)
    pos = np.minimum(np.searchsorted(sorted_keys, k), sorted_keys.size - 1)
    return starts[sorted_keys[pos] == k][:, rest].astype(np.int64)


def _slice_fit(basis, d_sites, head, rest, member_codes, f, member_keys, tol):
    """Fewest-site, then smallest-L1 projector expansion of ``f`` on a slice."""
    domain = _domain(basis, d_sites, head, rest, member_keys)
    sub = LocalBasis(basis.site_type, tuple(basis.values[i] for i in rest), (), (), (), (),
                     basis.reference[rest], domain, np.ones(0), True, frozenset())
    known = sub.key_of(domain)
    order = np.argsort(known)
    position = order[np.searchsorted(known[order], sub.key_of(member_codes[:, rest]))]
    y = np.zeros((domain.shape[0], f.shape[1]), dtype=f.dtype)
    y[position] = f
    scale = max(float(np.abs(y).max()), 1e-300)
    columns = [np.ones(domain.shape[0])]
    labels = [()]
    frontier = [((), np.ones(domain.shape[0]), -1)]
    for level in range(len(rest) + 1):
        if level:
            grown = []
            for factors, column, last in frontier:
                for k in range(last + 1, len(rest)):
                    site = rest[k]
                    for c in range(int(basis.sizes[site])):
                        if c == basis.reference[site]:
                            continue
                        new = column * (domain[:, k] == c)
                        if new.any():
                            grown.append((factors + ((int(site), c, c),), new, k))
            frontier = grown
            columns += [g[1] for g in grown]
            labels += [g[0] for g in grown]
            if len(columns) > MAX_SLICE_COLUMNS or len(columns) * domain.shape[0] > MAX_TABLE // 2:
                raise SizeError(f"the readout of a slice of the product manifold needs more "
                                f"than {len(columns) - len(grown):,} projector products on "
                                f"{domain.shape[0]:,} configurations for one group of matrix "
                                f"elements (limits {MAX_SLICE_COLUMNS:,} products, "
                                f"{MAX_TABLE // 2:,} table entries)")
        design = np.stack(columns, axis=1)
        solution, _, rank, _ = np.linalg.lstsq(design, y, rcond=None)
        if np.abs(design @ solution - y).max() <= 1e-9 * scale + tol:
            break
    if rank < design.shape[1]:
        solution = _basis_pursuit(design, design @ solution)
    found = []
    for label, row in zip(labels, solution):
        if np.max(np.abs(row)) > tol:
            found.append((label, row))
    return found


def _basis_pursuit(design, targets):
    """Per column of ``targets``: the solution of ``design x = target`` with least sum |x|."""
    n = design.shape[1]
    out = np.zeros((n, targets.shape[1]), dtype=targets.dtype)
    parts = [("real", np.real)] + ([("imag", np.imag)] if np.iscomplexobj(targets) else [])
    for part, take in parts:
        for m in range(targets.shape[1]):
            target = take(targets[:, m])
            if not np.any(np.abs(target) > 0):
                continue
            result = linprog(np.ones(2 * n), A_eq=np.hstack([design, -design]), b_eq=target,
                             bounds=(0, None), method="highs")
            if result.status != 0:       # keep the least-squares answer
                x = np.linalg.lstsq(design, target, rcond=None)[0]
            else:
                x = result.x[:n] - result.x[n:]
            out[:, m] += x if part == "real" else 1j * x
    return out


def matrix_of_strings(basis: LocalBasis, strings: dict) -> sp.csr_matrix:
    """The matrix on P (order of ``basis.codes``) of ``sum key -> coefficient`` strings
    (scalar coefficients); the inverse of :func:`strings_of_orders` on the hull."""
    codes = basis.codes
    keys = basis.key_of(codes)
    order = np.argsort(keys)
    rows, cols, vals = [], [], []
    for key, coefficient in strings.items():
        ok = np.ones(codes.shape[0], dtype=bool)
        for site, a, b in key:
            ok &= codes[:, site] == b
        b_index = np.flatnonzero(ok)
        ends = codes[b_index].copy()
        for site, a, b in key:
            ends[:, site] = a
        target = basis.key_of(ends)
        pos = np.minimum(np.searchsorted(keys[order], target), keys.size - 1)
        inside = keys[order][pos] == target
        a_index = order[pos[inside]]
        b_index = b_index[inside]
        sign = (basis.signs[a_index] * basis.signs[b_index]
                * _jordan_wigner(basis, codes[a_index], codes[b_index]))
        rows.append(a_index)
        cols.append(b_index)
        vals.append(coefficient * sign)
    dim = codes.shape[0]
    if not rows:
        return sp.csr_matrix((dim, dim))
    return sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                         shape=(dim, dim))

