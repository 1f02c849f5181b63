"""Spin-1/2 readout of effective Hamiltonians: Pauli strings, named couplings, rationals.

Conventions
-----------
A matrix of dimension ``2**N`` is read in the qubit basis where bit k of the index is site k
and bit value 0 is spin up (``S^z = +1/2``, Pauli ``Z = +1``).  Spin operators are
``S = sigma / 2``.  Pauli strings are written ``"X0 Y3 Z5"`` (sites ascending, identity
factors omitted); the identity string is ``"I"``.

The named couplings (``kind``) and their conventions, for sites listed in ``sites``:

- ``constant``: ``c`` (coefficient of the identity);
- ``field``: vector ``h`` of ``h . S_i``;
- ``exchange``: isotropic ``J`` of ``J S_i . S_j`` (``J = tr(Jt) / 3``);
- ``dm``: vector ``D`` of ``D . (S_i x S_j)`` (antisymmetric part of ``Jt``);
- ``anisotropy``: symmetric traceless 3x3 ``G`` of ``sum_ab G_ab S^a_i S^b_j``;
- ``chirality``: ``chi`` of ``chi S_i . (S_j x S_k)``;
- ``ring``: ``K`` of ``K [(S_i.S_j)(S_k.S_l) + (S_i.S_l)(S_j.S_k) - (S_i.S_k)(S_j.S_l)]`` on
  the 4-cycle ``(i, j, k, l)``,

where ``Jt_ab = 4 c(sigma^a_i sigma^b_j)`` is the two-site coupling tensor of
``sum_ab Jt_ab S^a_i S^b_j``.

Examples
--------
>>> import numpy as np
>>> sz = np.diag([0.5, -0.5])
>>> pauli_coefficients(np.kron(sz, sz), 2)
{'Z0 Z1': 0.25}
"""

import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np
import scipy.sparse as sp

from lowfold.build.numerics import pauli_strings
from lowfold.errors import ModelError, SizeError

__all__ = [
    "Coupling",
    "pauli_coefficients",
    "pauli_coefficients_by_order",
    "parse_pauli_string",
    "recognise_rational",
    "spin_couplings",
]

MAX_SITES = 24  # a 2**24 complex work vector is 256 MB
_AXES = "XYZ"
_KIND_RANK = {k: n for n, k in enumerate(
    ["constant", "field", "exchange", "dm", "anisotropy", "chirality", "ring"])}


# --------------------------------------------------------------------------- Pauli strings

def _ops_label(ops):
    """``((0, 'X'), (3, 'Y'))`` -> ``"X0 Y3"``; ``()`` -> ``"I"``."""
    return " ".join(f"{letter}{site}" for site, letter in ops) if ops else "I"


def _ops_key(ops):
    return (len(ops), tuple(s for s, _ in ops), tuple(letter for _, letter in ops))


def parse_pauli_string(text: str) -> tuple[tuple[int, str], ...]:
    """Parse ``"X0 Y3 Z5"`` into ``((0, "X"), (3, "Y"), (5, "Z"))``; ``"I"`` gives ``()``.

    Raises
    ------
    ModelError
        If a factor is not X/Y/Z followed by a site index, or sites are not ascending.
    """
    if not isinstance(text, str):
        raise ModelError(f"Pauli string must be a str, got {type(text).__name__}")
    if text.strip() == "I":
        return ()
    ops = []
    for factor in text.split():
        letter, digits = factor[:1], factor[1:]
        if letter not in _AXES or not digits.isdigit():
            raise ModelError(f"bad factor {factor!r} in Pauli string {text!r}; "
                             "write e.g. 'X0 Y3 Z5' or 'I'")
        ops.append((int(digits), letter))
    sites = [s for s, _ in ops]
    if not ops or any(a >= b for a, b in zip(sites, sites[1:])):
        raise ModelError(f"Pauli string {text!r}: sites must be distinct and ascending")
    return tuple(ops)


