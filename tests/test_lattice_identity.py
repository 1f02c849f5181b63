"""The linked-cluster identity on honeycomb and kagome clusters.

On a finite open cluster the weights of its own connected subclusters sum to the cluster's
effective Hamiltonian, order by order (Gelfand, Singh & Huse, J. Stat. Phys. 59, 1093
(1990); Oitmaa, Hamer & Zheng, Series Expansion Methods for Strongly Interacting Lattice
Models, CUP (2006), ch. 1).  Here: the half-filled Hubbard model, to order 4, on

- a single honeycomb hexagon (6 sites, one closed loop of 6 bonds),
- the open 2x2 honeycomb cluster (a hexagon with two pendant sites, 8 sites),
- the open 2x2 kagome cluster (12 sites: four corner-sharing triangles around a hexagon),

compared Pauli string by Pauli string and named coupling by named coupling (the same
readout of both sides, lowfold.readout.couplings) with derive on the cluster itself, whose
Schrieffer-Wolff orders are checked against exact spectra elsewhere.  The sum is taken with
the tree pruning (and on the hexagon also without it).
"""

from __future__ import annotations

import numpy as np
import pytest

import lowfold
from helpers.lattice_models import hubbard_text, parse
from lowfold.jobs.lattice import open_cluster_sum
from lowfold.model.cycles import lattice_cycles
from lowfold.readout.couplings import spin_couplings
from lowfold.readout.pauli import parse_pauli_string

ORDER = 4
ATOL = 1e-9

# one hexagon of the honeycomb lattice: sites 1-2-3-6-5-4 of the open 2x2 cluster, renumbered
HEXAGON = [(0, 1), (1, 2), (2, 3), (3, 4), (4, 5), (5, 0)]


def cluster_of(name: str):
    if name == "hexagon":
        return lowfold.make_lattice("graph", sites=6, bonds=HEXAGON)
    shape, size = {"honeycomb 2x2": ("honeycomb", [2, 2]), "kagome 2x2": ("kagome", [2, 2])}[name]
    return lowfold.make_lattice(shape, size, "open")


def derive_on(model, cluster):
    finite = lowfold.Model(cluster, model.site, model.terms, lowfold.Sector(), model.parameters,
                           model.perturbation)
    return lowfold.derive(finite, ORDER, compare_exact=False)


def pauli_table(result) -> dict:
    return {tuple(sorted(parse_pauli_string(t.operator))):
            np.array([t.orders.get(m, 0.0) for m in range(ORDER + 1)]) for t in result.terms}


def named(table: dict, cluster) -> dict:
    """Named couplings of a Pauli table, as derive reads them (cycles of the cluster)."""
    text = {" ".join(f"{p}{s}" for s, p in key) or "I": list(values)
            for key, values in table.items()}
    rings, triangles = lattice_cycles(cluster)
    found, residual = spin_couplings(text, cluster.n_sites, orders=list(range(ORDER + 1)),
                                     tol=1e-10, ring_cycles=rings, triangles=triangles)
    out = {(c.kind, tuple(c.sites)): c.orders for c in found}
    out.update({("pauli", key): dict(enumerate(v)) for key, v in residual.items()})
    return out


def assert_same(a: dict, b: dict) -> None:
    assert set(a) == set(b), sorted(set(a) ^ set(b))
    for key in a:
        for m in range(ORDER + 1):
            np.testing.assert_allclose(np.asarray(a[key].get(m, 0.0), dtype=float),
                                       np.asarray(b[key].get(m, 0.0), dtype=float),
                                       atol=ATOL, err_msg=f"{key} order {m}")


@pytest.mark.parametrize("name, shape", [("hexagon", "honeycomb"),
                                         ("honeycomb 2x2", "honeycomb"),
                                         ("kagome 2x2", "kagome")])
def test_subcluster_weights_sum_to_the_cluster(name, shape):
    model = parse(hubbard_text(shape, order=ORDER))
    cluster = cluster_of(name)
    direct = derive_on(model, cluster)
    summed = open_cluster_sum(model, cluster, ORDER, prune=True)
    own = pauli_table(direct)
    for key in set(own) | set(summed):                       # Pauli string by Pauli string
        np.testing.assert_allclose(summed.get(key, np.zeros(ORDER + 1)),
                                   own.get(key, np.zeros(ORDER + 1)), atol=ATOL,
                                   err_msg=str(key))
    mine = named(summed, cluster)                            # named coupling by coupling
    theirs = {(c.kind, tuple(c.sites)): c.orders for c in direct.couplings}
    theirs.update({("pauli", key): dict(enumerate(v)) for key, v in direct.residual.items()})
    assert_same(mine, theirs)
    # the content is not trivial: exchange on every bond at order 2, and order 4 present
    bonds = {tuple(sorted(map(int, b))) for b in cluster.bonds("nearest")}
    exchange = {sites: orders for (kind, sites), orders in mine.items() if kind == "exchange"}
    assert bonds <= set(exchange)
    assert all(abs(exchange[b][2] - 4 / 10.0) < 1e-12 for b in bonds)     # 4t^2/U, t=1, U=10
    assert any(abs(np.asarray(o.get(4, 0.0))).max() > 1e-6 for o in exchange.values())



def test_unpruned_sum_on_the_hexagon():
    # every subcluster computed, none pruned (the pruned sum is the one checked above)
    model = parse(hubbard_text("honeycomb", order=ORDER))
    cluster = cluster_of("hexagon")
    full = open_cluster_sum(model, cluster, ORDER, prune=False)
    own = pauli_table(derive_on(model, cluster))
    for key in set(own) | set(full):
        np.testing.assert_allclose(full.get(key, 0.0), own.get(key, 0.0), atol=ATOL,
                                   err_msg=str(key))
