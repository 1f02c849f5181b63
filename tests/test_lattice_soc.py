"""Spin-orbit and complex hopping on infinite lattices: directed bonds in the linked-cluster
expansion.

A bond of a hopping ``T = t 1 + i lambda . sigma`` (or of a complex t) has a direction
(``T^ji = T^dagger``), so the cluster graphs keep it and are identified only by
direction-preserving maps; on periodic clusters a bond class is taken along the
translations (the ring's bond ``(L - 1, 0)``), so that a uniform hopping stays translation
invariant there.  Checks:

- the infinite half-filled chain at second order has, per bond, the Moriya couplings of the
  Hubbard dimer (T. Moriya, Phys. Rev. 120, 91 (1960); the second order derived in
  test_spin_orbit_hopping.py): ``J = 4 (t^2 - lambda^2)/U + 8 lambda^2/(3U)``,
  ``D = 8 t lambda / U`` along the chain's direction, ``G = 8 (lambda lambda - lambda^2/3)/U``,
  and the constant ``-(t^2 + lambda^2)/U`` per site (one bond per site);
- the linked-cluster identity with directed bonds on an open 3x2 square cluster (x and y
  bonds, rotated and mirrored subclusters are different graphs): the subcluster weights sum
  to the cluster's own effective Hamiltonian, Pauli string by Pauli string (Gelfand, Singh &
  Huse, J. Stat. Phys. 59, 1093 (1990));
- the couplings to order n, put on a periodic ring, miss its exact levels by O(t^(n+1))
  (the check of the infinite lattice, with its scaling fit);
- the doped chain (``filling = "mixed"``, kept states {0, u, d}) with lambda off z: its
  classes (complex X-operator strings beside the t-J kinds) exported and run on a 5-site ring
  with 4 electrons miss the ring's exact levels (QuSpin, tests/helpers/electrons.py) by
  O(t^(n+1)), n = 1, 2;
- a DM perturbation on the square lattice keeps the direction of its x and y bonds;
- a uniform complex hopping ``t e^(i phi)`` on the chain is a gauge transformation of the
  real one (``c_j -> e^(-i j phi) c_j``; common practice): the same couplings as ``|t|``;
- on a periodic ring of 5 sites it is a flux ``5 phi`` through the ring: one fermion has the
  levels ``-2 |t| cos(2 pi n/5 + phi)`` (free particle on a ring, common practice).
"""

from __future__ import annotations

import tomllib

import numpy as np
import pytest
from helpers.electrons import hop_matrix, quspin_electron_levels

import lowfold
from lowfold import ModelError, parse_model
from lowfold.jobs.export import export_text
from lowfold.jobs.lattice import derive_infinite, open_cluster_sum

T, U = 0.1, 8.0
LAM = np.array([0.03, -0.02, 0.05])


def chain(t=T, lam=LAM, *, order=2, boundary="infinite", size=None, strength="t"):
    lattice = {"shape": "chain", "boundary": boundary, **({"size": size} if size else {})}
    return parse_model({
        "lattice": lattice, "site": {"type": "electron"},
        "parameters": {"t": t, "U": U, "mu": -U / 2, "lx": lam[0], "ly": lam[1], "lz": lam[2]},
        "term": [{"type": "hopping", "strength": strength, "soc": ["lx", "ly", "lz"]},
                 {"type": "hubbard", "strength": "U"}, {"type": "potential", "strength": "mu"}],
        "perturbation": {"unperturbed": ["hubbard", "potential"], "order": order}})


def value(result, kind, order=2):
    found = [c for c in result.classes if c.kind == kind]
    assert len(found) == 1 and found[0].name in ("nearest", "constant"), kind
    return np.asarray(found[0].orders.get(order, 0.0))