def _masks_to_ops(x, z, n_sites):
    ops = []
    for site in range(n_sites):
        xb, zb = (x >> site) & 1, (z >> site) & 1
        if xb or zb:
            ops.append((site, "Y" if xb and zb else ("X" if xb else "Z")))
    return tuple(ops)


def _coo_triplets(matrix, n_sites):
    dim = 1 << n_sites
    if sp.issparse(matrix):
        coo = sp.coo_array(matrix)
        rows, cols, data = coo.row, coo.col, coo.data
        shape = coo.shape
    else:
        arr = np.asarray(matrix)
        if arr.ndim != 2:
            raise ModelError(f"matrix must be two-dimensional, got shape {arr.shape}")
        shape = arr.shape
        if shape == (dim, dim):
            rows, cols = np.nonzero(arr)
            data = arr[rows, cols]
    if shape != (dim, dim):
        raise ModelError(f"matrix of shape {shape} does not act on {n_sites} qubits "
                         f"(expected ({dim}, {dim}))")
    if not np.issubdtype(np.asarray(data).dtype, np.number):
        raise ModelError("matrix elements must be numbers")
    data = np.asarray(data, dtype=np.complex128)
    if not np.all(np.isfinite(data)):
        raise ModelError("matrix has non-finite elements")
    return (np.asarray(rows, dtype=np.int64), np.asarray(cols, dtype=np.int64), data)


def _check_n_sites(n_sites):
    if isinstance(n_sites, bool) or not isinstance(n_sites, (int, np.integer)) or n_sites < 0:
        raise ModelError(f"n_sites must be a non-negative integer, got {n_sites!r}")
    if n_sites > MAX_SITES:
        raise SizeError(f"{n_sites} qubits exceed the readout limit of {MAX_SITES}")
    return int(n_sites)


def _pauli_ops(matrix, n_sites, tol, hermitian_tol, max_terms):
    """{ops: real coefficient}, in canonical order (weight, sites, letters)."""
    n_sites = _check_n_sites(n_sites)
    if isinstance(tol, bool) or not isinstance(tol, (int, float, np.floating, np.integer)) \
            or not (math.isfinite(tol) and tol >= 0):
        raise ModelError(f"tol must be a finite non-negative number, got {tol!r}")
    if isinstance(max_terms, bool) or not isinstance(max_terms, (int, np.integer)) \
            or max_terms < 1:
        raise ModelError(f"max_terms must be a positive integer, got {max_terms!r}")
    rows, cols, data = _coo_triplets(matrix, n_sites)
    xs, zs, cs, complete = pauli_strings(rows, cols, data, n_sites, float(tol), int(max_terms))
    if not complete:
        raise SizeError(f"more than {max_terms} Pauli strings exceed tol = {tol:g}; "
                        "raise tol or max_terms")
    if cs.size:
        worst = int(np.argmax(np.abs(cs.imag)))
        scale = max(1.0, float(np.max(np.abs(cs))))
        if abs(cs.imag[worst]) > hermitian_tol * scale:
            label = _ops_label(_masks_to_ops(int(xs[worst]), int(zs[worst]), n_sites))
            raise ModelError(f"matrix is not Hermitian: the coefficient of {label!r} is "
                             f"{complex(cs[worst])!r}")
    keep = np.abs(cs.real) > tol
    terms = {_masks_to_ops(int(x), int(z), n_sites): float(c)
             for x, z, c in zip(xs[keep], zs[keep], cs.real[keep])}
    return dict(sorted(terms.items(), key=lambda item: _ops_key(item[0])))


