"""Warnings of ``derive`` about results the user must not trust as they stand: a series that
has stopped converging (check errors growing with the order), a validity ratio past the
documented threshold, and couplings that receive wrap-around processes on periodic clusters.
"""

from __future__ import annotations

import numpy as np
import pytest

from helpers.derive_models import hubbard
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
