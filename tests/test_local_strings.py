"""X-operator strings: Jordan-Wigner signs against lowfold's own operators, uniqueness on the
whole product, and the pseudo-spin export.

- Electrons with every local state kept ({0 u d 2}): the first-order effective Hamiltonian
  P V P is V itself, built by lowfold's compiled operators in slot order (all spin-up slots
  first); read out in the site-ordered basis with Jordan-Wigner strings it must be the plain
  hopping -t sum_s (c+_is c_js + h.c.) on every bond, including bonds that skip sites and
  doubly occupied ends (exact identity, common practice).
- On the whole product the string expansion is unique: a random Hermitian operator goes to
  strings and back unchanged.
- A pseudo-spin-1/2 readout exports as a spin-1/2 model that reads back with the same
  couplings.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.modelfiles import lattice_text, model_of, term_text

from lowfold.jobs.derive import derive
from lowfold.jobs.export import export_text
from lowfold.readout.local_basis import product_manifold
from lowfold.readout.local_strings import matrix_of_strings, strings_of_orders

T, MU = 0.3, 0.7


def test_full_electron_space_reads_as_plain_hopping():
    # 2x2 open square: the bonds (0, 2) and (1, 3) skip a site in the Jordan-Wigner order
    terms = (term_text("hopping", "t", bonds="nearest", label="hopping")
             + term_text("potential", "mu", sites="all", label="level"))
    text = lattice_text("square", [2, 2], "open", {"type": "electron"}, terms,
                        parameters={"t": T, "mu": MU})
    text += '\n[perturbation]\nunperturbed = ["level"]\norder = 1\nwindow = [-1.0, 10.0]\n'
    result = derive(model_of(text), 1, compare_exact=False)
    assert result.manifold.dimension == 4**4
    assert result.manifold.readout == "local operators ({0 u d 2})"
    found = {(c.kind, c.sites): c.orders for c in result.couplings}
    assert set(found) == {("hopping", b) for b in [(0, 1), (0, 2), (1, 3), (2, 3)]} | {
        ("density", (i,)) for i in range(4)}
    for (kind, _), orders in found.items():
        if kind == "hopping":
            assert orders == {1: pytest.approx(T, rel=1e-12)}
        else:
            assert orders == {0: pytest.approx(MU, rel=1e-12)}


@pytest.mark.parametrize("seed", [1, 2])
def test_random_operator_round_trip_on_the_whole_product(seed):
    terms = term_text("hubbard", "U", label="onsite")
    text = lattice_text("chain", [3], "open", {"type": "boson", "max_occupation": 2}, terms,
                        parameters={"U": 1.0})
    model = model_of(text)
    states = np.arange(27, dtype=np.int64)
    basis, _ = product_manifold(model, states)
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(27, 27))
    h = a + a.T
    strings = strings_of_orders(basis, [h])
    back = matrix_of_strings(basis, {k: v[0] for k, v in strings.items()}).toarray()
    np.testing.assert_allclose(back, h, atol=1e-12)


def test_pseudo_spin_readout_exports_and_reads_back():
    terms = (term_text("product", "D", operators=["Sz", "Sz"], sites="all", label="anisotropy")
             + term_text("exchange", "J", bonds="nearest", label="exchange"))
    text = lattice_text("chain", [4], "periodic", {"type": "spin", "spin": 1}, terms,
                        parameters={"D": -1.0, "J": 0.1})
    text += '\n[perturbation]\nunperturbed = ["anisotropy"]\norder = 2\n'
    result = derive(model_of(text), 2, compare_exact=False)
    exported = export_text(result)
    assert "pseudo-spin" in exported
    again = derive(model_of(exported), 1, compare_exact=False)
    original = {(c.kind, c.sites): np.asarray(c.value) for c in result.couplings}
    read = {(c.kind, c.sites): np.asarray(c.value) for c in again.couplings}
    assert set(read) == set(original)
    for key, value in original.items():
        np.testing.assert_allclose(read[key], value, atol=1e-12)
