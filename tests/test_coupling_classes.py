"""Coupling classes of translation-invariant clusters (derive's ``classes``), their formulas,
the screen table and the LaTeX Hamiltonian.

References
----------
- Half-filled Hubbard chain to fourth order: J1 = 4 t^2/U - 16 t^4/U^3, J2 = 4 t^4/U^3
  (M. Takahashi, J. Phys. C 10, 1289 (1977)).  On a periodic ring of 6 sites the same values
  hold: at fourth order every process hops along at most two bonds, and each bond it uses it
  uses twice (an electron goes and comes back), so the processes live on open three-site
  segments of the ring; a process around the ring needs 6 hops.
- Square lattice to fourth order: ring exchange 80 t^4/U^3 on each plaquette, in the
  convention K [(S_i.S_j)(S_k.S_l) + (S_i.S_l)(S_j.S_k) - (S_i.S_k)(S_j.S_l)], and
  J2 = 4 t^4/U^3 (A. H. MacDonald, S. M. Girvin and D. Yoshioka, Phys. Rev. B 37, 9753 (1988),
  from memory).  The 3x3 periodic square cluster is the smallest one whose 4-cycles are all
  plaquettes, with one plaquette per site; its diagonal pairs are joined by the same two
  two-bond paths as on the lattice.  (Its nearest-neighbour exchange differs from the
  lattice's: its rows of three sites are triangles, so it is not tested here.)
"""

from __future__ import annotations

import json
from functools import cache

import pytest

from helpers.cli import run_all, succeeded
from helpers.modelfiles import hubbard_text, model_of
from lowfold.jobs.derive import derive

T, U = 0.1, 8.0
RING = hubbard_text("chain", [6], boundary="periodic", t=T, U=U, order=4, title="Hubbard ring")
SQUARE = hubbard_text("square", [3, 3], boundary="periodic", t=T, U=U, order=4)


@cache
def classes_of(text: str):
    result = derive(model_of(text), compare_exact=False)
    return result, {(c.kind, c.name): c for c in result.classes}


def test_six_site_ring_has_the_chain_exchange_classes():     # Takahashi 1977
    result, classes = classes_of(RING)
    nearest, second = classes["exchange", "nearest"], classes["exchange", "next-nearest"]
    assert nearest.formula == "4 t^2/U - 16 t^4/U^3"
    assert second.formula == "4 t^4/U^3"
    assert nearest.value == pytest.approx(4 * T**2 / U - 16 * T**4 / U**3, rel=1e-9)
    assert second.orders[4] == pytest.approx(4 * T**4 / U**3, rel=1e-9)
    assert nearest.multiplicity == 1 and second.multiplicity == 1     # 6 bonds on 6 sites
    assert [abs(a[0] - b[0]) for a, b in [nearest.positions, second.positions]] == [1.0, 2.0]
    assert {c.kind for c in result.classes} == {"constant", "exchange"}
    assert not any("translation" in w for w in result.warnings)


def test_classes_agree_with_the_couplings_they_group():
    result, classes = classes_of(RING)
    bonds = [c for c in result.couplings if c.kind == "exchange" and
             min((c.sites[1] - c.sites[0]) % 6, (c.sites[0] - c.sites[1]) % 6) == 1]
    assert len(bonds) == 6
    for c in bonds:
        assert c.value == pytest.approx(classes["exchange", "nearest"].value, rel=1e-9)


def test_three_by_three_square_has_one_plaquette_ring_per_site():   # MacDonald et al. 1988
    _, classes = classes_of(SQUARE)
    ring = classes["ring", "4-cycle"]
    assert ring.formula == "80 t^4/U^3"
    assert ring.multiplicity == 1
    corners = sorted(ring.positions)
    assert corners == sorted([(x, y) for x in (corners[0][0], corners[0][0] + 1)
                              for y in (corners[0][1], corners[0][1] + 1)])   # a unit square
    assert classes["exchange", "next-nearest"].formula == "4 t^4/U^3"
    assert classes["exchange", "next-nearest"].multiplicity == 2       # two diagonals per site
    assert classes["exchange", "nearest"].multiplicity == 2            # x and y bonds, one class


def test_site_dependent_model_gets_no_class_and_a_warning():
    # a potential on site 0 in H0 changes the denominators of the bonds at site 0 only
    text = hubbard_text("chain", [4], boundary="periodic", t=T, U=U, order=2,
                        unperturbed=("hubbard", "pot"), terms="""
[[term]]
type = "potential"
strength = 0.5
sites = [0]
label = "pot"
""")
    result = derive(model_of(text), compare_exact=False)
    assert not any(c.kind == "exchange" for c in result.classes)
    assert any("not translation invariant" in w for w in result.warnings)
    open_chain = derive(model_of(hubbard_text("chain", [4], t=T, U=U, order=2)),
                        compare_exact=False)
    assert open_chain.classes == ()


def test_json_screen_and_latex(tmp_path):
    path = tmp_path / "ring.toml"
    path.write_text(RING)
    procs = run_all({"json": ["derive", str(path), "--json", "--no-check"],
                     "text": ["derive", str(path), "--no-check"],
                     "latex": ["derive", str(path), "--no-check", "--latex"]})
    data = json.loads(succeeded(procs["json"]))
    entry = next(c for c in data["classes"] if c["class"] == "nearest")
    assert entry["kind"] == "exchange" and entry["formula"] == "4 t^2/U - 16 t^4/U^3"
    assert set(entry["orders"]) == {"2", "4"} and entry["multiplicity"] == 1.0
    text = succeeded(procs["text"])
    assert "coupling classes" in text and "next-nearest" in text
    latex = succeeded(procs["latex"])
    assert r"J_{1} &= \frac{4 t^{2}}{U} - \frac{16 t^{4}}{U^{3}}" in latex
    assert r"J_{1} \sum_{\langle ij \rangle} \mathbf{S}_i \cdot \mathbf{S}_j" in latex
    assert r"J_{2} &= \frac{4 t^{4}}{U^{3}}" in latex