def pauli_coefficients(matrix, n_sites: int, *, tol: float = 1e-12,
                       hermitian_tol: float = 1e-10,
                       max_terms: int = 2_000_000) -> dict[str, float]:
    """Pauli-string expansion ``H = sum_s c_s sigma_s`` of a Hermitian matrix on N qubits.

    Parameters
    ----------
    matrix : ndarray or scipy sparse matrix, shape (2**n_sites, 2**n_sites)
        Hermitian matrix in the qubit basis of the module conventions.
    n_sites : int
        Number of qubits N (at most ``MAX_SITES``).
    tol : float, keyword-only
        Coefficients with ``abs(c) <= tol`` are left out.
    hermitian_tol : float, keyword-only
        Largest imaginary part of a coefficient, relative to ``max(1, max |c|)``, accepted
        as round-off (a Hermitian matrix has real coefficients).
    max_terms : int, keyword-only
        Largest number of strings returned (a dense random matrix has 4**N of them).

    Returns
    -------
    dict of str to float
        ``{"X0 Y3": c, ...}``, ordered by number of sites, then sites, then letters.

    Raises
    ------
    ModelError
        If the shape does not match ``n_sites``, an element is not finite, or the matrix
        is not Hermitian.
    SizeError
        If ``n_sites > MAX_SITES`` or more than ``max_terms`` strings exceed ``tol``.

    Notes
    -----
    Elements are grouped by flip pattern ``row ^ col``; for each pattern one Walsh-Hadamard
    transform gives the coefficients of all strings with X/Y exactly on the flipped bits
    (:func:`lowfold.build.numerics.pauli_strings`), in
    O(nnz + P 2^N N) time for P distinct patterns.
    """
    terms = _pauli_ops(matrix, n_sites, tol, hermitian_tol, max_terms)
    return {_ops_label(ops): c for ops, c in terms.items()}


def pauli_coefficients_by_order(matrices: list, n_sites: int, *, tol: float = 1e-12,
                                max_terms: int = 2_000_000) -> dict[str, list[float]]:
    """Pauli expansion of each matrix of a list (one per perturbative order).

    Returns
    -------
    dict of str to list of float
        ``{string: [c for matrices[0], c for matrices[1], ...]}`` over the union of the
        strings whose coefficient exceeds ``tol`` in at least one matrix.
    """
    if isinstance(matrices, np.ndarray) or sp.issparse(matrices):
        raise ModelError("matrices must be a list of matrices, one per order")
    per_order = [_pauli_ops(m, n_sites, tol, 1e-10, max_terms) for m in matrices]
    keys = sorted(set().union(*per_order), key=_ops_key) if per_order else []
    return {_ops_label(ops): [terms.get(ops, 0.0) for terms in per_order] for ops in keys}


# --------------------------------------------------------------------------- templates

def _site_operator(op, site, n_sites):
    """``op`` on ``site`` of ``n_sites`` qubits (site 0 = least significant bit)."""
    return np.kron(np.kron(np.eye(1 << (n_sites - 1 - site)), op), np.eye(1 << site))


def _spins(n_sites):
    half = 0.5 * np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]])
    return [[_site_operator(half[a], s, n_sites) for a in range(3)] for s in range(n_sites)]


def _ring_matrix():
    spins = _spins(4)

    def dot(i, j):
        return sum(spins[i][a] @ spins[j][a] for a in range(3))

    return dot(0, 1) @ dot(2, 3) + dot(0, 3) @ dot(1, 2) - dot(0, 2) @ dot(1, 3)


def _chirality_matrix():
    spins = _spins(3)
    total = np.zeros((8, 8), dtype=complex)
    for a, b, c in [(0, 1, 2), (1, 2, 0), (2, 0, 1)]:
        total += spins[0][a] @ (spins[1][b] @ spins[2][c] - spins[1][c] @ spins[2][b])
    return total


def _template(matrix, n_sites):
    """Pauli content of an operator on template positions 0..n-1, {ops: c}."""
    return _pauli_ops(matrix, n_sites, 1e-14, 1e-10, 4 ** n_sites)


def _placed(template, sites):
    """Template {ops over positions} -> {ops over ``sites[position]``}."""
    placed = {}
    for ops, c in template.items():
        placed[tuple(sorted((sites[p], letter) for p, letter in ops))] = c
    return placed


