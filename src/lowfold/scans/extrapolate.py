"""Finite-size extrapolation: fit a value against 1/L (or 1/N) and read off the limit.

The fitted form is a polynomial in ``x = (1/L)**power`` (or ``(1/N)**power``)::

    f(x) = a + b x + c x^2 + ...      (degree chosen by the user)

so ``a`` is the infinite-size value.  The fit is linear least squares (NumPy); the
uncertainty of ``a`` is the square root of its variance from the fit covariance, either
with the given absolute errors ``sigma`` or, without them, scaled by the residual
variance ``RSS / (n - p)`` (common practice for least-squares fits).  Problems are
reported in the result's ``warnings`` list, never as Python warnings.

Which form to use is physics, not statistics: gapped systems converge exponentially,
open chains typically have a 1/L boundary term, and the ground-state energy per site of a
periodic critical chain approaches its limit as 1/L^2 (conformal field theory: Bloete,
Cardy, Nightingale, PRL 56, 742 (1986); Affleck, PRL 56, 746 (1986)), so use
``power=2`` there.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from lowfold.errors import ModelError
from lowfold.scans.select import axis_value, scalar

__all__ = ["Extrapolation", "fit_finite_size", "extrapolate_records"]


@dataclass(frozen=True)
class Extrapolation:
    """Result of a finite-size fit ``f(x) = sum_k coefficients[k] x^k``, ``x = (1/size)^power``.

    Attributes
    ----------
    value, error : float
        Extrapolated infinite-size value ``coefficients[0]`` and its standard uncertainty
        (NaN when the fit has no degrees of freedom left and no ``sigma`` was given).
    coefficients : ndarray
        ``a, b, c, ...`` in ascending powers of x.
    covariance : ndarray
        Covariance matrix of the coefficients.
    sizes, x, y : ndarray
        The sizes used, the fit abscissae and the values.
    degree : int
    power : float
    variable : str
        ``"L"`` or ``"N"`` (what ``sizes`` count).
    chi2_dof : float
        Residual sum of squares (weighted with ``sigma`` if given) per degree of freedom.
    warnings : tuple of str
    """

    value: float
    error: float
    coefficients: np.ndarray
    covariance: np.ndarray
    sizes: np.ndarray
    x: np.ndarray
    y: np.ndarray
    degree: int
    power: float
    variable: str
    chi2_dof: float
    warnings: tuple[str, ...] = field(default=())

    @property
    def form(self) -> str:
        """The fitted form in words, e.g. ``"a + b x + c x^2, x = 1/L^2"``."""
        names = "abcdefgh"
        terms = [names[0]] + [f"{names[k]} x" + (f"^{k}" if k > 1 else "") for k in range(1, self.degree + 1)]
        power = "" if self.power == 1 else f"^{self.power:g}"
        return " + ".join(terms) + f", x = 1/{self.variable}{power}"

    def curve(self, x: Sequence[float] | np.ndarray) -> np.ndarray:
        """The fitted polynomial evaluated at ``x``."""
        return np.polynomial.polynomial.polyval(np.asarray(x, dtype=float), self.coefficients)

    def to_dict(self) -> dict[str, Any]:
        """JSON-able summary."""
        return {
            "value": self.value, "error": self.error, "form": self.form,
            "coefficients": self.coefficients.tolist(), "covariance": self.covariance.tolist(),
            "sizes": self.sizes.tolist(), "values": self.y.tolist(), "chi2_dof": self.chi2_dof,
            "warnings": list(self.warnings),
        }


def fit_finite_size(
    sizes: Iterable[float],
    values: Iterable[float],
    *,
    degree: int = 1,
    power: float = 1.0,
    sigma: Iterable[float] | None = None,
    variable: str = "L",
) -> Extrapolation:
    """Fit ``values`` against ``x = (1/sizes)**power`` with a polynomial of ``degree``.

    Parameters
    ----------
    sizes : array_like
        Linear sizes L (or site numbers N), all positive.
    values : array_like
        The quantity at each size.
    degree : int, keyword-only
        Polynomial degree (``1``: ``a + b x``; ``2``: ``a + b x + c x^2``).
    power : float, keyword-only
        Exponent of ``1/size`` used as x (``2`` for a ``1/L^2`` approach).
    sigma : array_like, optional
        Absolute standard errors of ``values``; without them the covariance is scaled by
        the residual variance.
    variable : str
        Name of the size variable, for the stated form (``"L"`` or ``"N"``).

    Returns
    -------
    Extrapolation

    Raises
    ------
    ModelError
        Fewer distinct sizes than fit parameters, non-positive sizes, or mismatched input.

    Examples
    --------
    >>> fit = fit_finite_size([4, 6, 8, 10], [-0.5, -0.4671, -0.4564, -0.4515], degree=2, power=2)
    >>> round(fit.value, 2)
    -0.44
    """
    sizes = np.asarray(list(sizes), dtype=float)
    y = np.asarray(list(values), dtype=float)
    if sizes.ndim != 1 or sizes.shape != y.shape:
        raise ModelError(f"sizes and values must be 1-D of equal length, got {sizes.shape} and {y.shape}")
    if int(degree) != degree or degree < 0:
        raise ModelError(f"degree must be a non-negative integer, got {degree!r}")
    if not power > 0:
        raise ModelError(f"power must be positive, got {power!r}")
    if np.any(sizes <= 0) or not np.all(np.isfinite(y)):
        raise ModelError("sizes must be positive and values finite")
    degree = int(degree)
    n_par = degree + 1
    x = sizes ** (-float(power))
    n_distinct = len(np.unique(x))
    if n_distinct < n_par:
        raise ModelError(
            f"a degree-{degree} fit has {n_par} parameters but only {n_distinct} distinct "
            f"sizes were given; add sizes or lower the degree")
    warnings = []
    if n_distinct < n_par + 1:
        warnings.append(
            f"only {n_distinct} sizes for {n_par} fit parameters: the fit passes through every "
            "point and says nothing about its quality; add a size or lower the degree")
    weights = np.ones_like(y)
    if sigma is not None:
        sigma = np.asarray(list(sigma), dtype=float)
        if sigma.shape != y.shape or np.any(sigma <= 0):
            raise ModelError("sigma must be positive and match values")
        weights = 1.0 / sigma
    design = np.vander(x, n_par, increasing=True)
    coefficients, *_ = np.linalg.lstsq(design * weights[:, None], y * weights, rcond=None)
    residuals = (y - design @ coefficients) * weights
    dof = len(y) - n_par
    chi2_dof = float(residuals @ residuals / dof) if dof > 0 else float("nan")
    normal = np.linalg.inv((design * weights[:, None]).T @ (design * weights[:, None]))
    if sigma is not None:
        covariance = normal
    elif dof > 0:
        covariance = normal * chi2_dof
    else:
        covariance = np.full_like(normal, np.nan)
    error = float(np.sqrt(covariance[0, 0])) if np.isfinite(covariance[0, 0]) else float("nan")
    return Extrapolation(
        value=float(coefficients[0]), error=error, coefficients=coefficients,
        covariance=covariance, sizes=sizes, x=x, y=y, degree=degree, power=float(power),
        variable=variable, chi2_dof=chi2_dof, warnings=tuple(warnings))


def _group_label(record: Mapping[str, Any]) -> tuple:
    """Grid values of a point other than its size (the points of one extrapolation)."""
    values = record.get("values", {})
    return tuple((k, tuple(v) if isinstance(v, list) else v) for k, v in values.items() if k != "size")


def extrapolate_records(
    records: Iterable[Mapping[str, Any]],
    quantity: str,
    *,
    variable: str = "L",
    degree: int = 1,
    power: float = 1.0,
    per_site: bool = False,
    unit: str | None = None,
    order: int | None = None,
) -> list[dict[str, Any]]:
    """Extrapolate a quantity of a size scan, separately for each parameter point.

    Records are grouped by their grid values other than the size; within a group
    the quantity (see :func:`lowfold.store.scalar`) is fitted against ``1/variable``.

    Parameters
    ----------
    records : iterable of dict
        Point records (failed points are skipped and reported in the group warnings).
    quantity : str
        Quantity selector, e.g. ``"energy"`` or ``"coupling:exchange:0-1"``.
    variable : {"L", "N"}
        Fit in 1/L (first lattice size entry) or 1/N (number of sites).
    degree, power : keyword-only
        See :func:`fit_finite_size`.
    per_site : bool
        Divide the quantity by the number of sites first (energy per site).
    unit : str, optional
        Divide by this model parameter (energies in units of, e.g., t).
    order : int, optional
        Sum series/couplings through this order.

    Returns
    -------
    list of dict
        ``{"group": {...}, "fit": Extrapolation | None, "warnings": [...]}`` per group.
    """
    if variable not in ("L", "N"):
        raise ModelError(f"variable must be 'L' or 'N', got {variable!r}")
    groups: dict[tuple, list] = {}
    for record in records:
        groups.setdefault(_group_label(record), []).append(record)
    out = []
    for label, members in groups.items():
        notes = [f"point {r['key']} failed and was left out" for r in members if r.get("status") != "ok"]
        good = [r for r in members if r.get("status") == "ok"]
        sizes = [axis_value(r, variable) for r in good]
        values = []
        for r in good:
            value = scalar(r, quantity, order=order)
            if per_site:
                value /= float(r["n_sites"])
            if unit is not None:
                value /= _parameter(r, unit)
            values.append(value)
        fit = None
        try:
            fit = fit_finite_size(sizes, values, degree=degree, power=power, variable=variable)
            notes.extend(fit.warnings)
        except ModelError as exc:
            notes.append(str(exc))
        out.append({"group": dict(label), "fit": fit, "warnings": notes})
    return sorted(out, key=lambda entry: [_sort_key(v) for v in entry["group"].values()])


def _parameter(record: Mapping[str, Any], name: str) -> float:
    """The model parameter ``name`` of a point record; ModelError naming those it has."""
    parameters = record.get("parameters") or {}
    if name not in parameters:
        known = ", ".join(sorted(parameters)) or "none"
        raise ModelError(f"unit {name!r} is not a parameter of the scan (its parameters: {known})")
    return float(parameters[name])


def _sort_key(value) -> tuple:
    if isinstance(value, (int, float)):
        return (0, float(value), "")
    return (1, 0.0, str(value))
