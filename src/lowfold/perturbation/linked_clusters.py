"""Linked-cluster expansion on an infinite lattice (Gelfand, Singh & Huse, J. Stat. Phys. 59,
1093 (1990)).

The perturbation V is a sum of bond terms, terms on larger groups of sites (three-site
paths, 4-cycles, translated patterns) and one-site terms; H0 is a sum of one-site terms.  A
*cluster* is a connected set of V-bonds and groups, its *edges* (or a single site); a
process of order n of the infinite lattice uses at most n edges, so at order n every
cluster with at most n edges contributes.  The *weight* of a cluster is its own effective Hamiltonian minus the
weights of its connected proper subclusters (embedded on its sites); the effective
Hamiltonian of the lattice is the sum of the weights of every cluster of the lattice.

Conventions
-----------
- An operator is a dict ``key -> ndarray`` of coefficients per order ``0..n``; a key is a
  tuple of ``(site, letter)`` pairs sorted by site (``letter`` one of ``X Y Z``; ``()`` is
  the identity).  Weights of a cluster are stored on its *canonical* site labels.
- Fermions (the local-operator readout, :mod:`lowfold.readout.local_strings`): a letter is
  an X-operator ``(a, b)`` and a key the product of its factors in ascending site order,
  each fermion-parity-odd factor a fermionic operator (with its Jordan-Wigner string).  Such
  a product is a physical operator whatever the site order, but renaming the sites reorders
  its odd factors: :func:`add_embedded` multiplies by the sign of that permutation
  (``odd``, the set of odd letters), so that a subcluster's weight, written in its own
  site order, is added in the order of the cluster or lattice it is embedded in.
- A cluster graph is ``(n_sites, edges)`` with ``edges`` a tuple of ``(a, b, colour)``
  (``a < b`` unless the bond has a direction) or ``(a, b, c, ..., colour)`` for a group in
  its term's order, ``colour`` an integer naming the set of V terms on the edge.  Two
  clusters are the same graph when a relabelling of sites maps edges and colours onto each
  other (keeping the order of ordered edges); the canonical form comes from igraph's
  ``canonical_permutation`` (the BLISS algorithm) on the graph with every edge a vertex of
  its colour (:func:`canonical_form`).
- The sum over the lattice is taken per unit cell: every cluster whose smallest cell index
  (cells numbered as in :mod:`lowfold.model.lattice`) is the reference cell, once; each
  Pauli string of the sum is then translated so that its own smallest cell is the
  reference cell.  The result, :class:`LatticeSum`, holds one coefficient per translation
  class of strings.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Callable

import igraph
import numpy as np

__all__ = ["ClusterGraph", "LatticeSum", "canonical_form", "connected_edge_sets",
           "ClusterWeights", "lattice_sum", "add_embedded", "sum_embeddings", "prunable",
           "serial_map", "reorder_sign", "translate_key"]

ClusterGraph = tuple[int, tuple[tuple[int, ...], ...]]
Operator = dict[tuple, np.ndarray]


def canonical_form(n_sites: int, edges, directed: frozenset = frozenset()
                   ) -> tuple[ClusterGraph, list[int]]:
    """Canonical graph of a coloured cluster and the map from its sites to canonical labels.

    An edge is a group of sites and its colour, ``(a, b, c)`` for a bond.  A bond whose
    colour is not in ``directed`` is unordered; a bond of a ``directed`` colour (a complex
    or spin-orbit hopping, a DM vector, an ordered string: the bond has a direction) and a
    group of three or more sites are ordered: each site is linked to the edge through a
    vertex coloured by its position, so that only order-preserving maps are isomorphisms,
    and the canonical edge lists its sites in that order.

    Returns
    -------
    graph : ClusterGraph
        ``(n_sites, edges)`` on canonical labels, edges sorted: equal for isomorphic clusters.
    label : list of int
        ``label[a]`` is the canonical label of site ``a``.
    """
    edges = list(edges)
    if not edges:
        return (n_sites, ()), list(range(n_sites))
    ordered = [len(e) > 3 or e[-1] in directed for e in edges]
    top = 1 + max(e[-1] for e in edges)             # edge vertices: colours 1 .. top
    width = max(len(e) - 1 for e in edges)
    colours = [0] * n_sites + [1 + e[-1] for e in edges]
    links = []
    for k, (edge, keeps_order) in enumerate(zip(edges, ordered)):
        vertex = n_sites + k
        if not keeps_order:
            links += [(s, vertex) for s in edge[:-1]]
            continue
        for position, s in enumerate(edge[:-1]):    # a vertex per (colour, position)
            colours.append(1 + top + edge[-1] * width + position)
            links += [(s, len(colours) - 1), (len(colours) - 1, vertex)]
    g = igraph.Graph(n=len(colours))
    g.add_edges(links)
    position = _positions(g.canonical_permutation(color=colours))
    order = sorted(range(n_sites), key=lambda a: position[a])
    label = [0] * n_sites
    for rank, a in enumerate(order):
        label[a] = rank
    canon = tuple(sorted((*(label[s] for s in edge[:-1]), edge[-1]) if keeps_order
                         else (*sorted(label[s] for s in edge[:-1]), edge[-1])
                         for edge, keeps_order in zip(edges, ordered)))
    return (n_sites, canon), label


def _permutes_forward() -> bool:
    """Whether igraph's ``permute_vertices(perm)`` sends vertex ``v`` to ``perm[v]`` (else
    new vertex ``i`` is old vertex ``perm[i]``; igraph 1.0 does the latter).  The canonical
    graph is ``permute_vertices(canonical_permutation(...))`` in either convention."""
    moved = igraph.Graph(n=3, edges=[(0, 1)]).permute_vertices([2, 0, 1])
    return {tuple(sorted(e)) for e in moved.get_edgelist()} == {(0, 2)}


_FORWARD = _permutes_forward()


def _positions(perm) -> list[int]:
    """Canonical position of each vertex for igraph's canonical permutation ``perm``."""
    if _FORWARD:
        return list(perm)
    position = [0] * len(perm)
    for new, old in enumerate(perm):
        position[old] = new
    return position


