"""Local Hilbert spaces and their operators.

A site type describes what lives on one lattice site and how it is stored in the integer
encoding of many-body states.  Every site is made of ``modes`` *slots*; a slot holds one
digit in ``0 .. radix - 1``.  Slot ``site + mode * n_sites`` stores mode ``mode`` of site
``site``, and a many-body state is the integer ``sum_slot digit(slot) * radix**slot``.

Encodings (also written in the README, "Conventions"):

=================  =====  =====  ===================================================
type               modes  radix  digit
=================  =====  =====  ===================================================
spin S             1      2S+1   k, with S^z = S - k (spin-1/2: 0 = up, 1 = down)
spinless fermion   1      2      occupation
electron           2      2      mode 0: n_up, mode 1: n_dn (all up slots first)
boson              1      n+1    occupation, at most ``max_occupation``
=================  =====  =====  ===================================================

Fermionic slots anticommute; the Jordan-Wigner order is the slot order.

Limits (what lowfold can ever represent, checked before anything is allocated):

- A many-body state is one int64, so ``radix**n_slots`` must not exceed ``2**63 - 1``
  (:data:`STATE_LIMIT`): at most 62 spin-1/2 or spinless-fermion sites, 31 electron sites,
  39 spin-1 sites, 31 spin-3/2 sites; in general ``n_slots <= log(2**63 - 1) / log(radix)``.
- A slot holds at most :data:`MAX_RADIX` = 65,536 digits (spin S <= 32767.5, boson
  ``max_occupation`` <= 65,535): local operators are tables with one entry per digit, and
  two such sites already span 2**32 states, beyond any exact solve.

:func:`check_state_space` raises :class:`~lowfold.errors.SizeError` past these limits.

Every local operator is a short sum of *monomials*: a coefficient times a product of
:class:`SlotOperator` factors, each of which maps a digit to at most one digit with a fixed
digit change.  Operators without a fixed change (``Sx``, ``X`` ...) are split into raising
and lowering parts, so that every monomial has definite quantum-number changes and sums such
as ``X X + Y Y`` cancel exactly when monomials are collected.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np

from lowfold.errors import ModelError, SizeError

__all__ = ["SlotOperator", "Site", "make_site", "check_state_space", "SITE_TYPES",
           "STATE_LIMIT", "MAX_RADIX"]

SITE_TYPES = ("spin", "fermion", "electron", "boson")
STATE_LIMIT = 2**63 - 1      # largest int64: radix**n_slots must not exceed it
MAX_RADIX = 2**16            # digits per slot


@dataclass(frozen=True)
class SlotOperator:
    """A single-slot operator ``digit k -> k + shift`` with amplitude ``amplitudes[k]``.

    ``amplitudes[k] == 0`` means the operator annihilates digit ``k``.  ``fermionic`` marks
    an odd operator (``c``, ``c+``) that picks up the Jordan-Wigner sign.
    """

    shift: int
    amplitudes: tuple
    fermionic: bool = False

    def __post_init__(self):
        # amplitudes of digits mapped outside 0 .. radix-1 are meaningless: store them as 0
        radix = len(self.amplitudes)
        cleaned = tuple(complex(a) if 0 <= k + self.shift < radix else 0j
                        for k, a in enumerate(self.amplitudes))
        object.__setattr__(self, "amplitudes", cleaned)

    @property
    def radix(self) -> int:
        return len(self.amplitudes)

    def table(self) -> tuple[np.ndarray, np.ndarray]:
        """Digit map as arrays ``(new_digit, amplitude)``; ``new_digit = -1`` annihilates."""
        amp = np.array(self.amplitudes, dtype=complex)
        new = np.arange(self.radix) + self.shift
        dead = (amp == 0) | (new < 0) | (new >= self.radix)
        new[dead] = -1
        amp[dead] = 0
        return new, amp

    def compose(self, right: "SlotOperator") -> "SlotOperator":
        """The product ``self @ right`` (``right`` acts first)."""
        new_r, amp_r = right.table()
        new_l, amp_l = self.table()
        amplitudes = []
        for digit in range(self.radix):
            mid = new_r[digit]
            ok = mid >= 0 and new_l[mid] >= 0
            amplitudes.append(amp_r[digit] * amp_l[mid] if ok else 0j)
        return SlotOperator(self.shift + right.shift, _clean(amplitudes),
                            self.fermionic != right.fermionic)

    def adjoint(self) -> "SlotOperator":
        new, amp = self.table()
        amplitudes = [0j] * self.radix
        for digit in range(self.radix):
            if new[digit] >= 0:
                amplitudes[new[digit]] = np.conj(amp[digit])
        return SlotOperator(-self.shift, _clean(amplitudes), self.fermionic)

    def is_zero(self) -> bool:
        return not np.any(self.table()[1])


def _clean(values) -> tuple:
    """Amplitudes as a hashable tuple of Python complex numbers."""
    return tuple(complex(v) for v in values)


# A monomial: coefficient and factors [(mode, SlotOperator), ...], leftmost factor first.
Monomial = tuple[complex, tuple[tuple[int, SlotOperator], ...]]


@dataclass(frozen=True)
class Site:
    """One site's local Hilbert space and its named operators.

    Attributes
    ----------
    type : str
        ``"spin"``, ``"fermion"``, ``"electron"`` or ``"boson"``.
    modes, radix : int
        Slots per site and digits per slot (see the module docstring).
    spin : Fraction or None
        S for spin sites.
    max_occupation : int or None
        Cut-off for bosons.
    states : tuple of int or None
        The kept local states (local values, ascending; ``None``: all of them).  A site with
        kept states lives in their span: the basis holds only states whose every site is
        kept, and every term acts as ``P O P`` (:mod:`lowfold.build.kept_states`).
    """

    type: str
    modes: int
    radix: int
    spin: Fraction | None = None
    max_occupation: int | None = None
    states: tuple[int, ...] | None = None

    def __post_init__(self):
        if self.radix < 2:
            raise ModelError(f"a site slot needs at least 2 states, got radix {self.radix}")
        if self.radix > MAX_RADIX:
            raise SizeError(f"a {self.type} site with {self.radix:,} states per slot is outside "
                            f"what lowfold handles (2 to {MAX_RADIX:,} states per slot)")

    @property
    def local_dimension(self) -> int:
        return self.radix ** self.modes

    @property
    def is_fermionic(self) -> bool:
        return self.type in ("fermion", "electron")

    @property
    def has_spin(self) -> bool:
        return self.type in ("spin", "electron")

    @property
    def has_particles(self) -> bool:
        return self.type != "spin"

    @property
    def is_restricted(self) -> bool:
        return self.states is not None

    def local_labels(self) -> tuple[str, ...]:
        """Label of every local value (:mod:`lowfold.model.local_space`)."""
        from lowfold.model.local_space import local_labels
        return local_labels(self)

    def kept_labels(self) -> tuple[str, ...]:
        labels = self.local_labels()
        return tuple(labels[v] for v in (self.states or range(len(labels))))

    def operator_names(self) -> tuple[str, ...]:
        return tuple(_OPERATOR_BUILDERS[self.type](self)) + ("|a><b|",)

    def operator(self, name: str) -> list[Monomial]:
        """The named local operator as a list of monomials; ``ModelError`` if unknown."""
        builders = _OPERATOR_BUILDERS[self.type](self)
        if name in builders:
            return builders[name]()
        from lowfold.model.local_space import x_operator
        if isinstance(name, str) and name.startswith("|"):
            return x_operator(self, name)
        known = ", ".join(self.operator_names())
        raise ModelError(f"unknown operator {name!r} for {self.type} sites (known: {known}; "
                         f"X-operators |a><b| of the local states {' '.join(self.local_labels())})")

    def adjoint_name(self, name: str) -> str:
        """Name of the adjoint operator (``S+`` <-> ``S-``, ``c`` <-> ``c+``, ``|a><b|`` <->
        ``|b><a|``, ...)."""
        pairs = {"S+": "S-", "c": "c+", "b": "b+", "c_up": "c+_up", "c_dn": "c+_dn"}
        pairs.update({v: k for k, v in pairs.items()})
        from lowfold.model.local_space import split_x_name
        parts = split_x_name(name)
        if parts is not None:
            return f"|{parts[1]}><{parts[0]}|"
        return pairs.get(name, name)

    def slot_particles(self, mode: int) -> int:
        """Particles carried by one unit of digit in ``mode`` (0 for spins)."""
        return 0 if self.type == "spin" else 1

    def slot_twice_sz(self, mode: int) -> int:
        """Change of 2 S^z per unit increase of the digit in ``mode``."""
        if self.type == "spin":
            return -2
        if self.type == "electron":
            return 1 if mode == 0 else -1
        return 0


def make_site(type: str, *, spin=None, max_occupation=None, states=None,
              min_occupation=None) -> Site:
    """Build a :class:`Site`; ``states`` (labels of the kept local states) or, for bosons,
    ``min_occupation`` restrict its local space (:mod:`lowfold.model.local_space`).

    Raises
    ------
    ModelError
        Unknown type, an option of another type, a spin that is not a positive multiple of
        1/2, a ``max_occupation`` that is not a positive integer, unknown or repeated kept
        states.
    SizeError
        More than :data:`MAX_RADIX` states per site slot (spin S > 32767.5,
        ``max_occupation`` > 65,535).
    """
    site = _make_full_site(type, spin=spin, max_occupation=max_occupation)
    if min_occupation is not None:
        if site.type != "boson":
            raise ModelError(f"'min_occupation' is only valid for type = \"boson\", not {type!r}")
        if states is not None:
            raise ModelError("give either 'states' or 'min_occupation', not both")
        if (isinstance(min_occupation, bool) or not isinstance(min_occupation, int)
                or not 0 <= min_occupation <= site.max_occupation):
            raise ModelError(f"min_occupation must be an integer from 0 to max_occupation "
                             f"({site.max_occupation}), got {min_occupation!r}")
        states = list(range(min_occupation, site.max_occupation + 1))
    if states is None:
        return site
    from lowfold.model.local_space import kept_values
    kept = kept_values(site, states)
    return site if len(kept) == site.local_dimension else replace(site, states=kept)


def _make_full_site(type: str, *, spin=None, max_occupation=None) -> Site:
    if type == "spin":
        twice = _twice_spin(0.5 if spin is None else spin)
        if twice + 1 > MAX_RADIX:
            raise SizeError(f"spin {spin!r} has {twice + 1:,} states per site, more than the "
                            f"{MAX_RADIX:,} lowfold handles (spin <= {(MAX_RADIX - 1) / 2})")
        return Site("spin", 1, twice + 1, spin=Fraction(twice, 2))
    if spin is not None:
        raise ModelError(f"'spin' is only valid for type = \"spin\", not {type!r}")
    if type == "boson":
        cutoff = _positive_integer(max_occupation)
        if cutoff is None:
            raise ModelError(f"boson sites need max_occupation = a positive integer, "
                             f"got {max_occupation!r}")
        if cutoff + 1 > MAX_RADIX:
            raise SizeError(f"max_occupation = {cutoff:,} gives {cutoff + 1:,} states per site, "
                            f"more than the {MAX_RADIX:,} lowfold handles "
                            f"(max_occupation <= {MAX_RADIX - 1:,})")
        return Site("boson", 1, cutoff + 1, max_occupation=cutoff)
    if max_occupation is not None:
        raise ModelError(f"'max_occupation' is only valid for type = \"boson\", not {type!r}")
    if type == "fermion":
        return Site("fermion", 1, 2)
    if type == "electron":
        return Site("electron", 2, 2)
    raise ModelError(f"unknown site type {type!r} (known: {', '.join(SITE_TYPES)})")


def _twice_spin(spin) -> int:
    """2S as an integer >= 1; ``ModelError`` unless ``spin`` is a positive multiple of 1/2."""
    try:
        twice = Fraction(spin) * 2 if not isinstance(spin, bool) else None
    except (TypeError, ValueError, OverflowError, ZeroDivisionError):
        twice = None
    if twice is None or twice.denominator != 1 or twice < 1:
        raise ModelError(f"spin must be a positive multiple of 1/2, got {spin!r}")
    return int(twice)


def _positive_integer(value) -> int | None:
    """``value`` as an int if it is a whole number >= 1 (an integral float counts)."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, np.integer)):
        return int(value) if value >= 1 else None
    if isinstance(value, (float, np.floating)) and np.isfinite(value) and value == int(value):
        return int(value) if value >= 1 else None
    return None


