"""Non-diagonal H0: the two-site Hubbard model with the hopping as H0 and U as V.

Exact: the ground state of two electrons on two sites (S^z = 0, half filling) has
E(U) = (U - sqrt(U^2 + 16 t^2)) / 2 (exact diagonalisation of the singlet block, common
practice; the closed form is checked below against its own Taylor series).  With H = H0 + lambda V, V = U sum_i n_iup n_idown, the energy is E(lambda U), so
its Taylor coefficients in lambda are, from the binomial series of sqrt(1 + x),
x = (lambda U / 4t)^2:

    E_0 = -2t,   E_1 = U/2,   E_{2m} = -2t C(1/2, m) (U / 4t)^{2m},   other odd E_n = 0.

The old iterative route refused order >= 4 (sometimes >= 2) with a false "degenerate
partner" on this 4-state problem.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from helpers.exact import binom_half
from helpers.series_models import tunnelling_dimer_file

from lowfold import load_model, state_series
from lowfold.perturbation.series import rayleigh_schrodinger_general

ORDER = 12


def closed_form_coefficients(t: float, u: float, order: int) -> np.ndarray:
    """Taylor coefficients in lambda of E(lambda U) = (lambda U - sqrt(lambda^2 U^2 + 16 t^2))/2."""
    c = np.zeros(order + 1)
    c[1] = u / 2
    for m in range(order // 2 + 1):
        c[2 * m] = float(-2 * t * binom_half(m) * (Fraction(u) / (4 * Fraction(t))) ** (2 * m))
    return c


def two_site_split(t: float, u: float):
    """H0 (hopping) and V (Hubbard U) on |ud,0>, |0,ud>, |u,d>, |d,u> (signs of the
    fermionic hops do not change the spectrum of this block: a gauge)."""
    h0 = -t * np.array([[0, 0, 1, 1], [0, 0, 1, 1], [1, 1, 0, 0], [1, 1, 0, 0]], dtype=float)
    v = u * np.diag([1.0, 1.0, 0.0, 0.0])
    return h0, v


def test_closed_form_coefficients_sum_to_the_closed_form():
    # the derived coefficients themselves, against the closed form inside the radius 4t/U
    t, u, lam = 1.0, 2.0, 0.5
    c = closed_form_coefficients(t, u, 40)
    exact = (lam * u - np.sqrt((lam * u) ** 2 + 16 * t * t)) / 2
    assert np.isclose(np.polyval(c[::-1], lam), exact, rtol=0, atol=1e-14)


@pytest.mark.parametrize("u", [0.5, 2.0, 10.0 / 3.0, 10.0])
@pytest.mark.parametrize("solver", ["auto", "dense", "minres", "gmres"])
def test_non_diagonal_series_matches_closed_form_to_order_12(u, solver):
    t = 1.0
    h0, v = two_site_split(t, u)
    values, vectors = np.linalg.eigh(h0)
    result = rayleigh_schrodinger_general(h0, v, vectors[:, 0], values[0], ORDER, solver=solver)
    expected = closed_form_coefficients(t, u, ORDER)
    # the largest |E_n| sets the rounding level of every order
    scale = np.max(np.abs(expected))
    np.testing.assert_allclose(result.energies, expected, rtol=1e-9, atol=1e-12 * scale)


@pytest.mark.parametrize("method", ["wigner", "direct"])
def test_both_energy_formulas_match_on_the_dense_route(method):
    h0, v = two_site_split(0.7, 3.0)
    values, vectors = np.linalg.eigh(h0)
    result = rayleigh_schrodinger_general(h0, v, vectors[:, 0], values[0], ORDER, method=method)
    np.testing.assert_allclose(result.energies, closed_form_coefficients(0.7, 3.0, ORDER),
                               rtol=1e-9, atol=1e-12)




@pytest.mark.parametrize("u", [0.5, 10.0])
def test_series_job_runs_on_the_two_site_model_file(tmp_path, u):
    # the case of the report: U = 10, order 12 was refused with a false degenerate partner
    path = tmp_path / "h.toml"
    path.write_text(tunnelling_dimer_file(u, 4))
    out = state_series(load_model(path), ORDER)
    expected = closed_form_coefficients(1.0, u, ORDER)
    np.testing.assert_allclose(out.energies, expected, rtol=1e-9,
                               atol=1e-12 * np.max(np.abs(expected)))
    assert np.isclose(out.exact, (u - np.sqrt(u * u + 16.0)) / 2, atol=1e-10)