def test_infinite_chain_has_the_moriya_couplings_of_each_bond():
    result = derive_infinite(chain(), 2)
    l2 = LAM @ LAM
    assert value(result, "exchange") == pytest.approx(4 * (T**2 - l2) / U + 8 * l2 / (3 * U),
                                                      rel=1e-10)
    dm = [c for c in result.classes if c.kind == "dm"][0]
    assert dm.positions[1][0] - dm.positions[0][0] == 1.0      # the bond along +x
    np.testing.assert_allclose(value(result, "dm"), 8 * T * LAM / U, atol=1e-14)
    np.testing.assert_allclose(value(result, "anisotropy"),
                               8 * (np.outer(LAM, LAM) - np.eye(3) * l2 / 3) / U, atol=1e-14)
    assert value(result, "constant") == pytest.approx(-(T**2 + l2) / U, rel=1e-10)


def test_linked_cluster_identity_with_directed_bonds_on_a_square_cluster():
    order = 4
    model = chain(order=order)
    model = parse_model({**_table(model), "lattice": {"shape": "square",
                                                      "boundary": "infinite"}})
    cluster = lowfold.make_lattice("square", [3, 2], "open")
    finite = lowfold.Model(cluster, model.site, model.terms, lowfold.Sector(), model.parameters,
                           model.perturbation)
    direct = lowfold.derive(finite, order, compare_exact=False)
    own = {tuple(sorted(lowfold.readout.pauli.parse_pauli_string(t.operator))):
           [t.orders.get(m, 0.0) for m in range(order + 1)] for t in direct.terms}
    summed = open_cluster_sum(model, cluster, order)
    zero = np.zeros(order + 1)
    assert any(len(key) == 2 and key[0][1] != key[1][1] for key in own)   # DM-like X Y terms
    for key in set(own) | set(summed):
        np.testing.assert_allclose(np.asarray(summed.get(key, zero)),
                                   np.asarray(own.get(key, zero)), atol=1e-12, err_msg=str(key))


def _table(model):
    """The model-file table of :func:`chain` (parameters and terms), for another lattice."""
    return {"site": {"type": "electron"}, "parameters": dict(model.parameters),
            "term": [{"type": "hopping", "strength": "t", "soc": ["lx", "ly", "lz"]},
                     {"type": "hubbard", "strength": "U"},
                     {"type": "potential", "strength": "mu"}],
            "perturbation": {"unperturbed": ["hubbard", "potential"],
                             "order": model.perturbation.order}}


def test_error_on_a_ring_falls_like_the_next_power():
    result = lowfold.derive(chain(order=3), 3, compare_exact=True, fit_scaling=True)
    assert result.check.cluster.startswith("periodic chain")
    fits = result.scaling
    assert result.check.max_abs_error[2] < 0.01 * result.check.max_abs_error[0]
    for n in (2, 3):                      # odd orders vanish at half filling: t^4 from n = 2
        assert fits[n].power == pytest.approx(4, abs=0.2), (n, fits[n].power)


def test_uniform_complex_hopping_on_the_chain_is_a_gauge():
    phase = 0.7
    complex_t = {"re": T * np.cos(phase), "im": T * np.sin(phase)}
    model = parse_model({**_table(chain()), "lattice": {"shape": "chain", "boundary": "infinite"},
                         "parameters": {"t": complex_t, "U": U, "mu": -U / 2},
                         "term": [{"type": "hopping", "strength": "t"},
                                  {"type": "hubbard", "strength": "U"},
                                  {"type": "potential", "strength": "mu"}]})
    result = derive_infinite(model, 4)
    kinds = {c.kind for c in result.classes}
    assert kinds <= {"constant", "exchange"} and "exchange" in kinds
    plain = derive_infinite(chain(lam=(0.0, 0.0, 0.0), order=4), 4)
    for mine, theirs in zip(sorted(result.classes, key=lambda c: (c.kind, c.name)),
                            sorted(plain.classes, key=lambda c: (c.kind, c.name))):
        assert (mine.kind, mine.name) == (theirs.kind, theirs.name)
        for m in range(5):
            assert mine.orders.get(m, 0.0) == pytest.approx(theirs.orders.get(m, 0.0), abs=1e-13)


