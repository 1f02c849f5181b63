"""Rational coefficients of effective couplings: ``value = (p/q) t^m / U^(m-1)``.

At order m of a perturbation with one strength ``t`` in V and one strength ``U`` in H0, a
coupling is a rational multiple of ``t^m / U^(m-1)`` when every intermediate energy is a
rational multiple of ``U`` (the superexchange ``4 t^2/U`` of the half-filled Hubbard model,
P. W. Anderson, Phys. Rev. 115, 2 (1959); its fourth order ``-16 t^4/U^3``, M. Takahashi,
J. Phys. C 10, 1289 (1977)).  A recognised fraction is a hint to be flagged as such, not a
proof.

Order keys are integers here; JSON writes them as strings.
"""

from __future__ import annotations

import math
from fractions import Fraction
from typing import TYPE_CHECKING

from lowfold.errors import ModelError
from lowfold.model.model import Model

if TYPE_CHECKING:
    from lowfold.readout.couplings import Coupling

__all__ = ["RECOGNISED_KINDS", "recognise_couplings", "recognise_rational", "single_ratio"]

RECOGNISED_KINDS = ("exchange", "ring", "chirality", "constant",
                    # scalar kinds of the local-operator readout (readout/local_names.py)
                    "hopping", "three-site", "density", "single-ion", "biquadratic",
                    "particle-hopping", "hole-hopping", "particle-energy", "hole-energy")


def recognise_rational(value: float, scale: float, *, max_denominator: int = 1000,
                       rtol: float = 1e-8, atol: float = 0.0) -> Fraction | None:
    """The fraction p/q (q <= max_denominator) that ``value / scale`` equals, if any.

    Returns ``Fraction(p, q)`` when ``|value/scale - p/q| <= rtol |value/scale| + atol``,
    else ``None``.  A recognised fraction is a hint to be flagged as such, not a proof.

    Examples
    --------
    >>> recognise_rational(80 * 0.1**4 / 8.0**3, 0.1**4 / 8.0**3)
    Fraction(80, 1)
    >>> recognise_rational(math.pi, 1.0) is None
    True
    """
    if not (math.isfinite(scale) and scale != 0):
        raise ModelError(f"scale must be finite and non-zero, got {scale!r}")
    if isinstance(max_denominator, bool) or not isinstance(max_denominator, int) \
            or max_denominator < 1:
        raise ModelError(f"max_denominator must be a positive integer, got {max_denominator!r}")
    if not math.isfinite(value):
        return None
    ratio = value / scale
    guess = Fraction(ratio).limit_denominator(max_denominator)
    return guess if abs(ratio - float(guess)) <= rtol * abs(ratio) + atol else None


def single_ratio(model: Model) -> tuple[str, str] | None:
    """``(small, large)``: the parameter names of V and of H0 when each has exactly one.

    Parameters
    ----------
    model : Model
        A model with a ``[perturbation]`` table.

    Returns
    -------
    tuple of str or None
        ``(name of V's strength, name of H0's strength)`` when every term of V has the same
        named strength and every term of H0 has the same named strength (a literal number
        anywhere gives ``None``), both real, and no hopping has phases, a flux or a
        spin-orbit part; else ``None``.
    """
    def names(labels):
        strengths = {model.term(label).strength for label in labels}
        return strengths if all(isinstance(s, str) for s in strengths) else set()
    if any(t.soc is not None or t.phases is not None or t.flux is not None for t in model.terms):
        return None          # a further energy scale (lambda) or phase: not t^n / U^(n-1)
    h0, v = names(model.unperturbed_labels), names(model.perturbation_labels)
    if len(h0) == 1 and len(v) == 1:
        small, large = v.pop(), h0.pop()
        if any(isinstance(model.parameters[name], complex) for name in (small, large)):
            return None      # a complex amplitude: the couplings depend on its phase too
        return small, large
    return None


def recognise_couplings(model: Model, couplings: list[Coupling]
                        ) -> tuple[str | None, dict[tuple[str, tuple[int, ...]], dict[int, str]]]:
    """The order-by-order fractions ``p/q`` of ``t^m / U^(m-1)`` in the couplings, if any.

    Parameters
    ----------
    model : Model
        The model the couplings were derived from; :func:`single_ratio` names ``t`` and ``U``
        and ``model.parameters`` gives their values.
    couplings : list of Coupling
        Couplings with integer order keys (``Coupling.orders``).

    Returns
    -------
    scale : str or None
        ``"t^n/U^(n-1)"`` with the model's parameter names, or ``None`` when the model has no
        single ratio or one of the two strengths is zero (then nothing is recognised).
    recognised : dict
        ``{(kind, sites): {m: "p/q"}}`` for the exchange, ring, chirality and constant
        couplings with at least one order recognised (denominator at most 64, relative
        tolerance 1e-7; orders at or below 1e-12 are skipped).  Order keys ``m`` are ints.

    Examples
    --------
    Two-site Hubbard model at half filling, second order: ``J = 4 t^2/U`` (Anderson 1959).

    >>> from lowfold.model.modelfile import parse_model
    >>> model = parse_model({
    ...     "lattice": {"shape": "chain", "size": [2]}, "site": {"type": "electron"},
    ...     "sector": {"particles": 2}, "parameters": {"t": 0.1, "U": 8.0},
    ...     "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
    ...              {"type": "hubbard", "strength": "U"}],
    ...     "perturbation": {"unperturbed": ["hubbard"], "order": 2}})
    >>> from lowfold.readout.couplings import Coupling
    >>> exchange = Coupling("exchange", (0, 1), 4 * 0.1**2 / 8.0, {2: 4 * 0.1**2 / 8.0})
    >>> recognise_couplings(model, [exchange])
    ('t^n/U^(n-1)', {('exchange', (0, 1)): {2: '4'}})
    """
    ratio = single_ratio(model)
    if ratio is None:
        return None, {}
    small, large = ratio
    t, u = model.parameters[small], model.parameters[large]
    if t == 0 or u == 0:
        return None, {}
    recognised = {}
    for c in couplings:
        if c.kind not in RECOGNISED_KINDS:
            continue
        found = {}
        for m, value in c.orders.items():
            if isinstance(value, (int, float)) and abs(value) > 1e-12:
                fraction = recognise_rational(value, t**m / u ** (m - 1), max_denominator=64,
                                              rtol=1e-7)
                if fraction is not None:
                    found[int(m)] = str(fraction)
        if found:
            recognised[(c.kind, tuple(c.sites))] = found
    return f"{small}^n/{large}^(n-1)", recognised
