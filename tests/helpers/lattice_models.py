"""Model files of infinite lattices (text), shared by the linked-cluster tests.

- :func:`hubbard_text`: the half-filled Hubbard model, H0 = U n_up n_dn + mu n with
  mu = -U/2 (the one-site potential selects one electron per site, as
  ``lowfold.jobs.lattice`` documents), V the nearest-neighbour hopping t.
- :func:`tj_text`: the Hubbard model with H0 = U n_up n_dn alone and ``filling = "mixed"``:
  the manifold {0, u, d} on every site, the t-J model at any filling.
- :func:`ising_chain_text`: the transverse-field Ising chain H = -sum sigma^z
  - g sum sigma^x sigma^x at g = 1 (S = sigma/2, so the strengths are -2 and -4); H0 the field.
"""

from __future__ import annotations

import tomllib

T, U = 1.0, 10.0


def hubbard_text(shape: str = "chain", *, boundary: str = "infinite", size=None,
                 order: int = 4, extra: str = "", t: float = T, u: float = U) -> str:
    """Model file of the Hubbard model with the chemical potential -U/2 in H0."""
    lattice = f'shape = "{shape}"\nboundary = "{boundary}"\n' + (f"size = {size}\n" if size else "")
    return f"""
[lattice]
{lattice}
[site]
type = "electron"
[parameters]
t = {t}
U = {u}
mu = {-u / 2}
[[term]]
label = "hop"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
[[term]]
label = "mu"
type = "potential"
strength = "mu"
{extra}
[perturbation]
unperturbed = ["U", "mu"]
order = {order}
"""


def tj_text(shape: str = "chain", *, boundary: str = "infinite", size=None, order: int = 2,
            t: float = T, u: float = U) -> str:
    """Model file of the Hubbard model read out on {0, u, d} per site (module docstring)."""
    lattice = f'shape = "{shape}"\nboundary = "{boundary}"\n' + (f"size = {size}\n" if size else "")
    return f"""
[lattice]
{lattice}
[site]
type = "electron"
[parameters]
t = {t}
U = {u}
[[term]]
label = "hop"
type = "hopping"
strength = "t"
bonds = "nearest"
[[term]]
label = "U"
type = "hubbard"
strength = "U"
[perturbation]
unperturbed = ["U"]
order = {order}
filling = "mixed"
"""


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
