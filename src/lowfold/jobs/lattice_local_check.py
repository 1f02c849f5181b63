"""The exact check of an infinite lattice's local-operator couplings on a periodic cluster.

The named couplings per unit cell (:func:`lowfold.jobs.lattice_classes.local_cell_couplings`,
what the coupling classes hold) are placed on a periodic cluster of the same lattice, every
translation of every member, as strings of X-operators (each coupling's own strings,
:func:`lowfold.readout.local_names.coupling_strings`; a leftover ``string`` its string): the
fermion factors of a member are reordered, with their sign, into the cluster's site order.
In every block of conserved particle number and S^z, the effective spectrum summed to each
order is compared with the lowest exact levels of the original model there, as the finite
check does (:mod:`lowfold.jobs.check`).  The export of the spin readout
(:mod:`lowfold.jobs.lattice_check`) is not used: model files have no term types for
operators projected onto kept states.

The cluster (:func:`local_check_cluster`): among the periodic clusters of 4 to 12 sites of the
shape whose largest exact block has at most ``MAX_BLOCK_STATES`` states, one whose shortest
winding loop is longer than the order (every order compared; the fewest sites), else the one
with the longest winding loop (orders from it on are not compared, and a warning says so).
"""

from __future__ import annotations

import dataclasses
import itertools
import re
from fractions import Fraction
from typing import Callable

import numpy as np
import scipy.linalg as la

from lowfold.build.basis import sector_size
from lowfold.build.hamiltonian import build_basis, compile_operator, hamiltonian_matrix
from lowfold.errors import LowfoldError, ModelError
from lowfold.jobs.check import SCALE_FACTORS, _fit_powers
from lowfold.jobs.check_levels import check_levels_value, levels_to_compare
from lowfold.jobs.check_winding import shortest_winding_loop
from lowfold.jobs.lattice_classes import local_cell_couplings
from lowfold.model.model import Model
from lowfold.model.sector import Sector
from lowfold.perturbation.linked_clusters import reorder_sign
from lowfold.readout.local_basis import product_slice, product_states, uniform_basis
from lowfold.readout.local_names import coupling_strings
from lowfold.readout.local_strings import matrix_of_strings
from lowfold.results import CheckedBlock, DeriveCheck
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["local_check_cluster", "cluster_strings", "local_lattice_check",
           "attach_local_check", "MAX_BLOCK_STATES"]

MAX_BLOCK_STATES = 20_000       # largest exact block (particle number, S^z) of the cluster
_SITES = (4, 12)


def local_check_cluster(model: Model, order: int, one_site, size=None
                        ) -> tuple[Model, int | None]:
    """The original model on the periodic cluster of the check, and its shortest winding
    loop (``one_site``: the one-site manifold; ``size``: cells per direction; default: the
    module's rule)."""
    if size is not None:
        return _periodic(model, tuple(int(n) for n in np.atleast_1d(size)))
    lat = model.lattice
    ndim, n_basis = len(lat.translations), len(lat.unit_cell)
    best = None
    candidates = [c for c in itertools.product(range(2, _SITES[1] + 1), repeat=ndim)
                  if _SITES[0] <= n_basis * int(np.prod(c)) <= _SITES[1]]
    candidates.sort(key=lambda c: (int(np.prod(c)), max(c) - min(c)))   # fewest sites first
    for cells in candidates:
        if best is not None and best[0][0] == order + 1:
            break                     # every order compared, on the fewest sites
        try:
            cluster, w = _periodic(model, cells)
        except LowfoldError:
            continue
        if max(sector_size(cluster.site, cluster.n_sites, s)
               for s in _sectors(cluster, one_site)) > MAX_BLOCK_STATES:
            continue
        reach = w or 0
        key = (min(reach, order + 1), -cluster.n_sites, -(max(cells) - min(cells)))
        if best is None or key > best[0]:
            best = (key, cluster, w)
    if best is None:
        raise ModelError(f"no periodic {lat.shape} cluster of {_SITES[0]} to {_SITES[1]} sites "
                         f"with exact blocks of at most {MAX_BLOCK_STATES:,} states")
    return best[1], best[2]


def _periodic(model: Model, cells) -> tuple[Model, int | None]:
    cluster = model.with_lattice(size=list(cells), boundary="periodic").with_sector(Sector())
    return cluster, shortest_winding_loop(cluster)


