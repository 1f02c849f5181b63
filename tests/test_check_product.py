"""The exact check of ``derive`` in the product basis of electrons (``lowfold.jobs.check_product``).

Large check blocks of Hubbard clusters are solved without a sparse matrix, by a block
eigensolver on wave functions Psi[down, up] started from the effective eigenvectors.  Here
the threshold is lowered so that small clusters take that route: their exact levels must be
those of the sparse-matrix route and of QuSpin (independent exact diagonalisation), degenerate
levels with all their members, and a cluster too large for memory is refused before anything
is built.
"""

from __future__ import annotations

import importlib
from fractions import Fraction

import numpy as np
import pytest

from helpers.derive_models import hubbard
from helpers.reference import quspin_hubbard_energies
from lowfold.jobs.check import ManifoldBlock, exact_check
from lowfold.jobs.derive import derive
from lowfold.model.sector import Sector


def derive_both(model, order, threshold, **options):
    """``derive`` with the product route above ``threshold`` states, and with the sparse route
    only (threshold above every block)."""
    module = importlib.import_module("lowfold.jobs.check_product")
    saved = module.PRODUCT_CHECK_MIN_STATES
    try:
        module.PRODUCT_CHECK_MIN_STATES = threshold
        product = derive(model, order, **options)
        module.PRODUCT_CHECK_MIN_STATES = 10**12
        sparse = derive(model, order, **options)
    finally:
        module.PRODUCT_CHECK_MIN_STATES = saved
    return product, sparse


def methods(result):
    return {b.sz: b.method for b in result.check.blocks}


def ring_bonds(n):
    return [(i, (i + 1) % n) for i in range(n)]


@pytest.fixture(scope="module")
def chain8():
    # 8-site open chain: S^z = 0, +-1 blocks of 4900 and 3136 states take the product route
    return derive_both(hubbard("chain", (8,), t=0.1, U=1.0, order=4), 4, 1000)


def test_product_levels_equal_the_sparse_route_on_the_8_site_chain(chain8):
    product, sparse = chain8
    assert methods(product)["0"] == "product-block"
    assert methods(sparse)["0"] == "lobpcg"
    np.testing.assert_allclose(product.check.exact, sparse.check.exact, rtol=0, atol=1e-9)
    for m in range(5):
        assert product.check.max_abs_error[m] == pytest.approx(sparse.check.max_abs_error[m],
                                                               abs=1e-9)


def test_spin_reversed_block_takes_the_levels_of_its_partner(chain8):
    product, _ = chain8
    routes = methods(product)
    # -S^z is computed first, +S^z is its spin reversal (check_mirror), in the product basis too
    assert routes["-1"] == "product-block" and routes["1"] == "mirror"
    assert routes["-4"] == "dense" and routes["-2"] == "dense"


@pytest.mark.parametrize("size", [(2, 2), (2, 3)])
def test_product_levels_equal_the_sparse_route_on_small_squares(size):
    product, sparse = derive_both(hubbard("square", size, t=0.1, U=1.0, order=4), 4, 30)
    assert methods(product)["0"] == "product-block"
    np.testing.assert_allclose(product.check.exact, sparse.check.exact, rtol=0, atol=1e-9)
    for m in range(5):
        assert product.check.max_abs_error[m] == pytest.approx(sparse.check.max_abs_error[m],
                                                               abs=1e-9)


def test_check_scaling_in_the_product_basis():
    # The power of the error at scaled couplings: order n falls like lambda^(n+1)
    # (Bravyi, DiVincenzo and Loss, Ann. Phys. 326, 2793 (2011), Sec. 3).
    model = hubbard("chain", (6,), t=0.1, U=1.0, order=2)
    product, sparse = derive_both(model, 2, 100, fit_scaling=True)
    assert methods(product)["0"] == "product-block"
    for m in (0, 1, 2):
        assert product.scaling[m].power == pytest.approx(sparse.scaling[m].power, abs=1e-6)
    assert product.scaling[2].ok


def test_degenerate_levels_keep_all_their_members():
    # 6-site Hubbard ring at half filling: momenta +-k give doubly degenerate levels in the
    # S^z = 0 block (400 states), all 20 levels of the manifold's block compared.
    from helpers.modelfiles import hubbard_text, model_of
    model = model_of(hubbard_text("chain", (6,), boundary="periodic", t=0.1, U=1.0, order=4))
    product, _ = derive_both(model, 4, 100)
    assert methods(product)["0"] == "product-block"
    reference = quspin_hubbard_energies(6, ring_bonds(6), 0.1, 1.0, 3, 3, k=20)
    pairs = np.flatnonzero(np.diff(reference) < 1e-9)
    assert pairs.size >= 3                    # the reference has degenerate levels
    block = [b for b in product.check.blocks if b.sz == "0"][0]
    assert block.compared == 20
    exact = np.array(product.check.exact)
    for e in reference:                       # every member, counted with multiplicity
        assert np.sum(np.abs(exact - e) < 1e-9) >= np.sum(np.abs(reference - e) < 1e-9)


