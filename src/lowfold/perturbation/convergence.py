"""Summing and judging a power series ``f(lambda) = sum_n c_n lambda^n`` from its first terms.

Partial sums, the Pade table and the Domb-Sykes ratio test (Domb and Sykes, Proc. R. Soc.
A 240, 214 (1957); Baker, *Essentials of Pade Approximants*, 1975).  Perturbation series
of an energy often contain only even powers (a symmetry forbids odd orders); such series are
recognised and treated as series in ``x = lambda^2``.
"""

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.interpolate import pade

from lowfold.errors import ModelError

__all__ = ["PadeEstimate", "partial_sums", "pade_table", "pade_estimate", "ratio_test",
           "is_even_series", "drop_roundoff", "convergence_warnings",
           "ROUNDOFF_RTOL", "RESIDUAL_WARNING", "VALIDITY_WARNING", "SPREAD_WARNING"]

ROUNDOFF_RTOL = 1e-9      # |c_n| below this times its neighbours' size: rounding, read as 0
RESIDUAL_WARNING = 0.05   # Domb-Sykes fit: rms deviation / |intercept| above this: unreliable
VALIDITY_WARNING = 0.5    # largest |V_mn| / |E_n - E_m| (times lambda) above this: warn
SPREAD_WARNING = 0.01     # Pade spread above this fraction of the correction: warn


def _coefficients(coeffs, minimum=1):
    c = np.asarray(coeffs)
    if c.ndim != 1 or c.size < minimum:
        raise ModelError(f"need a 1-D sequence of at least {minimum} series coefficients")
    if not np.all(np.isfinite(c)):
        raise ModelError("series coefficients must be finite")
    return c.astype(np.result_type(c.dtype, np.float64))


def is_even_series(coeffs, *, rtol=1e-12):
    """True if every odd coefficient is negligible next to the largest coefficient."""
    c = _coefficients(coeffs)
    scale = np.max(np.abs(c))
    return bool(c.size > 2 and scale > 0 and np.all(np.abs(c[1::2]) <= rtol * scale))


def partial_sums(coeffs, lam=1.0):
    """``S_n = sum_{k <= n} c_k lam^k`` for ``n = 0 .. len(coeffs) - 1``."""
    c = _coefficients(coeffs)
    return np.cumsum(c * lam ** np.arange(c.size))


