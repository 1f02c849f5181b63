"""Model files of the effective-Hamiltonian (``derive``) tests, and cached models and results.

Energies in units of the file's parameters; S = sigma/2; exchange ``J S_i.S_j``.  The
Hubbard writer is :func:`helpers.modelfiles.hubbard_text`.
"""

from __future__ import annotations

from functools import cache

import numpy as np

import lowfold
from helpers.modelfiles import hubbard_text, model_of, toml_value
from lowfold.jobs.derive import derive


@cache
def hubbard(shape: str, size: tuple, boundary: str = "open", t: float = 0.1, U: float = 1.0,
            order: int = 4) -> lowfold.Model:
    """Half-filled Hubbard cluster, H0 = Hubbard U, V = hopping t (cached: models are frozen)."""
    return model_of(hubbard_text(shape, size, boundary=boundary, t=t, U=U, order=order))


@cache
def hubbard_result(shape, size, order, t=0.1, U=1.0, compare_exact=True):
    """``derive`` of :func:`hubbard`, cached across the test modules."""
    return derive(hubbard(shape, size, t=t, U=U, order=order), order, compare_exact=compare_exact)


def anderson_text(eps_d: float, U: float, V: float) -> str:
    """Anderson impurity (site 0) with one bath site (site 1, energy 0), two electrons."""
    return f"""
title = "impurity level and one bath orbital"
[lattice]
shape = "graph"
sites = 2
bonds = [[0, 1]]
[site]
type = "electron"
[sector]
particles = 2
[parameters]
eps_d = {eps_d!r}
U = {U!r}
V = {V!r}
[[term]]
type = "potential"
strength = "eps_d"
sites = [0]
label = "level"
[[term]]
type = "hubbard"
strength = "U"
sites = [0]
label = "charging"
[[term]]
type = "hopping"
strength = "V"
bonds = [[0, 1]]
label = "hybridisation"
[perturbation]
unperturbed = ["level", "charging"]
order = 4
"""


@cache
def random_spin_text(seed: int, *, n_sites: int = 5, n_pinned: int = 3, scale: float = 0.25,
                     split: float = 0.0, order: int = 6) -> str:
    """A random spin-1/2 graph model with a gapped, degenerate (or, with ``split``,
    quasi-degenerate) lowest level of H0.

    H0: fields ``h_i S^z_i`` (h_i in [1, 2]) and Ising ``J_ij S^z_i S^z_j`` (|J| < 0.3) on
    the first ``n_pinned`` sites, which fixes them; the other sites are free (a 2^k-fold
    degenerate level), the last one split by ``split S^z`` when asked (then the manifold is a
    window around the lowest pinned configuration).  V: a random two-spin product
    ``v S^a_i S^b_j`` on every pair and a random field ``v S^a_i`` on every site, |v| <
    ``scale``; a, b in x, y, z, so V is complex in general and conserves nothing.
    """
    rng = np.random.default_rng(seed)
    pairs = [[i, j] for i in range(n_sites) for j in range(i + 1, n_sites)]
    params, terms, h0 = {}, [], []
    fields = rng.uniform(1.0, 2.0, n_pinned)
    ising = {}
    for i in range(n_pinned):
        params[f"h{i}"] = fields[i]
        terms.append({"type": "field", "axis": "z", "strength": f"h{i}", "sites": [i],
                      "label": f"pin{i}"})
        h0.append(f"pin{i}")
    for i in range(n_pinned):
        for j in range(i + 1, n_pinned):
            ising[i, j] = params[f"J{i}{j}"] = rng.uniform(-0.3, 0.3)
            terms.append({"type": "product", "operators": ["Sz", "Sz"], "strength": f"J{i}{j}",
                          "bonds": [[i, j]], "label": f"ising{i}{j}"})
            h0.append(f"ising{i}{j}")
    if split:
        params["eps"] = split
        terms.append({"type": "field", "axis": "z", "strength": "eps", "sites": [n_sites - 1],
                      "label": "split"})
        h0.append("split")
    names = ["Sx", "Sy", "Sz"]
    for k, (i, j) in enumerate(pairs):
        a, b = rng.integers(0, 3, 2)
        params[f"v{k}"] = scale * rng.uniform(-1, 1)
        terms.append({"type": "product", "operators": [names[a], names[b]], "strength": f"v{k}",
                      "bonds": [[i, j]], "label": f"v{k}"})
    for i in range(n_sites):
        k = len(pairs) + i
        params[f"v{k}"] = scale * rng.uniform(-1, 1)
        terms.append({"type": "field", "axis": "xyz"[rng.integers(0, 3)], "strength": f"v{k}",
                      "sites": [i], "label": f"v{k}"})
    lines = [f'title = "random spin model {seed}"',
             f'[lattice]\nshape = "graph"\nsites = {n_sites}\nbonds = {toml_value(pairs)}',
             '[site]\ntype = "spin"\nspin = 0.5', "[parameters]"]
    lines += [f"{name} = {toml_value(value)}" for name, value in params.items()]
    lines += ["[[term]]\n" + "\n".join(f"{k} = {toml_value(v)}" for k, v in term.items())
              for term in terms]
    perturbation = f"[perturbation]\nunperturbed = {toml_value(h0)}\norder = {order}"
    if split:
        # lowest pinned configuration, by brute force over the 2^n_pinned S^z values
        sz = np.array(np.meshgrid(*[[0.5, -0.5]] * n_pinned, indexing="ij")).reshape(n_pinned, -1)
        energy = fields @ sz + sum(jij * sz[i] * sz[j] for (i, j), jij in ising.items())
        e0 = float(energy.min())
        perturbation += f"\nwindow = [{e0 - 0.2!r}, {e0 + 0.2!r}]"
    lines.append(perturbation)
    return "\n".join(lines)


ISING_CHAIN = """
title = "ferromagnetic Ising chain in a weak transverse field"
[lattice]
shape = "chain"
size = [3]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
Jz = -1.0
G = 0.05
[[term]]
type = "product"
operators = ["Sz", "Sz"]
strength = "Jz"
bonds = "nearest"
label = "ising"
[[term]]
type = "field"
axis = "x"
strength = "G"
label = "transverse"
[perturbation]
unperturbed = ["ising"]
order = 3
"""


NO_GAP_SPINS = """
[lattice]
shape = "chain"
size = [2]
[site]
type = "spin"
spin = 0.5
[parameters]
h = 1.0
tiny = 1e-10
g = 0.1
[[term]]
type = "field"
axis = "z"
strength = "h"
sites = [0]
[[term]]
type = "field"
axis = "z"
strength = "tiny"
sites = [1]
label = "tiny"
[[term]]
type = "field"
axis = "x"
strength = "g"
sites = [1]
label = "transverse"
[perturbation]
unperturbed = ["field", "tiny"]
window = [-1.0, -0.5]
"""