# --------------------------------------------------------------------------- couplings

@dataclass(frozen=True)
class Coupling:
    """A named spin-1/2 coupling (see the module docstring for the conventions).

    Attributes
    ----------
    kind : str
        ``constant | field | exchange | dm | anisotropy | ring | chirality``.
    sites : tuple of int
        ``()``, ``(i,)``, ``(i, j)`` with i < j, the triangle ``(i, j, k)`` or the 4-cycle
        ``(i, j, k, l)`` in cyclic order (rotated to start at its smallest site).
    value : float or list
        Scalar, 3-vector or 3x3 nested list; the sum of ``orders``.
    orders : dict of int to float or list
        Contribution of each perturbative order.
    """

    kind: str
    sites: tuple[int, ...]
    value: float | list
    orders: dict[int, float | list] = field(default_factory=dict)

    def to_dict(self) -> dict:
        """JSON-ready ``{"kind", "sites", "value", "orders"}`` (order keys as strings)."""
        return {"kind": self.kind, "sites": list(self.sites), "value": self.value,
                "orders": {str(k): v for k, v in self.orders.items()}}


def _make_coupling(kind, sites, per_order, labels, tol):
    """Coupling from an array (n_orders, ...) when it exceeds tol, else None."""
    per_order = np.asarray(per_order, dtype=float)
    total = per_order.sum(axis=0)
    if max(np.max(np.abs(total)), np.max(np.abs(per_order))) <= tol:
        return None

    def plain(a):
        return float(a) if np.ndim(a) == 0 else np.asarray(a).tolist()

    return Coupling(kind, tuple(int(s) for s in sites), plain(total),
                    {lab: plain(v) for lab, v in zip(labels, per_order)})


def _read_table(coeffs_by_order, n_sites, n_orders):
    table = {}
    for label, values in coeffs_by_order.items():
        ops = parse_pauli_string(label)
        if ops and ops[-1][0] >= n_sites:
            raise ModelError(f"Pauli string {label!r} acts beyond site {n_sites - 1}")
        arr = np.asarray(values, dtype=float).reshape(-1)
        if arr.size != n_orders or not np.all(np.isfinite(arr)):
            raise ModelError(f"coefficients of {label!r} must be {n_orders} finite numbers "
                             "(one per order)")
        table[ops] = arr.copy()
    return table


def _fit(table, placed, n_orders):
    """Least-squares amplitude per order of the placed template in the table."""
    t = np.array(list(placed.values()))
    c = np.array([table.get(ops, np.zeros(n_orders)) for ops in placed])
    return t @ c / (t @ t)


def _subtract(table, placed, amplitude):
    for ops, coefficient in placed.items():
        table[ops] = table.get(ops, np.zeros(amplitude.shape)) - coefficient * amplitude


def _ring_cyclic_orders(sites):
    """The three distinct cyclic orders of four sites, each starting at the smallest."""
    a, b, c, d = sorted(sites)
    return [(a, b, c, d), (a, b, d, c), (a, c, b, d)]


def _canonical_cycle(cycle):
    start = cycle.index(min(cycle))
    rotated = cycle[start:] + cycle[:start]
    return rotated if rotated[1] < rotated[-1] else (rotated[0],) + rotated[:0:-1]


def _canonical_triangle(tri):
    start = tri.index(min(tri))
    return tri[start:] + tri[:start]


def _check_tuples(groups, size, n_sites, name):
    checked, seen = [], set()
    for group in groups:
        group = tuple(int(s) for s in group)
        if len(group) != size or len(set(group)) != size or not all(
                0 <= s < n_sites for s in group):
            raise ModelError(f"{name}: {group} must be {size} distinct sites in 0..{n_sites - 1}")
        if frozenset(group) in seen:
            raise ModelError(f"{name}: sites {sorted(group)} given twice; give one per set")
        seen.add(frozenset(group))
        checked.append(group)
    return checked