def connected_edge_sets(adjacent: list[list[int]], seeds, max_edges: int) -> list[frozenset]:
    """Every connected set of at most ``max_edges`` edges that contains a seed edge.

    ``adjacent[e]`` lists the edges that share a site with edge ``e``.  Sets grow one
    adjacent edge at a time; each set is returned once.
    """
    level = {frozenset([e]) for e in seeds}
    found = list(level)
    for _ in range(max_edges - 1):
        grown = set()
        for edges in level:
            for e in edges:
                for f in adjacent[e]:
                    if f not in edges:
                        grown.add(edges | {f})
        level = grown
        found.extend(level)
    return found


def serial_map(function: Callable, items: list) -> list:
    """``[function(x) for x in items]``: the default way of computing the distinct graphs."""
    return [function(item) for item in items]


def _bridges(n_sites: int, edges) -> int:
    """Number of bonds whose removal disconnects the cluster (bonds on no cycle)."""
    return len(igraph.Graph(n=n_sites, edges=[(a, b) for a, b, _ in edges]).bridges())


def prunable(n_sites: int, edges, order: int, even_trees: bool) -> bool:
    """Whether a cluster (any labelling) has zero weight to ``order`` by the pruning rules.

    Always: more bonds than ``order`` (a process of order n moves across at most n bonds,
    and a cluster's weight holds only processes that use all its bonds).  With
    ``even_trees`` (see :class:`ClusterWeights`): ``bonds + bridges > order``; a tree has
    ``bridges = bonds`` and every bond to a site of degree one is a bridge, so those are
    decided without a bridge search.
    """
    bonds = len(edges)
    if bonds > order:
        return True
    if not even_trees or not bonds:
        return False
    if bonds == n_sites - 1:
        return 2 * bonds > order
    degree = [0] * n_sites
    for a, b, _ in edges:
        degree[a] += 1
        degree[b] += 1
    if bonds + degree.count(1) > order:
        return True
    return bonds + _bridges(n_sites, edges) > order


def _subgraphs(graph: ClusterGraph):
    """Connected proper subclusters of a cluster: single sites and connected edge subsets,
    each as ``(sites, edges)`` on the cluster's labels."""
    n, edges = graph
    if not edges:
        return
    for a in range(n):
        yield (a,), ()
    for size in range(1, len(edges)):
        for subset in itertools.combinations(edges, size):
            sites = sorted({s for edge in subset for s in edge[:-1]})
            if _connected(sites, subset):
                yield tuple(sites), subset


def _connected(sites, edges) -> bool:
    reach, todo = {sites[0]}, [sites[0]]
    while todo:
        s = todo.pop()
        for edge in edges:
            if s in edge[:-1]:
                for y in edge[:-1]:
                    if y not in reach:
                        reach.add(y)
                        todo.append(y)
    return len(reach) == len(sites)


def _local(sites, edges) -> tuple[int, list]:
    index = {s: k for k, s in enumerate(sites)}
    return len(sites), [(*(index[s] for s in edge[:-1]), edge[-1]) for edge in edges]


def reorder_sign(key, site_of, odd: frozenset) -> float:
    """Sign of reordering the odd factors of ``key`` (ascending in its own sites) into the
    ascending order of the renamed sites ``site_of[s]``: the parity of that permutation."""
    moved = [site_of[s] for s, p in key if p in odd]
    inversions = sum(1 for a in range(len(moved)) for b in range(a + 1, len(moved))
                     if moved[a] > moved[b])
    return -1.0 if inversions % 2 else 1.0


