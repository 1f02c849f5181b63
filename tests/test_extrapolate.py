"""Finite-size extrapolation: synthetic data of known form, and the Hubbard chain limit."""

import math

import numpy as np
import pytest
from scipy import integrate, special

from helpers.modelfiles import hubbard_text
from lowfold.errors import ModelError
from lowfold.scans.extrapolate import extrapolate_records, fit_finite_size


def test_noise_free_polynomial_is_recovered_exactly():
    sizes = np.array([4, 6, 8, 10, 12])
    values = -0.25 + 0.7 / sizes - 1.3 / sizes**2
    fit = fit_finite_size(sizes, values, degree=2)
    assert fit.value == pytest.approx(-0.25, abs=1e-12)
    assert fit.coefficients == pytest.approx([-0.25, 0.7, -1.3], abs=1e-9)
    assert fit.form == "a + b x + c x^2, x = 1/L"
    assert fit.warnings == ()
    assert fit.curve([0.0])[0] == pytest.approx(fit.value)


def test_too_few_sizes_warns_or_refuses():
    exact = fit_finite_size([4, 8], [1.0, 2.0], degree=1)      # 1 = a + b/4, 2 = a + b/8
    assert exact.value == pytest.approx(3.0)
    assert math.isnan(exact.error)
    assert len(exact.warnings) == 1 and "only 2 sizes for 2 fit parameters" in exact.warnings[0]
    with pytest.raises(ModelError, match="3 parameters but only 2 distinct sizes"):
        fit_finite_size([4, 8, 8], [1.0, 2.0, 2.0], degree=2)
    with pytest.raises(ModelError, match="equal length"):
        fit_finite_size([4, 8], [1.0], degree=1)
    with pytest.raises(ModelError, match="positive"):
        fit_finite_size([0, 8, 10], [1.0, 2.0, 3.0])


@pytest.mark.parametrize("known_sigma", [True, False])
def test_uncertainty_is_calibrated_on_noisy_synthetic_data(known_sigma):
    # Data of exactly the fitted form a + b/L^2 + c/L^4 with Gaussian noise: the pull
    # (estimate - a) / error must be ~ N(0, 1) with known sigma (a Student-t with 5
    # degrees of freedom when the error is estimated from the residuals; common practice).
    rng = np.random.default_rng(20260612)
    sizes = np.arange(4, 20, 2)                       # 8 sizes, 3 parameters
    a, b, c, noise = -0.4431, 0.31, -0.85, 2e-4
    clean = a + b / sizes**2 + c / sizes**4
    pulls = []
    for _ in range(400):
        values = clean + noise * rng.standard_normal(sizes.size)
        sigma = np.full(sizes.size, noise) if known_sigma else None
        fit = fit_finite_size(sizes, values, degree=2, power=2, sigma=sigma)
        pulls.append((fit.value - a) / fit.error)
    pulls = np.abs(pulls)
    inside = np.mean(pulls < 1.0)
    # P(|Z| < 1) = 0.683; P(|t_5| < 1) = 0.637; 400 draws -> +-0.024 standard error
    expected = 0.683 if known_sigma else 0.637
    assert abs(inside - expected) < 0.08
    assert np.mean(pulls < 3.0) > 0.95


def test_fit_in_one_over_n_and_grouping():
    records = []
    for U in (8.0, 16.0):
        for L in (4, 6, 8, 10):
            value = -1.0 / U + 0.5 / L
            records.append({"key": f"{U}-{L}", "status": "ok", "task": "spectrum",
                            "parameters": {"U": U, "t": 1.0},
                            "values": {"U": U, "size": [L]}, "size": [L], "n_sites": 2 * L,
                            "result": {"dimension": 1, "energies": [value * 2 * L]}})
    records.append({"key": "bad", "status": "error", "parameters": {"U": 8.0, "t": 1.0},
                    "values": {"U": 8.0, "size": [12]}, "size": [12], "n_sites": 24,
                    "error": {"type": "SizeError", "message": "too big"}})
    fits = extrapolate_records(records, "energy", variable="N", per_site=True, degree=1)
    assert [f["group"] for f in fits] == [{"U": 8.0}, {"U": 16.0}]
    for entry in fits:
        assert entry["fit"].value == pytest.approx(-1.0 / entry["group"]["U"], abs=1e-12)
        assert entry["fit"].coefficients[1] == pytest.approx(1.0)      # 0.5/L = 1.0/N
    assert fits[0]["warnings"] == ["point bad failed and was left out"]


