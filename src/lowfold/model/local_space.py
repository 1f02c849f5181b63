"""Kept local states of a site, X-operators, and terms projected onto the kept space.

A site's *local value* is ``sum_m digit_m radix**m`` over its modes (electrons: 0 empty,
1 up, 2 down, 3 double; spins: ``S - S^z``; bosons and spinless fermions: the occupation).
Every local value has a *label* (the labels of the local-operator readout,
:mod:`lowfold.readout.local_basis`): electrons ``0 u d 2``; spins their S^z with its sign
(``+1 0 -1``, ``+1/2 -1/2``); bosons and spinless fermions the occupation.

``[site] states = [...]`` keeps some local states (the doped Mott insulator ``["0", "u",
"d"]``, a boson window ``min_occupation`` .. ``max_occupation``).  The model then lives in the
span of the kept states, ``P = prod_i P_i``: the basis holds only states whose every site
is kept (:func:`lowfold.build.basis.kept_states`), and every off-diagonal string ``O`` of a
term acts as ``P_S O P_S``, ``S`` the sites it touches (:mod:`lowfold.build.kept_states`),
which on the kept space is ``P O P``.  So the hopping of electrons without double occupancy
is the projected hopping ``-t sum_s P (c+_is c_js + h.c.) P`` of the t-J model.

X-operators ``|a><b|`` (a, b labels) are local operator names of every site type: the
operator that takes local state b to a.  A fermion-parity-odd one is a product of the site's
creation and annihilation operators, so it carries the Jordan-Wigner string of the sites
before it: ``|a><b|_i = F(a)_i P0_i F(b)_i^dagger`` with ``F(l)`` the creators of state l in
mode order (``|2> = c+_up c+_dn |0>``) and ``P0`` the projector on the empty site -- the
X-operators of the local-operator readout (:mod:`lowfold.readout.local_strings`).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

from lowfold.errors import ModelError
from lowfold.model.sites import Site, SlotOperator

__all__ = ["local_labels", "kept_values", "x_operator", "split_x_name", "local_quantities"]

_ELECTRON_LABELS = ("0", "u", "d", "2")


def local_labels(site: Site) -> tuple[str, ...]:
    """Label of every local value ``0 .. local_dimension - 1``."""
    if site.type == "electron":
        return _ELECTRON_LABELS
    if site.type == "spin":
        out = []
        for k in range(site.radix):
            m = Fraction(site.spin) - k
            out.append(("+" if m > 0 else "") + str(m))
        return tuple(out)
    return tuple(str(k) for k in range(site.radix))


def kept_values(site: Site, states) -> tuple[int, ...]:
    """Local values of the kept-state labels ``states`` (ascending); ``ModelError`` for an
    empty list, an unknown label or a repeated one.  Bosons and spinless fermions also
    take occupations as integers."""
    labels = local_labels(site)
    if not isinstance(states, (list, tuple)) or not states:
        raise ModelError(f"states must be a non-empty list of local states (of {' '.join(labels)})")
    values = []
    for state in states:
        if isinstance(state, int) and not isinstance(state, bool) and site.type in ("boson", "fermion"):
            state = str(state)
        if not isinstance(state, str) or state not in labels:
            raise ModelError(f"states: unknown local state {state!r} for {site.type} sites "
                             f"(local states: {' '.join(labels)})")
        value = labels.index(state)
        if value in values:
            raise ModelError(f"states: {state!r} is listed twice")
        values.append(value)
    return tuple(sorted(values))


def split_x_name(name) -> tuple[str, str] | None:
    """``("a", "b")`` for the X-operator name ``"|a><b|"``, else ``None``."""
    if not isinstance(name, str) or not (name.startswith("|") and name.endswith("|")):
        return None
    inner = name[1:-1]
    if inner.count("><") != 1:
        return None
    a, b = inner.split("><")
    return (a, b) if a and b else None


def _digits(site: Site, value: int) -> list[int]:
    return [(value // site.radix ** m) % site.radix for m in range(site.modes)]


def _slot_step(site: Site, before: int, after: int) -> SlotOperator:
    """The slot operator ``|after><before|`` of one digit (fermionic if the parity changes)."""
    amplitudes = [0j] * site.radix
    amplitudes[before] = 1 + 0j
    odd = site.is_fermionic and (after - before) % 2 == 1
    return SlotOperator(after - before, tuple(amplitudes), odd)


def x_operator(site: Site, name: str) -> list:
    """The monomials of the X-operator ``name`` = ``"|a><b|"`` (see the module docstring)."""
    parts = split_x_name(name)
    labels = local_labels(site)
    if parts is None or parts[0] not in labels or parts[1] not in labels:
        raise ModelError(f"unknown operator {name!r} for {site.type} sites: an X-operator is "
                         f"|a><b| with a, b among the local states {' '.join(labels)}")
    a, b = (labels.index(p) for p in parts)
    da, db = _digits(site, a), _digits(site, b)
    factors = tuple((m, _slot_step(site, db[m], da[m])) for m in range(site.modes))
    # the factors act right to left in slot order; a fermionic factor on mode m passes the
    # particles of the lower modes of the same site (still in state b there)
    sign = 1
    for m, op in factors:
        if op.fermionic and sum(db[:m]) % 2:
            sign = -sign
    return [(complex(sign), factors)]


def local_quantities(site: Site, value: int) -> tuple[int, int]:
    """Particles and 2 S^z of one local value."""
    digits = _digits(site, value)
    if site.type == "spin":
        return 0, int(2 * site.spin) - 2 * digits[0]
    particles = sum(d * site.slot_particles(m) for m, d in enumerate(digits))
    return int(particles), int(sum(d * site.slot_twice_sz(m) for m, d in enumerate(digits)))