def add_embedded(target: Operator, source: Operator, site_of, scale: float = 1.0,
                 odd: frozenset | None = None) -> None:
    """``target += scale * source`` with the sites of ``source`` renamed by ``site_of``
    (``odd``: letters of fermion-parity-odd factors, whose reordering gives a sign)."""
    for key, values in source.items():
        new = tuple(sorted((site_of[s], p) for s, p in key))
        factor = scale * reorder_sign(key, site_of, odd) if odd else scale
        if new in target:
            target[new] = target[new] + factor * values
        else:
            target[new] = factor * values


class ClusterWeights:
    """Weights of clusters, computed once per canonical graph.

    Parameters
    ----------
    solve : callable
        ``solve(graph) -> Operator``: the effective Hamiltonian of the canonical cluster
        ``graph`` (its own terms only), coefficients per order ``0..order`` (each graph is
        solved once, at the highest order; lower orders are the same run's coefficients).
    order : int
        Highest order: clusters with more bonds have zero weight.
    even_trees : bool
        Prune clusters with ``bonds + bridges > order`` (valid when every V term moves a
        particle across its bond and every site's manifold fixes its particle number: a
        process of a cluster's weight uses every bond, and it crosses a bridge, a bond on no
        cycle, an even number of times, as the particle numbers on either side of it return;
        for a tree, ``2 * bonds > order``).
    mapper : callable, optional
        ``mapper(solve, graphs) -> list`` of ``solve(graph)``; the graphs are independent
        calculations (default :func:`serial_map`; a Dask client's map for a cluster).
    odd : frozenset, optional
        Letters of fermion-parity-odd factors (local-operator keys of fermions): embedding
        a weight reorders them, with a sign (:func:`add_embedded`).
    directed : frozenset, optional
        Bond colours with a direction (:func:`canonical_form`).
    """

    def __init__(self, solve: Callable[[ClusterGraph], Operator], order: int, *,
                 even_trees: bool = False, mapper: Callable | None = None,
                 odd: frozenset | None = None, directed: frozenset = frozenset()):
        self.odd = odd or None
        self.directed = directed
        self._solve, self._order, self._even_trees = solve, order, even_trees
        self._mapper = mapper or serial_map
        self._weights: dict[ClusterGraph, Operator] = {}
        self._solved: dict[ClusterGraph, Operator] = {}
        self._inside: dict[ClusterGraph, list] = {}
        self._contributes: dict[ClusterGraph, bool] = {}
        self.computed = 0          # graphs whose effective Hamiltonian was computed
        self.pruned = 0            # graphs skipped by a pruning rule

    def prunable(self, n_sites: int, edges) -> bool:
        """:func:`prunable` with this expansion's order and rules (any labelling)."""
        return prunable(n_sites, edges, self._order, self._even_trees)

    def can_contribute(self, graph: ClusterGraph) -> bool:
        if graph not in self._contributes:
            self._contributes[graph] = not self.prunable(*graph)
        return self._contributes[graph]

    def subclusters(self, graph: ClusterGraph) -> list:
        """``(canonical graph, site map)`` of each connected proper subcluster of ``graph``
        that can contribute (memoised; pruned ones have zero weight and are left out)."""
        if graph not in self._inside:
            found = []
            for sites, edges in _subgraphs(graph):
                local = _local(sites, edges)
                if self.prunable(*local):
                    continue
                canon, label = canonical_form(*local, self.directed)
                found.append((canon, {label[k]: sites[k] for k in range(len(sites))}))
            self._inside[graph] = found
        return self._inside[graph]

    def prepare(self, graphs) -> None:
        """Solve every graph that the weights of ``graphs`` need, in one call of the mapper
        (biggest first): the graphs themselves and their subclusters that can contribute."""
        todo, seen = [], set()
        stack = [g for g in graphs if self.can_contribute(g)]
        while stack:
            graph = stack.pop()
            if graph in seen or graph in self._weights or graph in self._solved:
                continue
            seen.add(graph)
            todo.append(graph)
            stack.extend(canon for canon, _ in self.subclusters(graph))
        todo.sort(key=lambda g: (-g[0], -len(g[1]), g))
        if todo:
            self._solved.update(zip(todo, self._mapper(self._solve, todo)))
            self.computed += len(todo)

    def weight(self, graph: ClusterGraph) -> Operator:
        """The weight of a canonical cluster (memoised)."""
        if graph in self._weights:
            return self._weights[graph]
        if not self.can_contribute(graph):
            self.pruned += 1
            self._weights[graph] = {}
            return {}
        own = self._solved.pop(graph, None)
        if own is None:
            self.computed += 1
            own = self._solve(graph)
        total = {k: np.array(v, dtype=complex if np.iscomplexobj(v) else float)
                 for k, v in own.items()}
        for canon, site_of in self.subclusters(graph):
            add_embedded(total, self.weight(canon), site_of, -1.0, self.odd)
        self._weights[graph] = total
        return total


