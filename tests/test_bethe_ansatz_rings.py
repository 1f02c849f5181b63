"""Periodic Hubbard rings against the Bethe ansatz of the finite ring.

The exact energies of lowfold (the product-basis route that ``spectrum`` takes for these
rings) are compared with the ground-state energy from the Lieb-Wu equations of the same
finite ring (E. H. Lieb and F. Y. Wu, Phys. Rev. Lett. 20, 1445 (1968)), solved in the test
by ``helpers.bethe_ansatz`` (scipy.optimize.root, continuation in U).  The quantum numbers
carry the fermion sign of the periodic ring (I_j in Z + M/2, J_a in Z + (N - M + 1)/2; see
the helper); ``test_the_quantum_numbers_carry_the_ring_sign`` shows that the other choice,
the symmetric set without the twist, gives a different energy when M is even.

Default run: 8-12 sites; 14 sites is marked slow (20 s to 3 minutes, by the load); the
16-site ring is measured by ``benchmarks/bench_product.py``.
"""

from __future__ import annotations

import numpy as np
import pytest

import lowfold
from helpers.bethe_ansatz import lieb_wu_energy, quantum_numbers
from helpers.modelfiles import hubbard_text, model_of

T = 1.0


def ring(L: int, U: float, particles: int, sz=0):
    return model_of(hubbard_text("chain", [L], boundary="periodic", t=T, U=U,
                                 particles=particles, sz=sz))


def product_ground_energy(model) -> float:
    found = lowfold.spectrum(model, levels=1)
    assert found.method == "product"
    return float(found.energies[0])


@pytest.mark.parametrize("L", [8, 10])
@pytest.mark.parametrize("U", [1.0, 4.0, 10.0])
def test_half_filled_rings(L, U):
    expected = lieb_wu_energy(L, L, L // 2, U, T)
    assert abs(product_ground_energy(ring(L, U, L)) - expected) < 1e-9


@pytest.mark.parametrize("L", [12, pytest.param(14, marks=pytest.mark.slow)])
def test_half_filled_larger_rings(L):
    U = 4.0
    expected = lieb_wu_energy(L, L, L // 2, U, T)
    assert abs(product_ground_energy(ring(L, U, L)) - expected) < 1e-8


# closed shells of both species (N_up and N_dn odd), also at S^z != 0: the ground state has
# consecutive quantum numbers.  Open shells (N_s even, e.g. 8 electrons on 10 sites) have a
# ground state with other quantum numbers, which the helper does not search for.
@pytest.mark.parametrize(("L", "particles", "down"),
                         [(8, 6, 3), (10, 6, 3), (12, 10, 5), (10, 8, 3), (12, 8, 3)])
def test_rings_away_from_half_filling(L, particles, down):
    U = 6.0
    sz = (particles - 2 * down) / 2
    expected = lieb_wu_energy(L, particles, down, U, T)
    assert abs(product_ground_energy(ring(L, U, particles, sz)) - expected) < 1e-9


def test_the_quantum_numbers_carry_the_ring_sign():
    # M = 4 even on 8 sites: the I_j must be integers (a twist of pi on the symmetric
    # half-odd set); the symmetric half-odd set is the antiperiodic ring, a different energy
    L, U = 8, 4.0
    exact = product_ground_energy(ring(L, U, L))
    twisted = lieb_wu_energy(L, L, L // 2, U, T, I=quantum_numbers(L, parity_half=True))
    assert abs(lieb_wu_energy(L, L, L // 2, U, T) - exact) < 1e-9
    assert abs(twisted - exact) > 0.05
    # M = 3 odd on 6 sites: the symmetric half-odd set is the one allowed
    assert np.allclose(quantum_numbers(6, parity_half=True), [-2.5, -1.5, -0.5, 0.5, 1.5, 2.5])
    six = float(lowfold.spectrum(ring(6, U, 6), levels=1).energies[0])   # dense-sized
    assert abs(lieb_wu_energy(6, 6, 3, U, T) - six) < 1e-9
