"""Compiled strings projected onto the kept local states of a site (``[site] states``).

On a site with kept states every off-diagonal string ``O`` of a term acts as ``P_S O P_S``
(``S`` the sites it touches, ``P_i`` the projector onto the kept states of site i), which on
the kept space is ``P O P`` (:mod:`lowfold.model.local_space`).  The projection is done
here, string by string: on each site the string moves a local state v to one v' (or kills
it); the string is split into one string per kept v whose image v' is kept, each with the
factors of v only (the other digits' amplitudes set to 0, projectors on the modes the string
leaves alone).  Every string so made keeps the kept space by itself, so images outside it
never appear (not even ones that other strings would cancel), and splitting keeps the
Jordan-Wigner signs (the factors keep their slots and parity; the added ones are even).
"""

from __future__ import annotations

from itertools import product as cartesian

from lowfold.model.sites import Site, SlotOperator

__all__ = ["project_string"]


def _only(op: SlotOperator, digit: int) -> SlotOperator:
    amplitudes = [0j] * op.radix
    amplitudes[digit] = op.amplitudes[digit]
    return SlotOperator(op.shift, tuple(amplitudes), op.fermionic)


def _site_options(site: Site, n_sites: int, index: int, factors: dict) -> list:
    """Per kept source value of site ``index`` whose image is kept: its slot factors."""
    options = []
    for value in site.states:
        digits = [(value // site.radix ** m) % site.radix for m in range(site.modes)]
        target, chosen, alive = 0, [], True
        for m, digit in enumerate(digits):
            slot = index + m * n_sites
            op = factors.get(slot)
            if op is None:
                projector = [0j] * site.radix
                projector[digit] = 1 + 0j
                chosen.append((slot, SlotOperator(0, tuple(projector))))
                target += digit * site.radix ** m
                continue
            new = digit + op.shift
            if not 0 <= new < site.radix or op.amplitudes[digit] == 0:
                alive = False
                break
            chosen.append((slot, _only(op, digit)))
            target += new * site.radix ** m
        if alive and target in site.states:
            options.append(chosen)
    return options


def project_string(site: Site, n_sites: int, key) -> list:
    """The factor lists ``[[(slot, SlotOperator), ...], ...]`` whose sum is ``P_S O P_S`` of
    the string ``key`` (slot-sorted factors); ``[list(key)]`` for a diagonal string."""
    if all(op.shift == 0 for _, op in key):
        return [list(key)]
    by_site: dict = {}
    for slot, op in key:
        by_site.setdefault(slot % n_sites, {})[slot] = op
    per_site = [_site_options(site, n_sites, index, factors)
                for index, factors in sorted(by_site.items())]
    out = []
    for choice in cartesian(*per_site):
        out.append(sorted((f for option in choice for f in option), key=lambda f: f[0]))
    return out
