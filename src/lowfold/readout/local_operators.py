"""Physical operators on a few sites of a product manifold, as strings of X-operators.

The named couplings of :mod:`lowfold.readout.local_names` are operators written with the
site's own creation, annihilation and spin operators, projected onto the kept local states:
``P O P``.  They are built here as matrices on the full local spaces of their sites (in the
site-ordered Fock basis of :mod:`lowfold.readout.local_basis`, Jordan-Wigner strings
included), projected onto the product of the kept sets, and decomposed with the same scheme
as the effective Hamiltonian (:func:`lowfold.readout.local_strings.strings_of_entries`), so
the two are comparable string by string.

Local operators (site-ordered, local value ``v``):

- electron: ``v = n_up + 2 n_dn``, ``|2> = c+_up c+_dn |0>``;
- spinless fermion: ``v = n``;
- spin S: ``v = S - S^z``;
- boson: ``v = n`` up to the cut-off.
"""

from __future__ import annotations

from functools import reduce

import numpy as np

from lowfold.readout.local_basis import LocalBasis, hull_codes
from lowfold.readout.local_strings import strings_of_entries

__all__ = ["LocalOperators", "operator_strings"]


class LocalOperators:
    """Full local matrices of a site type and their placement on a few sites with JW signs."""

    def __init__(self, site):
        self.site = site
        self.dim = site.radix ** site.modes
        self.parity = np.array([sum((v // site.radix ** m) % site.radix for m in range(site.modes))
                                % 2 if site.is_fermionic else 0 for v in range(self.dim)])
        self.local = self._local_matrices()

    def _local_matrices(self) -> dict:
        site, d = self.site, self.dim
        ops = {"1": np.eye(d)}
        if site.type == "electron":
            up, dn = np.zeros((d, d)), np.zeros((d, d))
            up[1, 0], up[3, 2] = 1, 1            # c+_up |0> = |u>, c+_up |d> = |2>
            dn[2, 0], dn[3, 1] = 1, -1           # c+_dn |0> = |d>, c+_dn |u> = -|2>
            ops.update({"c+_up": up, "c+_dn": dn, "c_up": up.T, "c_dn": dn.T})
            ops["n_up"], ops["n_dn"] = up @ up.T, dn @ dn.T
            ops["n"] = ops["n_up"] + ops["n_dn"]
            ops["S+"] = up @ dn.T
            ops["S-"] = dn @ up.T
            ops["Sz"] = 0.5 * (ops["n_up"] - ops["n_dn"])
        elif site.type == "fermion":
            create = np.array([[0.0, 0.0], [1.0, 0.0]])
            ops.update({"c+": create, "c": create.T, "n": create @ create.T})
        elif site.type == "spin":
            s = float(site.spin)
            m = s - np.arange(d)
            plus = np.zeros((d, d))
            for k in range(1, d):                 # S+ |m> ~ |m+1>: digit k -> k - 1
                plus[k - 1, k] = np.sqrt(s * (s + 1) - m[k] * (m[k] + 1))
            ops.update({"S+": plus, "S-": plus.T, "Sz": np.diag(m)})
        else:
            create = np.diag(np.sqrt(np.arange(1.0, d)), -1)
            ops.update({"b+": create, "b": create.T, "n": np.diag(np.arange(float(d)))})
        return ops

    def place(self, name: str, position: int, n: int) -> np.ndarray:
        """Operator ``name`` on the ``position``-th of ``n`` sites (position 0 = slowest index),
        with the Jordan-Wigner string on the positions before it when it is odd."""
        local = self.local[name]
        odd = bool(np.any(local[self.parity[:, None] != self.parity[None, :]]))
        string = np.diag(np.where(self.parity, -1.0, 1.0)) if odd else np.eye(self.dim)
        factors = [string] * position + [local] + [np.eye(self.dim)] * (n - position - 1)
        return reduce(np.kron, factors)


def operator_strings(ops: LocalOperators, basis: LocalBasis, sites, matrix, *, tol=1e-12) -> dict:
    """Strings (keys on the real sites) of ``P matrix P``, ``matrix`` acting on the full local
    spaces of ``sites`` (ascending) in :meth:`LocalOperators.place` order."""
    sites = [int(s) for s in sites]
    codes = hull_codes(basis, sites)
    values = [basis.values[s] for s in sites]
    full = np.zeros(codes.shape[0], dtype=np.int64)
    for p, s in enumerate(sites):
        full = full * ops.dim + values[p][codes[:, p]]
    block = matrix[np.ix_(full, full)]
    small = LocalBasis(basis.site_type, tuple(values), tuple(basis.labels[s] for s in sites),
                       tuple(basis.particles[s] for s in sites),
                       tuple(basis.twice_sz[s] for s in sites),
                       tuple(basis.parity[s] for s in sites), basis.reference[sites],
                       codes, np.ones(codes.shape[0]), True, frozenset())
    rows, cols = np.nonzero(np.abs(block) > tol)
    found = strings_of_entries(small, rows, cols, block[rows, cols][:, None], tol=tol)
    return {tuple((sites[p], a, b) for p, a, b in key): float(np.real(v[0]))
            for key, v in found.items()}
