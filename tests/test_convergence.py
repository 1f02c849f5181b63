"""Partial sums, Pade table and Domb-Sykes ratio test on series with known sums."""

from math import comb

import numpy as np
import pytest

from helpers.exact import binom_half
from lowfold.errors import ModelError
from lowfold.perturbation.convergence import (
    is_even_series,
    pade_estimate,
    pade_table,
    partial_sums,
    ratio_test,
)
from lowfold.perturbation.series import rayleigh_schrodinger


def _binom_half(j):
    """C(1/2, j) as a float (the exact fraction of helpers.exact)."""
    return float(binom_half(j))


def _power_law(alpha, lam_c, n):
    """Taylor coefficients of (1 - lam/lam_c)^(-alpha): Gamma(k + alpha)/(Gamma(alpha) k!)
    lam_c^-k (binomial series)."""
    c = np.empty(n + 1)
    c[0] = 1.0
    for k in range(1, n + 1):
        c[k] = c[k - 1] * (k - 1 + alpha) / k / lam_c
    return c


def test_partial_sums_of_geometric_series():
    # sum_{k<=n} x^k = (1 - x^{n+1}) / (1 - x) (geometric series).
    x = 0.3
    sums = partial_sums(np.ones(8), x)
    np.testing.assert_allclose(sums, (1 - x ** np.arange(1, 9)) / (1 - x), rtol=1e-14)


def test_pade_reproduces_a_rational_function_beyond_its_radius():
    # A [1/2] Pade approximant of a [1/2] rational function is the function itself
    # (uniqueness of Pade approximants; Baker, Essentials of Pade Approximants, 1975).
    def f(x):
        return (1 + 2 * x) / (1 - 1.5 * x + 0.5 * x * x)  # poles at x = 1 and x = 2

    n = 8
    c = np.empty(n + 1)  # Taylor coefficients by the denominator recursion
    num = [1.0, 2.0]
    for k in range(n + 1):
        c[k] = (num[k] if k < 2 else 0.0) + 1.5 * (c[k - 1] if k >= 1 else 0) - 0.5 * (
            c[k - 2] if k >= 2 else 0)
    table = pade_table(c, 3.0, even=False)
    assert abs(table[(1, 2)] - f(3.0)) < 1e-10
    assert abs(partial_sums(c, 3.0)[-1] - f(3.0)) > 1.0  # outside the radius 1


def test_pade_estimate_sums_sqrt_beyond_radius():
    # sqrt(1 + x) = sum_j C(1/2, j) x^j has radius 1 (branch point at x = -1); its
    # near-diagonal Pade approximants converge on the cut-free positive axis
    # (Stieltjes-type function; Baker and Graves-Morris, Pade Approximants, 1996).
    c = np.array([_binom_half(j) for j in range(21)])
    estimate = pade_estimate(c, 3.0)
    assert abs(estimate.value - 2.0) < 1e-6
    assert estimate.spread < 1e-4
    assert sum(estimate.approximant) == 20 and abs(estimate.approximant[0] -
                                                   estimate.approximant[1]) <= 1
    assert abs(partial_sums(c, 3.0)[-1] - 2.0) > 1e3


def test_even_series_pade_is_keyed_in_lambda():
    # sqrt(1 + 4 lam^2): even series, radius 1/2 (branch points at lam = +-i/2).
    c = np.zeros(41)
    c[::2] = [_binom_half(j) * 4.0**j for j in range(21)]
    assert is_even_series(c)
    table = pade_table(c, 1.0)
    assert all(left % 2 == 0 and right % 2 == 0 for (left, right) in table)
    estimate = pade_estimate(c, 1.0)
    assert abs(estimate.value - np.sqrt(5.0)) < 1e-6


