"""Coupling classes, formulas and the series job of infinite lattices: checks from outside.

- MacDonald, Girvin & Yoshioka, Phys. Rev. B 37, 9753 (1988) (values from memory): the
  half-filled Hubbard model on the square lattice at order 4 is the Heisenberg model with
  J1 = 4t^2/U - 24t^4/U^3 on nearest neighbours, J2 = 4t^4/U^3 on the diagonals, J3 =
  4t^4/U^3 at two lattice spacings, and a ring exchange 80 t^4/U^3 on every plaquette
  (the counting of Takahashi, J. Phys. C 10, 1289 (1977), carried to the square lattice).
- The same values from ``derive`` on the 3x3 open cluster (exact on the cluster, no linked
  clusters): every order-4 process of the centre bonds, of the diagonal (0,0)-(1,1), of the
  pair (1,0)-(1,2) through the centre and of each plaquette fits inside the cluster.
- Pfeuty, Ann. Phys. 57, 79 (1970): energy per site of the transverse-field Ising chain.
- The CLI words its own messages (a library error never names a flag).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import lowfold
from helpers.cli import run_all, succeeded
from helpers.exact import pfeuty_per_site
from helpers.lattice_models import T, U, hubbard_text, ising_chain_text, parse

SERIES_ORDER = 6


@pytest.fixture(scope="module")
def square():
    return lowfold.derive(parse(hubbard_text("square", order=4)))


def test_square_lattice_order_4_macdonald_girvin_yoshioka(square):
    found = {(c.kind, c.name): c for c in square.classes}
    j1 = found[("exchange", "nearest")]
    j2 = found[("exchange", "next-nearest")]
    j3 = found[("exchange", "third")]
    ring = found[("ring", "4-cycle")]
    assert j1.orders[2] == pytest.approx(4 * T**2 / U, rel=1e-9)
    assert j1.orders[4] == pytest.approx(-24 * T**4 / U**3, rel=1e-9)
    assert j2.orders == pytest.approx({4: 4 * T**4 / U**3}, rel=1e-9)
    assert j3.orders == pytest.approx({4: 4 * T**4 / U**3}, rel=1e-9)
    assert ring.orders == pytest.approx({4: 80 * T**4 / U**3}, rel=1e-9)
    # members per site: 2 bonds, 2 diagonals, 2 straight pairs at distance 2, 1 plaquette
    assert [c.multiplicity for c in (j1, j2, j3, ring)] == [2, 2, 2, 1]
    assert j1.formula == "4 t^2/U - 24 t^4/U^3"
    assert (j2.formula, j3.formula, ring.formula) == ("4 t^4/U^3", "4 t^4/U^3", "80 t^4/U^3")
    # four-site content is read as ring exchange on the plaquette, nothing is left as strings
    assert not [c for c in square.classes if c.kind == "pauli"]
    side = sorted(np.linalg.norm(np.subtract(ring.positions[k], ring.positions[k - 1]))
                  for k in range(4))
    assert side == pytest.approx([1.0] * 4)


def test_square_lattice_against_the_open_3x3_cluster(square):
    model = parse(hubbard_text("square", order=4))
    cluster = lowfold.make_lattice("square", [3, 3], "open")       # site = x + 3 y
    finite = lowfold.Model(cluster, model.site, model.terms, lowfold.Sector(particles=9),
                           model.parameters, model.perturbation)
    own = {(c.kind, tuple(c.sites)): c.orders for c in
           lowfold.derive(finite, 4, compare_exact=False).couplings}
    found = {(c.kind, c.name): c.orders for c in square.classes}
    for key, name in [(("exchange", (1, 4)), "nearest"), (("exchange", (3, 4)), "nearest"),
                      (("exchange", (0, 4)), "next-nearest"), (("exchange", (1, 7)), "third"),
                      (("ring", (0, 1, 4, 3)), "4-cycle")]:
        want = found[(key[0], name)]
        for m in range(5):
            assert own[key].get(m, 0.0) == pytest.approx(want.get(m, 0.0), abs=1e-12), (key, m)


def test_chain_classes_have_names_and_formulas():
    # Takahashi, J. Phys. C 10, 1289 (1977): J1 = 4t^2/U - 16t^4/U^3, J2 = 4t^4/U^3
    found = {(c.kind, c.name): c for c in lowfold.derive(parse(hubbard_text(order=4))).classes}
    assert found[("exchange", "nearest")].formula == "4 t^2/U - 16 t^4/U^3"
    assert found[("exchange", "next-nearest")].formula == "4 t^4/U^3"
    # the constant per site carries mu = -U/2 at order 0
    assert found[("constant", "constant")].formula.startswith("-1/2 U")


def test_series_job_gives_energy_per_site():
    result = lowfold.state_series(parse(ising_chain_text(SERIES_ORDER)))
    want = [float(c) for c in pfeuty_per_site(SERIES_ORDER)]
    np.testing.assert_allclose(result.energies, want, atol=1e-10)
    assert result.energy == pytest.approx(sum(want))
    assert any("per site" in w for w in result.warnings)
    with pytest.raises(lowfold.ModelError, match="per site only"):
        lowfold.state_series(parse(ising_chain_text(2)), state="level:1")


@pytest.fixture(scope="module")
def cli(tmp_path_factory):
    folder = tmp_path_factory.mktemp("infinite")
    ising, hubbard = folder / "ising.toml", folder / "hubbard.toml"
    ising.write_text(ising_chain_text(SERIES_ORDER))
    hubbard.write_text(hubbard_text(order=2))
    return run_all({"series": ["series", ising, "--json"], "spectrum": ["spectrum", hubbard]})


def test_series_cli_pfeuty_per_site(cli):
    data = json.loads(succeeded(cli["series"]))
    want = [float(c) for c in pfeuty_per_site(SERIES_ORDER)]
    got = [data["orders"][str(m)] for m in range(SERIES_ORDER + 1)]
    np.testing.assert_allclose(got, want, atol=1e-10)
    assert data["energy"] == pytest.approx(sum(want))
    assert any("per site" in w for w in data["warnings"])


def test_spectrum_cli_on_infinite_lattice_says_give_size(cli):
    proc = cli["spectrum"]
    assert proc.returncode == 2
    assert "--size" in proc.stderr and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1


def test_bridge_pruning_changes_nothing():
    # a triangle with one pendant bond (4 bonds, 1 bridge) is pruned at order 4 by the bridge
    # rule only; the sum must equal the unpruned one (and both derive on the strip itself)
    from lowfold.jobs.lattice import open_cluster_sum
    from lowfold.perturbation.linked_clusters import ClusterWeights
    weights = ClusterWeights(lambda graph: {}, 4, even_trees=True)
    assert not weights.can_contribute((4, ((0, 1, 0), (0, 2, 0), (1, 2, 0), (2, 3, 0))))
    assert weights.can_contribute((4, ((0, 1, 0), (0, 3, 0), (1, 2, 0), (2, 3, 0))))
    model = parse(hubbard_text("triangular"))
    cluster = lowfold.make_lattice("triangular", [3, 2], "open")
    pruned = open_cluster_sum(model, cluster, 4, prune=True)
    full = open_cluster_sum(model, cluster, 4, prune=False)
    for key in set(pruned) | set(full):
        np.testing.assert_allclose(pruned.get(key, 0.0), full.get(key, 0.0), atol=1e-10,
                                   err_msg=str(key))
