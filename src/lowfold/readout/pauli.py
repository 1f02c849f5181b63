"""Pauli-string decomposition of matrices on spin-1/2 sites (qubits).

Conventions
-----------
A matrix of dimension ``2**N`` is read in the qubit basis where bit k of the index is site k
and bit value 0 is spin up (``S^z = +1/2``, Pauli ``Z = +1``).  Spin operators are
``S = sigma / 2``.  Pauli strings are written ``"X0 Y3 Z5"`` (sites ascending, identity
factors omitted); the identity string is ``"I"``.

Examples
--------
>>> import numpy as np
>>> sz = np.diag([0.5, -0.5])
>>> pauli_coefficients(np.kron(sz, sz), 2)
{'Z0 Z1': 0.25}
"""

import math

import numpy as np
import scipy.sparse as sp

from lowfold.build.numerics import pauli_strings
from lowfold.errors import ModelError, SizeError

__all__ = [
    "MAX_SITES",
    "parse_pauli_string",
    "pauli_coefficients",
    "pauli_coefficients_by_order",
]

MAX_SITES = 24  # a 2**24 complex work vector is 256 MB
AXES = "XYZ"


# --------------------------------------------------------------------------- Pauli strings

def ops_label(ops):
    """``((0, 'X'), (3, 'Y'))`` -> ``"X0 Y3"``; ``()`` -> ``"I"``."""
    return " ".join(f"{letter}{site}" for site, letter in ops) if ops else "I"


def ops_key(ops):
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
        if letter not in AXES or not digits.isdigit():
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


def check_n_sites(n_sites):
    if isinstance(n_sites, bool) or not isinstance(n_sites, (int, np.integer)) or n_sites < 0:
        raise ModelError(f"n_sites must be a non-negative integer, got {n_sites!r}")
    if n_sites > MAX_SITES:
        raise SizeError(f"{n_sites} qubits exceed the readout limit of {MAX_SITES}")
    return int(n_sites)


def pauli_ops(matrix, n_sites, tol, hermitian_tol, max_terms):
    """{ops: real coefficient}, in canonical order (weight, sites, letters)."""
    n_sites = check_n_sites(n_sites)
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
            label = ops_label(_masks_to_ops(int(xs[worst]), int(zs[worst]), n_sites))
            raise ModelError(f"matrix is not Hermitian: the coefficient of {label!r} is "
                             f"{complex(cs[worst])!r}")
    keep = np.abs(cs.real) > tol
    terms = {_masks_to_ops(int(x), int(z), n_sites): float(c)
             for x, z, c in zip(xs[keep], zs[keep], cs.real[keep])}
    return dict(sorted(terms.items(), key=lambda item: ops_key(item[0])))


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
    terms = pauli_ops(matrix, n_sites, tol, hermitian_tol, max_terms)
    return {ops_label(ops): c for ops, c in terms.items()}


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
    per_order = [pauli_ops(m, n_sites, tol, 1e-10, max_terms) for m in matrices]
    keys = sorted(set().union(*per_order), key=ops_key) if per_order else []
    return {ops_label(ops): [terms.get(ops, 0.0) for terms in per_order] for ops in keys}
