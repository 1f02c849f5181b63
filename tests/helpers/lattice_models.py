"""Model files of infinite lattices (text), shared by the linked-cluster tests.

- :func:`hubbard_text`: the half-filled Hubbard model, H0 = U n_up n_dn + mu n with
  mu = -U/2 (the one-site potential selects one electron per site, as
  ``lowfold.jobs.lattice`` documents), V the nearest-neighbour hopping t.
- :func:`tj_text`: the Hubbard model with H0 = U n_up n_dn alone and ``filling = "mixed"``:
  the manifold {0, u, d} on every site, the t-J model at any filling.
- :func:`boson_text`: the Bose-Hubbard chain, H0 = (U/2) n (n - 1) + mu n with mu = -U
  (the lowest one-site levels: 1 and 2 bosons, as ``filling = "mixed"`` keeps them both),
  V the hopping t, occupations up to ``max_occupation``.
- :func:`ising_chain_text`: the transverse-field Ising chain H = -sum sigma^z
  - g sum sigma^x sigma^x at g = 1 (S = sigma/2, so the strengths are -2 and -4); H0 the field.
"""

from __future__ import annotations

import tomllib

T, U = 1.0, 10.0


def _hubbard_family(shape, boundary, size, site, t, u, mu, order, extra="",
                    filling=None) -> str:
    """A Hubbard-type model file: V the nearest-neighbour hopping t, H0 the on-site U (and
    the potential mu when given), ``filling`` written in [perturbation] when given."""
    lattice = f'shape = "{shape}"\nboundary = "{boundary}"\n' + (f"size = {size}\n" if size else "")
    potential = "" if mu is None else """[[term]]
label = "mu"
type = "potential"
strength = "mu"
"""
    return f"""
[lattice]
{lattice}
[site]
{site}
[parameters]
t = {t}
U = {u}
{"" if mu is None else f"mu = {mu}"}
[[term]]
label = "hop"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
{potential}{extra}
[perturbation]
unperturbed = {'["U"]' if mu is None else '["U", "mu"]'}
order = {order}
{"" if filling is None else f'filling = "{filling}"'}
"""


def hubbard_text(shape: str = "chain", *, boundary: str = "infinite", size=None,
                 order: int = 4, extra: str = "", t: float = T, u: float = U) -> str:
    """Model file of the Hubbard model with the chemical potential -U/2 in H0."""
    return _hubbard_family(shape, boundary, size, 'type = "electron"', t, u, -u / 2, order,
                           extra)


def tj_text(shape: str = "chain", *, boundary: str = "infinite", size=None, order: int = 2,
            t: float = T, u: float = U) -> str:
    """Model file of the Hubbard model read out on {0, u, d} per site (module docstring)."""
    return _hubbard_family(shape, boundary, size, 'type = "electron"', t, u, None, order,
                           filling="mixed")


def boson_text(t: float, order: int, max_occupation: int = 3, u: float = 1.0) -> str:
    """Model file of the Bose-Hubbard chain (module docstring)."""
    site = f'type = "boson"\nmax_occupation = {max_occupation}'
    return _hubbard_family("chain", "infinite", None, site, t, u, -u, order, filling="mixed")


def ising_chain_text(order: int) -> str:
    """Model file of the infinite transverse-field Ising chain at g = 1 (module docstring)."""
    return f"""
[lattice]
shape = "chain"
boundary = "infinite"
[site]
type = "spin"
[[term]]
label = "field"
type = "field"
axis = "z"
strength = -2.0
[[term]]
label = "zz"
type = "product"
operators = ["Sx", "Sx"]
bonds = "nearest"
strength = -4.0
[perturbation]
unperturbed = ["field"]
order = {order}
"""


def parse(text: str):
    """The :class:`lowfold.Model` of a model-file text."""
    import lowfold
    return lowfold.parse_model(tomllib.loads(text))