def _supports(table, size):
    return sorted({tuple(s for s, _ in ops) for ops in table if len(ops) == size})


def _fit_chirality(table, triangles, n_sites, labels, tol):
    template = _template(_chirality_matrix(), 3)
    if triangles is None:
        triangles = _supports(table, 3)
    found = []
    for tri in _check_tuples(triangles, 3, n_sites, "triangles"):
        tri = _canonical_triangle(tri)
        placed = _placed(template, tri)
        chi = _fit(table, placed, len(labels))
        coupling = _make_coupling("chirality", tri, chi, labels, tol)
        if coupling is not None:
            _subtract(table, placed, chi)
            found.append(coupling)
    return found


def _fit_ring(table, ring_cycles, n_sites, labels, tol):
    template = _template(_ring_matrix(), 4)
    if ring_cycles is None:
        candidates = [_ring_cyclic_orders(s) for s in _supports(table, 4)]
    else:
        candidates = [[_canonical_cycle(c)]
                      for c in _check_tuples(ring_cycles, 4, n_sites, "ring_cycles")]
    found = []
    for cycles in candidates:
        fits = [(cycle, _placed(template, cycle)) for cycle in cycles]
        amplitudes = [_fit(table, placed, len(labels)) for _, placed in fits]
        best = int(np.argmax([np.sum(k ** 2) for k in amplitudes]))  # least residual
        (cycle, placed), ring = fits[best], amplitudes[best]
        coupling = _make_coupling("ring", cycle, ring, labels, tol)
        if coupling is not None:
            _subtract(table, placed, ring)
            found.append(coupling)
    return found


def _pair_tensor(table, i, j, n_orders):
    tensor = np.zeros((n_orders, 3, 3))
    for a, la in enumerate(_AXES):
        for b, lb in enumerate(_AXES):
            tensor[:, a, b] = 4.0 * table.pop(((i, la), (j, lb)), np.zeros(n_orders))
    return tensor


def _read_pairs(table, labels, tol):
    n = len(labels)
    found = []
    for i, j in _supports(table, 2):
        jt = _pair_tensor(table, i, j, n)
        exchange = np.trace(jt, axis1=1, axis2=2) / 3.0
        anti = 0.5 * (jt - jt.transpose(0, 2, 1))
        dm = np.stack([anti[:, 1, 2], anti[:, 2, 0], anti[:, 0, 1]], axis=1)
        aniso = 0.5 * (jt + jt.transpose(0, 2, 1)) - exchange[:, None, None] * np.eye(3)
        parts = [("exchange", exchange, exchange[:, None, None] * np.eye(3)),
                 ("dm", dm, anti), ("anisotropy", aniso, aniso)]
        for kind, value, explained in parts:
            coupling = _make_coupling(kind, (i, j), value, labels, tol)
            if coupling is not None:
                found.append(coupling)
                jt = jt - explained
        for a, la in enumerate(_AXES):  # unreported (sub-tol) parts stay in the residual
            for b, lb in enumerate(_AXES):
                table[((i, la), (j, lb))] = jt[:, a, b] / 4.0
    return found


def _read_fields_and_constant(table, labels, tol):
    n = len(labels)
    found = []
    for (i,) in _supports(table, 1):
        h = np.stack([2.0 * table.get(((i, a),), np.zeros(n)) for a in _AXES], axis=1)
        coupling = _make_coupling("field", (i,), h, labels, tol)
        if coupling is not None:
            found.append(coupling)
            for a in _AXES:
                table.pop(((i, a),), None)
    if () in table:
        coupling = _make_coupling("constant", (), table[()], labels, tol)
        if coupling is not None:
            found.append(coupling)
            del table[()]
    return found