def test_twenty_sites_are_refused_before_anything_is_built(monkeypatch):
    # Half-filled 20-site chain: the S^z = 0 block has C(20,10)^2 = 34,134,779,536 states,
    # 4 x 8 wave functions of 273 GB: refused with the estimate and the limit named.
    module = importlib.import_module("lowfold.jobs.check")
    built = []
    monkeypatch.setattr(module, "product_hamiltonians", lambda *a: built.append(a))
    monkeypatch.setattr(module, "product_at_bottom", lambda *a: built.append(a))
    model = hubbard("chain", (20,), order=2)
    states = np.arange(8, dtype=np.int64)       # stand-ins: only the sizes matter here
    block = ManifoldBlock(np.arange(8), Sector(particles=20, sz=Fraction(0)))
    check, _, skipped = exact_check(model, states, np.zeros(8), [None], [block],
                                    memory_limit=8 * 2**30)
    assert check is None and built == []
    assert len(skipped) == 1
    need = (4 * 8 * 8 + 8) * 34_134_779_536 / 2**30
    assert f"{need:.1f} GiB" in skipped[0]
    assert "34,134,779,536 states, in the product basis" in skipped[0]
    assert "8.0 GiB allowed" in skipped[0]


def test_a_z_field_keeps_both_spin_blocks_computed():
    # A field along z (in V) is odd under spin reversal: the S^z = +-1 blocks of the 6-site
    # chain differ, so neither takes the other's levels, and the levels are QuSpin's shifted
    # by the Zeeman energy h S^z (S^z commutes with H).
    from helpers.modelfiles import hubbard_text, model_of
    field = '[[term]]\ntype = "field"\nstrength = 0.003\naxis = "z"\nlabel = "zeeman"\n'
    model = model_of(hubbard_text("chain", (6,), t=0.1, U=1.0, order=2, terms=field))
    product, sparse = derive_both(model, 2, 100)
    routes = methods(product)
    assert routes["-1"] == routes["1"] == routes["0"] == "product-block"
    np.testing.assert_allclose(product.check.exact, sparse.check.exact, rtol=0, atol=1e-9)
    bonds = [(i, i + 1) for i in range(5)]
    expected = []
    for block in product.check.blocks:
        sz = int(block.sz)
        levels = quspin_hubbard_energies(6, bonds, 0.1, 1.0, 3 + sz, 3 - sz, k=block.compared)
        expected.extend(levels + 0.003 * sz)
    np.testing.assert_allclose(product.check.exact, np.sort(expected), rtol=0, atol=1e-9)


def test_large_manifold_blocks_keep_their_effective_matrices_sparse(monkeypatch):
    # Above EFFECTIVE_DENSE_LIMIT manifold states (12,870 in the S^z = 0 block of a 16-site
    # cluster) the effective levels come from Lanczos on the sparse H_eff and the product
    # route's preconditioner inverts H_eff - sigma on its lowest vectors and diagonal; the
    # levels and errors are those of the dense route.  Lowered here to reach the 8-site chain.
    model = hubbard("chain", (8,), t=0.1, U=1.0, order=2)
    dense, _ = derive_both(model, 2, 1000)
    monkeypatch.setattr(importlib.import_module("lowfold.jobs.check"),
                        "EFFECTIVE_DENSE_LIMIT", 20)
    sparse, _ = derive_both(model, 2, 1000)
    assert methods(sparse)["0"] == "product-block"
    np.testing.assert_allclose(sparse.check.exact, dense.check.exact, rtol=0, atol=1e-9)
    for m in range(3):
        assert sparse.check.max_abs_error[m] == pytest.approx(dense.check.max_abs_error[m],
                                                              abs=1e-9)
    assert sparse.check.ground_state_error[2] == pytest.approx(
        dense.check.ground_state_error[2], abs=1e-9)


@pytest.mark.parametrize("dtype", [np.float64, np.complex128])
def test_gap_sweeps_equal_their_numpy_twins(dtype):
    from lowfold.build.product_gaps import divide_by_gap, subtract_hopping_over_gap
    rng = np.random.default_rng(3)
    y = rng.standard_normal((7, 11)).astype(dtype)
    hy = rng.standard_normal((7, 11)).astype(dtype)
    diag = rng.uniform(-1.0, 3.0, (7, 11))
    gap = np.maximum(diag - 0.5, 0.2)
    expected = y / gap
    divide_by_gap(y, diag, 0.5, 0.2)
    np.testing.assert_allclose(y, expected, rtol=1e-14)
    expected = y - (hy - diag * y) / gap
    subtract_hopping_over_gap(y, hy, diag, 0.5, 0.2)
    np.testing.assert_allclose(y, expected, rtol=1e-14)
