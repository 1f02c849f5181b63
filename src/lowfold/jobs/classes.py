"""Coupling classes of a translation-invariant cluster: the couplings grouped by symmetry.

On a cluster periodic in every direction, the couplings that a translation maps into each
other are one orbit; orbits of the same kind, class name (:func:`~lowfold.readout.classes.
class_name`) and value (within a tolerance) are one :class:`~lowfold.results.CouplingClass`,
so that the x and y bonds of a square cluster are one ``nearest`` class.  The grouping reads
results and makes result objects, hence it lives above ``readout/`` and ``results/``.

Conventions
-----------
- A member's ``orders`` are those of one coupling (not summed over the class); its
  ``positions`` are its sites at their minimum images (``readout.classes.member_positions``),
  in the order the coupling uses them; ``multiplicity`` is members per site.
- ``constant``: one member per site with the constant divided by the number of sites (the
  energy per site), class ``constant``, no positions.
- Multi-spin strings without a name (the readout's residual) are ``pauli`` members with
  ``operator`` the letters on the member's sites (``"Z Z Z Z"``).
- A translation maps a DM pair (i, j) onto (j, i) with the vector's sign flipped, and a
  triangle onto its reverse orientation with the chirality's sign flipped; ring terms are
  symmetric under the dihedral group of their 4-cycle.
- A ring or chirality member on a cycle of the cluster's bonds that is no cycle of the
  lattice (it winds around a periodic direction) is class ``4-cycle around the cluster``
  (``triangle around the cluster``).
- Values are equal when every order agrees within ``1e-6`` of the largest contribution of
  that order among all couplings (plus 1e-14).  A coupling whose translated images are
  missing or differ (a site-dependent term) gets no class, and a warning says so.
"""

from __future__ import annotations

import numpy as np

from lowfold.model.lattice import Lattice
from lowfold.model.model import Model
from lowfold.readout.classes import (class_name, lattice_shells, member_positions,
                                     translation_invariant, translations)
from lowfold.readout.couplings import Coupling
from lowfold.readout.formulas import coupling_formula
from lowfold.readout.pauli import parse_pauli_string
from lowfold.results import CouplingClass
from lowfold.results.effective import COUPLING_TOL

__all__ = ["group_into_classes"]

_RTOL = 1e-6
_SYMMETRIC_LOCAL = ("hopping", "density", "biquadratic", "particle-hopping", "hole-hopping",
                    "particle-interaction", "hole-interaction")


def _group(generators: list[np.ndarray], n: int) -> list[np.ndarray]:
    """Every product of the generators (a translation group: commuting, finite)."""
    seen = {tuple(range(n)): np.arange(n)}
    frontier = [np.arange(n)]
    while frontier:
        new = []
        for perm in frontier:
            for g in generators:
                image = g[perm]
                if tuple(image) not in seen:
                    seen[tuple(image)] = image
                    new.append(image)
        frontier = new
    return list(seen.values())


def _canonical(kind: str, sites: tuple, letters: tuple | None) -> tuple[tuple, tuple, float]:
    """``(sites, letters, sign)``: the stored form of a coupling on ``sites``."""
    if kind in ("exchange", "anisotropy"):
        return tuple(sorted(sites)), letters, 1.0
    if kind == "dm":
        return (tuple(sites), letters, 1.0) if sites[0] < sites[1] else \
            ((sites[1], sites[0]), letters, -1.0)
    if kind == "chirality":
        k = sites.index(min(sites))
        rotated = sites[k:] + sites[:k]
        return (rotated, letters, 1.0) if rotated[1] < rotated[2] else \
            ((rotated[0], rotated[2], rotated[1]), letters, -1.0)
    if kind == "ring":
        rotations = [sites[r:] + sites[:r] for r in range(4)]
        rotations += [tuple(reversed(c)) for c in rotations]
        return min(rotations), letters, 1.0
    if kind in _SYMMETRIC_LOCAL:          # local-operator readout (readout/local_names.py)
        return tuple(sorted(sites)), letters, 1.0
    if kind == "three-site":              # (i, j, k) with middle j is also (k, j, i)
        return min(tuple(sites), tuple(reversed(sites))), letters, 1.0
    if kind == "pauli":
        pairs = sorted(zip(sites, letters))
        return tuple(s for s, _ in pairs), tuple(x for _, x in pairs), 1.0
    return tuple(sites), letters, 1.0


def _members(couplings, residual, n_orders):
    """``{(kind, sites, letters): per-order array}`` of the named couplings and pauli strings."""
    members = {}
    for c in couplings:
        if c.kind == "string":            # X-operator strings without a name: no class
            continue
        values = np.zeros((n_orders,) + np.shape(c.value))
        for m, v in c.orders.items():
            values[int(m)] = np.asarray(v, dtype=float)
        members[(c.kind, tuple(c.sites), None)] = values
    for label, values in (residual or {}).items():
        ops = parse_pauli_string(label)
        members[("pauli", tuple(s for s, _ in ops), tuple(x for _, x in ops))] = \
            np.asarray(values, dtype=float)
    return members


