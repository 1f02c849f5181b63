"""Exact couplings of a cluster (``derive(..., exact_couplings=True)``, ``--exact-couplings``).

The exact effective Hamiltonian is the direct rotation of the exact states that grow out of
the manifold P onto P (des Cloizeaux, Nucl. Phys. 20, 321 (1960)); each Pauli term and named
coupling gets its exact value beside its orders.  Checks from outside the project:

- the Hubbard dimer at half filling: the singlet lies at E_s = (U - sqrt(U^2 + 16 t^2))/2 and
  the triplet at 0 (exact diagonalisation of the two-site problem; common practice), so the
  exact effective model is ``J (S0.S1 - 1/4)`` with ``J = (sqrt(U^2 + 16 t^2) - U)/2`` at every
  U/t, not only at large U;
- the series summed to order n differs from the exact couplings by the first missing order:
  at half filling odd orders vanish, so on the 6-site chain ``J_exact - J_{<=n}`` falls like
  ``(t/U)^(n+2)`` (Takahashi, J. Phys. C 10, 1289 (1977): the expansion of the Hubbard
  chain's spin model goes in t^2/U steps; DESIGN.md: the series differs from the direct
  rotation by O(lambda^(n+1)));
- an independent direct rotation, written out here from the reference Hamiltonian of
  ``helpers.reference`` (Jordan-Wigner strings by hand, whole particle-number sector, no
  S^z blocks), agrees entry by entry with lowfold's exact effective Hamiltonian: the
  manifold's states are located in the exact eigenvectors' basis with the right signs;
- refusals: on the 4-site Hubbard ring at U/t = 3 an exact state with no weight on P (a
  symmetry-forbidden one) is among the six lowest of S^z = 0, and at U/t = 2 the S^z = 1
  block's fourth and fifth levels are degenerate: both are ManifoldErrors naming the block
  and the coupling.  A 12-site chain (up to 924 manifold states of a 853,776-state block) is
  a SizeError before anything is built.
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
import scipy.linalg as la

from helpers import lattice_models
from helpers import reference as ref
from helpers.modelfiles import hubbard_text, model_of
from lowfold.errors import ManifoldError, ModelError, SizeError
from lowfold.jobs.derive import derive
from lowfold.jobs.tasks import run_task
from lowfold.perturbation.direct_rotation import direct_rotation
from lowfold.results import EffectiveModel


def dimer_exchange(t, U):
    """J of the Hubbard dimer at any U/t: the singlet-triplet gap, written without the
    cancellation of (sqrt(U^2 + 16 t^2) - U)/2 at large U (common practice)."""
    return 8 * t * t / (np.sqrt(U * U + 16 * t * t) + U)


def hubbard(size, *, t=1.0, U=10.0, order=2, boundary="open"):
    return model_of(hubbard_text("chain", size, boundary=boundary, t=t, U=U, order=order))


def exchange(result, sites):
    coupling = next(c for c in result.couplings if c.kind == "exchange" and c.sites == sites)
    return coupling, result.exact.coupling_value("exchange", sites)


# ----------------------------------------------------------------------------- dimer


@pytest.mark.parametrize("U", [0.5, 1.0, 2.0, 4.0, 10.0, 50.0])
def test_dimer_exact_exchange_at_every_ratio(U):
    t = 1.0
    result = derive(hubbard((2,), t=t, U=U, order=2), compare_exact=False, exact_couplings=True)
    J = dimer_exchange(t, U)
    assert abs(result.exact.coupling_value("exchange", (0, 1)) - J) < 1e-10
    # J (S0.S1 - 1/4): the constant is -J/4, and nothing else is in the exact model
    assert abs(result.exact.coupling_value("constant", ()) + J / 4) < 1e-10
    assert set(result.exact.couplings) == {("constant", ()), ("exchange", (0, 1))}
    # the exact levels used are the singlet and the triplet
    assert np.allclose(result.exact.energies, [-J, 0, 0, 0], atol=1e-10)
    data = result.to_dict()
    exchange_json = next(c for c in data["couplings"] if c["kind"] == "exchange")
    assert abs(exchange_json["exact"] - J) < 1e-10
    assert {t_["operator"] for t_ in data["terms"]} == {"I", "X0 X1", "Y0 Y1", "Z0 Z1"}
    assert all(abs(t_["exact"] - (J / 4 if t_["operator"] != "I" else -J / 4)) < 1e-10
               for t_ in data["terms"])          # J S.S = (J/4) sigma.sigma


def test_dimer_exact_exchange_with_the_hopping_scale_varied():
    # the same closed form with t != 1 (and U/t small): J depends on U and t only through it
    for t, U in [(0.3, 0.2), (2.0, 3.0), (0.05, 1.0)]:
        result = derive(hubbard((2,), t=t, U=U, order=2), compare_exact=False, exact_couplings=True)
        assert abs(result.exact.coupling_value("exchange", (0, 1)) - dimer_exchange(t, U)) < 1e-10


# ----------------------------------------------------------------------------- convergence


def test_six_site_chain_partial_sums_approach_the_exact_exchange_like_t_over_U_to_n_plus_2():
    ratios = [0.04, 0.05, 0.0625, 0.08]
    errors = {2: [], 4: [], 6: []}
    for lam in ratios:                         # U = 1, t = lambda: the error in units of U
        result = derive(hubbard((6,), t=lam, U=1.0, order=6), compare_exact=False,
                        exact_couplings=True)
        for bond in [(0, 1), (2, 3)]:
            coupling, exact = exchange(result, bond)
            for n in errors:
                partial = sum(v for m, v in coupling.orders.items() if m <= n)
                errors[n].append((bond, abs(exact - partial)))
    for n, rows in errors.items():
        for bond in [(0, 1), (2, 3)]:
            e = [err for b, err in rows if b == bond]
            slope = np.polyfit(np.log(ratios), np.log(e), 1)[0]
            assert abs(slope - (n + 2)) < 0.25, (n, bond, slope, e)


def test_exact_couplings_of_the_ring_include_what_the_order_lacks():
    # 4-site ring at order 2: the exact model also has the ring exchange and the next-nearest
    # exchange, which the series reaches at order 4 only; they are listed beyond the orders.
    # At order 4 the ring exchange is a leading term, so exact - order 4 falls like
    # (t/U)^6 (the next even order, as for the exchange above).
    model = hubbard((4,), t=0.1, U=1.0, order=4, boundary="periodic")
    second = derive(model, 2, compare_exact=False, exact_couplings=True).to_dict()
    beyond = {(c["kind"], tuple(c["sites"])) for c in second["exact"]["beyond_orders"]["couplings"]}
    assert ("ring", (0, 1, 2, 3)) in beyond and ("exchange", (0, 2)) in beyond
    ratios, errors = [0.03, 0.04, 0.05], []
    for lam in ratios:
        fourth = derive(hubbard((4,), t=lam, U=1.0, order=4, boundary="periodic"),
                        compare_exact=False, exact_couplings=True)
        ring = next(c for c in fourth.couplings if c.kind == "ring")
        errors.append(abs(fourth.exact.coupling_value("ring", ring.sites) - ring.value))
    slope = np.polyfit(np.log(ratios), np.log(errors), 1)[0]
    assert abs(slope - 6) < 0.25, (slope, errors)


def test_exact_couplings_of_a_ring_keep_its_translation_symmetry_and_form_classes():
    # the direct rotation commutes with the ring's translations (P and H do), so every
    # nearest-neighbour bond has the same exact exchange; the class carries it
    result = derive(hubbard((6,), t=0.1, U=1.0, order=4, boundary="periodic"),
                    compare_exact=False, exact_couplings=True)
    nearest = [result.exact.coupling_value("exchange", (i, (i + 1) % 6) if i < 5 else (0, 5))
               for i in range(6)]
    assert np.ptp(nearest) < 1e-12
    classes = {(c["kind"], c["class"]): c for c in result.to_dict()["classes"]}
    assert abs(classes[("exchange", "nearest")]["exact"] - nearest[0]) < 1e-12
    assert 0 < classes[("exchange", "next-nearest")]["exact"] < 2 * classes[("exchange", "next-nearest")]["value"]


# ----------------------------------------------------------------------------- signs


def test_exact_matrix_matches_an_independent_direct_rotation():
    t, U, n = 1.0, 7.0, 4
    bonds = [(i, i + 1) for i in range(n - 1)]
    terms = (ref.expand_term("electron", "hopping", t, bonds=bonds)
             + ref.expand_term("electron", "hubbard", U, sites=list(range(n))))
    states = ref.sector_states("electron", n, particles=n)
    h = ref.restrict(ref.sparse_hamiltonian("electron", n, terms), states)
    energies, vectors = la.eigh(h)
    result = derive(hubbard((n,), t=t, U=U, order=2), compare_exact=False, exact_couplings=True)
    p = np.searchsorted(states, result.manifold.states)       # reference rows of the manifold
    assert np.array_equal(states[p], result.manifold.states)
    k = p.size
    x, _, yh = np.linalg.svd(vectors[p, :k])
    w = x @ yh
    expected = (w * energies[:k]) @ w.conj().T
    got = result.exact.matrix.toarray()
    assert np.max(np.abs(got - expected)) < 1e-10
    assert np.allclose(np.sort(result.exact.energies), energies[:k], atol=1e-10)


def test_direct_rotation_of_a_two_level_mixture():
    # one state |P> and one |Q> mixed by an angle theta: the exact state in P's direction is
    # cos(theta)|P> + sin(theta)|Q>, so H_eff_exact = E (the sign of the overlap is removed by
    # the polar factor; a 1x1 polar factor is the phase)
    rotation = direct_rotation([-1.5], [[-0.8]], next_energy=2.0)
    assert rotation.matrix.shape == (1, 1) and abs(rotation.matrix[0, 0] + 1.5) < 1e-15
    assert abs(rotation.smallest_singular_value - 0.8) < 1e-15 and rotation.gap == 3.5


def test_window_above_the_bottom_takes_the_levels_that_grow_out_of_it():
    # the doublon pair {|2 0>, |0 2>} of the Hubbard dimer (window around U): its exact states
    # are the upper two of the S^z = 0 block, at U (antisymmetric) and (U + sqrt(U^2 + 16t^2))/2
    # (exact two-site solution, common practice), so H_eff_exact = (U + J/2) + (J/2) pair
    # hopping, with J the dimer exchange
    t, U = 1.0, 10.0
    text = hubbard_text("chain", (2,), t=t, U=U, order=2) + "window = [9.5, 10.5]\n"
    result = derive(model_of(text), compare_exact=False, exact_couplings=True)
    J = dimer_exchange(t, U)
    h = result.exact.matrix.toarray()
    assert np.allclose(np.diag(h), U + J / 2, atol=1e-10)
    assert abs(abs(h[0, 1]) - J / 2) < 1e-10
    assert np.allclose(result.exact.energies, [U, (U + np.sqrt(U * U + 16 * t * t)) / 2])


def test_lanczos_route_gives_the_dense_result(monkeypatch):
    # the blocks of the 6-site chain diagonalised by ARPACK (limit lowered) and densely
    from lowfold.jobs import exact_couplings as module
    model = hubbard((6,), t=0.1, U=1.0, order=2)
    dense = derive(model, compare_exact=False, exact_couplings=True).exact
    monkeypatch.setattr(module, "DENSE_EXACT_LIMIT", 50)
    sparse = derive(model, compare_exact=False, exact_couplings=True).exact
    assert np.max(np.abs((dense.matrix - sparse.matrix).toarray())) < 1e-9
    assert dense.couplings.keys() == sparse.couplings.keys()


# ----------------------------------------------------------------------------- refusals


def test_ring_where_a_state_without_weight_on_the_manifold_comes_down_is_refused():
    model = hubbard((4,), t=1.0, U=3.0, order=2, boundary="periodic")
    with pytest.raises(ManifoldError) as info:
        derive(model, compare_exact=False, exact_couplings=True)
    message = str(info.value)
    assert "left the manifold" in message and "singular value" in message
    assert "S^z = 0 block" in message and "U = 3" in message and "\n" not in message


def test_ring_where_the_exact_gap_closes_is_refused():
    model = hubbard((4,), t=1.0, U=2.0, order=2, boundary="periodic")
    with pytest.raises(ManifoldError) as info:
        derive(model, compare_exact=False, exact_couplings=True)
    message = str(info.value)
    assert "no exact gap above the 4 states" in message and "U = 2" in message


def test_the_same_ring_at_larger_U_is_accepted():
    model = hubbard((4,), t=1.0, U=6.0, order=2, boundary="periodic")
    result = derive(model, compare_exact=False, exact_couplings=True)
    assert result.exact.smallest_singular_value > 0.8 and result.exact.gap > 1


def test_direct_rotation_refuses_degenerate_cut_and_lost_overlap():
    with pytest.raises(ManifoldError, match="no exact gap above"):
        direct_rotation([0.0, 1.0], np.eye(2), next_energy=1.0)
    with pytest.raises(ManifoldError, match="no exact gap below"):
        direct_rotation([0.0, 1.0], np.eye(2), previous_energy=0.0, next_energy=2.0)
    with pytest.raises(ManifoldError, match="left the manifold"):
        direct_rotation([0.0, 1.0], np.diag([1.0, 1e-4]), next_energy=2.0)
    with pytest.raises(ModelError):
        direct_rotation([0.0, 1.0], np.eye(3))
    with pytest.raises(ModelError):
        direct_rotation([0.0, np.nan], np.eye(2))


def test_too_large_cluster_is_a_size_error_before_memory_grows():
    model = hubbard((12,), t=0.1, U=1.0, order=2)
    tracemalloc.start()
    try:
        with pytest.raises(SizeError) as info:
            derive(model, exact_couplings=True)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    message = str(info.value)
    assert "exact eigenvectors" in message and "more than the limit of" in message
    assert peak < 200 * 2**20          # no sector basis or eigenvectors were built


def test_infinite_lattice_has_no_exact_couplings():
    with pytest.raises(ModelError, match="finite cluster"):
        derive(model_of(lattice_models.hubbard_text("chain", order=2)), exact_couplings=True)


# ----------------------------------------------------------------------------- results


def test_json_round_trip_and_task_option():
    model = hubbard((3,), t=0.2, U=1.0, order=2)
    result = run_task("derive", model, {"exact_couplings": True, "check": False})
    data = result.to_dict()
    assert all("exact" in c for c in data["couplings"]) and all("exact" in t for t in data["terms"])
    again = EffectiveModel.from_dict(data).to_dict()
    assert again == data
    assert "exact" not in run_task("derive", model, {"check": False}).to_dict()
    with pytest.raises(ModelError, match="exact_couplings must be true or false"):
        run_task("derive", model, {"exact_couplings": "yes"})


def test_matrix_readout_carries_the_exact_matrix():
    # a manifold with no spin form (two electrons on three sites, one per site is not the
    # manifold): the JSON's effective.exact holds the exact matrix, equal to the exact
    # lowest levels in its spectrum
    text = hubbard_text("chain", (3,), t=0.1, U=1.0, particles=2, order=2)
    result = derive(model_of(text), compare_exact=False, exact_couplings=True)
    assert not result.spin_form
    data = result.to_dict()
    assert "exact" in data["effective"]
    rebuilt = EffectiveModel.from_dict(data)
    assert np.allclose(rebuilt.exact.matrix.toarray(), result.exact.matrix.toarray())
    assert np.allclose(la.eigvalsh(result.exact.matrix.toarray()),
                       np.sort(result.exact.energies), atol=1e-12)
