"""Named couplings of a product manifold, fitted to its X-operator strings.

Each named coupling is a projected physical operator ``T`` (built by
:mod:`lowfold.readout.local_operators`) with its own string expansion; the couplings are
the least-squares fit ``H = sum_T x_T T + rest`` in the space of strings (templates only
where the strings of H have the template's support), and ``rest`` is returned as plain
strings (kind ``string``, with the string in ``operator``).

Kinds and conventions (``P`` the projector on the kept local states; ``value`` as in H):

electrons
    ``hopping`` (i, j): ``-t sum_s P (c+_is c_js + h.c.) P``, value ``t``;
    ``exchange`` (i, j): ``J (S_i.S_j - n_i n_j / 4)``, value ``J``;
    ``three-site`` (i, j, k), j the middle site, bonded to i and k:
    ``-K sum_s P (c+_is n_j,-s c_ks - c+_is c+_j,-s c_js c_k,-s + h.c.) P``, value ``K``;
    ``density`` (i, j): ``V n_i n_j``; ``density`` (i): ``mu n_i``.
spinless fermions
    ``hopping``, ``density`` as for electrons.
spins (a site with three or more kept states)
    ``exchange`` ``J S_i.S_j``; ``biquadratic`` ``B (S_i.S_j)^2``; ``single-ion``
    ``D (S^z_i)^2``; ``field`` ``h S^z_i`` (value ``[0, 0, h]``).
bosons (reference state b of a site: the background; p = b + 1, h = b - 1)
    ``particle-hopping`` ``-t_p (|p b>_i <b p|_j + h.c.)`` and ``hole-hopping``
    ``-t_h (|h b>_i <b h|_j + h.c.)``, values ``t_p``, ``t_h``;
    ``particle-energy`` / ``hole-energy`` (i): ``e |p><p|_i`` / ``e |h><h|_i``;
    ``particle-interaction`` / ``hole-interaction`` / ``particle-hole-interaction``
    (i, j): ``W |x><x|_i |y><y|_j`` with x, y = p, h.
all
    ``constant``: the identity.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import lsqr

from lowfold.readout.couplings import Coupling
from lowfold.readout.local_basis import LocalBasis
from lowfold.readout.local_operators import LocalOperators, operator_strings
from lowfold.readout.local_strings import string_label

__all__ = ["LocalCoupling", "coupling_strings", "name_strings"]

DENSE_FIT = 20_000_000   # strings x templates solved densely; above, sparse (lsqr)


@dataclass(frozen=True)
class LocalCoupling(Coupling):
    """A coupling of the local readout; ``operator`` names the string of a ``string``."""

    operator: str = ""

    def to_dict(self) -> dict:
        out = super().to_dict()
        if self.operator:
            out["operator"] = self.operator
        return out


# --------------------------------------------------------------------------- templates

def _electron_templates(ops, sites):
    n = len(sites)
    p = lambda name, k: ops.place(name, k, n)
    if n == 1:
        return [("density", p("n", 0))]
    if n == 2:
        hop = sum(p(f"c+_{s}", 0) @ p(f"c_{s}", 1) for s in ("up", "dn"))
        spin = (p("Sz", 0) @ p("Sz", 1) + 0.5 * (p("S+", 0) @ p("S-", 1) + p("S-", 0) @ p("S+", 1))
                - 0.25 * p("n", 0) @ p("n", 1))
        return [("hopping", -(hop + hop.T)), ("exchange", spin), ("density", p("n", 0) @ p("n", 1))]
    return []


def _three_site(ops, order):
    """The three-site operator on sites ``order = (i, j, k)`` (positions sorted by site)."""
    position = {s: k for k, s in enumerate(sorted(order))}
    i, j, k = (position[s] for s in order)
    p = lambda name, q: ops.place(name, q, 3)
    other = {"up": "dn", "dn": "up"}
    total = 0
    for s, r in other.items():
        total = total + p(f"c+_{s}", i) @ p(f"n_{r}", j) @ p(f"c_{s}", k)
        total = total - p(f"c+_{s}", i) @ p(f"c+_{r}", j) @ p(f"c_{s}", j) @ p(f"c_{r}", k)
    return -(total + total.T)


def _fermion_templates(ops, sites):
    n = len(sites)
    if n == 1:
        return [("density", ops.place("n", 0, 1))]
    if n == 2:
        hop = ops.place("c+", 0, 2) @ ops.place("c", 1, 2)
        return [("hopping", -(hop + hop.T)), ("density", ops.place("n", 0, 2) @ ops.place("n", 1, 2))]
    return []


def _spin_templates(ops, sites):
    n = len(sites)
    p = lambda name, k: ops.place(name, k, n)
    if n == 1:
        return [("single-ion", p("Sz", 0) @ p("Sz", 0)), ("field", p("Sz", 0))]
    if n == 2:
        dot = p("Sz", 0) @ p("Sz", 1) + 0.5 * (p("S+", 0) @ p("S-", 1) + p("S-", 0) @ p("S+", 1))
        return [("exchange", dot), ("biquadratic", dot @ dot)]
    return []


def _boson_strings(basis: LocalBasis, sites):
    """Boson templates directly as strings (X-operators relative to the background)."""
    ref = {s: int(basis.reference[s]) for s in sites}
    size = {s: int(basis.sizes[s]) for s in sites}
    step = {"particle": 1, "hole": -1}
    out = []
    if len(sites) == 1:
        (s,) = sites
        for name, d in step.items():
            if 0 <= ref[s] + d < size[s]:
                out.append((f"{name}-energy", {((s, ref[s] + d, ref[s] + d),): 1.0}))
        return out
    i, j = sites
    for name, d in step.items():
        if all(0 <= ref[s] + d < size[s] for s in sites):
            a, b = ref[i] + d, ref[j] + d
            out.append((f"{name}-hopping", {((i, a, ref[i]), (j, ref[j], b)): -1.0,
                                            ((i, ref[i], a), (j, b, ref[j])): -1.0}))
    pairs = [("particle-interaction", 1, 1), ("hole-interaction", -1, -1),
             ("particle-hole-interaction", 1, -1), ("particle-hole-interaction", -1, 1)]
    found = {}
    for name, di, dj in pairs:
        a, b = ref[i] + di, ref[j] + dj
        if 0 <= a < size[i] and 0 <= b < size[j]:
            found.setdefault(name, {})[((i, a, a), (j, b, b))] = 1.0
    return out + list(found.items())


def _templates(model, basis: LocalBasis, ops, supports, bonded):
    """[(kind, sites, strings)] for every support met."""
    out = [("constant", (), {(): 1.0})]
    for sites in sorted(supports, key=lambda s: (len(s), s)):
        if basis.site_type == "boson":
            if len(sites) <= 2:
                out += [(kind, sites, strings) for kind, strings in _boson_strings(basis, sites)]
            continue
        if len(sites) == 3 and basis.site_type == "electron":
            for middle in sites:
                ends = [s for s in sites if s != middle]
                if all(frozenset((e, middle)) in bonded for e in ends):
                    order = (ends[0], middle, ends[1])
                    out.append(("three-site", order,
                                operator_strings(ops, basis, sites, _three_site(ops, order))))
            continue
        maker = {"electron": _electron_templates, "fermion": _fermion_templates,
                 "spin": _spin_templates}[basis.site_type]
        for kind, matrix in maker(ops, sites):
            strings = operator_strings(ops, basis, sites, matrix)
            if strings:
                out.append((kind, tuple(sites), strings))
    return out


def coupling_strings(model, basis: LocalBasis, kind: str, sites) -> dict:
    """The strings of one named coupling of unit value on ``sites`` (for a three-site term,
    ``(i, j, k)`` with j the middle), e.g. to build an effective Hamiltonian from couplings;
    ``{}`` when the kind does not exist there."""
    sites = tuple(int(s) for s in sites)
    ordered = tuple(sorted(sites))
    bonded = {frozenset((sites[0], sites[1])), frozenset((sites[1], sites[2]))} \
        if kind == "three-site" else set()
    for found, where, strings in _templates(model, basis, LocalOperators(model.site),
                                            {ordered}, bonded):
        if found == kind and (where == sites or (kind != "three-site" and where == ordered)):
            return strings
    return {}


# --------------------------------------------------------------------------- the fit

def name_strings(model, basis: LocalBasis, strings: dict, n_orders: int, *, tol: float = 1e-10,
                 bonded: set | None = None, fold=None) -> tuple[list[LocalCoupling], dict]:
    """Named couplings and the leftover strings of an operator given as ``strings``.

    Parameters
    ----------
    bonded : set of frozenset, optional
        Nearest-neighbour pairs (the middle of a three-site term is bonded to both ends);
        default: the model lattice's nearest bonds.
    fold : callable, optional
        ``fold(key) -> key``: the representative of a string's translation class, for an
        operator given per unit cell (an infinite lattice: ``strings`` holds representatives
        only).  Each template's strings are folded too, so that the fit is per unit cell
        (a bond's exchange also has one-site strings on both its sites).

    Returns
    -------
    couplings : list of LocalCoupling
        Named couplings then ``string`` couplings, each with its value per order.
    residual : dict
        ``{label: [coefficient per order]}`` of the strings no name explains.
    """
    supports = {tuple(sorted({s for s, _, _ in key})) for key in strings if key}
    if bonded is None:
        bonded = {frozenset(map(int, b)) for b in model.lattice.bonds("nearest")}
    ops = LocalOperators(model.site)
    templates = _templates(model, basis, ops, supports, bonded)
    templates = [t for t in templates if t[2]]
    if fold is not None:
        templates = [(kind, sites, _folded(t, fold)) for kind, sites, t in templates]
    rows = {key: r for r, key in enumerate(strings)}
    for _, _, t in templates:
        for key in t:
            rows.setdefault(key, len(rows))
    dtype = complex if any(np.iscomplexobj(v) for v in strings.values()) else float
    target = np.zeros((len(rows), n_orders), dtype=dtype)
    for key, v in strings.items():
        target[rows[key]] = v
    entries = [(rows[key], c, v) for c, (_, _, t) in enumerate(templates) for key, v in t.items()]
    r, c, v = (np.array(x) for x in zip(*entries)) if entries else (np.zeros(0, int),) * 3
    design = sp.csr_matrix((v.astype(float), (r, c)), shape=(len(rows), len(templates)))
    solution = _least_squares(design, target)
    rest = target - design @ solution
    couplings = []
    for (kind, sites, _), x in zip(templates, solution):
        if np.max(np.abs(x)) <= tol:
            continue
        couplings.append(_coupling(kind, sites, x, tol))
    residual = {}
    labels = {r: key for key, r in rows.items()}
    for r in np.flatnonzero(np.abs(rest).max(axis=1) > tol):
        key = labels[r]
        label = string_label(basis, key)
        residual[label] = [_plain(v) for v in rest[r]]
        sites = tuple(sorted({s for s, _, _ in key}))
        couplings.append(_coupling("string", sites, rest[r], tol, operator=label))
    return couplings, residual


def _folded(strings: dict, fold) -> dict:
    out = {}
    for key, value in strings.items():
        new = fold(key)
        out[new] = out.get(new, 0.0) + value
    return {k: v for k, v in out.items() if v != 0.0}


def _least_squares(design: sp.csr_matrix, target: np.ndarray) -> np.ndarray:
    """Least-squares coefficients of the templates (dense below DENSE_FIT entries)."""
    if design.shape[1] == 0:
        return np.zeros((0, target.shape[1]), dtype=target.dtype)
    if design.shape[0] * design.shape[1] <= DENSE_FIT:
        return np.linalg.lstsq(design.toarray(), target, rcond=None)[0]
    columns = []
    for m in range(target.shape[1]):
        parts = [lsqr(design, np.real(target[:, m]), atol=1e-15, btol=1e-15)[0]]
        if np.iscomplexobj(target):
            parts.append(1j * lsqr(design, np.imag(target[:, m]), atol=1e-15, btol=1e-15)[0])
        columns.append(sum(parts))
    return np.stack(columns, axis=1)


def _plain(v):
    v = complex(v)
    return v.real if abs(v.imag) <= 1e-13 * max(1.0, abs(v.real)) else [v.real, v.imag]


def _coupling(kind, sites, per_order, tol, operator=""):
    per_order = np.asarray(per_order)
    value = per_order.sum()
    if kind == "field":
        plain = lambda v: [0.0, 0.0, _plain(v)]
    else:
        plain = _plain
    orders = {m: plain(v) for m, v in enumerate(per_order) if abs(v) > tol}
    return LocalCoupling(kind, tuple(int(s) for s in sites), plain(value), orders, operator)