def _sectors(cluster: Model, one_site) -> list[Sector]:
    """The blocks of the check: particle number (sites with particles; those the product of
    one-site manifolds has) times total S^z (when the model conserves it)."""
    site, n = cluster.site, cluster.n_sites
    op = compile_operator(cluster, check_sector=False)
    numbers = [None]
    if site.has_particles:
        held = one_site.particles[0]
        numbers = list(range(n * int(held.min()), n * int(held.max()) + 1))
    out = []
    for particles in numbers:
        if not op.conserves_sz or not site.has_spin:
            out.append(Sector(particles=particles))
            continue
        top = _max_twice_sz(site, n, particles)
        for twice in range(-top, top + 1, 2):
            out.append(Sector(particles=particles, sz=Fraction(twice, 2)))
    return [s for s in out if sector_size(site, n, s) > 0]


def _max_twice_sz(site, n: int, particles) -> int:
    if site.type == "spin":
        return round(2 * float(site.spin)) * n
    return min(particles, 2 * n - particles) if site.type == "electron" else particles


# --------------------------------------------------------------------------- the couplings

def cluster_strings(run, couplings, cluster: Model, order: int) -> list[dict]:
    """Strings of each order ``0..order`` on ``cluster``: every member of ``couplings``
    (representatives on ``run.patch``) translated onto the periodic cluster (site order of
    the cluster, fermion signs included)."""
    patch, n_basis = run.patch, run.n_basis
    basis = uniform_basis(run.local, patch.n_sites)
    odd = _odd(run.local)
    size = list(cluster.lattice.size)
    ndim, cells = len(size), patch.size[0]
    ref = [(run.reference // cells**k) % cells for k in range(ndim)]
    out = [{} for _ in range(order + 1)]
    for c in couplings:
        strings = _strings_of(c, run, basis, cluster)
        for shift in itertools.product(*[range(n) for n in size]):
            site_of = {}
            for key in strings:
                for s, _, _ in key:
                    if s not in site_of:
                        site_of[s] = _cluster_site(s, n_basis, cells, ref, shift, size)
            if len({site_of[s] for s in site_of}) < len(site_of):
                raise ModelError("a coupling wraps onto itself on the check's cluster; "
                                 "give a larger cluster")
            for key, value in strings.items():
                new = tuple(sorted((site_of[s], a, b) for s, a, b in key))
                pairs = tuple((s, (a, b)) for s, a, b in key)
                sign = reorder_sign(pairs, site_of, odd) if odd else 1.0
                for m, v in c.orders.items():
                    if int(m) <= order:
                        coefficient = sign * value * _scalar(c.kind, v)
                        out[int(m)][new] = out[int(m)].get(new, 0.0) + coefficient
    return out


def _scalar(kind: str, value) -> float:
    """The coefficient that multiplies a template of unit value (a field ``[0, 0, h]``: h)."""
    if kind == "field":
        return float(np.ravel(value)[-1])
    if isinstance(value, (list, tuple)):           # a complex string value [re, im]
        value = complex(*value)
    value = complex(value)             # complex for a complex or spin-orbit hopping
    return value.real if value.imag == 0 else value


def _strings_of(c, run, basis, model: Model) -> dict:
    if c.kind == "string":
        code = {label: k for k, label in enumerate(run.local.labels[0])}
        return {tuple((int(s), code[a], code[b]) for a, b, s in
                      re.findall(r"\|([^>]*)><([^|]*)\|_(\d+)", c.operator)): 1.0}
    if c.kind == "constant":
        return {(): 1.0}
    found = coupling_strings(model, basis, c.kind, c.sites)
    if not found:
        raise ModelError(f"no operator for the coupling {c.kind} on {c.sites}")
    return found


def _odd(one_site) -> frozenset | None:
    if not one_site.fermionic:
        return None
    parity = one_site.parity[0]
    return frozenset((a, b) for a in range(parity.size) for b in range(parity.size)
                     if parity[a] != parity[b])


def _cluster_site(s: int, n_basis: int, cells: int, ref, shift, size) -> int:
    cell, b = divmod(s, n_basis)
    index, stride = 0, 1
    for k in range(len(size)):
        x = (cell // cells**k) % cells - ref[k] + shift[k]
        index += (x % size[k]) * stride
        stride *= size[k]
    return n_basis * index + b


# --------------------------------------------------------------------------- the check

def local_lattice_check(result, run, *, size=None, levels=8, fit_scaling: bool = False,
                        particles=None, progress: Callable[[str], None] | None = None):
    """``(DeriveCheck or None, fits or None, warnings)`` of the local-operator couplings of
    an infinite lattice (module docstring); ``run`` is the linked-cluster run whose
    couplings ``result.classes`` holds; ``particles``: only the blocks of these particle
    numbers (default: every block)."""
    say = progress or (lambda message: None)
    levels = check_levels_value(levels)
    model, order = result.model, result.order
    try:
        cluster, w = local_check_cluster(model, order, run.local, size)
    except ModelError as exc:
        return None, None, [f"exact check skipped: {exc}"]
    name = _name(cluster)
    top = order if w is None else min(order, w - 1)
    warnings = []
    if top < order:
        warnings.append(f"exact check on the {name}: its shortest loop of bonds around it has "
                        f"{w} bonds; orders 0 to {top} are compared")
    couplings, _ = local_cell_couplings(run, order, model)
    try:
        placed = cluster_strings(run, couplings, cluster, top)
        scaled, exact_all, described, ground = _compare(cluster, run.local, placed, levels,
                                                        SCALE_FACTORS if fit_scaling else (1.0,),
                                                        say, name, particles)
    except LowfoldError as exc:
        return None, None, warnings + [f"exact check on the {name} skipped: {exc}"]
    check = DeriveCheck(tuple(sorted(exact_all)), {m: scaled[(1.0, m)] for m in range(top + 1)},
                        levels, tuple(described), ground, cluster=name, winding_loop=w)
    fits = _fit_powers(scaled, SCALE_FACTORS, top, cluster) if fit_scaling else None
    return check, fits, warnings


def _name(cluster: Model) -> str:
    lat = cluster.lattice
    if lat.shape == "chain":
        return f"periodic chain, {cluster.n_sites} sites"
    return f"periodic {lat.shape} {'x'.join(map(str, lat.size))}, {cluster.n_sites} sites"


def _compare(cluster, one_site, placed, levels, factors, say, name, particles=None):
    scaled, exact_all, described, lowest = {}, [], [], {}
    for sector in _sectors(cluster, one_site):
        if particles is not None and sector.particles not in particles:
            continue
        block = cluster.with_sector(sector)
        basis = build_basis(block, max_states=MAX_BLOCK_STATES)
        p_states = product_states(block, basis.states, one_site)
        if not p_states.size:
            continue
        local = product_slice(block, p_states, one_site)
        effective = [matrix_of_strings(local, strings).toarray() for strings in placed]
        p = p_states.size
        k = levels_to_compare(levels, p, basis.size)
        say(f"exact check on the {name}, block {sector}: lowest {k} of {p} levels")
        h0 = hamiltonian_matrix(block, basis, cluster.unperturbed_labels, check=False)
        v = hamiltonian_matrix(block, basis, cluster.perturbation_labels, check=False)
        described.append(CheckedBlock(None if sector.sz is None else str(sector.sz), k, p))
        for factor in factors:
            exact = np.sort(np.real(lowest_eigenpairs(h0 + factor * v, k, tol=1e-12)[0]))[:k]
            if factor == 1.0:
                exact_all.extend(exact.tolist())
            running = np.zeros((p, p), dtype=np.result_type(*effective))
            for m, h in enumerate(effective):
                running = running + factor**m * h
                found = la.eigvalsh(running, subset_by_index=[0, k - 1])
                error = float(np.max(np.abs(found - exact)))
                scaled[(factor, m)] = max(scaled.get((factor, m), 0.0), error)
                if factor == 1.0:
                    pair = (float(exact[0]), float(found[0]))
                    if m not in lowest or pair[0] < lowest[m][0]:
                        lowest[m] = pair
    ground = {m: abs(b - a) for m, (a, b) in lowest.items()}
    return scaled, exact_all, described, ground


def attach_local_check(result, run, *, levels=8, fit_scaling: bool = False, progress=None):
    """``result`` with its :func:`local_lattice_check` (check, scaling and warnings)."""
    check, fits, warnings = local_lattice_check(result, run, levels=levels,
                                                fit_scaling=fit_scaling, progress=progress)
    return dataclasses.replace(result, check=check, scaling=fits,
                               warnings=tuple(result.warnings) + tuple(warnings))
