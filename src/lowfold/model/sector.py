"""Sectors: the conserved totals (particle number, S^z) that select part of a model's space.

A :class:`Sector` is part of the model; the basis layer (``lowfold.build.basis``) enumerates
its states.  :func:`sector_totals` turns a sector into digit-sum constraints per species and
refuses sectors that cannot exist.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from lowfold.errors import ModelError
from lowfold.model.sites import Site

__all__ = ["Sector", "sector_totals"]


@dataclass(frozen=True)
class Sector:
    """Conserved quantities: total particle number and total S^z (``None`` = not fixed).

    Spins take ``sz``; spinless fermions and bosons take ``particles``; electrons take
    either or both (``sz`` alone: every particle number, ``N_up - N_dn = 2 sz``).
    """

    particles: int | None = None
    sz: Fraction | None = None

    @property
    def is_full(self) -> bool:
        return self.particles is None and self.sz is None



def sector_totals(site: Site, n_sites: int, sector: Sector) -> list[tuple[int, int]] | None:
    """Digit-sum constraints of a sector as ``[(n_slots, total), ...]`` per species, or
    ``None`` for the full space, or ``"sz-only"`` for electrons with fixed S^z and free
    particle number (a union of two-species blocks).  Raises ``ModelError`` for a sector
    that cannot exist."""
    particles, sz = sector.particles, sector.sz
    if sector.is_full:
        return None
    if site.type == "spin":
        if particles is not None:
            raise ModelError("sector.particles is not defined for spin sites (use sz)")
        total = n_sites * site.spin - sz               # sum of digits k = S - m
        if Fraction(sz) * 2 % 1 != 0 or total.denominator != 1:
            raise ModelError(f"sector.sz = {sz} is impossible for {n_sites} spin-{site.spin} "
                             "sites (S^z must be integer or half-integer like N*S)")
        if not 0 <= total <= 2 * n_sites * site.spin:
            raise ModelError(f"sector.sz = {sz} is out of range for {n_sites} spin-{site.spin} "
                             f"sites (|S^z| <= {n_sites * site.spin})")
        return [(n_sites, int(total))]
    if site.type in ("fermion", "boson"):
        if sz is not None:
            raise ModelError(f"sector.sz is not defined for {site.type} sites")
        capacity = n_sites * (site.radix - 1)
        if not 0 <= particles <= capacity:
            raise ModelError(f"sector.particles = {particles} is impossible: {n_sites} "
                             f"{site.type} sites hold 0 to {capacity} particles")
        return [(n_sites, particles)]
    # electrons
    if particles is not None and not 0 <= particles <= 2 * n_sites:
        raise ModelError(f"sector.particles = {particles} is impossible: {n_sites} electron "
                         f"sites hold 0 to {2 * n_sites} particles")
    if sz is None:
        return [(2 * n_sites, particles)]
    if particles is None:
        twice = Fraction(sz) * 2
        if twice.denominator != 1 or abs(twice) > n_sites:
            raise ModelError(f"sector.sz = {sz} is impossible for {n_sites} electron sites")
        return "sz-only"
    n_up = Fraction(particles, 2) + Fraction(sz)
    n_dn = Fraction(particles, 2) - Fraction(sz)
    if n_up.denominator != 1 or not (0 <= n_up <= n_sites and 0 <= n_dn <= n_sites):
        raise ModelError(f"sector.sz = {sz} is impossible with {particles} electrons on "
                         f"{n_sites} sites")
    return [(n_sites, int(n_up)), (n_sites, int(n_dn))]