def spin_couplings(coeffs_by_order: dict[str, list[float]], n_sites: int, *,
                   orders: list[int], tol: float = 1e-10, ring_cycles=None,
                   triangles=None) -> tuple[list[Coupling], dict[str, list[float]]]:
    """Named spin-1/2 couplings of a Pauli expansion, and the Pauli terms they leave over.

    Parameters
    ----------
    coeffs_by_order : dict of str to list of float
        ``{string: [c per order]}`` as from :func:`pauli_coefficients_by_order`.
    n_sites : int
        Number of sites.
    orders : list of int, keyword-only
        Order label of each position of the coefficient lists.
    tol : float, keyword-only
        A coupling is reported when its value or an order's contribution exceeds ``tol``
        (largest absolute component); residual strings likewise.
    ring_cycles : list of 4-tuples, optional
        4-cycles, in cyclic order, on which to fit ring exchange. ``None``: every set of
        four sites with four-site content, in the cyclic order that fits best (least
        residual; the first of ``(a,b,c,d), (a,b,d,c), (a,c,b,d)`` on a tie).
    triangles : list of 3-tuples, optional
        Oriented triangles on which to fit scalar chirality. ``None``: every set of three
        sites with three-site content, oriented ascending.

    Returns
    -------
    couplings : list of Coupling
        Ordered by kind (constant, field, exchange, dm, anisotropy, chirality, ring), then
        sites.
    residual : dict of str to list of float
        Pauli terms not explained by the couplings (nothing beyond ``tol`` is lost): the
        input equals the couplings' Pauli expansion plus the residual.

    Notes
    -----
    Ring exchange and chirality are least-squares fits (orthogonal projections in the
    Pauli basis) of the operator's own Pauli expansion, computed from Kronecker products,
    to the content on their sites; the fitted operator, all of its strings, is then
    subtracted.  The ring operator has four-site strings only and chirality three-site
    strings only, so neither changes the one- and two-site readout.
    """
    n_sites = _check_n_sites(n_sites)
    labels = [int(k) for k in orders]
    if not labels or len(set(labels)) != len(labels):
        raise ModelError(f"orders {orders} must name each order once (at least one)")
    table = _read_table(coeffs_by_order, n_sites, len(labels))
    found = _fit_chirality(table, triangles, n_sites, labels, tol)
    found += _fit_ring(table, ring_cycles, n_sites, labels, tol)
    found += _read_pairs(table, labels, tol)
    found += _read_fields_and_constant(table, labels, tol)
    found.sort(key=lambda c: (_KIND_RANK[c.kind], sorted(c.sites), c.sites))
    residual = {_ops_label(ops): [float(v) for v in values]
                for ops, values in sorted(table.items(), key=lambda item: _ops_key(item[0]))
                if np.max(np.abs(values)) > tol}
    return found, residual


# --------------------------------------------------------------------------- rationals

def recognise_rational(value: float, scale: float, *, max_denominator: int = 1000,
                       rtol: float = 1e-8, atol: float = 0.0) -> Fraction | None:
    """The fraction p/q (q <= max_denominator) that ``value / scale`` equals, if any.

    Returns ``Fraction(p, q)`` when ``|value/scale - p/q| <= rtol |value/scale| + atol``,
    else ``None``.  A recognised fraction is a hint to be flagged as such, not a proof.

    Examples
    --------
    >>> recognise_rational(80 * 0.1**4 / 8.0**3, 0.1**4 / 8.0**3)
    Fraction(80, 1)
    >>> recognise_rational(math.pi, 1.0) is None
    True
    """
    if not (math.isfinite(scale) and scale != 0):
        raise ModelError(f"scale must be finite and non-zero, got {scale!r}")
    if isinstance(max_denominator, bool) or not isinstance(max_denominator, int) \
            or max_denominator < 1:
        raise ModelError(f"max_denominator must be a positive integer, got {max_denominator!r}")
    if not math.isfinite(value):
        return None
    ratio = value / scale
    guess = Fraction(ratio).limit_denominator(max_denominator)
    return guess if abs(ratio - float(guess)) <= rtol * abs(ratio) + atol else None