def _pade_value(c, numerator, denominator, lam):
    """``[numerator/denominator]`` Pade approximant at ``lam``; NaN if it does not exist."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", scipy.linalg.LinAlgWarning)
        try:
            p, q = pade(c[: numerator + denominator + 1], denominator, numerator)
        except (np.linalg.LinAlgError, scipy.linalg.LinAlgWarning, ValueError):
            return np.nan
    qv = q(lam)
    if qv == 0 or not np.isfinite(qv):
        return np.nan
    return p(lam) / qv


def pade_table(coeffs, lam=1.0, *, even=None):
    """Values at ``lam`` of all Pade approximants ``[L/M]`` with ``L + M < len(coeffs)``.

    Parameters
    ----------
    coeffs : sequence
        ``c_0 .. c_N``.
    lam : float
        Where to evaluate.
    even : bool, optional
        Treat the series as even in ``lam`` (default: detected with :func:`is_even_series`).
        Then the approximants are built in ``x = lam^2`` from ``c_0, c_2, ...``; the
        ``[a/b]`` approximant in x is the ``[2a/2b]`` approximant in ``lam`` and is keyed so.

    Returns
    -------
    dict
        ``{(L, M): value}`` with L the degree of the numerator and M of the denominator;
        NaN where the approximant does not exist (singular or ill-conditioned system).
    """
    c = _coefficients(coeffs)
    if even is None:
        even = is_even_series(c)
    base, x, scale = (c[::2], lam * lam, 2) if even else (c, lam, 1)
    n = base.size - 1
    table = {}
    for total in range(n + 1):
        for m in range(total + 1):
            table[(scale * (total - m), scale * m)] = _pade_value(base, total - m, m, x)
    return table


@dataclass(frozen=True)
class PadeEstimate:
    """Best Pade value of a series and how far its near-diagonal neighbours spread.

    Attributes
    ----------
    value : float
        The diagonal (or nearest-to-diagonal) approximant of highest order that exists.
    spread : float
        Largest distance from ``value`` among the other near-diagonal approximants of the two
        highest orders (a rough error bar; NaN if there are none).
    approximant : tuple of int
        ``(L, M)`` of the approximant giving ``value``.
    """

    value: float
    spread: float
    approximant: tuple


def pade_estimate(coeffs, lam=1.0, *, even=None):
    """Best estimate of the sum from the near-diagonal Pade approximants (see PadeEstimate)."""
    table = pade_table(coeffs, lam, even=even)
    step = 2 if (even if even is not None else is_even_series(coeffs)) else 1
    near = {k: v for k, v in table.items() if abs(k[0] - k[1]) <= step and np.isfinite(v)}
    if not near:
        raise ModelError("no near-diagonal Pade approximant exists for these coefficients")
    top = max(sum(k) for k in near)
    best_key = min((k for k in near if sum(k) == top), key=lambda k: (abs(k[0] - k[1]), -k[1]))
    best = near[best_key]
    others = [v for k, v in near.items() if k != best_key and sum(k) >= top - step]
    spread = max(abs(v - best) for v in others) if others else float("nan")
    return PadeEstimate(value=best, spread=float(spread), approximant=best_key)


def drop_roundoff(coeffs, *, rtol=ROUNDOFF_RTOL):
    """Coefficients with those at rounding level set to zero.

    ``c_n`` (``n >= 1``) is rounding when ``|c_n| <= rtol * max(|c_{n-1}|, |c_{n+1}|)``: a
    series computed in floating point leaves orders that vanish by symmetry at ~1e-16 of
    their neighbours, while a genuine coefficient is a smooth continuation of them.
    """
    c = _coefficients(coeffs).copy()
    size = np.abs(c)
    for n in range(1, c.size):
        near = max(size[n - 1], size[n + 1] if n + 1 < c.size else 0.0)
        if size[n] <= rtol * near:
            c[n] = 0.0
    return c


def _structure(c):
    """How the non-zero coefficients past order 1 are spaced: ``"all"``, ``"even"``,
    ``"odd"`` (one parity only: a series in ``lambda^2``), ``"pairs"`` (signs in pairs
    ``+ + - -``: singularities on the imaginary axis, fit even and odd orders apart)."""
    tail = np.flatnonzero(c[2:]) + 2
    if tail.size >= 2 and np.all(tail % 2 == tail[0] % 2):
        return "even" if tail[0] % 2 == 0 else "odd"
    if tail.size >= 4 and np.array_equal(tail, np.arange(tail[0], tail[-1] + 1)):
        turns = np.sign(c[tail[1:]]) * np.sign(c[tail[:-1]])
        if np.all(turns[1:] == -turns[:-1]):
            return "pairs"
    return "all"


def _line_fit(a, n0, count):
    """Domb-Sykes line through the ratios ``a_m / a_{m-1}`` of one sub-series."""
    m_all = np.arange(1, a.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = np.where(a[:-1] != 0, a[1:] / np.where(a[:-1] != 0, a[:-1], 1.0), np.nan)
    usable = m_all.size
    count = count if count is not None else max(2, usable // 2)
    if usable < 3 or count > usable:
        raise ModelError(
            f"too few non-zero coefficients for a ratio fit: {usable} ratios in the fitted "
            "variable, need at least 3")
    if count < 2:
        raise ModelError(f"fit_points must lie in 2..{usable}, got {count}")
    m_fit, r_fit = m_all[-count:], ratios[-count:]
    problems = []
    if not np.all(np.isfinite(r_fit)):
        raise ModelError("zero coefficients among the fitted orders: ratios are undefined")
    slope, intercept = np.polyfit(1.0 / m_fit, r_fit, 1)
    residual = float(np.sqrt(np.mean((slope / m_fit + intercept - r_fit) ** 2)))
    relative = residual / abs(intercept) if intercept != 0 else np.inf
    if count < 3:
        problems.append("only two ratios are fitted, so the fit has no measure of quality")
    if np.any(np.sign(r_fit) != np.sign(r_fit[-1])):
        problems.append("the fitted ratios change sign irregularly (complex singularities?)")
    if relative > RESIDUAL_WARNING:
        problems.append(f"the ratios scatter about the fitted line by {relative:.2g} of its "
                        "intercept (oscillating ratios: complex singularities?)")
    return {"m": m_all + n0, "ratios": ratios, "slope": float(slope),
            "intercept": float(intercept), "fit_residual": residual,
            "relative_residual": float(relative), "problems": problems}


def ratio_test(coeffs, *, fit_points=None, even=None):
    """Domb-Sykes analysis: radius and kind of the nearest singularity, with its reliability.

    For ``f ~ (1 - lambda/lambda_c)^(-alpha)`` the ratios ``r_n = c_n / c_{n-1}`` lie on the
    line ``r_n = (1/lambda_c) (1 + (alpha - 1)/n)`` (Domb and Sykes, Proc. R. Soc. A 240,
    214 (1957)); a straight-line fit against ``1/n`` gives ``1/lambda_c`` as intercept and
    ``alpha = 1 + slope / intercept``.

    Before fitting, coefficients at rounding level next to their neighbours are read as zero
    (:func:`drop_roundoff`), and the spacing of the rest chooses the variable: one parity
    only past order 1 (an even series, possibly plus a linear term, or an odd one) is a
    series in ``x = lambda^2``; signs in pairs ``+ + - -`` mean singularities on the
    imaginary axis, and the even and odd orders are fitted apart in ``x`` (the nearer
    singularity wins).  Terms of order 0 and 1 do not move singularities.

    Parameters
    ----------
    coeffs : sequence
        ``c_0 .. c_N`` (at least three).
    fit_points : int, optional
        Number of highest-order ratios fitted (default: the upper half, at least 2; a fit
        of two ratios is exact and so is marked unreliable).
    even : bool, optional
        Force the variable: True fits ``c_0, c_2, ...`` in ``lambda^2``, False fits all
        orders in ``lambda``; default detected.

    Returns
    -------
    dict
        ``variable`` ("lambda" or "lambda^2"), ``structure`` ("all", "even", "odd" or
        "pairs"), ``n`` (orders in ``lambda`` of the ratio numerators) and ``ratios``,
        ``intercept``, ``slope``, ``singularity`` (``lambda_c`` or ``x_c``, signed),
        ``radius`` (in lambda), ``side`` ("positive" or "negative" real axis of the variable;
        for ``lambda^2`` "negative" means the imaginary lambda axis), ``exponent`` (alpha),
        ``fit_residual`` (rms deviation of the fitted ratios from the line),
        ``relative_residual`` (the same over ``|intercept|``), ``reliable`` (bool) and
        ``reason`` (why not, or None).  The estimate is unreliable when the ratios scatter
        by more than ``RESIDUAL_WARNING`` of the intercept, change sign, or are only two.

    Raises
    ------
    ModelError
        Fewer than three coefficients, or fewer than three ratios in the fitted variable.
    """
    c = _coefficients(coeffs, minimum=3)
    if np.iscomplexobj(c):
        raise ModelError("the ratio test needs real coefficients")
    c = drop_roundoff(c)
    if even is None:
        structure = _structure(c)
    else:
        structure = "even" if even else "all"
    if structure == "all":
        parts = [(c, 0, 1)]
    elif structure == "even":
        parts = [(c[::2], 0, 2)]
    elif structure == "odd":
        parts = [(c[1::2], 1, 2)]
    else:
        parts = [(c[::2], 0, 2), (c[1::2], 1, 2)]
    step = parts[0][2]
    fits = []
    for a, offset, _ in parts:
        fit = _line_fit(a, 0, fit_points)
        fit["n"] = offset + step * fit["m"]
        fits.append(fit)
    # the nearer singularity (largest |intercept|) dominates the series
    best = max(fits, key=lambda f: abs(f["intercept"]))
    intercept, slope = best["intercept"], best["slope"]
    if intercept == 0:
        singularity, radius, exponent = np.inf, np.inf, np.nan
    else:
        singularity = 1.0 / intercept
        radius = abs(singularity) ** (1.0 / step)
        exponent = 1.0 + slope / intercept
    problems = [p for f in fits for p in f["problems"]]
    return {
        "variable": "lambda^2" if step == 2 else "lambda",
        "structure": structure,
        "n": best["n"],
        "ratios": best["ratios"],
        "intercept": float(intercept),
        "slope": float(slope),
        "singularity": float(singularity),
        "radius": float(radius),
        "side": "positive" if intercept > 0 else "negative",
        "exponent": float(exponent),
        "fit_residual": best["fit_residual"],
        "relative_residual": best["relative_residual"],
        "reliable": not problems,
        "reason": "; ".join(problems) if problems else None,
    }


def _growing_terms(c, lam, last=3):
    """True if the last ``last`` non-zero terms ``|c_n lam^n|`` (n >= 1) grow strictly."""
    terms = np.abs(c[1:] * lam ** np.arange(1, c.size))
    terms = terms[terms > 0]
    return terms.size >= last and bool(np.all(np.diff(terms[-last:]) > 0))


def convergence_warnings(coeffs, *, lam=1.0, validity_ratio=None, ratio=None, pade=None):
    """Plain sentences saying why the series should not be trusted at ``lambda = lam``.

    Parameters
    ----------
    coeffs : sequence
        ``c_0 .. c_N`` of ``E(lambda) = sum c_n lambda^n``.
    lam : float
        The coupling factor asked for (1 = V as given).
    validity_ratio : float, optional
        Largest ``|V_mn| / |E_n - E_m|`` at ``lambda = 1``; warned about above
        ``VALIDITY_WARNING = 0.5`` once multiplied by ``|lam|`` (a two-level system
        ``[[0, g], [g, Delta]]`` has its branch points at ``|lambda| = Delta / (2|g|)``: the
        series diverges beyond a ratio of 1/2, exact).
    ratio : dict, optional
        A :func:`ratio_test` result (computed here when omitted; skipped if impossible).
    pade : PadeEstimate, optional
        Computed here when omitted.

    Returns
    -------
    list of str
        One sentence per reason, empty when none applies: a reliable ratio-test radius at
        or below ``|lam|``; terms that still grow over the last three non-zero orders; a
        large validity ratio; Pade approximants of the top orders spreading by more than
        ``SPREAD_WARNING`` of the correction ``value - c_0``.
    """
    c = drop_roundoff(coeffs)
    lam = float(lam)
    out = []
    if ratio is None and c.size >= 3:
        try:
            ratio = ratio_test(c)
        except ModelError:
            ratio = None
    if ratio is not None and ratio.get("reliable", True) and ratio.get("radius") is not None \
            and ratio["radius"] <= abs(lam):
        out.append(f"the ratio test puts the nearest singularity at |lambda| = "
                   f"{ratio['radius']:.3g}, not beyond lambda = {lam:g}: the series diverges "
                   "there; prefer the Pade value or an exact result")
    if _growing_terms(c, lam):
        out.append(f"the terms of the series still grow at the highest orders at lambda = "
                   f"{lam:g}: the partial sums do not converge")
    if validity_ratio is not None and abs(lam) * validity_ratio > VALIDITY_WARNING:
        out.append(f"the validity ratio |V_mn| / |E_n - E_m| is {abs(lam) * validity_ratio:.3g} "
                   f"at lambda = {lam:g}, above {VALIDITY_WARNING:g}: perturbation theory is "
                   "not expected to converge")
    if pade is None and c.size >= 2:
        try:
            pade = pade_estimate(c, lam)
        except (ModelError, np.linalg.LinAlgError, ValueError):
            pade = None
    if pade is not None and np.isfinite(pade.spread):
        correction = abs(pade.value - c[0])
        floor = 1e-10 * max(1.0, abs(pade.value))
        if pade.spread > max(SPREAD_WARNING * correction, floor):
            out.append(f"the Pade approximants of the highest orders disagree by "
                       f"{pade.spread:.3g} at lambda = {lam:g} (the correction to order 0 is "
                       f"{correction:.3g}): the resummed value is uncertain")
    return out