@dataclass(frozen=True)
class LatticeSum:
    """The effective Hamiltonian of the infinite lattice per unit cell.

    Attributes
    ----------
    terms : dict
        Pauli key on patch sites (a representative with its smallest cell the reference
        cell) -> coefficients per order.
    clusters : int
        Clusters of the lattice summed (per unit cell, pruned ones included).
    distinct : int
        Distinct graphs whose effective Hamiltonian was computed.
    """

    terms: Operator
    clusters: int
    distinct: int


def lattice_sum(n_sites: int, bonds, colours, cell_of, reference: int, n_basis: int,
                weights: ClusterWeights, max_bonds: int) -> LatticeSum:
    """Sum of the weights of every cluster whose smallest cell is the reference cell.

    Parameters
    ----------
    n_sites : int
        Sites of the patch; ``cell_of[s]`` is the cell index of site ``s`` and site
        ``s = n_basis * cell + basis index`` (numbering of :mod:`lowfold.model.lattice`).
    bonds : sequence of tuples of int
        V-groups of the patch (bonds, or groups of more sites for multi-site terms);
        ``colours[k]`` the colour of group ``k``.
    reference : int
        Cell index of the reference cell (far enough from the edges of the patch).
    """
    bonds = [tuple(int(s) for s in group) for group in bonds]    # plain ints: fast below
    cell_of = [int(c) for c in cell_of]
    keep = [k for k, group in enumerate(bonds) if min(cell_of[s] for s in group) >= reference]
    at = {}
    for k in keep:
        for s in bonds[k]:
            at.setdefault(s, []).append(k)
    adjacent = {k: sorted({f for s in bonds[k] for f in at[s] if f != k}) for k in keep}
    seeds = [k for k in keep if any(cell_of[s] == reference for s in bonds[k])]
    index = {k: n for n, k in enumerate(keep)}
    sets = connected_edge_sets([[index[f] for f in adjacent[k]] for k in keep],
                               [index[k] for k in seeds], max_bonds) if max_bonds else []
    clusters = [((s,), ()) for s in range(reference * n_basis, (reference + 1) * n_basis)]
    edge = [(*bonds[k], int(colours[k])) for k in keep]
    clusters += [(tuple(sorted({s for n in es for s in edge[n][:-1]})),
                  tuple(edge[n] for n in es)) for es in sets]
    total = sum_embeddings(clusters, weights)
    return LatticeSum(_translate(total, cell_of, reference, n_basis), len(clusters),
                      weights.computed)


def sum_embeddings(clusters, weights: ClusterWeights) -> Operator:
    """Sum of the weights of ``clusters`` (each ``(sites, edges)``), embedded on their sites.

    Clusters are grouped by canonical graph (pruned ones skipped before canonical
    labelling), the distinct graphs solved in one call of the weights' mapper, and each
    graph's weight then added once per embedding.
    """
    groups: dict[ClusterGraph, list] = {}
    for sites, edges in clusters:
        local = _local(sites, edges)
        if weights.prunable(*local):
            weights.pruned += 1
            continue
        canon, label = canonical_form(*local, weights.directed)
        groups.setdefault(canon, []).append({label[k]: sites[k] for k in range(len(sites))})
    weights.prepare(list(groups))
    total: Operator = {}
    for canon, embeddings in groups.items():
        weight = weights.weight(canon)
        for site_of in embeddings:
            add_embedded(total, weight, site_of, odd=weights.odd)
    return total


def _translate(terms: Operator, cell_of, reference: int, n_basis: int) -> Operator:
    """Each string moved so that its smallest cell is the reference cell (patch numbering:
    a shift of the cell index by d moves site s to s + n_basis * d, inside the patch)."""
    out: Operator = {}
    for key, values in terms.items():
        new = translate_key(key, cell_of, reference, n_basis)
        out[new] = out[new] + values if new in out else values
    return out


def translate_key(key, cell_of, reference: int, n_basis: int) -> tuple:
    """``key`` (``(site, letter)`` pairs on patch sites) moved so that its smallest cell is
    the reference cell; a shift of site indices, which keeps their order (no fermion sign)."""
    shift = (min((cell_of[s] for s, _ in key), default=reference) - reference) * n_basis
    return tuple((s - shift, p) for s, p in key)
