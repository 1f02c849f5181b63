"""Named spin-1/2 couplings read out of a Pauli expansion (exchange, DM, ring, ...).

The qubit basis and the Pauli-string notation are those of :mod:`lowfold.readout.pauli`;
spin operators are ``S = sigma / 2``.

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
>>> couplings, residual = spin_couplings({"X0 X1": [0.25], "Y0 Y1": [0.25], "Z0 Z1": [0.25]},
...                                      2, orders=[2])
>>> couplings
[Coupling(kind='exchange', sites=(0, 1), value=1.0, orders={2: 1.0})]
>>> residual
{}
"""

from dataclasses import dataclass, field

import numpy as np

from lowfold.errors import ModelError
from lowfold.readout.pauli import (
    AXES,
    check_n_sites,
    ops_key,
    ops_label,
    parse_pauli_string,
    pauli_coefficients_by_order,  # noqa: F401 (for jobs/derive.py until it imports from pauli)
    pauli_ops,
)
from lowfold.readout.rationals import recognise_rational  # noqa: F401 (likewise, from rationals)

__all__ = ["Coupling", "spin_couplings"]

_KIND_RANK = {k: n for n, k in enumerate(
    ["constant", "field", "exchange", "dm", "anisotropy", "chirality", "ring"])}


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
    return pauli_ops(matrix, n_sites, 1e-14, 1e-10, 4 ** n_sites)


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
    for a, la in enumerate(AXES):
        for b, lb in enumerate(AXES):
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
        for a, la in enumerate(AXES):  # unreported (sub-tol) parts stay in the residual
            for b, lb in enumerate(AXES):
                table[((i, la), (j, lb))] = jt[:, a, b] / 4.0
    return found


def _read_fields_and_constant(table, labels, tol):
    n = len(labels)
    found = []
    for (i,) in _supports(table, 1):
        h = np.stack([2.0 * table.get(((i, a),), np.zeros(n)) for a in AXES], axis=1)
        coupling = _make_coupling("field", (i,), h, labels, tol)
        if coupling is not None:
            found.append(coupling)
            for a in AXES:
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
    n_sites = check_n_sites(n_sites)
    labels = [int(k) for k in orders]
    if not labels or len(set(labels)) != len(labels):
        raise ModelError(f"orders {orders} must name each order once (at least one)")
    table = _read_table(coeffs_by_order, n_sites, len(labels))
    found = _fit_chirality(table, triangles, n_sites, labels, tol)
    found += _fit_ring(table, ring_cycles, n_sites, labels, tol)
    found += _read_pairs(table, labels, tol)
    found += _read_fields_and_constant(table, labels, tol)
    found.sort(key=lambda c: (_KIND_RANK[c.kind], sorted(c.sites), c.sites))
    residual = {ops_label(ops): [float(v) for v in values]
                for ops, values in sorted(table.items(), key=lambda item: ops_key(item[0]))
                if np.max(np.abs(values)) > tol}
    return found, residual
