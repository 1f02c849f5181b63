"""Canonical graphs and pruning rules of the linked-cluster expansion, each against the
unpruned calculation.

- Gelfand, Singh & Huse, J. Stat. Phys. 59, 1093 (1990): the weight of a cluster is its
  effective Hamiltonian minus the embedded weights of its connected proper subclusters; a
  rule may drop a cluster only if that weight is zero to the order asked for.
- The rules of ``lowfold.perturbation.linked_clusters.prunable`` (common practice for
  hopping at integer filling): a weight holds only processes that use every bond, and a
  process that returns every site to its particle number crosses each bridge (a bond on no
  cycle) an even number of times, so it needs at least ``bonds + bridges`` hops.  A tree has
  ``bridges = bonds``; a bond to a site of degree one is a bridge.  Each rule is checked by
  computing, without pruning, the weight of a cluster that only this rule drops: zero to the
  order at which it is dropped, and not zero one order later (the rule is tight).
- Graph counts by hand (common practice): the connected graphs with ``bonds + bridges <= 6``
  that embed in the square, honeycomb and chain lattices.
"""

from __future__ import annotations

import random

import numpy as np
import pytest

from helpers.lattice_models import hubbard_text, parse
from lowfold.jobs.lattice import GraphSolver, linked_cluster_sum
from lowfold.perturbation.linked_clusters import ClusterWeights, canonical_form, prunable

HOP = {0: ("hop",)}      # colour 0: the hopping term of hubbard_text


def relabelled(n, edges, rng):
    perm = list(range(n))
    rng.shuffle(perm)
    moved = [(perm[a], perm[b], c) for a, b, c in edges]
    rng.shuffle(moved)
    return [(min(a, b), max(a, b), c) for a, b, c in moved]


GRAPHS = [
    (4, [(0, 1, 0), (1, 2, 0), (2, 3, 0)]),                          # path
    (4, [(0, 1, 0), (0, 2, 0), (0, 3, 0)]),                          # star
    (5, [(0, 1, 0), (1, 2, 0), (2, 3, 0), (0, 3, 0), (3, 4, 0)]),    # square with a tail
    (4, [(0, 1, 0), (1, 2, 1), (0, 2, 0), (2, 3, 1)]),               # two-coloured
]


@pytest.mark.parametrize("n, edges", GRAPHS)
def test_canonical_form_is_the_same_for_every_relabelling(n, edges):
    rng = random.Random(7)
    canon, label = canonical_form(n, edges)
    mapped = sorted((min(label[a], label[b]), max(label[a], label[b]), c) for a, b, c in edges)
    assert tuple(mapped) == canon[1]                  # the map sends the edges onto the form
    for _ in range(20):
        other = relabelled(n, edges, rng)
        form, label = canonical_form(n, other)
        assert form == canon
        assert tuple(sorted((min(label[a], label[b]), max(label[a], label[b]), c)
                            for a, b, c in other)) == canon[1]


def test_canonical_forms_tell_graphs_and_colours_apart():
    forms = {canonical_form(n, edges)[0] for n, edges in GRAPHS}
    assert len(forms) == len(GRAPHS)
    recoloured = [(0, 1, 1), (1, 2, 0), (0, 2, 0), (2, 3, 1)]       # not isomorphic to the last
    assert canonical_form(4, recoloured)[0] != canonical_form(*GRAPHS[3])[0]


@pytest.mark.parametrize("shape, distinct", [
    # site, bond, 2-bond path, 3-bond path (the chain stops here)
    ("chain", 4),
    # + 3-bond star, hexagon
    ("honeycomb", 6),
    # + 3-bond star, plaquette, plaquette with one pendant bond, 6-cycle around two plaquettes
    ("square", 8),
])
def test_each_distinct_graph_is_computed_once(shape, distinct):
    model = parse(hubbard_text(shape, order=6))
    seen = []

    def record(function, graphs):
        seen.extend(graphs)
        return [{} for _ in graphs]
    run = linked_cluster_sum(model, 6, graph_map=record)
    assert run.total.distinct == distinct == len(seen) == len(set(seen))


def unpruned_weight(shape, graph, order):
    model = parse(hubbard_text(shape, order=order))
    weights = ClusterWeights(GraphSolver(model, HOP, order, filling=1), order, even_trees=False)
    return weights.weight(canonical_form(*graph)[0])


def assert_rule(shape, graph, order, rule_holds):
    """The cluster is dropped at ``order`` (by the rule checked) and not at ``order + 1``;
    its unpruned weight is zero through ``order`` and not zero at ``order + 1`` (the rule is
    tight)."""
    starts = order + 1
    assert rule_holds(*graph, order)
    assert prunable(*graph, order, True) and not prunable(*graph, order + 1, True)
    weight = unpruned_weight(shape, graph, starts)
    scale = max(np.max(np.abs(v)) for v in weight.values())
    assert scale > 1e-6
    for key, values in weight.items():
        assert np.max(np.abs(values[:starts])) <= 1e-10 * max(scale, 1.0), key
    assert max(abs(values[starts]) for values in weight.values()) > 1e-6


def test_tree_rule_three_bond_path():
    # a tree of b bonds needs 2b hops: the 3-bond path starts at order 6
    path = (4, [(0, 1, 0), (1, 2, 0), (2, 3, 0)])
    assert_rule("chain", path, 5, lambda n, e, order: len(e) == n - 1 and 2 * len(e) > order)


def test_leaf_rule_plaquette_with_a_pendant_bond():
    # 5 bonds, one of them to a site of degree one (a bridge): at least 6 hops
    tadpole = (5, [(0, 1, 0), (1, 2, 0), (2, 3, 0), (0, 3, 0), (3, 4, 0)])
    assert_rule("square", tadpole, 5, lambda n, e, order: len(e) >= n and len(e) + 1 > order)


def test_bridge_rule_two_triangles_joined_by_a_bond():
    # 7 bonds, no site of degree one, one bridge: starts at order 8 (found by a bridge search)
    dumbbell = (6, [(0, 1, 0), (1, 2, 0), (0, 2, 0), (2, 3, 0),
                    (3, 4, 0), (4, 5, 0), (3, 5, 0)])
    degrees = np.bincount([s for a, b, _ in dumbbell[1] for s in (a, b)])
    assert (degrees > 1).all()
    assert_rule("triangular", dumbbell, 7, lambda n, e, order: len(e) + 1 > order)


def test_bond_count_rule_holds_for_any_perturbation():
    # more bonds than the order: zero for any V (here without the hopping rules)
    path = (4, [(0, 1, 0), (1, 2, 0), (2, 3, 0)])
    assert prunable(*path, 2, False) and not prunable(*path, 3, False)
    weight = unpruned_weight("chain", path, 3)
    assert all(np.max(np.abs(v[:3])) <= 1e-12 for v in weight.values())


@pytest.mark.parametrize("shape, order", [("square", 5), ("honeycomb", 6)])
def test_pruned_lattice_sum_equals_the_unpruned_one(shape, order):
    model = parse(hubbard_text(shape, order=order))
    pruned = linked_cluster_sum(model, order, prune=True)
    full = linked_cluster_sum(model, order, prune=False)
    assert pruned.total.distinct < full.total.distinct
    keys = set(pruned.total.terms) | set(full.total.terms)
    for key in keys:
        np.testing.assert_allclose(pruned.total.terms.get(key, 0.0),
                                   full.total.terms.get(key, 0.0), atol=1e-11, err_msg=str(key))
