"""Couplings written as formulas in t and U (lowfold.readout.formulas).

Reference values: the half-filled Hubbard chain, J1 = 4 t^2/U - 16 t^4/U^3 and
J2 = 4 t^4/U^3 (M. Takahashi, J. Phys. C 10, 1289 (1977)); the square lattice's
J1 = 4 t^2/U - 24 t^4/U^3 and ring 80 t^4/U^3 (A. H. MacDonald, S. M. Girvin and D. Yoshioka,
Phys. Rev. B 37, 9753 (1988), from memory).  Formulas are read back by evaluating them with
exact rational arithmetic (Python's own parser, ``^`` read as a power).
"""

from __future__ import annotations

import re
from fractions import Fraction

import pytest

from helpers.modelfiles import hubbard_text, model_of
from lowfold.readout.formulas import coupling_formula, formula_coefficients, latex_formula

T, U = 0.1, 8.0
MODEL = model_of(hubbard_text("chain", [2], t=T, U=U, order=6))


def orders_of(coefficients: dict[int, Fraction]) -> dict[int, float]:
    """Per-order values ``c_m t^m / U^(m-1)`` at the model's t and U."""
    return {m: float(c) * T**m / U ** (m - 1) for m, c in coefficients.items()}


def read_back(formula: str, t: Fraction, u: Fraction) -> Fraction:
    """The formula's exact value at rational t, U: numbers become Fractions, ``^`` a power,
    and a space between a number and a name a product."""
    expression = formula.replace("^", "**")
    expression = re.sub(r"(\d) (?=[A-Za-z])", r"\1*", expression)
    expression = re.sub(r"\d+", lambda m: f"Fraction({m.group(0)})", expression)
    value = eval(expression, {"Fraction": Fraction, "t": t, "U": u})   # noqa: S307  test input
    return Fraction(value)


@pytest.mark.parametrize("coefficients, text", [
    ({2: Fraction(4), 4: Fraction(-16)}, "4 t^2/U - 16 t^4/U^3"),       # Takahashi 1977, J1
    ({4: Fraction(4)}, "4 t^4/U^3"),                                     # Takahashi 1977, J2
    ({2: Fraction(4), 4: Fraction(-24)}, "4 t^2/U - 24 t^4/U^3"),       # MacDonald et al. 1988
    ({4: Fraction(80)}, "80 t^4/U^3"),                                   # ring, from memory
    ({0: Fraction(-1, 2), 1: Fraction(-1), 2: Fraction(1), 6: Fraction(3, 2)},
     "-1/2 U - t + t^2/U + 3/2 t^6/U^5"),
])
def test_formula_text_and_round_trip(coefficients, text):
    formula = coupling_formula(MODEL, orders_of(coefficients))
    assert formula == text
    for t, u in [(Fraction(1, 10), Fraction(8)), (Fraction(2, 7), Fraction(3))]:
        exact = sum(c * t**m / u ** (m - 1) for m, c in coefficients.items())
        assert read_back(formula, t, u) == exact


def test_zero_orders_are_left_out_and_all_zero_is_written_0():
    orders = {0: 0.0, 1: 1e-20, 2: 4 * T**2 / U, 3: -1e-19, 4: 0.0}
    assert coupling_formula(MODEL, orders) == "4 t^2/U"
    assert coupling_formula(MODEL, {2: 0.0, 4: 0.0}) == "0"


def test_latex_formula_is_a_sum_of_fractions():
    latex = latex_formula(MODEL, orders_of({2: Fraction(4), 4: Fraction(-16)}))
    assert latex == r"\frac{4 t^{2}}{U} - \frac{16 t^{4}}{U^{3}}"
    assert r"\frac{4 t^{2}}{U}" in latex
    assert latex_formula(MODEL, orders_of({4: Fraction(-3, 2)})) == r"-\frac{3 t^{4}}{2 U^{3}}"


def test_no_formula_without_one_energy_ratio_or_for_vectors_or_irrationals():
    spins = model_of(hubbard_text("chain", [2], t=T, U=U, order=2).replace(
        'strength = "U"', "strength = 8.0"))
    assert formula_coefficients(spins, {2: 4 * T**2 / U}) is None
    assert coupling_formula(MODEL, {2: [0.0, 0.0, 4 * T**2 / U]}) is None
    assert coupling_formula(MODEL, {2: 2**0.5 * T**2 / U}) is None
