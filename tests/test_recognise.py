"""Tests of rational recognition of couplings (``lowfold.readout.rationals``).

Sources:

- Two-site Hubbard model at half filling: the singlet-triplet splitting is
  ``J = (sqrt(U^2 + 16 t^2) - U)/2 = 4 t^2/U - 16 t^4/U^3 + O(t^6/U^5)`` (closed form of the
  2x2 singlet block, common practice; expanded by hand); the same two orders are the
  nearest-neighbour exchange of M. Takahashi, J. Phys. C 10, 1289 (1977), and the first is
  Anderson's superexchange (Phys. Rev. 115, 2 (1959)).
"""

from __future__ import annotations

import pytest
from helpers.derive_models import hubbard
from helpers.modelfiles import hubbard_text, model_of, term_text

from lowfold.jobs.derive import derive
from lowfold.readout.couplings import Coupling
from lowfold.readout.rationals import recognise_couplings, single_ratio
from lowfold.readout.spin_form import read_spin_form

T, U = 0.1, 8.0


def hubbard_dimer(*, t=T, u=U):
    """Two-site Hubbard model, H0 = Hubbard U, V = hopping t, to fourth order."""
    return hubbard("chain", (2,), t=t, U=u, order=4)


def two_strengths_in_v():
    """The dimer with a second perturbation of literal strength: V has no single parameter."""
    return model_of(hubbard_text("chain", [2], t=T, U=U, order=4,
                                 terms=term_text("interaction", 0.05, label="repulsion")))


def takahashi_exchange(t=T, u=U):
    return Coupling("exchange", (0, 1), 4 * t**2 / u - 16 * t**4 / u**3,
                    {2: 4 * t**2 / u, 4: -16 * t**4 / u**3})


def test_single_ratio_names_v_then_h0():
    assert single_ratio(hubbard_dimer()) == ("t", "U")


def test_single_ratio_needs_named_strengths():
    assert single_ratio(two_strengths_in_v()) is None


def test_recognises_four_and_minus_sixteen():
    scale, found = recognise_couplings(hubbard_dimer(), [takahashi_exchange()])
    assert scale == "t^n/U^(n-1)"
    assert found == {("exchange", (0, 1)): {2: "4", 4: "-16"}}
    assert all(isinstance(m, int) for m in found[("exchange", (0, 1))])


def test_only_scalar_kinds_are_recognised():
    field = Coupling("field", (0,), [0.0, 0.0, 4 * T**2 / U], {2: [0.0, 0.0, 4 * T**2 / U]})
    scale, found = recognise_couplings(hubbard_dimer(), [field])
    assert scale == "t^n/U^(n-1)" and found == {}


@pytest.mark.parametrize("t,u", [(0.0, U), (T, 0.0)])
def test_a_zero_strength_gives_no_scale(t, u):
    assert recognise_couplings(hubbard_dimer(t=t, u=u), [takahashi_exchange()]) == (None, {})


def test_no_single_ratio_gives_no_scale():
    assert recognise_couplings(two_strengths_in_v(), [takahashi_exchange()]) == (None, {})


def test_derived_fourth_order_dimer_exchange_is_recognised():
    model = hubbard_dimer()
    result = derive(model, 4, compare_exact=False)
    form, reason = read_spin_form(model, result.orders, result.manifold.states)
    assert reason == ""
    exchange = next(c for c in form.couplings if c.kind == "exchange")
    # closed form expanded to fourth order; the sixth-order remainder is not in the series
    assert exchange.value == pytest.approx(4 * T**2 / U - 16 * T**4 / U**3, rel=1e-9)
    scale, found = recognise_couplings(model, form.couplings)
    assert scale == "t^n/U^(n-1)"
    assert found[("exchange", (0, 1))] == {2: "4", 4: "-16"}
