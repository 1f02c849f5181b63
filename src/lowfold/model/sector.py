"""Sectors: the conserved totals (particle number, S^z) that select part of a model's space.

A :class:`Sector` is part of the model (:meth:`Sector.from_filling` makes one from
particles per site, as scan files do); the basis layer (``lowfold.build.basis``) enumerates
its states.  :func:`sector_totals` turns a sector into digit-sum constraints per species and
refuses sectors that cannot exist.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from fractions import Fraction

from lowfold.errors import ModelError
from lowfold.model.sites import Site

__all__ = ["Sector", "sector_totals", "sz_breaking_terms", "sz_note", "check_sector_symmetry"]


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

    @classmethod
    def from_filling(cls, filling, n_sites: int, *, sz=None) -> "Sector":
        """The sector with ``filling`` particles per site on ``n_sites`` sites (what a scan
        file's ``filling`` means), and optionally a fixed total ``sz``.

        ``filling * n_sites`` must be a whole number: exactly for integers and fractions,
        within 1e-9 for floats (0.1 * 10 is taken as 1).

        Examples
        --------
        >>> Sector.from_filling(1, 6)
        Sector(particles=6, sz=None)
        >>> Sector.from_filling(Fraction(2, 3), 6, sz=0)
        Sector(particles=4, sz=Fraction(0, 1))

        Raises
        ------
        ModelError
            A filling that is negative, not a finite number, or gives a fractional number
            of particles; a bad ``n_sites`` or ``sz``.
        """
        if isinstance(n_sites, bool) or not isinstance(n_sites, numbers.Integral) or n_sites < 1:
            raise ModelError(f"the number of sites must be an integer >= 1, got {n_sites!r}")
        if (isinstance(filling, bool) or not isinstance(filling, numbers.Real)
                or not math.isfinite(filling) or filling < 0):
            raise ModelError(f"filling must be a finite number >= 0, got {filling!r}")
        if isinstance(filling, numbers.Rational):
            count = Fraction(filling) * int(n_sites)
            whole = count.denominator == 1
        else:
            count = float(filling) * int(n_sites)
            whole = abs(count - round(count)) <= 1e-9
        if not whole:
            raise ModelError(f"filling {float(filling):g} on {n_sites} sites gives "
                             f"{float(count):g} particles, not an integer")
        return cls(int(round(count)), None if sz is None else _half_integer(sz))


def _half_integer(sz) -> Fraction:
    """``sz`` as a Fraction; ``ModelError`` unless it is a multiple of 1/2."""
    try:
        value = Fraction(sz) if not isinstance(sz, bool) else None
    except (TypeError, ValueError, OverflowError):
        value = None
    if value is None or (2 * value).denominator != 1:
        raise ModelError(f"sz must be a multiple of 1/2, got {sz!r}")
    return value



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


def sz_breaking_terms(model) -> list[str]:
    """Labels of the hopping terms whose spin-orbit part ``i lambda . sigma`` has ``lambda``
    not along z: they do not conserve the total S^z (:mod:`lowfold.model.hopping`)."""
    from lowfold.model.hopping import breaks_sz
    return [t.label for t in model.terms if breaks_sz(t, model.parameters)]


def sz_note(model) -> str | None:
    """The warning that S^z is not conserved (and so not used to split levels or manifold
    blocks), or ``None`` when no term breaks it by construction."""
    labels = sz_breaking_terms(model)
    if not labels:
        return None
    return (f"S^z is not conserved: the spin-orbit hopping of {', '.join(map(repr, labels))} "
            "has lambda not along z, so the sector's S^z part is dropped and levels are not "
            "split by S^z")


def check_sector_symmetry(model) -> None:
    """``ModelError`` when the sector fixes S^z but a spin-orbit hopping breaks it."""
    if model.sector.sz is None:
        return
    labels = sz_breaking_terms(model)
    if labels:
        raise ModelError(f"sector.sz: {model.term_key(labels[0])} has spin-orbit hopping with "
                         "lambda not along z, which does not conserve S^z; remove sz from "
                         "[sector] (or put soc along z)")
