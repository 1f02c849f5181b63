"""The local-operator readout of an effective Hamiltonian on a product manifold.

Used by the derive job when the manifold is not one spin-1/2 per site
(:mod:`lowfold.readout.spin_form`):

- every site keeps two states of a spin (spin-1 with easy-axis anisotropy: S^z = +1, -1):
  a *pseudo-spin-1/2* per site, the first kept state (highest S^z) pseudo-spin up, read out
  in Pauli strings and named spin-1/2 couplings as a spin-1/2 manifold is;
- otherwise, when P is a product of per-site state sets or its slice at fixed particle
  number (:mod:`lowfold.readout.local_basis`): X-operator strings
  (:mod:`lowfold.readout.local_strings`) and named couplings
  (:mod:`lowfold.readout.local_names`);
- else no named readout: the matrices stay, and one warning says why.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from lowfold.errors import SizeError
from lowfold.model.cycles import lattice_cycles
from lowfold.readout.couplings import spin_couplings
from lowfold.readout.local_basis import LocalBasis, product_manifold
from lowfold.readout.local_names import name_strings
from lowfold.readout.local_strings import strings_of_orders
from lowfold.readout.pauli import pauli_coefficients_by_order

__all__ = ["LOCAL_READOUT", "PSEUDO_SPIN_READOUT", "read_local_form"]

LOCAL_READOUT = "local operators"
PSEUDO_SPIN_READOUT = "pseudo-spin-1/2"
TERM_TOL = 1e-12       # strings and Pauli coefficients at or below this are left out
COUPLING_TOL = 1e-10   # couplings at or below this are left out


def _describe(basis: LocalBasis) -> str:
    sets = {" ".join(labels) for labels in basis.labels}
    text = "; ".join(f"{{{s}}}" for s in sorted(sets))
    return text + ("" if basis.is_hull else ", at fixed particle number")


def read_local_form(model, orders, states) -> dict:
    """Readout of ``orders`` on the manifold ``states``: a dict with ``readout`` (its name),
    ``terms`` (Pauli terms ``(label, [c per order])`` of a pseudo-spin readout), ``couplings``,
    ``residual`` and ``warnings``; ``couplings`` is empty and ``readout`` starts with
    ``"matrix ("`` when there is no named readout."""
    basis, reason = product_manifold(model, states)
    if basis is None:
        return {"readout": f"matrix ({reason})", "terms": {}, "couplings": [], "residual": {},
                "warnings": [f"no named readout: {reason}"]}
    if (model.site.type == "spin" and basis.is_hull and np.all(basis.sizes == 2)):
        return _pseudo_spin(model, basis, orders)
    try:
        strings = strings_of_orders(basis, orders, tol=TERM_TOL)
    except SizeError as exc:            # the readout is optional: keep the matrices
        return {"readout": f"matrix ({exc})", "terms": {}, "couplings": [], "residual": {},
                "warnings": [f"no named readout: {exc}"]}
    couplings, residual = name_strings(model, basis, strings, len(orders), tol=COUPLING_TOL)
    return {"readout": f"{LOCAL_READOUT} ({_describe(basis)})", "terms": {},
            "couplings": couplings, "residual": residual, "warnings": []}


def _pseudo_spin(model, basis: LocalBasis, orders) -> dict:
    n = basis.n_sites
    qubit = basis.codes.astype(np.int64) @ (1 << np.arange(n, dtype=np.int64))
    perm = sp.csr_matrix((np.ones(qubit.size), (qubit, np.arange(qubit.size))),
                         shape=(2**n, 2**n))
    terms = pauli_coefficients_by_order([perm @ h @ perm.T for h in orders], n, tol=TERM_TOL)
    rings, triangles = lattice_cycles(model.lattice)
    couplings, residual = spin_couplings(terms, n, orders=list(range(len(orders))),
                                         tol=COUPLING_TOL, ring_cycles=rings,
                                         triangles=triangles)
    states = " ".join(basis.labels[0])
    return {"readout": f"{PSEUDO_SPIN_READOUT} (S^z = {states.replace(' ', ', ')} as up, down)",
            "terms": terms, "couplings": couplings, "residual": residual, "warnings": []}