def check_state_space(site: Site, n_sites: int) -> None:
    """Raise :class:`~lowfold.errors.SizeError` unless every state of ``n_sites`` sites of
    type ``site`` fits in one int64, i.e. ``radix**(modes * n_sites) <= 2**63 - 1``."""
    n_slots = site.modes * n_sites
    if site.radix ** n_slots <= STATE_LIMIT:
        return
    most = 0
    while site.radix ** ((most + 1) * site.modes) <= STATE_LIMIT:
        most += 1
    raise SizeError(f"{n_sites:,} {_describe(site)} sites do not fit: a state is one int64 "
                    f"with one base-{site.radix} digit per slot ({site.modes} per site), so "
                    f"radix**slots must not exceed 2**63 - 1; lowfold handles at most "
                    f"{most} such sites")


def _describe(site: Site) -> str:
    if site.type == "spin":
        return f"spin-{site.spin}"
    if site.type == "boson":
        return f"boson (max_occupation {site.max_occupation})"
    return site.type


# ---------------------------------------------------------------------------------------
# operator tables


def _diag(values) -> SlotOperator:
    return SlotOperator(0, _clean(values))


def _mono(coef, *factors) -> Monomial:
    return (complex(coef), tuple(factors))


def _spin_operators(site: Site) -> dict:
    s = float(site.spin)
    m = s - np.arange(site.radix)          # S^z of each digit
    sz = _diag(m)
    # S+ raises m, i.e. lowers the digit: digit k -> k - 1
    s_plus = SlotOperator(-1, _clean(np.sqrt(np.maximum(s * (s + 1) - m * (m + 1), 0.0))))
    s_minus = SlotOperator(+1, _clean(np.sqrt(np.maximum(s * (s + 1) - m * (m - 1), 0.0))))
    ops = {
        "Sz": lambda: [_mono(1, (0, sz))],
        "S+": lambda: [_mono(1, (0, s_plus))],
        "S-": lambda: [_mono(1, (0, s_minus))],
        "Sx": lambda: [_mono(0.5, (0, s_plus)), _mono(0.5, (0, s_minus))],
        "Sy": lambda: [_mono(-0.5j, (0, s_plus)), _mono(0.5j, (0, s_minus))],
    }
    if site.radix == 2:
        ops.update({
            "X": lambda: [_mono(1, (0, s_plus)), _mono(1, (0, s_minus))],
            "Y": lambda: [_mono(-1j, (0, s_plus)), _mono(1j, (0, s_minus))],
            "Z": lambda: [_mono(2, (0, sz))],
        })
    return ops


