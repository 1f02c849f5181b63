"""Tests of the spin-1/2 form of effective Hamiltonians (``lowfold.readout.spin_form``).

Sources:

- Two-site Hubbard model at half filling, second order: ``H_eff = J (S_0.S_1 - 1/4)`` with
  ``J = 4 t^2/U`` (superexchange, P. W. Anderson, Phys. Rev. 115, 2 (1959)); the singlet is
  the only state lowered, by ``J``.
- The sign of an electron state relative to the spin state: hand calculation with the
  fermion order of ``lowfold.model.sites`` (all up slots first, Jordan-Wigner order = slot
  order), written out at each use.

Energies in the model's units; ``S = sigma/2``; exchange ``J S_i.S_j``.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.sparse as sp
from helpers.derive_models import hubbard
from helpers.modelfiles import exchange, model_of, spin_text

from lowfold.jobs.derive import derive
from lowfold.readout.spin_form import SpinForm, read_spin_form, spin_half_map

T, U = 0.1, 8.0


def dimer(site: str = "electron"):
    """Two-site Hubbard model (H0 = U, V = t, to second order) or two spins 1/2."""
    if site == "electron":
        return hubbard("chain", (2,), t=T, U=U, order=2)
    return model_of(spin_text("chain", [2], "open", exchange(1.0)))


# ---------------------------------------------------------------------------- spin_half_map

def test_electron_states_map_to_their_down_pattern_with_reordering_sign():
    model = dimer()
    # 2 sites: bits 0,1 = up slots of sites 0,1; bits 2,3 = down slots.
    # 3 = both up; 12 = both down; 9 = up on 0, down on 1 = c+_{0up} c+_{1dn}|0>, already in
    # site order (+1); 6 = up on 1, down on 0 = c+_{1up} c+_{0dn}|0> = -c+_{0dn} c+_{1up}|0>
    # (one swap, -1).  Qubit index = down pattern: 3 -> 0, 6 -> 1, 9 -> 2, 12 -> 3.
    states = np.array([3, 6, 9, 12])
    (qubit, sign), reason = spin_half_map(model, states)
    assert reason == ""
    assert qubit.tolist() == [0, 1, 2, 3]
    assert sign.tolist() == [1.0, -1.0, 1.0, 1.0]


def test_spin_half_sites_map_to_themselves():
    states = np.arange(4)
    (qubit, sign), reason = spin_half_map(dimer("spin"), states)
    assert reason == "" and qubit.tolist() == [0, 1, 2, 3] and sign.tolist() == [1.0] * 4


@pytest.mark.parametrize("states,words", [
    (np.array([3, 6]), "2 states, not 2^2"),
    (np.array([3, 5, 6, 9]), "not one electron per site"),  # 5 = site 0 doubly occupied
])
def test_no_spin_form_says_why(states, words):
    mapping, reason = spin_half_map(dimer(), states)
    assert mapping is None and words in reason
    form, reason2 = read_spin_form(dimer(), [sp.csr_matrix((states.size, states.size))],
                                   states)
    assert form is None and reason2 == reason


# ---------------------------------------------------------------------------- read_spin_form

def hand_second_order():
    """H_eff,2 of the dimer on P = [3, 6, 9, 12]: -J |s><s|, with the singlet
    s = (|up dn> - |dn up>)/sqrt2 = (|9> + |6>)/sqrt2 in electron states (signs above)."""
    j = 4 * T**2 / U
    h2 = np.zeros((4, 4))
    h2[np.ix_([1, 2], [1, 2])] = -j / 2
    return sp.csr_matrix(h2)


def test_hand_second_order_reads_as_anderson_superexchange():
    zero = sp.csr_matrix((4, 4))
    form, reason = read_spin_form(dimer(), [zero, zero, hand_second_order()],
                                  np.array([3, 6, 9, 12]))
    assert reason == "" and isinstance(form, SpinForm)
    j = 4 * T**2 / U
    by_kind = {c.kind: c for c in form.couplings}
    assert set(by_kind) == {"exchange", "constant"}
    assert by_kind["exchange"].sites == (0, 1)
    assert by_kind["exchange"].value == pytest.approx(j, rel=1e-12)
    assert by_kind["exchange"].orders[2] == pytest.approx(j, rel=1e-12)
    assert by_kind["constant"].value == pytest.approx(-j / 4, rel=1e-12)  # J (S.S - 1/4)
    for string in ("X0 X1", "Y0 Y1", "Z0 Z1"):                         # J/4 sigma.sigma
        assert form.terms[string] == pytest.approx([0.0, 0.0, j / 4], abs=1e-15)
    assert form.residual == {}


def test_derived_second_order_reads_as_anderson_superexchange():
    model = dimer()
    result = derive(model, 2, compare_exact=False)
    form, reason = read_spin_form(model, result.orders, result.manifold.states)
    assert reason == ""
    assert result.manifold.states.tolist() == [3, 6, 9, 12]
    np.testing.assert_allclose(result.orders[2].toarray(), hand_second_order().toarray(),
                               atol=1e-14)
    exchange = [c for c in form.couplings if c.kind == "exchange"]
    assert len(exchange) == 1 and exchange[0].value == pytest.approx(4 * T**2 / U, rel=1e-10)


def test_spin_form_is_frozen():
    zero = sp.csr_matrix((4, 4))
    form, _ = read_spin_form(dimer(), [zero, zero, hand_second_order()], np.array([3, 6, 9, 12]))
    with pytest.raises(dataclasses.FrozenInstanceError):
        form.terms = {}
