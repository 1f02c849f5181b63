"""Sweeps of ``lowfold series`` (``sweep=``): levels along lambda in [A, B], avoided
crossings inside one symmetry sector and true crossings between S^z sectors, checked against
closed forms and dense Kronecker-product spectra; and the syntax of a sweep.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from helpers.exact import heisenberg, spin_z_total
from helpers.series_models import ZEEMAN_CHAIN, offset_dimer_file, one_spin_file, singlet_block
from lowfold import ModelError, state_series
from lowfold.cli.app import parse_sweep

# ---------------------------------------------------------------------------------------
# sweeps: avoided and true crossings


def test_sweep_two_level_avoided_crossing(load):
    # H(lambda) = (-1 + r lambda) sigma^z + b lambda sigma^x: eigenvalues
    # +- sqrt((1 - r lambda)^2 + b^2 lambda^2), closest at lambda* = r / (r^2 + b^2).
    r, b = 1.0, 0.05
    result = state_series(load(one_spin_file(r, b)), sweep=parse_sweep("lambda=0:2:41"))
    sweep = result.sweep.to_dict()
    lambdas = np.linspace(0, 2, 41)
    gaps = 2 * np.sqrt((1 - r * lambdas) ** 2 + (b * lambdas) ** 2)
    best = lambdas[np.argmin(gaps)]
    star = r / (r * r + b * b)
    assert abs(best - star) <= 0.025
    avoided = sweep["avoided_crossings"]
    assert len(avoided) == 1
    assert avoided[0]["lambda"] == pytest.approx(best, abs=1e-12)
    assert avoided[0]["gap"] == pytest.approx(gaps.min(), abs=1e-12)
    assert sweep["crossings"] == []
    levels = np.array(sweep["levels"])
    np.testing.assert_allclose(levels, np.stack([-gaps / 2, gaps / 2], axis=1), atol=1e-12)


def test_sweep_hubbard_dimer_avoided_crossing(load):
    # Offset dimer with a tilt +lambda n_0: the pair on dot 0 (diagonal -3 + 2 lambda) meets
    # the singlet with one electron per dot (-2 + lambda) at lambda = 1, and the hopping
    # repels them (singlet block, see singlet_block).  The triplet T0 (-2 + lambda, not
    # coupled) runs between the two repelled levels; the avoided crossing is between
    # singlet levels 0 and 1 of the dense singlet block.
    t = 0.05
    result = state_series(load(offset_dimer_file(t, 8, tilt=True)),
                          sweep=parse_sweep("lambda=0:2:41"))
    lambdas = np.linspace(0, 2, 41)
    singlets = np.array([np.linalg.eigvalsh(singlet_block(t * lam, lam)) for lam in lambdas])
    fine = np.linspace(0, 2, 4001)
    gaps = [np.diff(np.linalg.eigvalsh(singlet_block(t * lam, lam))[:2])[0] for lam in fine]
    star = fine[int(np.argmin(gaps))]
    assert abs(star - 1.0) < 0.05  # pushed down a little by |02>
    levels = np.array(result.sweep.levels)
    for row, s in zip(levels, singlets):  # the dense singlet levels are among the levels
        assert np.min(np.abs(row[:, None] - s[None, :2]), axis=0).max() < 1e-10
    avoided = result.sweep.to_dict()["avoided_crossings"]
    assert any(abs(c["lambda"] - star) <= 0.05 for c in avoided), avoided


def test_sweep_spin_dimer_true_crossing_between_sz_sectors(load):
    # Two spins, H0 = -(S0^z + S1^z), V = S0.S1.  Exactly: |uu> at
    # -1 + lambda/4 (S^z = 1), the singlet at -3 lambda/4 (S^z = 0): a true crossing at
    # lambda = 1 between S^z sectors (V conserves S^z; elementary two-spin algebra).
    result = state_series(load(ZEEMAN_CHAIN.format(L=2)), sweep=parse_sweep("lambda=0:2:41"))
    sweep = result.sweep.to_dict()
    assert sweep["crossings"] == [{"lambda": pytest.approx(1.0, abs=0.025),
                                   "sectors": ["Sz=0", "Sz=1"]}]
    assert sweep["avoided_crossings"] == []
    lambdas = np.array(sweep["lambda"])
    np.testing.assert_allclose(sweep["followed"], -1 + lambdas / 4, atol=1e-12)
    np.testing.assert_allclose(np.array(sweep["levels"])[:, 0],
                               np.minimum(-1 + lambdas / 4, -3 * lambdas / 4), atol=1e-12)


def test_sweep_spin_chain_crossings_match_dense_sectors(load):
    # Four spins: H0 = -sum S^z, V = sum S.S (open chain).  Dense check: lowest level of
    # each S^z sector from the Kronecker build; the ground state passes S^z = 2 -> 1 -> 0.
    n = 4
    result = state_series(load(ZEEMAN_CHAIN.format(L=n)), sweep=parse_sweep("lambda=0:2:41"))
    sweep = result.sweep.to_dict()
    lambdas = np.linspace(0, 2, 41)
    sz = spin_z_total(n)
    h0 = np.diag(-sz)
    v = heisenberg([(i, i + 1) for i in range(n - 1)], n)
    sectors = np.unique(sz)
    lowest = np.array([[np.linalg.eigvalsh((h0 + lam * v)[np.ix_(sz == s, sz == s)])[0]
                        for s in sectors] for lam in lambdas])
    ground = sectors[np.argmin(lowest, axis=1)]
    changes = [(0.5 * (lambdas[i] + lambdas[i + 1]), ground[i], ground[i + 1])
               for i in range(len(lambdas) - 1) if ground[i] != ground[i + 1]]
    assert [(a, b) for _, a, b in changes] == [(2, 1), (1, 0)]
    reported = {(frozenset(c["sectors"]), round(c["lambda"], 6)) for c in sweep["crossings"]}
    for lam, a, b in changes:
        key = frozenset({f"Sz={int(a)}", f"Sz={int(b)}"})
        assert any(k == key and abs(x - lam) <= 0.05 for k, x in reported), (lam, a, b)
    # every reported crossing is a sign change of the dense lowest levels of its sectors
    for c in sweep["crossings"]:
        i, j = (int(np.flatnonzero(sectors == float(Fraction(s[3:])))[0]) for s in c["sectors"])
        near = np.abs(lambdas - c["lambda"]) <= 0.05
        diff = lowest[near, i] - lowest[near, j]
        assert diff.min() < 0 < diff.max(), c


@pytest.mark.parametrize("text", ["lambda=0:2", "mu=0:1:5", "lambda=a:1:5", "lambda=0:1:1",
                                  "lambda=1:1:5", "lambda=0:nan:5", "lambda=0:1:5000",
                                  "lambda=0:1:-3", "", "lambda=0:1:4:2"])
def test_sweep_syntax_errors(text):
    with pytest.raises(ModelError, match="--sweep"):
        parse_sweep(text)


def test_sweep_parses_start_stop_count():
    np.testing.assert_allclose(parse_sweep(" lambda = 0:2:41 "), np.linspace(0, 2, 41))
    np.testing.assert_allclose(parse_sweep("lambda=-1:1e0:3"), [-1, 0, 1])