def test_ratio_test_power_law_exact():
    # (1 - lam/lam_c)^(-alpha): r_n = (1/lam_c)(1 + (alpha - 1)/n) exactly (Domb and Sykes,
    # Proc. R. Soc. A 240, 214 (1957)).
    result = ratio_test(_power_law(1.5, 0.4, 20))
    assert result["variable"] == "lambda" and result["side"] == "positive"
    assert np.isclose(result["radius"], 0.4) and np.isclose(result["singularity"], 0.4)
    assert np.isclose(result["exponent"], 1.5)
    assert result["fit_residual"] < 1e-12


def test_ratio_test_sqrt_negative_axis():
    # sqrt(1 + x): singularity at x = -1, exponent alpha = -1/2 (binomial series).
    result = ratio_test([_binom_half(j) for j in range(25)])
    assert result["side"] == "negative"
    assert np.isclose(result["singularity"], -1.0)
    assert np.isclose(result["radius"], 1.0) and np.isclose(result["exponent"], -0.5)


def test_ratio_test_even_series_imaginary_singularity():
    # sqrt(1 + lam^2/lam_c^2), lam_c = 0.5: in x = lam^2 the branch point is at x = -1/4,
    # i.e. on the imaginary lam axis at distance 1/2.
    c = np.zeros(31)
    c[::2] = [_binom_half(j) * 4.0**j for j in range(16)]
    result = ratio_test(c)
    assert result["variable"] == "lambda^2" and result["side"] == "negative"
    assert np.isclose(result["singularity"], -0.25) and np.isclose(result["radius"], 0.5)


def test_ratio_test_ising_chain_critical_point():
    # Pfeuty, Ann. Phys. 57, 79 (1970): e(g) = -sum_n C(1/2, n)^2 g^{2n} per site
    # (see test_series), critical at g = 1: a singularity at g^2 = +1.
    c = np.zeros(41)
    c[::2] = [-_binom_half(n) ** 2 for n in range(21)]
    result = ratio_test(c)
    assert result["variable"] == "lambda^2" and result["side"] == "positive"
    assert abs(result["radius"] - 1.0) < 0.01


def test_ratio_test_rejects_zero_coefficients():
    with pytest.raises(ModelError):
        ratio_test([1.0, 0.5, 0.0, 0.2, 0.0, 0.1, 0.0])
    with pytest.raises(ModelError):
        ratio_test([1.0, 2.0])


def test_pade_beats_partial_sum_near_radius_for_random_matrix():
    # A random symmetric matrix split into diagonal H0 and off-diagonal V; exact lowest
    # eigenvalue from numpy eigh (the reference is the lowest H0 level, followed along lam,
    # stays the lowest).  Radius from the root test |c_n|^(-1/n) (Cauchy-Hadamard).
    rng = np.random.default_rng(8)
    n = 30
    d = np.sort(rng.uniform(0.0, 6.0, n))
    a = rng.normal(size=(n, n))
    v = (a + a.T) / 2
    np.fill_diagonal(v, 0.0)
    c = rayleigh_schrodinger(d, v, 0, 30).energies
    radius = abs(c[-1]) ** (-1.0 / 30)
    lam = 0.9 * radius
    exact = np.linalg.eigvalsh(np.diag(d) + lam * v)[0]
    partial_error = abs(partial_sums(c, lam)[-1] - exact)
    pade_error = abs(pade_estimate(c, lam).value - exact)
    assert pade_error < 1e-3 * partial_error
    # far inside the radius both agree with the exact value
    small = 0.3 * radius
    exact_small = np.linalg.eigvalsh(np.diag(d) + small * v)[0]
    assert abs(partial_sums(c, small)[-1] - exact_small) < 1e-10
    assert abs(pade_estimate(c, small).value - exact_small) < 1e-10


def test_binomial_helper_is_the_binomial_series():
    # C(1/2, j) = (-1)^(j+1) C(2j, j) / (4^j (2j - 1)) (binomial identity, common practice).
    for j in range(1, 10):
        expected = (-1) ** (j + 1) * comb(2 * j, j) / (4**j * (2 * j - 1))
        assert np.isclose(_binom_half(j), expected)
