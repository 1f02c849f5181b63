"""Reliability of the convergence judgements: the Domb-Sykes estimate on exactly known
series (with rounding-level and sign-pair coefficients), the divergence warnings, errors of
an exact check that stop falling, and a series that continues another level than the exact
one followed through an avoided crossing."""

from __future__ import annotations

import numpy as np
import pytest
from helpers.exact import binom_half
from scipy.integrate import quad

from lowfold import derive, load_model
from lowfold.perturbation.convergence import (
    VALIDITY_WARNING,
    convergence_warnings,
    drop_roundoff,
    pade_estimate,
    ratio_test,
)
from lowfold.perturbation.diagnostics import check_divergence, followed_level_warnings
from lowfold.perturbation.series import (
    rayleigh_schrodinger,
    rayleigh_schrodinger_general,
)


def two_site_series(t: float, u: float, order: int):
    """Rayleigh-Schroedinger series of the two-site Hubbard ground state, hopping as H0 and
    U as V (closed form E = (U - sqrt(U^2 + 16 t^2))/2, exact), and its validity ratio."""
    h0 = -t * np.array([[0, 0, 1, 1], [0, 0, 1, 1], [1, 1, 0, 0], [1, 1, 0, 0]], dtype=float)
    v = u * np.diag([1.0, 1.0, 0.0, 0.0])
    values, vectors = np.linalg.eigh(h0)
    return rayleigh_schrodinger_general(h0, v, vectors[:, 0], values[0], order).energies


# ----------------------------------------------------------------------------- ratio test


def test_geometric_series_radius_one_on_both_sides():
    # 1/(1 - x) = sum x^n and 1/(1 + x) = sum (-x)^n: pole at x = +1 and x = -1 (exact).
    for sign, side in ((1.0, "positive"), (-1.0, "negative")):
        result = ratio_test(sign ** np.arange(20))
        assert result["reliable"] and result["reason"] is None
        assert result["variable"] == "lambda" and result["side"] == side
        assert result["radius"] == pytest.approx(1.0, abs=1e-12)
        assert result["exponent"] == pytest.approx(1.0, abs=1e-12)  # a simple pole
        assert result["fit_residual"] < 1e-12


def test_even_series_with_rounding_level_odd_orders():
    # sqrt(1 + x^2): branch points at x = +-i, radius 1 (binomial series); odd orders at
    # rounding level 1e-19 must not hide the structure (the old estimate gave 1e-14).
    c = np.zeros(25)
    c[::2] = [float(binom_half(m)) for m in range(13)]
    noisy = c.copy()
    noisy[1::2] = 1e-19 * np.cos(np.arange(12))
    np.testing.assert_array_equal(drop_roundoff(noisy)[1::2], 0.0)
    result = ratio_test(noisy)
    assert result["variable"] == "lambda^2" and result["structure"] == "even"
    assert result["side"] == "negative" and result["reliable"]
    assert result["radius"] == pytest.approx(1.0, rel=1e-10)


@pytest.mark.parametrize("u", [0.5, 2.0, 10.0])
def test_two_site_hubbard_radius_is_4t_over_u(u):
    # E(lambda) = (lambda U - sqrt(lambda^2 U^2 + 16 t^2))/2 has its branch points at
    # lambda = +-4it/U: radius 4t/U on the imaginary axis (exact); the linear term U/2 and
    # the rounding-level odd orders of the computed series do not change the variable.
    t = 1.0
    result = ratio_test(two_site_series(t, u, 16))
    assert result["variable"] == "lambda^2" and result["side"] == "negative"
    assert result["reliable"], result["reason"]
    assert result["radius"] == pytest.approx(4 * t / u, rel=1e-6)
    assert result["exponent"] == pytest.approx(-0.5, abs=1e-6)  # square-root branch point


