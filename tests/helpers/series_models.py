"""Model files (TOML) of the single-state series tests, and dense twins of two of them.

Spin labels: one letter per site, site 0 first, u = S^z +1/2.  Used by
``test_state_series*.py`` and ``test_series_cli.py``.
"""

from __future__ import annotations

import numpy as np

from helpers.exact import PAULI_Z, heisenberg, site_op
from helpers.modelfiles import hubbard_text, term_text

TFIM_RING = """
title = "transverse-field Ising ring"
# H0 = -sum_i sigma^z_i (field strength -2 on S^z = sigma^z / 2): a unique all-up state.
# V  = -g sum_i X_i X_(i+1): the Ising coupling, here along x (Pfeuty's chain rotated).
[lattice]
shape = "chain"
size = [{L}]
boundary = "periodic"
[site]
type = "spin"
spin = 0.5
[parameters]
minus_g = {minus_g}
[[term]]
type = "field"
axis = "z"
strength = -2.0
label = "field"
[[term]]
type = "product"
operators = ["X", "X"]
strength = "minus_g"
bonds = "nearest"
label = "ising"
[perturbation]
unperturbed = ["field"]
order = {order}
"""

SPIN_DIMERS = """
title = "two exchange-coupled spin dimers"
# H0 = J (S0.S1 + S2.S3): not diagonal in the S^z basis, unique singlet-singlet ground state.
# V  = J' S1.S2, a weak link between the dimers.
[lattice]
shape = "chain"
size = [4]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
J = 1.0
Jp = {Jp}
[[term]]
type = "exchange"
strength = "J"
bonds = [[0, 1], [2, 3]]
label = "dimer"
[[term]]
type = "exchange"
strength = "Jp"
bonds = [[1, 2]]
label = "link"
[perturbation]
unperturbed = ["dimer"]
order = {order}
"""

GRADED_FIELDS = """
title = "four spins in a graded field"
# H0 = sum_i h_i S^z_i with all 16 configurations at distinct energies; V = J sum S_i.S_j.
[lattice]
shape = "chain"
size = [4]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
J = {J}
[[term]]
type = "field"
axis = "z"
strength = -1.0
sites = [0]
label = "h0"
[[term]]
type = "field"
axis = "z"
strength = -2.1
sites = [1]
label = "h1"
[[term]]
type = "field"
axis = "z"
strength = -4.3
sites = [2]
label = "h2"
[[term]]
type = "field"
axis = "z"
strength = -8.7
sites = [3]
label = "h3"
[[term]]
type = "exchange"
strength = "J"
bonds = "nearest"
[perturbation]
unperturbed = ["h0", "h1", "h2", "h3"]
order = 6
"""
GRADED_H = (-1.0, -2.1, -4.3, -8.7)

ZEEMAN_CHAIN = """
title = "spins in a field with Heisenberg exchange"
# H0 = -sum_i S^z_i (unique all-up state), V = J sum S_i.S_j conserves S^z.
[lattice]
shape = "chain"
size = [{L}]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[parameters]
J = 1.0
[[term]]
type = "field"
axis = "z"
strength = -1.0
label = "zeeman"
[[term]]
type = "exchange"
strength = "J"
bonds = "nearest"
[perturbation]
unperturbed = ["zeeman"]
order = 4
"""

ONE_SPIN = """
title = "one spin swept through a level crossing"
# H(lambda) = -sigma^z + lambda (r sigma^z + b sigma^x): the diagonal levels cross at
# lambda = 1/r, the x field b turns the crossing into an avoided one.
[lattice]
shape = "chain"
size = [1]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "field"
axis = "z"
strength = -2.0
label = "bias"
[[term]]
type = "field"
axis = "z"
strength = {two_r}
label = "ramp"
[[term]]
type = "field"
axis = "x"
strength = {two_b}
label = "mixing"
[perturbation]
unperturbed = ["bias"]
order = 8
"""

