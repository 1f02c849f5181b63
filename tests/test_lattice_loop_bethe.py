"""The Bethe-ansatz reference of the loop-closing benchmark (benchmarks/bench_lattice_loop.py).

E/L of the half-filled Hubbard chain, Lieb & Wu, Phys. Rev. Lett. 20, 1445 (1968), by
quadrature, against its known limits:

- U = 0: free electrons at half filling, E/L = -4t/pi (common practice: -(2/pi) 2t);
- large U: the Heisenberg chain with J = 4t^2/U, E/L = -J ln 2 (Hulthen, Ark. Mat. Astron.
  Fys. 26A, No. 11 (1938), with the -J/4 per bond of the superexchange), and the next term
  +9 zeta(3) t^4/U^3 of the expansion of the Lieb-Wu integral (from memory; it is the
  second term of the alternating sum over exp(-k w U/2t));
- and against Lanczos of the Hubbard ring itself (lowfold.spectrum, L = 10, U = 8t): the
  finite ring differs from the infinite chain by a few 1e-3 t per site only.
"""

from __future__ import annotations

import importlib.util
import math
from fractions import Fraction
from pathlib import Path

import pytest
from scipy.special import zeta

import lowfold

BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_lattice_loop.py"


@pytest.fixture(scope="module")
def bench():
    spec = importlib.util.spec_from_file_location("bench_lattice_loop", BENCH)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_free_electrons(bench):
    assert bench.bethe_ansatz_energy(0.0) == pytest.approx(-4 / math.pi, abs=1e-7)
    assert bench.bethe_ansatz_energy(0.0, t=2.0) == pytest.approx(-8 / math.pi, abs=1e-6)


@pytest.mark.parametrize("u", [50.0, 100.0, 200.0])
def test_heisenberg_limit_and_next_term(bench, u):
    energy = bench.bethe_ansatz_energy(u)
    assert energy == pytest.approx(-4 * math.log(2) / u, rel=20 / u**2)
    correction = (energy + 4 * math.log(2) / u) * u**3
    assert correction == pytest.approx(9 * zeta(3), rel=30 / u**2)


def test_energy_falls_towards_zero_with_u(bench):
    values = [bench.bethe_ansatz_energy(u) for u in (1.0, 2.0, 4.0, 8.0, 16.0)]
    assert all(a < b < 0 for a, b in zip(values, values[1:]))


def test_against_lanczos_of_the_ring(bench):
    u, n = 8.0, 10
    model = bench.infinite_model("chain", u, 2).with_lattice(size=[n], boundary="periodic")
    model = model.with_sector(lowfold.Sector(particles=n, sz=Fraction(0)))
    ring = float(lowfold.spectrum(model, levels=1).energies[0]) / n
    infinite = bench.bethe_ansatz_energy(u) - u / 2            # the -U/2 potential of H0
    assert abs(ring - infinite) < 1e-2
    assert ring < infinite                        # the periodic ring of 4k + 2 sites lies below