def test_uniform_complex_hopping_on_a_ring_is_a_flux_through_it():
    phase, length = 0.3, 5
    model = parse_model({
        "lattice": {"shape": "chain", "size": [length], "boundary": "periodic"},
        "site": {"type": "fermion"}, "sector": {"particles": 1},
        "parameters": {"t": {"re": T * np.cos(phase), "im": T * np.sin(phase)}},
        "term": [{"type": "hopping", "strength": "t"}]})
    levels = np.sort(lowfold.spectrum(model, length).energies)
    exact = np.sort(-2 * T * np.cos(2 * np.pi * np.arange(length) / length + phase))
    np.testing.assert_allclose(levels, exact, atol=1e-13)


def test_flux_on_an_infinite_lattice_is_refused():
    table = {**_table(chain()), "lattice": {"shape": "square", "boundary": "infinite"}}
    table["term"] = [{**table["term"][0], "flux": 0.1}] + table["term"][1:]
    del table["term"][0]["soc"]
    with pytest.raises(ModelError, match="flux is not supported on an infinite lattice"):
        parse_model(table)


def test_doped_chain_with_spin_orbit_hopping_exports_and_runs_on_a_ring():
    lam, ring, electrons = np.array([0.5, 0.0, 0.25]), 5, 4
    for order in (1, 2):
        errors = []
        for t in (0.04, 0.02):
            table = {**_table(chain()), "lattice": {"shape": "chain", "boundary": "infinite"},
                     "parameters": {"t": t, "U": 1.0, "lx": lam[0] * t, "ly": 0.0,
                                    "lz": lam[2] * t},
                     "perturbation": {"unperturbed": ["hubbard"], "order": order,
                                      "filling": "mixed"}}
            table["term"] = table["term"][:2]
            result = derive_infinite(parse_model(table), order)
            text = export_text(result).replace(
                'boundary = "infinite"', f'boundary = "periodic"\nsize = [{ring}]').replace(
                "[parameters]", f"[sector]\nparticles = {electrons}\n\n[parameters]")
            assert "im = " in text                    # complex strings are written
            levels = np.sort(lowfold.spectrum(parse_model(tomllib.loads(text)), 80).energies)
            hops = [(i, (i + 1) % ring, hop_matrix(t, lam * t)) for i in range(ring)]
            exact = quspin_electron_levels(ring, hops, 1.0, electrons, k=80)
            errors.append(np.abs(levels - exact).max())
        power = np.log2(errors[0] / errors[1])
        assert power == pytest.approx(order + 1, abs=0.25), (order, power)


def test_dm_perturbation_keeps_the_direction_of_every_bond():
    # V = D . (S_i x S_j) on the nearest bonds (i -> j along the translations), H0 a
    # constant: at first order the effective model is V itself, so each bond direction has
    # the vector as written (an edge relabelled against its direction would flip it); a
    # constant adds no energy per site
    table = {"lattice": {"shape": "square", "boundary": "infinite"},
             "site": {"type": "spin", "spin": 0.5}, "parameters": {"E0": 1.0, "D": 0.2},
             "term": [{"type": "constant", "strength": "E0", "label": "E0"},
                      {"type": "dm", "strength": "D", "vector": [0.3, 0.5, 0.8], "label": "dm"}],
             "perturbation": {"unperturbed": ["E0"], "order": 1, "window": [0.0, 2.0]}}
    result = derive_infinite(parse_model(table), 1)
    (dm,) = result.classes
    assert (dm.kind, dm.name, dm.multiplicity) == ("dm", "nearest", 2.0)
    np.testing.assert_allclose(dm.value, 0.2 * np.array([0.3, 0.5, 0.8]), atol=1e-15)
