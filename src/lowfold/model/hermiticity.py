"""Hermiticity of a model, decided from its terms before any basis is built.

Every term type but ``product`` is Hermitian by construction when its strength is real
(``exchange`` carries both ``S+ S-`` orders); ``hopping`` carries its own Hermitian conjugate,
so it is Hermitian for a complex strength too (``-s c+_i c_j - conj(s) c+_j c_i``, with its
phases and spin-orbit part, :mod:`lowfold.model.hopping`).  A ``product``
term is Hermitian with ``conjugate = true``; without it, it must be self-adjoint or find its
Hermitian partner among the other product terms.  :func:`check_hermitian_terms` groups the
products of those terms by the set of sites they touch (a product and its adjoint touch the
same sites) and checks each group:

1. formally: each product is put in a normal form (factors sorted by site, each fermionic
   swap of two sites giving a sign, factors on one site kept in their order), and the sum of
   the normal forms must equal the sum of their adjoints;
2. if the formal test fails (operator identities such as ``n Sz = Sz n`` are invisible to
   it), exactly: as a matrix on the group's slots alone, with the Jordan-Wigner order of
   the slots restricted to the group -- a faithful representation of the operators the
   group's modes generate, so Hermitian there if and only if Hermitian on the full space.

A group whose space has more than :data:`MAX_GROUP_DIMENSION` states is left undecided
(possible only at large local dimensions); the build layer checks the assembled matrix.
"""

from __future__ import annotations

from functools import reduce

import numpy as np

from lowfold.errors import ModelError

__all__ = ["check_hermitian_terms", "MAX_GROUP_DIMENSION"]

MAX_GROUP_DIMENSION = 4096
_RTOL = 1e-10


def check_hermitian_terms(model) -> None:
    """Raise ``ModelError`` (``term 'label' is not Hermitian; ...``) unless the terms of
    ``model`` sum to a Hermitian operator, as far as the terms decide it (see the module
    docstring)."""
    for term in model.terms:
        if term.type not in ("product", "hopping", "string") and complex(model.strength(term)).imag != 0:
            raise ModelError(f"term {term.label!r}: a {term.type} term needs a real strength "
                             f"(it is Hermitian only then), got {model.strength(term)!r}; "
                             "complex strengths belong to hopping, product and string terms")
    loose = [t for t in model.terms if t.type in ("product", "string") and not t.conjugate]
    if not loose:
        return
    groups: dict = {}
    for label, products in model.products([t.label for t in loose]):
        for coefficient, factors in products:
            sites = frozenset(site for _, site in factors)
            groups.setdefault(sites, []).append((label, complex(coefficient), factors))
    site = model.site
    names = {name for entries in groups.values() for _, _, factors in entries for name, _ in factors}
    parity = {n: _is_odd(site, n) for n in names | {site.adjoint_name(n) for n in names}}
    for sites, entries in groups.items():
        if _formally_hermitian(site, parity, entries):
            continue
        verdict = _matrix_hermitian(model, sorted(sites), entries)
        if verdict is False:
            where = ", ".join(str(s) for s in sorted(sites))
            raise ModelError(f"term {entries[0][0]!r} is not Hermitian (on site{'s' * (len(sites) > 1)} "
                             f"{where}); add conjugate = true or its Hermitian partner")


def _is_odd(site, name: str) -> bool:
    """Whether the named local operator is fermionic (odd): each of its monomials has the
    same parity, an odd number of fermionic slot factors."""
    coefficient, factors = site.operator(name)[0]
    return sum(op.fermionic for _, op in factors) % 2 == 1


def _normal_form(coefficient: complex, factors, parity) -> tuple[complex, tuple]:
    """Factors stably sorted by site, with the sign of the fermionic swaps; the key groups
    the operator names of each site in their order."""
    items = list(factors)
    sign = 1
    for i in range(1, len(items)):           # insertion sort counts the odd-odd swaps
        j = i
        while j > 0 and items[j - 1][1] > items[j][1]:
            if parity[items[j - 1][0]] and parity[items[j][0]]:
                sign = -sign
            items[j - 1], items[j] = items[j], items[j - 1]
            j -= 1
    key = []
    for name, site in items:
        if key and key[-1][0] == site:
            key[-1] = (site, key[-1][1] + (name,))
        else:
            key.append((site, (name,)))
    return sign * coefficient, tuple(key)


def _formally_hermitian(site, parity, entries) -> bool:
    forward: dict = {}
    backward: dict = {}
    for _, coefficient, factors in entries:
        c, key = _normal_form(coefficient, factors, parity)
        forward[key] = forward.get(key, 0) + c
        adjoint = tuple((site.adjoint_name(name), s) for name, s in reversed(factors))
        c, key = _normal_form(coefficient.conjugate(), adjoint, parity)
        backward[key] = backward.get(key, 0) + c
    scale = max((abs(c) for c in forward.values()), default=0.0)
    return all(abs(forward.get(k, 0) - backward.get(k, 0)) <= _RTOL * scale
               for k in set(forward) | set(backward))


def _matrix_hermitian(model, sites: list[int], entries) -> bool | None:
    """Hermiticity of the group's sum as a matrix on its own slots; ``None`` if too big."""
    site, n = model.site, model.n_sites
    slots = sorted(s + mode * n for s in sites for mode in range(site.modes))
    if site.radix ** len(slots) > MAX_GROUP_DIMENSION:
        return None
    position = {slot: p for p, slot in enumerate(slots)}
    named: dict = {}

    def local(name: str, s: int) -> np.ndarray:
        if (name, s) not in named:
            named[name, s] = sum(coefficient * reduce(np.matmul, [
                _slot_matrix(op, position[s + mode * n], len(slots), site.radix)
                for mode, op in factors]) for coefficient, factors in site.operator(name))
        return named[name, s]

    total = sum(coefficient * reduce(np.matmul, [local(name, s) for name, s in factors])
                for _, coefficient, factors in entries)
    scale = np.abs(total).max()
    return bool(np.abs(total - total.conj().T).max() <= _RTOL * max(scale, 1e-300))


def _slot_matrix(op, position: int, n_slots: int, radix: int) -> np.ndarray:
    """One slot operator on ``n_slots`` slots (slot ``position``; Jordan-Wigner parity on
    the slots before it when the operator is fermionic)."""
    new, amplitude = op.table()
    digits = np.arange(radix)
    single = np.zeros((radix, radix), dtype=complex)
    alive = new >= 0
    single[new[alive], digits[alive]] = amplitude[alive]
    parity = np.diag((-1.0) ** digits)
    factors = [single if p == position else (parity if op.fermionic and p < position
                                             else np.eye(radix)) for p in range(n_slots)]
    return reduce(np.kron, reversed(factors))
