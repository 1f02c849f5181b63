"""Term types of projected local operators: the local readout kinds as model-file terms.

The local-operator readout of ``lowfold derive`` (:mod:`lowfold.readout.local_names`) names
couplings of a manifold of kept local states; with ``[site] states`` the model file can keep
the same states (:mod:`lowfold.model.local_space`), and these types write the kinds that no
other type covers.  With ``s`` the strength (products act as ``P O P`` on kept states):

- ``three-site`` (electrons): ``-s sum_(i,j,k) sum_sigma (c+_(i sigma) n_(j,-sigma)
  c_(k sigma) - c+_(i sigma) c+_(j,-sigma) c_(j sigma) c_(k,-sigma) + h.c.)`` on groups
  ``(i, j, k)``, j the middle site: the correlated hopping of the t-J model with the sign of
  the readout's ``three-site`` kind.  Default: every path i - j - k of nearest bonds
  (``i < k``), each once;
- ``biquadratic`` (spins): ``s sum_bonds (S_i . S_j)^2``;
- ``single-ion`` (spins): ``s sum_sites (S^z_i)^2``;
- ``string`` (all): ``s sum_groups O_1 O_2 ...`` with ``operators`` one local operator
  name per site of each group (X-operators ``|a><b|`` above all), in the group's order;
  ``conjugate = true`` adds the Hermitian conjugate.

Selectors as for the multi-spin types (:func:`lowfold.model.spin_terms.term_groups`):
``bonds``, ``sites`` (groups) or a translated ``pattern``.
"""

from __future__ import annotations

from lowfold.errors import ModelError
from lowfold.model.spin_terms import term_groups

__all__ = ["LOCAL_TERM_TYPES", "LOCAL_EXPANDERS", "paths"]

LOCAL_TERM_TYPES = ("three-site", "biquadratic", "single-ion", "string")
_SIGMA = {"up": "dn", "dn": "up"}


def _require(site, allowed, term) -> None:
    if site.type not in allowed:
        raise ModelError(f"term {term.label!r}: type {term.type!r} is defined for "
                         f"{' and '.join(allowed)} sites, not {site.type}")


def paths(lattice) -> list[tuple[int, int, int]]:
    """Every path ``(i, j, k)`` of two nearest bonds, ``i < k``, ordered by middle site."""
    neighbours: dict = {}
    for a, b in lattice.bonds("nearest"):
        neighbours.setdefault(int(a), set()).add(int(b))
        neighbours.setdefault(int(b), set()).add(int(a))
    out = []
    for j in sorted(neighbours):
        ends = sorted(neighbours[j])
        out += [(i, j, k) for n, i in enumerate(ends) for k in ends[n + 1:]]
    return out


def _adjoint(site, coefficient, factors):
    return (complex(coefficient).conjugate(),
            tuple((site.adjoint_name(name), s) for name, s in reversed(factors)))


def _three_site(term, s, lattice, site):
    _require(site, ("electron",), term)
    given = any(getattr(term, k) is not None for k in ("bonds", "sites", "pattern"))
    groups = term_groups(term, lattice, 3) if given else paths(lattice)
    out = []
    for group in groups:
        if len(set(group)) != 3:
            raise ModelError(f"term {term.label!r}: a three-site group needs three different "
                             f"sites, got {list(group)}")
        i, j, k = group
        for sigma, other in _SIGMA.items():
            hop = (-s, ((f"c+_{sigma}", i), (f"n_{other}", j), (f"c_{sigma}", k)))
            flip = (s, ((f"c+_{sigma}", i), (f"c+_{other}", j), (f"c_{sigma}", j),
                        (f"c_{other}", k)))
            out += [hop, _adjoint(site, *hop), flip, _adjoint(site, *flip)]
    return out


def _dot(i, j):
    return [(1.0, (("Sz", i), ("Sz", j))), (0.5, (("S+", i), ("S-", j))),
            (0.5, (("S-", i), ("S+", j)))]


def _biquadratic(term, s, lattice, site):
    _require(site, ("spin",), term)
    out = []
    for i, j in term_groups(term, lattice, 2):
        out += [(s * c1 * c2, f1 + f2) for c1, f1 in _dot(i, j) for c2, f2 in _dot(i, j)]
    return out


def _single_ion(term, s, lattice, site):
    _require(site, ("spin",), term)
    return [(s, (("Sz", i), ("Sz", i))) for (i,) in term_groups(term, lattice, 1)]


def _string(term, s, lattice, site):
    operators = term.operators or ()
    if not operators:
        raise ModelError(f"term {term.label!r}: string needs a non-empty 'operators' list, "
                         "e.g. [\"|u><0|\", \"|0><u|\"]")
    for name in operators:
        site.operator(name)                      # raises ModelError for unknown names
    out = []
    for group in term_groups(term, lattice, len(operators)):
        if len(set(group)) != len(group):
            raise ModelError(f"term {term.label!r}: a string names each site once, got "
                             f"{list(group)}")
        product = (s, tuple(zip(operators, group)))
        out.append(product)
        if term.conjugate:
            out.append(_adjoint(site, *product))
    return out


LOCAL_EXPANDERS = {"three-site": _three_site, "biquadratic": _biquadratic,
                   "single-ion": _single_ion, "string": _string}
