"""The exact check of an infinite lattice's couplings on a periodic cluster
(lowfold.jobs.lattice_check): checks from outside.

- The exact levels of the check are those of the Hubbard ring itself: an independent dense
  build (tests/helpers/reference.py, Kronecker products with the Jordan-Wigner strings
  written out, no lowfold code).
- The effective side at order 2 is the Heisenberg ring with J = 4t^2/U and the constant
  -J/4 per bond plus the potential -U/2 per singly occupied site (Anderson's superexchange,
  P. W. Anderson, Phys. Rev. 115, 2 (1959); common practice), diagonalised densely here
  (tests/helpers/exact.py).
- The error of the sum to order n falls like the next non-zero order: odd orders vanish at
  half filling, so like lambda^(n+2) when V is scaled by lambda, and like U^-(n+1) at fixed
  t (the order-(n+2) term is t^(n+2)/U^(n+1)); common practice of the t/U expansion.
- Winding: on a ring of L sites the shortest loop around it has L bonds, so orders >= L are
  not compared (lowfold.jobs.check_winding).
- Below that loop the cluster's own Schrieffer-Wolff orders are the infinite lattice's
  couplings put on it (linked-cluster picture, Gelfand, Singh & Huse, J. Stat. Phys. 59,
  1093 (1990)): the check equals the finite check of the cluster itself (an 8-site ring at
  order 6, the 2x2 periodic honeycomb cluster at order 3).
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest

import lowfold
from helpers import reference as ref
from helpers.cli import one_json_object, run_all, succeeded
from helpers.exact import heisenberg
from helpers.lattice_models import hubbard_text
from lowfold.jobs.lattice_check import check_cluster, lattice_check


def chain_text(t: float, u: float, order: int) -> str:
    """The half-filled Hubbard chain, H0 = U n_up n_dn - (U/2) n, V the hopping."""
    return hubbard_text("chain", order=order, t=t, u=u)


def infinite_chain(t: float, u: float, order: int):
    model = lowfold.parse_model(tomllib.loads(chain_text(t, u, order)))
    return lowfold.derive(model, order, compare_exact=False)


def reference_ring_levels(n: int, t: float, u: float, k: int) -> np.ndarray:
    """Lowest ``k`` levels of the half-filled Hubbard ring, S^z = 0, built densely without
    lowfold (sign convention of the hopping: -t sum c+_i c_j + h.c., as lowfold's)."""
    bonds = [(i, (i + 1) % n) for i in range(n)]
    terms = ref.expand_term("electron", "hopping", t, bonds=bonds)
    terms += ref.expand_term("electron", "hubbard", u, sites=range(n))
    terms += ref.expand_term("electron", "potential", -u / 2, sites=range(n))
    h = ref.sparse_hamiltonian("electron", n, terms)
    states = ref.sector_states("electron", n, particles=n, sz=0)
    block = np.asarray(ref.restrict(h, states))
    return np.linalg.eigvalsh(block)[:k]


def test_check_on_a_six_site_ring_against_independent_builds():
    t, u, n = 1.0, 12.0, 6
    result = infinite_chain(t, u, 2)
    check, _, warnings = lattice_check(result, size=n)
    assert check.cluster == "periodic chain, 6 sites"
    assert check.winding_loop == 6 and sorted(check.max_abs_error) == [0, 1, 2]
    assert not any("wind" in w for w in warnings)
    exact = reference_ring_levels(n, t, u, 1)[0]
    assert min(check.exact) == pytest.approx(exact, abs=1e-9)
    # Anderson superexchange on the ring: -U/2 per site + J (S.S - 1/4) per bond
    j = 4 * t**2 / u
    bonds = [(i, (i + 1) % n) for i in range(n)]
    heis = np.linalg.eigvalsh(heisenberg(bonds, n))[0]
    effective = -u / 2 * n + j * (heis - n / 4)
    assert check.ground_state_error[2] == pytest.approx(abs(effective - exact), abs=1e-9)
    assert check.ground_state_error[0] == pytest.approx(abs(-u / 2 * n - exact), abs=1e-9)


def test_errors_fall_order_by_order_and_scale_with_the_coupling():
    result = infinite_chain(1.0, 10.0, 4)
    check, fits, _ = lattice_check(result, size=8, fit_scaling=True)
    assert check.cluster == "periodic chain, 8 sites"
    errors = check.max_abs_error
    assert errors[0] > 10 * errors[2] > 10 * 10 * errors[4] > 0
    # lambda^(n+2): the next non-zero order (odd orders vanish at half filling)
    assert fits[2].power == pytest.approx(4.0, abs=0.15)
    assert fits[4].power == pytest.approx(6.0, abs=0.15)
    assert fits[2].ok and fits[4].ok


def test_errors_scale_like_the_next_order_in_t_over_u():
    # at fixed t the order-n error is ~ t^(n+2)/U^(n+1): doubling U divides it by 2^(n+1)
    low, high = (lattice_check(infinite_chain(1.0, u, 4), size=8)[0] for u in (16.0, 32.0))
    for n in (2, 4):
        ratio = low.max_abs_error[n] / high.max_abs_error[n]
        assert math.log2(ratio) == pytest.approx(n + 1, abs=0.15), n
        g = low.ground_state_error[n] / high.ground_state_error[n]
        assert math.log2(g) == pytest.approx(n + 1, abs=0.15), n


def test_orders_that_wind_around_a_small_ring_are_not_compared():
    result = infinite_chain(1.0, 10.0, 4)
    check, _, warnings = lattice_check(result, size=4)
    assert check.winding_loop == 4 and sorted(check.max_abs_error) == [0, 1, 2, 3]
    assert any("order 4 is not" in w and "wind" in w for w in warnings)
    data = check.to_dict()
    assert data["cluster"] == "periodic chain, 4 sites" and data["winding_loop"] == 4
    assert set(data["by_order"]) == {"0", "1", "2", "3"}


def test_default_clusters():
    # the most orders compared within the cost limit (lowfold.jobs.lattice_check docstring)
    model = lowfold.parse_model(tomllib.loads(chain_text(1.0, 10.0, 2)))
    _, name, loop = check_cluster(model)
    assert (name, loop) == ("periodic chain, 10 sites", 10)
    square = lowfold.parse_model(tomllib.loads(chain_text(1.0, 10.0, 2)
                                               .replace('"chain"', '"square"')))
    _, name, loop = check_cluster(square)
    assert (name, loop) == ("periodic square 3x3, 9 sites", 3)


def test_derive_of_an_infinite_lattice_carries_its_check():
    model = lowfold.parse_model(tomllib.loads(chain_text(1.0, 10.0, 2)))
    checked = lowfold.derive(model, 2, check_levels=2)
    assert checked.check.cluster == "periodic chain, 10 sites"
    assert checked.check.max_abs_error[2] < 0.2 * checked.check.max_abs_error[0]
    assert lowfold.derive(model, 2, compare_exact=False).check is None
    again = lowfold.EffectiveModel.from_dict(checked.to_dict())
    assert again.check.cluster == checked.check.cluster
    assert again.check.winding_loop == 10


@pytest.fixture(scope="module")
def cli(tmp_path_factory):
    path = tmp_path_factory.mktemp("lattice_check") / "chain.toml"
    path.write_text(chain_text(1.0, 10.0, 2))
    return run_all({"checked": ["derive", path, "--json", "--check-levels", "2"],
                    "unchecked": ["derive", path, "--json", "--no-check"],
                    "screen": ["derive", path, "--check-levels", "2"]})


def test_cli_json_is_strict_and_names_the_cluster(cli):
    data = one_json_object(cli["checked"])
    check = data["check"]
    assert check["cluster"] == "periodic chain, 10 sites" and check["winding_loop"] == 10
    assert set(check["by_order"]) == {"0", "1", "2"}
    assert check["by_order"]["2"]["max_abs_error"] < check["by_order"]["0"]["max_abs_error"]


def test_cli_no_check_gives_null(cli):
    data = one_json_object(cli["unchecked"])
    assert data["check"] is None
    assert data["classes"]


def test_screen_shows_classes_and_names_the_cluster(cli):
    text = succeeded(cli["screen"])
    assert "coupling classes" in text and "next-nearest" not in text    # order 2: J1 only
    assert "exchange nearest: 4 t^2/U" in text
    assert "on the periodic chain, 10 sites" in text


def test_order_6_on_a_ring_equals_the_rings_own_check():
    # below the winding loop (8 bonds) the ring's own Schrieffer-Wolff orders are the
    # infinite chain's couplings put on it, four-spin terms (exported as patterns) included
    result = infinite_chain(1.0, 10.0, 6)
    assert any(c.kind == "pauli" for c in result.classes)
    check, _, warnings = lattice_check(result, size=8)
    assert not warnings
    ring = lowfold.parse_model(tomllib.loads(chain_text(1.0, 10.0, 6)))
    ring = ring.with_lattice(size=[8], boundary="periodic")
    own = lowfold.derive(ring, 6).check
    for m in range(7):
        assert check.max_abs_error[m] == pytest.approx(own.max_abs_error[m], rel=1e-6, abs=1e-9)
    assert check.max_abs_error[6] < check.max_abs_error[4] < check.max_abs_error[2]


def test_honeycomb_check_equals_the_clusters_own_below_the_winding_loop():
    # two sites per cell: the 2x2 periodic honeycomb cluster (8 sites, shortest loop around
    # it 4 bonds); at orders 0..3 its own derive and the infinite couplings put on it agree
    text = chain_text(1.0, 10.0, 3).replace('"chain"', '"honeycomb"')
    infinite = lowfold.parse_model(tomllib.loads(text))
    result = lowfold.derive(infinite, 3, compare_exact=False)
    check, _, _ = lattice_check(result)
    assert check.cluster == "periodic honeycomb 2x2, 8 sites" and check.winding_loop == 4
    cluster = infinite.with_lattice(size=[2, 2], boundary="periodic")
    own = lowfold.derive(cluster, 3).check
    for m in range(4):
        assert check.max_abs_error[m] == pytest.approx(own.max_abs_error[m], rel=1e-6, abs=1e-9)
        assert check.ground_state_error[m] == pytest.approx(own.ground_state_error[m],
                                                            rel=1e-6, abs=1e-9)


def test_kagome_has_no_cluster_within_the_cost_limit_and_says_so():
    text = chain_text(1.0, 10.0, 2).replace('"chain"', '"kagome"')
    result = lowfold.derive(lowfold.parse_model(tomllib.loads(text)), 2)
    assert result.check is None and result.classes
    assert any("exact check skipped" in w and "kagome" in w for w in result.warnings)
