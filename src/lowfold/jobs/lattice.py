"""Effective models and ground-state energies of infinite lattices (linked clusters).

:func:`derive_infinite` and :func:`energy_per_site` run the linked-cluster expansion of
:mod:`lowfold.perturbation.linked_clusters` with one Schrieffer–Wolff calculation per
distinct cluster graph: the derive job on a ``graph`` model with the same site type, the
V terms restricted to the cluster's edges (bonds and groups of sites,
:mod:`lowfold.jobs.lattice_groups`) and the one-site H0 terms on its sites.  The sum
per unit cell is read out as coupling classes (:class:`lowfold.results.CouplingClass`).

Requirements (a :class:`~lowfold.errors.ModelError` otherwise): H0 is a sum of one-site
terms, the manifold is the lowest level of H0 (a product of one-site manifolds), the sector
fixes no total, and V terms act on bond classes, translated groups (three-site paths,
cycles, patterns) or all sites; no flux or explicit phases.

Readouts.  When the one-site manifold is one spin-1/2 (or pseudo-spin-1/2) the clusters'
effective Hamiltonians are Pauli strings; otherwise (``filling = "mixed"``: the doped Mott
insulator {0, u, d}; spins with three or more kept states; bosons) they are strings of
X-operators with Jordan-Wigner signs (:mod:`lowfold.readout.local_strings`), whose fermion
factors are reordered with their sign when a weight is embedded
(:mod:`lowfold.perturbation.linked_clusters`), and the sum per cell is named by
:func:`lowfold.jobs.lattice_classes.read_local_classes`.  Clusters are then computed without
a fixed particle number (their manifold is the whole product of one-site manifolds, on which
the string expansion is unique), and the bridge pruning is off: with mixed fillings a
particle may cross a bridge once.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, replace

import numpy as np

from lowfold.build.hamiltonian import Hamiltonian
from lowfold.errors import ModelError
from lowfold.jobs.lattice_classes import formula_model, read_classes, read_local_classes
from lowfold.jobs.lattice_groups import (cell_reach, coloured_groups, ordered_colours,
                                         term_groups_on, term_width, with_bond_classes)
from lowfold.model.lattice import Lattice, make_lattice
from lowfold.model.model import Model, PerturbationSpec
from lowfold.model.sector import Sector
from lowfold.model.terms import ONE_SITE_TYPES
from lowfold.perturbation.linked_clusters import (ClusterWeights, LatticeSum,
                                                  connected_edge_sets, lattice_sum,
                                                  sum_embeddings)
from lowfold.perturbation.orders import validate_order
from lowfold.readout.local_basis import LocalBasis, product_manifold
from lowfold.readout.local_strings import strings_of_orders
from lowfold.readout.pauli import parse_pauli_string
from lowfold.results import EffectiveModel, ManifoldSummary, StateSeries

__all__ = ["LinkedClusterRun", "derive_infinite", "energy_per_site", "linked_cluster_sum",
           "check_linked_cluster_model", "open_cluster_sum", "read_classes", "formula_model",
           "series_infinite"]

MAX_ORDER = 40        # as the derive job
STRING_TOL = 1e-12    # X-operator strings of a cluster at or below this are left out


@dataclass(frozen=True)
class LinkedClusterRun:
    """One linked-cluster sum: the per-cell operator and what it took."""

    total: LatticeSum
    patch: Lattice
    reference: int
    n_basis: int
    seconds: float
    filling_note: str | None = None
    local: LocalBasis | None = None       # one-site basis of a local-operator readout


def check_linked_cluster_model(model: Model) -> None:
    """Raise a ModelError saying what is wrong when the linked-cluster route cannot take
    ``model``."""
    spec = model.perturbation
    if spec is None:
        model.unperturbed_labels          # raises the ModelError that explains it
    if (spec.window is not None or spec.manifold != "lowest") and not _constant_h0(model):
        raise ModelError("an infinite lattice needs manifold = \"lowest\" (a product of one-site "
                         "manifolds), not an energy window; remove perturbation.window")
    if not model.sector.is_full:
        raise ModelError("an infinite lattice has no fixed totals: remove particles/sz from "
                         "[sector] and select the filling with one-site H0 terms (e.g. a "
                         "potential of -U/2 for the half-filled Hubbard model)")
    for term in model.terms:
        one_site = (term.type in ONE_SITE_TYPES + ("constant",)
                    or (term.type == "product" and term.sites is not None))
        if term.label in spec.unperturbed and not one_site:
            raise ModelError(f"H0 term {term.label!r} ({term.type}) acts on bonds; the "
                             "linked-cluster expansion needs H0 to be a sum of one-site terms: "
                             "move it to the perturbation, or give the lattice a size")
        if term.bonds is not None and not isinstance(term.bonds, str):
            raise ModelError(f"term {term.label!r}: explicit bonds on an infinite lattice; use a "
                             "bond class (nearest, next-nearest, third)")
        if term.sites is not None and term.sites != "all":
            raise ModelError(f"term {term.label!r}: explicit sites on an infinite lattice; use "
                             "sites = \"all\"")
        if (term.type == "product" and term.bonds is not None and term.operators is not None
                and len(set(term.operators)) > 1 and not term.conjugate):
            raise ModelError(f"term {term.label!r}: a product of different operators on bonds "
                             "has a direction, which the cluster graphs do not keep")


def _constant_h0(model: Model) -> bool:
    """Whether H0 is only ``constant`` terms (an exported effective model: the manifold is
    the whole space, selected by a window around the constant)."""
    return all(model.term(label).type == "constant" for label in model.unperturbed_labels)


def one_site_filling(model: Model) -> tuple[int | None, str | None]:
    """Particles per site of the manifold, and a note when it had to be chosen.

    H0 is a sum of one-site terms, so its lowest level is a product of one-site levels.  When
    the lowest one-site level holds states of different particle numbers (``U n_up n_dn``
    alone: 0 or 1 electron), the manifold would mix fillings; then the largest of them is
    taken (1 electron per site: the Mott state at half filling; 1 boson per site for
    ``(U/2) n (n - 1)``), and the note says so.  ``(None, None)`` for sites without particles.
    """
    if not model.site.has_particles or model.perturbation.filling == "mixed":
        return None, None
    lowest = {}
    capacity = model.site.modes * (model.site.radix - 1)
    for particles in range(capacity + 1):
        one_site = _cluster_model(model, {}, (1, ()), 1, Sector(particles=particles))
        h0 = Hamiltonian.of(one_site, list(one_site.unperturbed_labels))
        lowest[particles] = float(np.min(h0.diagonal())) if h0.size else np.inf
    floor = min(lowest.values())
    scale = max(1.0, max(abs(e) for e in lowest.values() if np.isfinite(e)))
    degenerate = [n for n, e in lowest.items() if e <= floor + 1e-12 * scale]
    chosen = max(degenerate)
    if len(degenerate) == 1:
        return chosen, None
    return chosen, (f"the lowest one-site level of H0 holds {', '.join(map(str, degenerate))} "
                    f"particles; the manifold takes {chosen} per site (the Mott state at this "
                    "integer filling); a one-site potential in H0 selects another filling")


def _cluster_model(model: Model, labels: dict, graph, order: int,
                   sector: Sector | None = None) -> Model:
    """The ``graph`` model of one cluster: V terms on its edges (bonds and groups, in their
    order), one-site terms on its sites,
    in ``sector`` (default: no fixed totals)."""
    n, edges = graph
    links = {tuple(sorted(pair)) for edge in edges for pair in zip(edge[:-2], edge[1:-1])}
    lattice = make_lattice("graph", sites=n, bonds=sorted(links))
    terms = []
    for term in model.terms:
        if term.type == "constant":    # no energy per site: a number on every cluster
            terms.append(replace(term, strength=0.0))    # would count once per cluster
            continue
        if term_width(term) == 1:
            terms.append(replace(term, sites="all"))
            continue
        mine = tuple(edge[:-1] for edge in edges if term.label in labels[edge[-1]])
        if mine and term.bonds is not None:
            terms.append(replace(term, bonds=mine))
        elif mine:                    # a group term: its groups, in its order, as sites
            terms.append(replace(term, sites=mine, pattern=None, cycles=None))
    window = None
    if _constant_h0(model):
        # H0 is a number (zero on a cluster): every state is in the manifold
        window = (-1.0, 1.0)
    spec = PerturbationSpec(model.perturbation.unperturbed, order,
                            "lowest" if window is None else None, window,
                            model.perturbation.tolerance)
    return Model(lattice, model.site, tuple(terms), sector or Sector(), model.parameters, spec,
                 model.title, model.source)


@dataclass(frozen=True)
class GraphSolver:
    """The effective Hamiltonian of one canonical cluster graph, as a Pauli operator with
    coefficients per order ``0..order`` (or, with ``energy``, the ground-state energy of a
    non-degenerate reference as the identity's coefficients).  A plain picklable object:
    distinct graphs may be solved on Dask workers (``graph_map``)."""

    model: Model
    labels: dict
    order: int
    energy: bool = False
    filling: int | None = None
    local: bool = False

    def __call__(self, graph):
        from lowfold.jobs.derive import derive
        sector = None if self.filling is None else Sector(particles=self.filling * graph[0])
        result = derive(_cluster_model(self.model, self.labels, graph, self.order, sector),
                        self.order, compare_exact=False)
        if self.energy:
            if result.manifold.dimension != 1:
                raise ModelError(f"the ground state of H0 is {result.manifold.dimension}-fold "
                                 "degenerate on a cluster; the energy series needs a "
                                 "non-degenerate reference state")
            return {(): np.array([float(np.real(h.toarray()[0, 0])) for h in result.orders])}
        if self.local:
            return _local_strings(result)
        if not result.manifold.spin_form:
            raise ModelError(f"the manifold is not one spin-1/2 per site "
                             f"({result.manifold.readout}); the infinite-lattice readout needs "
                             "a one-site manifold of two states")
        out = {}
        for term in result.terms:
            key = tuple(sorted(parse_pauli_string(term.operator)))
            out[key] = np.array([term.orders.get(m, 0.0) for m in range(self.order + 1)])
        return out


def _local_strings(result) -> dict:
    """The X-operator strings of a cluster's effective Hamiltonian, keys
    ``((site, (a, b)), ...)`` (codes of :mod:`lowfold.readout.local_basis`)."""
    basis, reason = product_manifold(result.model, result.manifold.states)
    if basis is None or not basis.is_hull:
        raise ModelError("the manifold of a cluster is not a product of one-site manifolds"
                         f"{f' ({reason})' if reason else ''}; the infinite-lattice readout "
                         "needs one")
    found = strings_of_orders(basis, list(result.orders), tol=STRING_TOL)
    out = {}
    for key, values in found.items():
        values = np.asarray(values)
        if np.iscomplexobj(values) and np.abs(values.imag).max() <= 1e-13 * max(
                1.0, np.abs(values).max()):
            values = values.real
        out[tuple((s, (a, b)) for s, a, b in key)] = values
    return out


def one_site_basis(model: Model, filling: int | None) -> LocalBasis | None:
    """The one-site manifold as a local basis, or ``None`` when it is one spin-1/2 or
    pseudo-spin-1/2 (the Pauli readout)."""
    from lowfold.jobs.derive import derive
    sector = None if filling is None else Sector(particles=filling)
    result = derive(_cluster_model(model, {}, (1, ()), 1, sector), 1, compare_exact=False)
    if result.manifold.spin_form:
        return None
    basis, reason = product_manifold(result.model, result.manifold.states)
    if basis is None:
        raise ModelError(f"the one-site manifold has no local readout: {reason}")
    return basis


def _odd_letters(basis: LocalBasis | None) -> frozenset | None:
    """X-operators ``(a, b)`` that change a site's fermion parity (None: no fermions)."""
    if basis is None or not basis.fermionic:
        return None
    parity = basis.parity[0]
    return frozenset((a, b) for a in range(parity.size) for b in range(parity.size)
                     if parity[a] != parity[b])


def _solver(model: Model, labels: dict, order: int, energy: bool, filling: int | None = None,
            local: bool = False):
    return GraphSolver(model, labels, order, energy, filling, local)


def _even_trees(model: Model) -> bool:
    """Bridge pruning (``ClusterWeights``, ``even_trees``) holds when every V term moves
    particles across its bond (hopping) and
    the H0 manifold fixes each site's particle number (here: H0 of one-site terms that
    commute with the particle number, whose lowest level is checked non-mixed by derive)."""
    if model.perturbation.filling == "mixed":
        return False
    v = [model.term(label) for label in model.perturbation_labels]
    return bool(v) and all(t.type == "hopping" for t in v)


def linked_cluster_sum(model: Model, order: int, *, energy: bool = False,
                       prune: bool = True, graph_map=None) -> LinkedClusterRun:
    """The linked-cluster sum per unit cell of ``model`` (an infinite lattice) to ``order``.

    ``graph_map(function, graphs) -> list`` computes the distinct graphs (independent
    calculations; default: one after the other here, a Dask client's map on a cluster).
    """
    start = time.perf_counter()
    check_linked_cluster_model(model)
    model = with_bond_classes(model)
    lat = model.lattice
    v_terms = [model.term(label) for label in model.perturbation_labels]
    extent = max([0] + [abs(int(x)) for t in v_terms for offset in (t.pattern or ())
                        for x in offset[:len(lat.translations)]])
    probe = lat.patch(max(5, 2 * extent + 3))
    reach = max([1] + [cell_reach(probe, term_groups_on(t, probe)) for t in v_terms
                       if term_width(t) > 1])
    cells = 2 * max(order, 1) * reach + 3
    patch = lat.patch(cells)
    n_basis, ndim = len(lat.unit_cell), len(lat.translations)
    centre = cells // 2
    reference = sum(centre * cells**k for k in range(ndim))
    groups, colours, labels = coloured_groups(model, patch)
    filling, filling_note = one_site_filling(model)
    local = None if energy else one_site_basis(model, filling)
    weights = ClusterWeights(_solver(model, labels, order, energy, filling, local is not None),
                             order, even_trees=prune and _even_trees(model), mapper=graph_map,
                             odd=_odd_letters(local), directed=ordered_colours(model, labels))
    cell_of = np.arange(patch.n_sites) // n_basis
    total = lattice_sum(patch.n_sites, groups, colours, cell_of, reference, n_basis, weights,
                        order)
    return LinkedClusterRun(total, patch, reference, n_basis, time.perf_counter() - start,
                            filling_note, local)


def open_cluster_sum(model: Model, cluster: Lattice, order: int, *, energy: bool = False,
                     prune: bool = True) -> dict:
    """Sum of the weights of every connected subcluster of a finite open ``cluster`` of the
    model's shape, on the cluster's sites (the linked-cluster identity: this equals the
    effective Hamiltonian of the cluster itself, order by order)."""
    check_linked_cluster_model(model)
    model = with_bond_classes(model)
    bonds, colours, labels = coloured_groups(model, cluster)
    filling, _ = one_site_filling(model)
    local = None if energy else one_site_basis(model, filling)
    weights = ClusterWeights(_solver(model, labels, order, energy, filling, local is not None),
                             order, even_trees=prune and _even_trees(model),
                             odd=_odd_letters(local), directed=ordered_colours(model, labels))
    at: dict[int, list[int]] = {}
    for k, group in enumerate(bonds):
        for s in group:
            at.setdefault(s, []).append(k)
    adjacent = [sorted({f for s in bonds[k] for f in at[s] if f != k}) for k in range(len(bonds))]
    sets = connected_edge_sets(adjacent, range(len(bonds)), min(order, len(bonds)))
    clusters = [((s,), ()) for s in range(cluster.n_sites)]
    clusters += [(tuple(sorted({s for n in es for s in bonds[n]})),
                  tuple((*bonds[n], colours[n]) for n in es)) for es in sets]
    return sum_embeddings(clusters, weights)


def energy_per_site(model: Model, order: int | None = None, *, prune: bool = True,
                    graph_map=None) -> np.ndarray:
    """Ground-state energy per site of an infinite lattice, coefficient of each order
    ``0..order`` (non-degenerate product reference state of H0)."""
    order = validate_order(model.perturbation.order if order is None else order, maximum=MAX_ORDER)
    run = linked_cluster_sum(model, order, energy=True, prune=prune, graph_map=graph_map)
    return run.total.terms.get((), np.zeros(order + 1)) / run.n_basis


def series_infinite(model: Model, order: int | None = None, *, state: str | None = None,
                    sweep=None, progress=None, graph_map=None) -> StateSeries:
    """The series job on an infinite lattice: the ground-state energy **per site**.

    ``energies[m]`` is the order-``m`` coefficient of :func:`energy_per_site` (their sum is
    ``energy``); the reference is the product ground state of H0.  There is no exact value,
    Pade table or ratio test (they belong to a finite cluster; ``first_order_norm`` is 0), and
    no other state or sweep of the coupling (a :class:`~lowfold.errors.ModelError` if one is
    asked for).  A warning says that the energies are per site.
    """
    if state is not None or sweep is not None:
        raise ModelError("an infinite lattice gives the series of the ground-state energy per "
                         "site only: no other state and no sweep of the coupling; give the "
                         "lattice a size for those")
    if model.perturbation is None:
        model.unperturbed_labels
    order = validate_order(model.perturbation.order if order is None else order,
                           maximum=MAX_ORDER)
    if progress:
        progress(f"linked clusters to order {order} (energy per site)")
    run = linked_cluster_sum(model, order, energy=True, graph_map=graph_map)
    energies = run.total.terms.get((), np.zeros(order + 1)) / run.n_basis
    note = (f"infinite lattice: energies are per site (linked-cluster expansion, "
            f"{run.total.clusters} clusters per unit cell, {run.total.distinct} distinct graphs "
            "computed); the diagnostics of a finite state (exact value, Pade, ratio test, "
            "first-order state: norm written as 0) are not computed")
    notes = (note,) if run.filling_note is None else (note, run.filling_note)
    return StateSeries(np.asarray(energies, dtype=float), "product ground state of H0", None,
                       None, None, None, 0.0, warnings=notes)


def derive_infinite(model: Model, order: int | None = None, *, prune: bool = True,
                    progress=None, compare_exact: bool = False, check_levels=8,
                    fit_scaling: bool = False, graph_map=None) -> EffectiveModel:
    """The effective model of an infinite lattice as coupling classes (``graph_map``: see
    :func:`linked_cluster_sum`); with ``compare_exact``, checked on a periodic cluster
    (:mod:`lowfold.jobs.lattice_check`; local-operator readouts:
    :mod:`lowfold.jobs.lattice_local_check`)."""
    if model.perturbation is None:
        model.unperturbed_labels
    order = validate_order(model.perturbation.order if order is None else order, maximum=MAX_ORDER)
    if progress:
        progress(f"linked clusters to order {order}")
    run = linked_cluster_sum(model, order, prune=prune, graph_map=graph_map)
    energy = float(np.real(run.total.terms.get((), np.zeros(1))[0])) / run.n_basis
    if run.local is None:
        classes = read_classes(run, order, model)
        summary = ManifoldSummary(2, energy, None, "spin-1/2")
    else:
        classes = read_local_classes(run, order, model)
        labels = " ".join(run.local.labels[0])
        summary = ManifoldSummary(int(run.local.sizes[0]), energy, None,
                                  f"local operators ({{{labels}}} per site)")
    note = (f"infinite lattice: linked-cluster expansion, {run.total.clusters} clusters per "
            f"unit cell, {run.total.distinct} distinct graphs computed")
    notes = (note,) if run.filling_note is None else (note, run.filling_note)
    result = EffectiveModel(order, summary, warnings=notes, model=model, classes=classes)
    if compare_exact and run.local is not None:
        from lowfold.jobs.lattice_local_check import attach_local_check
        result = attach_local_check(result, run, levels=check_levels, fit_scaling=fit_scaling,
                                    progress=progress)
    elif compare_exact:
        from lowfold.jobs.lattice_check import attach_check
        result = attach_check(result, levels=check_levels, fit_scaling=fit_scaling,
                              progress=progress)
    return result