def lieb_wu_energy_per_site(U, t=1.0):
    """Ground-state energy per site of the half-filled Hubbard chain (thermodynamic limit).

    E/L = -4t int_0^inf J0(w) J1(w) / (w (1 + exp(w U / 2t))) dw
    (Lieb and Wu, PRL 20, 1445 (1968)).
    """
    def integrand(w):
        return special.j0(w) * special.j1(w) / (w * (1.0 + np.exp(min(w * U / (2 * t), 700.0))))

    # beyond w = 400 t/U the Fermi-like factor is below exp(-200): cut the range there
    value, error = integrate.quad(integrand, 0.0, 400.0 * t / U, epsabs=1e-15, epsrel=1e-13, limit=200)
    assert error < 1e-12
    return -4.0 * t * value


def test_lieb_wu_quadrature_against_strong_coupling_expansion():
    # E/L = -4 ln2 t^2/U + 9 zeta(3) t^4/U^3 + O(t^6/U^5) (strong-coupling expansion of the
    # Lieb-Wu result; Takahashi, J. Phys. C 10, 1289 (1977); coefficient from memory).  The
    # bound on the remainder allows a t^6/U^5 coefficient up to 300 in magnitude.
    for U in (40.0, 80.0):
        expansion = -4 * math.log(2) / U + 9 * special.zeta(3) / U**3
        assert lieb_wu_energy_per_site(U) == pytest.approx(expansion, abs=3 * 100 / U**5)


MODEL = hubbard_text("chain", [4], boundary="periodic", t=1.0, U=20.0, sz=0,
                     title="ring of quantum dots, one electron each")

SCAN = """
model = "ring.toml"
[task]
name = "spectrum"
levels = 1
[grid]
size = [4, 6, 8, 10]
[sector]
filling = 1
"""


@pytest.mark.slow
def test_hubbard_chain_extrapolates_to_lieb_wu(tmp_path):
    """Half-filled periodic Hubbard chains L = 4..10 at U/t = 20, via a lowfold scan.

    The energy per site of a periodic critical chain approaches its limit as 1/L^2
    (Bloete, Cardy, Nightingale, PRL 56, 742 (1986)), so fit a + b/L^2 + c/L^4.  Tolerance:
    three fit standard errors plus the change from the next-lower fit degree (the usual
    estimate of the systematic error of a truncated finite-size form; common practice).
    The extrapolation must also lie within that tolerance plus the next order
    9 zeta(3) t^4/U^3 of the Heisenberg-limit value -(4t^2/U) ln 2 (Hulthen, Ark. Mat.
    Astron. Fys. 26A (1938)).
    """
    from lowfold.scans.run import run_scan
    from lowfold.scans.store import load_results

    (tmp_path / "ring.toml").write_text(MODEL)
    (tmp_path / "scan.toml").write_text(SCAN)
    summary = run_scan(tmp_path / "scan.toml", out=tmp_path / "out", workers=2, progress=False)
    assert summary.ok and summary.computed == 4
    records = load_results(tmp_path / "out")
    assert sorted(r["result"]["dimension"] for r in records) == [36, 400, 4900, 63504]
    (best,) = extrapolate_records(records, "energy", per_site=True, degree=2, power=2)
    (lower,) = extrapolate_records(records, "energy", per_site=True, degree=1, power=2)
    fit = best["fit"]
    assert fit.warnings == ()
    tolerance = 3 * fit.error + abs(fit.value - lower["fit"].value)
    exact = lieb_wu_energy_per_site(20.0)
    assert abs(fit.value - exact) < tolerance
    assert tolerance < 0.01 * abs(exact)          # the check is not vacuous
    heisenberg = -4 * math.log(2) / 20.0
    assert abs(fit.value - heisenberg) < tolerance + 9 * special.zeta(3) / 20.0**3
