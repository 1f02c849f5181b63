"""The exact check of ``derive`` compares the lowest levels of each S^z block (default 8),
``check_levels`` chooses how many, the result says which, and a check that would not fit in
memory is skipped before anything is built.

Reference: QuSpin (independent exact diagonalisation) for the Hubbard chain's levels.
"""

from __future__ import annotations

import importlib

import numpy as np
import pytest
from scipy.sparse.linalg import eigsh

from helpers.cli import one_json_object, one_line_error, run_all
from helpers.derive_models import hubbard
from helpers.modelfiles import hubbard_text
from lowfold.errors import ModelError
from lowfold.jobs.derive import derive


def quspin_lowest(n_sites, n_up, k, t, U):
    """The k lowest levels of the open Hubbard chain at half filling with n_up up spins."""
    from quspin.basis import spinful_fermion_basis_1d
    from quspin.operators import hamiltonian

    basis = spinful_fermion_basis_1d(n_sites, Nf=(n_up, n_sites - n_up))
    bonds = [(i, i + 1) for i in range(n_sites - 1)]
    hop = [[-t, i, j] for i, j in bonds] + [[-t, j, i] for i, j in bonds]
    static = [["+-|", hop], ["|+-", hop], ["n|n", [[U, i, i] for i in range(n_sites)]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_herm=False,
                    check_pcon=False, check_symm=False).tocsr()
    if h.shape[0] <= 1200:
        return np.linalg.eigvalsh(h.toarray())[:k]
    return np.sort(eigsh(h, k=k, which="SA", tol=1e-12, return_eigenvectors=False))


@pytest.fixture(scope="module")
def eight_sites():
    return derive(hubbard("chain", (8,), t=0.1, U=1.0, order=4), 4)


def test_default_compares_the_lowest_eight_of_each_block(eight_sites):
    # 8-site chain: S^z blocks -4..4 with 1, 8, 28, 56, 70, ... manifold states in sectors of
    # 1, 64, 784, 3136, 4900 states: the sectors of at most 1200 states are compared whole.
    check = eight_sites.check
    assert check.requested == 8
    assert [b.sz for b in check.blocks] == ["-4", "-3", "-2", "-1", "0", "1", "2", "3", "4"]
    assert [b.compared for b in check.blocks] == [1, 8, 28, 8, 8, 8, 28, 8, 1]
    assert [b.manifold_states for b in check.blocks] == [1, 8, 28, 56, 70, 56, 28, 8, 1]
    expected = np.sort(np.concatenate([quspin_lowest(8, 4 + int(b.sz), b.compared, 0.1, 1.0)
                                       for b in check.blocks]))
    np.testing.assert_allclose(check.exact, expected, rtol=0, atol=1e-9)


def test_ground_state_error_is_reported(eight_sites):
    check = eight_sites.check
    ground = quspin_lowest(8, 4, 1, 0.1, 1.0)[0]
    effective = np.linalg.eigvalsh(eight_sites.matrix(4))[0]
    assert check.ground_state_error[4] == pytest.approx(abs(effective - ground), abs=1e-10)
    assert check.ground_state_error[4] <= check.max_abs_error[4] + 1e-12
    # errors fall like (t/U)^(n+1) (Bravyi, DiVincenzo and Loss 2011, Sec. 3)
    assert check.max_abs_error[4] < 0.1 * check.max_abs_error[2]


def test_fewer_levels_on_request():
    result = derive(hubbard("chain", (8,), t=0.1, U=1.0, order=2), 2, check_levels=2)
    assert [b.compared for b in result.check.blocks] == [1, 8, 28, 2, 2, 2, 28, 8, 1]
    assert "2 of each S^z block" in result.check.describe()


def test_all_levels_on_request():
    result = derive(hubbard("chain", (4,), order=2), 2, check_levels="all")
    assert result.check.compared == result.manifold.dimension == 16
    assert result.check.describe() == "all 16 levels of the manifold compared"


@pytest.mark.parametrize("bad", [0, -3, "some", True, 2.5, None])
def test_bad_check_levels_are_refused(bad):
    with pytest.raises(ModelError, match="positive whole number"):
        derive(hubbard("chain", (2,), order=2), 2, check_levels=bad)


def test_check_skipped_before_building_when_it_does_not_fit(monkeypatch):
    # A memory limit below the estimate: the check is skipped with the estimate named, and
    # no block is built (build_basis is never called by the check).
    module = importlib.import_module("lowfold.jobs.check")
    monkeypatch.setattr(module, "available_memory", lambda: 1000)
    built = []
    monkeypatch.setattr(module, "build_basis", lambda *a, **k: built.append(a))
    result = derive(hubbard("chain", (4,), order=2), 2)
    assert result.check is None and built == []
    skipped = [w for w in result.warnings if w.startswith("exact check skipped")]
    assert len(skipped) == 1 and "GiB" in skipped[0] and "allowed" in skipped[0]


def test_24_site_cluster_skips_the_check_at_once():
    # A half-filled 24-site Hubbard chain: the S^z = 0 block has C(24,12)^2 = 7.3e12 states.
    from lowfold.jobs.check import exact_check
    from lowfold.jobs.derive import _blocks
    from lowfold.perturbation.manifold import Manifold
    model = hubbard("chain", (24,), order=2)
    # two manifold states stand in for the 2^24 of the real manifold: only sizes matter here
    states = np.array([0, 1], dtype=np.int64)
    manifold = Manifold(states, np.zeros(2))
    check, _, skipped = exact_check(model, states, np.zeros(2), [None],
                                    _blocks(model, manifold, False))
    assert check is None and "exact check skipped" in skipped[0]


@pytest.fixture(scope="module")
def cli_runs(tmp_path_factory):
    path = tmp_path_factory.mktemp("levels") / "chain.toml"
    path.write_text(hubbard_text("chain", (4,), t=0.1, U=1.0, order=2))
    return run_all({"three": ["derive", path, "--check-levels", "3", "--json"],
                    "screen": ["derive", path, "--check-levels", "all"],
                    "bad": ["derive", path, "--check-levels", "many"]})


def test_cli_check_levels(cli_runs):
    data = one_json_object(cli_runs["three"])
    assert data["check"]["levels"]["requested"] == 3
    assert "levels of the manifold compared" in cli_runs["screen"].stdout
    assert "--check-levels" in one_line_error(cli_runs["bad"])
