"""Every model file in examples/ loads and gives a spectrum; physics checks on our own four.

Sector sizes are binomial counts (common practice).  The other checks use limits that are
solvable by hand:

* double dot: the two-electron, two-site problem splits into a 3 x 3 singlet block on the
  charge states S(1,1), (2,0), (0,2) with tunnelling matrix elements sqrt(2) t, and
  triplets at the (1,1) energy V + eps that do not tunnel (Pauli blockade); common practice
  for the two-site Hubbard model.
* ladder: with the legs switched off, decoupled rungs at the singlet-triplet crossing give
  a 2^6-fold degenerate ground level at 6 * (-3/4) J_rung.
* triangular spins: with the transverse exchange off, the ground energy is the Ising
  minimum, found by enumerating all 2^9 configurations of the sector.
"""

from __future__ import annotations

import itertools
from math import comb
from pathlib import Path

import numpy as np
import pytest

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

import lowfold

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
OURS = ("hubbard_chain", "heisenberg_ladder", "triangular_spins", "double_dot")


def example_files():
    """The model files of examples/ (those with a [lattice] table; scan files name a model)."""
    return sorted(p for p in EXAMPLES.glob("*.toml") if "lattice" in tomllib.loads(p.read_text()))


def test_our_examples_are_present():
    names = {p.stem for p in example_files()}
    assert set(OURS) <= names


@pytest.mark.parametrize("path", example_files(), ids=lambda p: p.stem)
def test_example_runs(path):
    model = lowfold.load_model(path)
    result = lowfold.spectrum(model, levels=2)
    assert result.dimension == lowfold.build_basis(model).size
    assert result.energies.shape == (min(2, result.dimension),)
    assert np.all(np.isfinite(result.energies))
    assert np.all(np.diff(result.energies) >= 0)
    if model.perturbation is not None:            # usable by the perturbative tasks
        assert model.perturbation_labels
        assert set(model.perturbation.unperturbed) <= {t.label for t in model.terms}


@pytest.mark.parametrize("name,dimension", [
    ("hubbard_chain", comb(6, 3) ** 2),       # 3 up and 3 down fermions on 6 wells
    ("heisenberg_ladder", 2**12),             # 12 spins, no sector
    ("triangular_spins", comb(9, 4)),         # 9 spins, S^z = 1/2: 4 spins down
    ("double_dot", comb(4, 2)),               # 2 electrons in 4 spin-orbitals
])
def test_example_dimensions(name, dimension):
    model = lowfold.load_model(EXAMPLES / f"{name}.toml")
    assert lowfold.build_basis(model).size == dimension


def test_double_dot_singlet_block_and_blockaded_triplets():
    model = lowfold.load_model(EXAMPLES / "double_dot.toml")
    p = model.parameters
    t, u, v, eps = p["t"], p["U"], p["V"], p["eps"]
    r = np.sqrt(2) * t
    singlets = np.array([[v + eps, -r, -r],
                         [-r, u, 0.0],
                         [-r, 0.0, u + 2 * eps]])
    expected = np.sort(np.concatenate([np.linalg.eigvalsh(singlets), [v + eps] * 3]))
    energies = lowfold.spectrum(model, levels=6).energies
    np.testing.assert_allclose(energies, expected, atol=1e-12)
    # the exchange splitting against its second-order value 4 t^2 (U-V) / ((U-V)^2 - eps^2)
    exchange = energies[1] - energies[0]
    second_order = 4 * t**2 * (u - v) / ((u - v) ** 2 - eps**2)
    assert exchange == pytest.approx(second_order, rel=0.02)


def test_ladder_decoupled_rungs():
    model = lowfold.load_model(EXAMPLES / "heisenberg_ladder.toml").with_parameters(J_leg=0.0)
    j_rung = model.parameters["J_rung"]
    energies = lowfold.spectrum(model, levels=3).energies
    np.testing.assert_allclose(energies, [-4.5 * j_rung] * 3, atol=1e-10)


def test_triangular_ising_limit():
    model = lowfold.load_model(EXAMPLES / "triangular_spins.toml").with_parameters(Jpm=0.0)
    bonds = model.lattice.bonds("nearest")
    n = model.lattice.n_sites
    jz = model.parameters["Jz"]
    best = np.inf
    for spins in itertools.product((0.5, -0.5), repeat=n):
        if sum(spins) == 0.5:
            best = min(best, jz * sum(spins[i] * spins[j] for i, j in bonds))
    e0 = lowfold.spectrum(model, levels=1).energies[0]
    assert e0 == pytest.approx(best, abs=1e-10)