def group_into_classes(model: Model, couplings: tuple[Coupling, ...] | list[Coupling],
                       residual: dict | None = None, *, orders: int | None = None,
                       warnings: list[str] | None = None) -> tuple[CouplingClass, ...]:
    """The couplings of a translation-invariant cluster grouped into coupling classes.

    Parameters
    ----------
    model : Model
        The model derived; its lattice must be periodic in every direction (else ``()``).
    couplings : sequence of Coupling
        Named couplings (integer order keys), as in ``EffectiveModel.couplings``.
    residual : dict, optional
        Pauli strings without a name, ``{label: [c per order 0, 1, ...]}``
        (``EffectiveModel.residual``): ``pauli`` members.
    orders : int, optional
        Highest order (default: the highest found).
    warnings : list of str, optional
        Receives one line per coupling kind with couplings that have no class.

    Returns
    -------
    tuple of CouplingClass
        Ordered by kind as the couplings are, then by class name and positions.
    """
    lattice: Lattice = model.lattice
    if not translation_invariant(lattice):
        return ()
    highest = max([int(m) for c in couplings for m in c.orders]
                  + [len(v) - 1 for v in (residual or {}).values()] + [orders or 0])
    members = _members(couplings, residual, highest + 1)
    if not members:
        return ()
    group = _group(translations(lattice), lattice.n_sites)
    scale = {kind: np.max([np.max(np.abs(v), axis=tuple(range(1, v.ndim))) for (k, _, _), v
                           in members.items() if k == kind], axis=0) for kind, _, _ in members}
    same = lambda a, b, kind: bool(np.all(np.abs(a - b).reshape(len(a), -1).max(axis=1)  # noqa: E731
                                          <= _RTOL * scale[kind] + 1e-14))
    orbits, lost, done = [], {}, set()
    for key, values in members.items():
        if key in done:
            continue
        kind, sites, letters = key
        orbit, invariant = set(), True
        for perm in group:
            image, image_letters, sign = _canonical(kind, tuple(int(perm[s]) for s in sites),
                                                    letters)
            other = (kind, image, image_letters)
            if other not in members or not same(members[other], sign * values, kind):
                invariant = False
            else:
                orbit.add(other)
        done |= orbit | {key}
        if invariant:
            orbits.append((key, sorted(orbit, key=lambda k: k[1])))
        else:
            lost[kind] = lost.get(kind, 0) + len(orbit | {key})
    for kind, count in lost.items():
        if warnings is not None:
            warnings.append(f"{count} {kind} coupling(s) differ from their translated images: "
                            "the cluster is not translation invariant for them, they have no class")
    return _classes(model, lattice, members, orbits, same)


def _classes(model, lattice, members, orbits, same):
    shells = lattice_shells(lattice)
    n = lattice.n_sites
    merged = []          # [name, first member key, member count, first member per orbit]
    for _, orbit in orbits:
        first = orbit[0]
        kind, sites, letters = first
        name = class_name(lattice, member_positions(lattice, sites), shells=shells)
        if kind in ("ring", "chirality") and name not in ("4-cycle", "triangle"):
            name = f"{'4-cycle' if kind == 'ring' else 'triangle'} around the cluster"
        for entry in merged:
            if entry[0] == name and entry[1][0] == kind and entry[1][2] == letters and \
                    same(members[entry[1]], members[first], kind):
                entry[2] += len(orbit)
                entry[3].append(first[1])
                break
        else:
            merged.append([name, first, len(orbit), [first[1]]])
    out = []
    for name, (kind, sites, letters), count, orbit_sites in merged:
        values = members[(kind, sites, letters)]
        per_site = kind == "constant"
        if per_site:
            values = values / n
        orders = {m: (float(v) if np.ndim(v) == 0 else np.asarray(v).tolist())
                  for m, v in enumerate(values) if np.max(np.abs(v)) > COUPLING_TOL}
        out.append(CouplingClass(kind, name, member_positions(lattice, sites),
                                 1.0 if per_site else count / n, orders,
                                 coupling_formula(model, orders) if orders else None,
                                 " ".join(letters) if letters else None,
                                 tuple(member_positions(lattice, m) for m in orbit_sites)))
    rank = ["constant", "field", "exchange", "dm", "anisotropy", "chirality", "ring", "pauli"]
    return tuple(sorted(out, key=lambda c: (rank.index(c.kind) if c.kind in rank else len(rank),
                                            len(c.positions), c.name, c.positions)))