DIMER_AND_FREE_SPIN = """
title = "a spin dimer beside a free spin"
# H0 = S0.S1: its ground level (singlet x free spin) is twofold degenerate.
[lattice]
shape = "chain"
size = [3]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "exchange"
strength = 1.0
bonds = [[0, 1]]
label = "pair"
[[term]]
type = "exchange"
strength = 0.1
bonds = [[1, 2]]
label = "link"
[perturbation]
unperturbed = ["pair"]
"""

NO_SPLIT = """
title = "no H0 / V split"
[lattice]
shape = "chain"
size = [2]
boundary = "open"
[site]
type = "spin"
spin = 0.5
[[term]]
type = "exchange"
strength = 1.0
bonds = "nearest"
"""


def tfim_file(L, g, order):
    return TFIM_RING.format(L=L, minus_g=-g, order=order)


def offset_dimer_file(t, order, tilt=False):
    """Hubbard dimer with a potential offset: two electrons on two dots; dot 0 lies D = 2
    deeper (U = 1), so the pair on dot 0 is the unique H0 ground state.  V = hopping t,
    plus (``tilt``) a term +1 n_0 that undoes half the offset."""
    terms = term_text("potential", -2.0, sites=[0], label="offset")
    if tilt:
        terms += term_text("potential", 1.0, sites=[0], label="tilt")
    return hubbard_text("chain", [2], t=t, U=1.0, sz=0, order=order,
                        unperturbed=["hubbard", "offset"], terms=terms,
                        title="Hubbard dimer with a potential offset")


def ionic_hubbard_file(t, order):
    """Ionic Hubbard chain, charge-density-wave limit: deep wells (-Delta = -3) on the even
    sites of an open 4-site chain at half filling; with Delta > U = 1 the unique H0 ground
    state has both electrons of a pair on each even site.  V = hopping t."""
    return hubbard_text("chain", [4], t=t, U=1.0, sz=0, order=order,
                        unperturbed=["hubbard", "wells"],
                        terms=term_text("potential", -3.0, sites=[0, 2], label="wells"),
                        title="ionic Hubbard chain, charge-density-wave limit")


# H0 = U sum n_up n_dn: the two singly occupied S^z = 0 states are degenerate and the
# hopping couples them at second order.
HUBBARD_DIMER = hubbard_text("chain", [2], t=0.1, U=1.0, sz=0, order=4,
                             title="half-filled Hubbard dimer")


def one_spin_file(r, b):
    return ONE_SPIN.format(two_r=2.0 * r, two_b=2.0 * b)


def graded_dense(J):
    h0 = sum(h * site_op(PAULI_Z, i, 4) / 2 for i, h in enumerate(GRADED_H)).real
    return h0, J * heisenberg([(0, 1), (1, 2), (2, 3)], 4)


def singlet_block(t, lam_tilt=0.0):
    """Hubbard dimer with offset, two electrons, spin-singlet block on (|20>, singlet of one
    electron per dot, |02>): hopping matrix elements -sqrt(2) t between neighbours in this
    chain of states (common practice, the two-site Hubbard model), diagonal U - 2D, -D, U
    with U = 1, D = 2, plus a tilt lam_tilt n_0."""
    a = -np.sqrt(2.0) * t
    return np.array([[1.0 - 4.0 + 2 * lam_tilt, a, 0.0],
                     [a, -2.0 + lam_tilt, a],
                     [0.0, a, 1.0]])


def tunnelling_dimer_file(u, order, t=1.0):
    """Two-site Hubbard model at half filling (S^z = 0) with the hopping as H0 and U as V:
    the non-diagonal route; exact E = (U - sqrt(U^2 + 16 t^2))/2."""
    return f"""
title = "two sites, tunnelling first"
[lattice]
shape = "chain"
size = [2]
[site]
type = "electron"
[sector]
particles = 2
sz = 0
[parameters]
t = {t}
U = {u}
[[term]]
type = "hopping"
strength = "t"
[[term]]
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["hopping"]
order = {order}
"""