_NUMBER = _diag([0, 1])
_ANNIHILATE = SlotOperator(-1, (0j, 1 + 0j), fermionic=True)
_CREATE = SlotOperator(+1, (1 + 0j, 0j), fermionic=True)


def _fermion_operators(site: Site) -> dict:
    return {
        "n": lambda: [_mono(1, (0, _NUMBER))],
        "c": lambda: [_mono(1, (0, _ANNIHILATE))],
        "c+": lambda: [_mono(1, (0, _CREATE))],
    }


def _electron_operators(site: Site) -> dict:
    up, dn = 0, 1
    return {
        "n_up": lambda: [_mono(1, (up, _NUMBER))],
        "n_dn": lambda: [_mono(1, (dn, _NUMBER))],
        "c_up": lambda: [_mono(1, (up, _ANNIHILATE))],
        "c_dn": lambda: [_mono(1, (dn, _ANNIHILATE))],
        "c+_up": lambda: [_mono(1, (up, _CREATE))],
        "c+_dn": lambda: [_mono(1, (dn, _CREATE))],
        # spin and density of the electron (extensions used by the term types)
        "n": lambda: [_mono(1, (up, _NUMBER)), _mono(1, (dn, _NUMBER))],
        "Sz": lambda: [_mono(0.5, (up, _NUMBER)), _mono(-0.5, (dn, _NUMBER))],
        "S+": lambda: [_mono(1, (up, _CREATE), (dn, _ANNIHILATE))],
        "S-": lambda: [_mono(1, (dn, _CREATE), (up, _ANNIHILATE))],
        "Sx": lambda: [_mono(0.5, (up, _CREATE), (dn, _ANNIHILATE)),
                       _mono(0.5, (dn, _CREATE), (up, _ANNIHILATE))],
        "Sy": lambda: [_mono(-0.5j, (up, _CREATE), (dn, _ANNIHILATE)),
                       _mono(0.5j, (dn, _CREATE), (up, _ANNIHILATE))],
    }


def _boson_operators(site: Site) -> dict:
    occupation = np.arange(site.radix)
    lower = SlotOperator(-1, _clean(np.sqrt(occupation)))
    raise_ = SlotOperator(+1, _clean(np.sqrt(occupation + 1.0)))
    return {
        "n": lambda: [_mono(1, (0, _diag(occupation)))],
        "b": lambda: [_mono(1, (0, lower))],
        "b+": lambda: [_mono(1, (0, raise_))],
    }


_OPERATOR_BUILDERS = {
    "spin": _spin_operators,
    "fermion": _fermion_operators,
    "electron": _electron_operators,
    "boson": _boson_operators,
}
