"""Warnings of ``derive`` about results the user must not trust as they stand: a series that
has stopped converging (check errors growing with the order), a validity ratio past the
documented threshold, and couplings that receive wrap-around processes on periodic clusters.
"""

from __future__ import annotations

import numpy as np
import pytest

from helpers.derive_models import hubbard
from lowfold.jobs.check_winding import shortest_winding_loop, wrap_around_warnings
from lowfold.jobs.derive import derive
from lowfold.perturbation.convergence import VALIDITY_WARNING


def divergence_warnings(result):
    return [w for w in result.warnings if "stops falling" in w]


def validity_warnings(result):
    return [w for w in result.warnings if "validity ratio" in w]


def test_two_site_hubbard_past_the_radius_warns_of_divergence():
    # Two-site Hubbard model at half filling: the singlet lies at (U - sqrt(U^2 + 16 t^2))/2
    # and the triplet at 0 (Essler et al., The One-Dimensional Hubbard Model, CUP 2005; exact
    # diagonalisation of the 2x2 singlet block).  As a series in t/U the singlet energy has
    # branch points at t/U = +-i/4, so at t/U = 3/8 (validity ratio 0.375) the orders diverge.
    t, U = 0.375, 1.0
    result = derive(hubbard("chain", (2,), t=t, U=U, order=30), 30)
    singlet = (U - np.sqrt(U**2 + 16 * t**2)) / 2
    np.testing.assert_allclose(result.check.exact, sorted([singlet, 0.0, 0.0, 0.0]), atol=1e-12)
    assert result.diagnostics.validity_ratio == pytest.approx(t / U)
    errors = result.check.max_abs_error
    assert errors[30] > errors[2]          # diverging, as the closed form says
    assert len(divergence_warnings(result)) == 1, result.warnings


def test_two_site_hubbard_inside_the_radius_does_not_warn():
    # t/U = 0.1 < 1/4: the errors fall with every even order (same closed form).
    result = derive(hubbard("chain", (2,), t=0.1, U=1.0, order=8), 8)
    errors = result.check.max_abs_error
    assert errors[8] < errors[6] < errors[4] < errors[2]
    assert divergence_warnings(result) == [] and validity_warnings(result) == []


def test_validity_ratio_past_the_documented_threshold_warns():
    # |V_PQ| / gap = t / U for the dimer (one hop out of P costs U; common practice).
    t = 1.2 * VALIDITY_WARNING
    result = derive(hubbard("chain", (2,), t=t, U=1.0, order=2), 2, compare_exact=False)
    assert result.diagnostics.validity_ratio == pytest.approx(t)
    assert len(validity_warnings(result)) == 1, result.warnings


def wrap_warnings(result):
    return [w for w in result.warnings if "wind around" in w]


@pytest.mark.parametrize("shape, size, boundary, loop", [
    ("chain", (6,), "periodic", 6),          # the ring itself
    ("chain", (6,), "open", None),
    ("triangular", (3, 3), "periodic", 3),   # three bonds along a lattice vector
    ("square", (4, 4), "periodic", 4),
    ("ladder", (4,), "periodic", 4),
])
def test_shortest_winding_loop(shape, size, boundary, loop):
    # Counted by hand on the cluster's bond graph.
    assert shortest_winding_loop(hubbard(shape, size, boundary)) == loop


def test_triangular_torus_warns_at_order_four():
    # A 3x3 triangular torus: the order-4 nearest-neighbour exchange includes processes that
    # wind around the torus (J1 = 4 - 80 t^4/U^3 there, issue report); loops of 3 bonds wind.
    result = derive(hubbard("triangular", (3, 3), "periodic", order=4), 4, compare_exact=False)
    assert len(wrap_warnings(result)) == 1
    assert "from order 3 on" in wrap_warnings(result)[0]


def test_six_site_ring_criterion_against_a_longer_ring():
    # Exchange J_01 of a periodic Hubbard ring at half filling, t/U = 0.1, orders 4 and 6.
    # Below the shortest winding loop (6 bonds) the 6-site ring must agree with the 8-site
    # ring, whose loop (8 bonds) is not reached by order 6 either, so both give the infinite
    # chain's coefficient (4 t^2/U - 16 t^4/U^3 at fourth order: Takahashi, J. Phys. C 10,
    # 1289 (1977)); at order 6 the 6-site ring receives winding processes and differs.
    def exchange(length, order):
        result = derive(hubbard("chain", (length,), "periodic", order=order), order,
                        compare_exact=False)
        coupling = [c for c in result.couplings
                    if c.kind == "exchange" and tuple(c.sites) == (0, 1)][0]
        return result, coupling.orders

    four, j_six_at_4 = exchange(6, 4)
    six, j_six = exchange(6, 6)
    eight, j_eight = exchange(8, 6)
    t, U = 0.1, 1.0
    assert j_six_at_4[4] == pytest.approx(-16 * t**4 / U**3, rel=1e-9)
    assert j_six[4] == pytest.approx(j_eight[4], rel=1e-9)
    assert abs(j_six[6] - j_eight[6]) > 1e-3 * abs(j_eight[6])
    assert wrap_warnings(four) == [] and wrap_warnings(eight) == []
    assert len(wrap_warnings(six)) == 1 and "from order 6 on" in wrap_warnings(six)[0]


def test_open_clusters_never_warn():
    model = hubbard("square", (2, 3), "open")
    assert wrap_around_warnings(model, 40) == []