def test_sign_pairs_are_fitted_in_lambda_squared():
    # (1 + lambda) / (1 + lambda^2 / R^2): coefficients 1, 1, -1/R^2, -1/R^2, ... (signs in
    # pairs), poles at +-iR (exact).  The series converges at lambda = 1 for R = 1.5; a fit
    # of c_n / c_{n-1} in lambda gave nonsense.
    r = 1.5
    c = np.array([(-1.0 / r**2) ** (n // 2) for n in range(24)])
    assert abs(np.sum(c) - 2 / (1 + 1 / r**2)) < 1e-3  # converges at lambda = 1
    result = ratio_test(c)
    assert result["structure"] == "pairs" and result["variable"] == "lambda^2"
    assert result["reliable"] and result["radius"] == pytest.approx(r, rel=1e-12)
    assert convergence_warnings(c, lam=1.0) == []


def test_pfeuty_transverse_ising_chain_radius():
    # Pfeuty, Ann. Phys. 57, 79 (1970): ground-state energy per site of the transverse-field
    # Ising chain, e(g) = -(1/pi) int_0^pi sqrt(1 + g^2 + 2 g cos k) dk in units of the
    # field, critical at g = 1.  Since |1 + g e^{ik}| = sqrt(1 + g^2 + 2 g cos k), the
    # average of |sum_a C(1/2, a) g^a e^{iak}|^2 gives e(g) = -sum_m C(1/2, m)^2 g^{2m}.
    c = np.zeros(41)
    c[::2] = [-float(binom_half(m)) ** 2 for m in range(21)]
    g = 0.4
    integral = -quad(lambda k: np.sqrt(1 + g * g + 2 * g * np.cos(k)), 0, np.pi)[0] / np.pi
    assert np.polyval(c[::-1], g) == pytest.approx(integral, abs=1e-13)
    result = ratio_test(c)
    assert result["variable"] == "lambda^2" and result["side"] == "positive"
    assert result["reliable"] and result["radius"] == pytest.approx(1.0, abs=0.01)


def test_complex_pair_at_a_generic_angle_is_flagged_unreliable():
    # 1/(1 - 2 cos(theta) x / R + x^2 / R^2): c_n = sin((n+1) theta) / (sin(theta) R^n)
    # (Chebyshev U_n), poles at R e^{+-i theta}: the ratios oscillate and no line fits.
    theta, r = 1.0, 2.0
    c = np.array([np.sin((n + 1) * theta) / (np.sin(theta) * r**n) for n in range(30)])
    result = ratio_test(c)
    assert not result["reliable"] and "ratio" in result["reason"]
    assert result["relative_residual"] > 0.05


# ------------------------------------------------------------------------- divergence


def test_two_site_series_warns_beyond_its_radius_only():
    # U = 10, t = 1: radius 4t/U = 0.4 < 1 (exact), validity ratio 2.5
    diverging = convergence_warnings(two_site_series(1.0, 10.0, 12), validity_ratio=2.5)
    text = " ".join(diverging)
    assert len(diverging) >= 3
    assert "0.4" in text and "singularity" in text
    assert "grow" in text and "validity ratio" in text
    # U = 0.5: radius 8, validity ratio 0.125: the series is to be trusted at lambda = 1
    assert convergence_warnings(two_site_series(1.0, 0.5, 12), validity_ratio=0.125) == []
    # ... but not at lambda = 9, past the radius 8
    assert any("singularity" in w for w in convergence_warnings(two_site_series(1.0, 0.5, 12),
                                                                lam=9.0))


def test_validity_ratio_warning_threshold():
    # a two-level system [[0, g], [g, Delta]] diverges for g / Delta > 1/2 (branch points
    # at |lambda| = Delta / (2 g), exact): the documented threshold.
    c = [float(binom_half(m)) for m in range(8)]
    assert VALIDITY_WARNING == 0.5
    assert any("1e+04" in w for w in convergence_warnings(c, validity_ratio=1e4))
    assert not any("validity" in w for w in convergence_warnings(c, validity_ratio=0.1))


def test_pade_spread_warning_on_the_euler_series():
    # Euler's series sum (-1)^n n! x^n (Stieltjes; Baker, Essentials of Pade Approximants,
    # 1975): radius zero, slowly converging Pade approximants.
    import math

    c = np.array([(-1) ** n * math.factorial(n) for n in range(9)], dtype=float)
    warnings = convergence_warnings(c)
    assert any("Pade" in w for w in warnings)
    assert any("grow" in w for w in warnings)


def test_check_divergence_on_synthetic_errors():
    falling = {n: 10.0 ** -n for n in range(12)}
    assert check_divergence(falling) == []
    plateau = {n: max(10.0 ** -n, 3e-15 * (1 + n % 3)) for n in range(30)}  # rounding floor
    assert check_divergence(plateau) == []
    rising = [0.4, 0.4, 0.16, 0.16, 0.155, 0.155, 0.2, 0.2, 0.3, 0.3, 0.49, 1.5, 2.4]
    (sentence,) = check_divergence(rising)
    assert "order 4" in sentence and "order 12" in sentence


def test_check_divergence_on_the_two_site_derive(tmp_path):
    # two-site Hubbard, t/U = 3/8 with U as H0: the check errors fall to order 4 and grow
    # after (the Schrieffer-Wolff series of the exchange sqrt(U^2 + 16 t^2) - U has radius
    # t/U = 1/4 in the hopping, exact from the branch points of the closed form).
    path = tmp_path / "d.toml"
    path.write_text(
        'title = "two sites"\n[lattice]\nshape = "chain"\nsize = [2]\n[site]\n'
        'type = "electron"\n[sector]\nparticles = 2\n[parameters]\nt = 0.375\nU = 1.0\n'
        '[[term]]\ntype = "hopping"\nstrength = "t"\n[[term]]\ntype = "hubbard"\n'
        'strength = "U"\n[perturbation]\nunperturbed = ["hubbard"]\norder = 16\n')
    result = derive(load_model(path), 16)
    warnings = check_divergence(result.check.max_abs_error)
    assert len(warnings) == 1 and "stopped converging" in warnings[0]


# ------------------------------------------------------------------- different levels


def test_series_past_an_avoided_crossing_continues_the_other_level():
    # Two levels 0 and 1/2 - 2 lambda coupled by g lambda: they cross near lambda = 1/4,
    # avoided by about 2 g / 4.  The series of level 0 (radius ~1/4) resummed by Pade gives
    # at lambda = 1 the diabatic level (the upper eigenvalue), while the exact level followed
    # adiabatically from the reference is the lower one (2x2 eigenvalues, exact).
    g = 0.01
    h0, v = np.array([0.0, 0.5]), np.array([[0.0, g], [g, -2.0]])
    series = rayleigh_schrodinger(h0, v, 0, 20)
    pade = pade_estimate(series.energies, 1.0)
    lower, upper = np.linalg.eigvalsh(np.diag(h0) + v)
    assert pade.value == pytest.approx(upper, abs=1e-8)
    (sentence,) = followed_level_warnings(pade.value, pade.spread, lower)
    assert "different levels" in sentence
    # away from the crossing (lambda = 0.1, before it) the two agree: no warning
    small = pade_estimate(series.energies, 0.1)
    exact = np.linalg.eigvalsh(np.diag(h0) + 0.1 * v)[0]
    assert followed_level_warnings(small.value, small.spread, exact, lam=0.1) == []
