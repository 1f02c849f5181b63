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
           "is_even_series"]


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


def ratio_test(coeffs, *, fit_points=None, even=None):
    """Domb-Sykes analysis: radius and kind of the nearest singularity.

    For ``f ~ (1 - lambda/lambda_c)^(-alpha)`` the ratios ``r_n = c_n / c_{n-1}`` lie on the
    line ``r_n = (1/lambda_c) (1 + (alpha - 1)/n)``; a straight-line fit against ``1/n``
    gives ``1/lambda_c`` as intercept and ``alpha = 1 + slope / intercept``.

    Parameters
    ----------
    coeffs : sequence
        ``c_0 .. c_N`` (at least three usable terms).
    fit_points : int, optional
        Number of highest-order ratios fitted (default: the upper half, at least 2).
    even : bool, optional
        Series in ``lambda^2`` (default: detected).  The fit then runs on ``a_m = c_{2m}``
        in ``x = lambda^2``; the radius in lambda is ``sqrt(|x_c|)``.

    Returns
    -------
    dict
        ``variable`` ("lambda" or "lambda^2"), ``n`` and ``ratios`` (the points),
        ``intercept``, ``slope``, ``singularity`` (``lambda_c`` or ``x_c``, signed),
        ``radius`` (in lambda), ``side`` ("positive" or "negative" real axis of the variable;
        for ``lambda^2`` "negative" means the imaginary lambda axis), ``exponent`` (alpha),
        ``fit_residual`` (rms deviation of the fitted ratios; large values mean the ratios
        oscillate, e.g. a complex-conjugate pair of singularities).
    """
    c = _coefficients(coeffs, minimum=3)
    if np.iscomplexobj(c):
        raise ModelError("the ratio test needs real coefficients")
    if even is None:
        even = is_even_series(c)
    a = c[::2] if even else c
    n_all = np.arange(1, a.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratios = np.where(a[:-1] != 0, a[1:] / np.where(a[:-1] != 0, a[:-1], 1.0), np.nan)
    count = fit_points if fit_points is not None else max(2, n_all.size // 2)
    if count < 2 or count > n_all.size:
        raise ModelError(f"fit_points must lie in 2..{n_all.size}, got {count}")
    n_fit, r_fit = n_all[-count:], ratios[-count:]
    if not np.all(np.isfinite(r_fit)):
        raise ModelError("zero coefficients among the fitted orders: ratios are undefined")
    slope, intercept = np.polyfit(1.0 / n_fit, r_fit, 1)
    residual = float(np.sqrt(np.mean((slope / n_fit + intercept - r_fit) ** 2)))
    if intercept == 0:
        singularity, radius, exponent = np.inf, np.inf, np.nan
    else:
        singularity = 1.0 / intercept
        radius = np.sqrt(abs(singularity)) if even else abs(singularity)
        exponent = 1.0 + slope / intercept
    return {
        "variable": "lambda^2" if even else "lambda",
        "n": n_all,
        "ratios": ratios,
        "intercept": float(intercept),
        "slope": float(slope),
        "singularity": float(singularity),
        "radius": float(radius),
        "side": "positive" if intercept > 0 else "negative",
        "exponent": float(exponent),
        "fit_residual": residual,
    }
