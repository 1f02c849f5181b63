"""Slow, obviously correct reference builders for the foundation checks.

Nothing here imports lowfold.  Three independent routes to a Hamiltonian:

* :func:`dense_hamiltonian` -- Kronecker products of local operator matrices, with the
  Jordan-Wigner strings written out explicitly, for a plain operator description
  ``terms = [(coef, [(opname, site), ...]), ...]`` meaning ``sum coef * O_1 O_2 ...``
  (ordinary operator product, the rightmost factor acts first).
* :func:`expand_term` -- the term types of the design (hopping, hubbard, interaction,
  potential, exchange, field, product) written out from their defining formulas into that
  description, from explicit bond and site lists.
* ``quspin_*`` -- the same Hamiltonians built with QuSpin (a general-purpose exact
  diagonalisation library: P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017)).

Full-space index convention (equal to lowfold's integer state):

* spin-S: site i holds digit k_i in 0..2S at radix d = 2S+1, index = sum k_i d**i, and
  digit k means S^z = S - k (spin-1/2: digit 0 = up = Pauli Z +1);
* spinless fermion: bit i = n_i, Jordan-Wigner order = site order;
* electron: bit i = n_{i,up}, bit N+i = n_{i,dn}; Jordan-Wigner order = bit order;
* boson: digit n_i in 0..max_occupation at radix max_occupation+1.

With ``np.kron`` the *left* factor is the most significant digit, so a full-space operator
is ``kron(A_{M-1}, ..., A_1, A_0)`` over the M local factors (sites or fermion modes).
"""

from __future__ import annotations

import math
from fractions import Fraction
from functools import lru_cache

import numpy as np
import scipy.sparse as sp

SPIN_NAMES = ("Sx", "Sy", "Sz", "S+", "S-")
PAULI_NAMES = ("X", "Y", "Z")
FERMION_NAMES = ("n", "c", "c+")
ELECTRON_NAMES = ("n_up", "n_dn", "c_up", "c_dn", "c+_up", "c+_dn")
BOSON_NAMES = ("b", "b+", "n")

ADJOINT = {
    "Sx": "Sx", "Sy": "Sy", "Sz": "Sz", "S+": "S-", "S-": "S+",
    "X": "X", "Y": "Y", "Z": "Z",
    "n": "n", "c": "c+", "c+": "c",
    "n_up": "n_up", "n_dn": "n_dn",
    "c_up": "c+_up", "c+_up": "c_up", "c_dn": "c+_dn", "c+_dn": "c_dn",
    "b": "b+", "b+": "b",
}


# --------------------------------------------------------------------------------------
# local matrices
# --------------------------------------------------------------------------------------

def spin_matrices(spin):
    """Return ``{name: matrix}`` for a spin ``spin`` in the digit basis k = S - m.

    Standard angular-momentum matrices (common practice):
    ``S^z |m> = m |m>``, ``S^+ |m> = sqrt(S(S+1) - m(m+1)) |m+1>``,
    ``Sx = (S+ + S-)/2``, ``Sy = (S+ - S-)/(2i)``.
    """
    two_s = int(round(2 * spin))
    d = two_s + 1
    m = np.array([spin - k for k in range(d)])          # m of digit k
    sz = np.diag(m).astype(complex)
    splus = np.zeros((d, d), dtype=complex)
    for k in range(1, d):                               # |m_k> -> |m_k + 1> = digit k - 1
        mk = m[k]
        splus[k - 1, k] = math.sqrt(spin * (spin + 1) - mk * (mk + 1))
    sminus = splus.conj().T
    mats = {
        "Sz": sz,
        "S+": splus,
        "S-": sminus,
        "Sx": (splus + sminus) / 2,
        "Sy": (splus - sminus) / 2j,
    }
    if two_s == 1:
        mats.update({"X": 2 * mats["Sx"], "Y": 2 * mats["Sy"], "Z": 2 * mats["Sz"]})
    return mats


def boson_matrices(max_occupation):
    """Return ``{b, b+, n}`` truncated to occupations 0..max_occupation."""
    d = max_occupation + 1
    b = np.zeros((d, d), dtype=complex)
    for n in range(1, d):
        b[n - 1, n] = math.sqrt(n)                      # b |n> = sqrt(n) |n-1>
    return {"b": b, "b+": b.conj().T, "n": np.diag(np.arange(d)).astype(complex)}


# one fermion mode in the basis (|0>, |1>)
_A = np.array([[0, 1], [0, 0]], dtype=complex)          # a |1> = |0>
_PARITY = np.diag([1.0, -1.0]).astype(complex)          # (-1)^n
_ID2 = np.eye(2, dtype=complex)


def _embed(factors):
    """Kronecker product of local factors listed from factor 0 (least significant) up."""
    out = sp.identity(1, dtype=complex, format="csr")
    for f in factors:                                   # new factor is more significant
        out = sp.kron(sp.csr_matrix(f), out, format="csr")
    return out


def _mode_annihilator(mode, n_modes):
    """Jordan-Wigner annihilator ``c_mode = (prod_{l < mode} (-1)^{n_l}) a_mode``."""
    factors = []
    for l in range(n_modes):
        if l < mode:
            factors.append(_PARITY)
        elif l == mode:
            factors.append(_A)
        else:
            factors.append(_ID2)
    return _embed(factors)


# --------------------------------------------------------------------------------------
# full-space operators
# --------------------------------------------------------------------------------------

def local_dimension(site_type, *, spin=0.5, max_occupation=None):
    if site_type == "spin":
        return int(round(2 * spin)) + 1
    if site_type == "fermion":
        return 2
    if site_type == "electron":
        return 4
    if site_type == "boson":
        return max_occupation + 1
    raise ValueError(site_type)


def full_dimension(site_type, n_sites, *, spin=0.5, max_occupation=None):
    return local_dimension(site_type, spin=spin, max_occupation=max_occupation) ** n_sites


def site_operator(site_type, n_sites, name, site, *, spin=0.5, max_occupation=None):
    """Full-space sparse matrix of the local operator ``name`` on ``site``.

    Fermionic operators carry their Jordan-Wigner string.  For electrons the spin
    operators ``Sz S+ S- Sx Sy`` and ``n = n_up + n_dn`` are also provided, built from
    the mode operators (``S+ = c+_up c_dn``, ``Sz = (n_up - n_dn)/2``).  The result is
    cached: do not modify it.
    """
    if not 0 <= site < n_sites:
        raise ValueError(f"site {site} outside 0..{n_sites - 1}")
    return _site_operator(site_type, n_sites, name, site, float(spin), max_occupation)


@lru_cache(maxsize=4096)
def _site_operator(site_type, n_sites, name, site, spin, max_occupation):
    if site_type in ("spin", "boson"):
        if site_type == "spin":
            mats = spin_matrices(spin)
        else:
            mats = boson_matrices(max_occupation)
        if name not in mats:
            raise ValueError(f"{name!r} is not an operator of site type {site_type}")
        d = mats[name].shape[0]
        factors = [mats[name] if l == site else np.eye(d) for l in range(n_sites)]
        return _embed(factors)
    if site_type == "fermion":
        if name == "c":
            return _mode_annihilator(site, n_sites)
        c = _site_operator(site_type, n_sites, "c", site, spin, max_occupation)
        if name == "c+":
            return c.conj().T.tocsr()
        if name == "n":
            return (c.conj().T @ c).tocsr()
        raise ValueError(f"{name!r} is not an operator of site type fermion")
    if site_type == "electron":

        def op(other):
            return _site_operator(site_type, n_sites, other, site, spin, max_occupation)

        if name == "c_up":
            return _mode_annihilator(site, 2 * n_sites)
        if name == "c_dn":
            return _mode_annihilator(n_sites + site, 2 * n_sites)
        composite = {
            "c+_up": lambda: op("c_up").conj().T,
            "c+_dn": lambda: op("c_dn").conj().T,
            "n_up": lambda: op("c+_up") @ op("c_up"),
            "n_dn": lambda: op("c+_dn") @ op("c_dn"),
            "n": lambda: op("n_up") + op("n_dn"),
            "S+": lambda: op("c+_up") @ op("c_dn"),
            "S-": lambda: op("c+_dn") @ op("c_up"),
            "Sz": lambda: (op("n_up") - op("n_dn")) / 2,
            "Sx": lambda: (op("S+") + op("S-")) / 2,
            "Sy": lambda: (op("S+") - op("S-")) / 2j,
        }
        if name not in composite:
            raise ValueError(f"{name!r} is not an operator of site type electron")
        return sp.csr_matrix(composite[name]())
    raise ValueError(site_type)


def sparse_hamiltonian(site_type, n_sites, terms, *, spin=0.5, max_occupation=None):
    """``sum coef * O_1 @ O_2 @ ...`` over ``terms`` as a sparse full-space matrix."""
    dim = full_dimension(site_type, n_sites, spin=spin, max_occupation=max_occupation)
    cache = {}

    def op(name, site):
        key = (name, site)
        if key not in cache:
            cache[key] = site_operator(site_type, n_sites, name, site, spin=spin,
                                       max_occupation=max_occupation)
        return cache[key]

    h = sp.csr_matrix((dim, dim), dtype=complex)
    for coef, factors in terms:
        prod = sp.identity(dim, dtype=complex, format="csr")
        for name, site in factors:                      # written order = matrix order
            prod = prod @ op(name, site)
        h = h + coef * prod
    return h.tocsr()


def dense_hamiltonian(site_type, n_sites, terms, *, spin=0.5, max_occupation=None):
    """Dense full-space matrix of ``terms`` (see module docstring); complex128."""
    return sparse_hamiltonian(site_type, n_sites, terms, spin=spin,
                              max_occupation=max_occupation).toarray()


def restrict(matrix, states):
    """Rows and columns of a full-space matrix at the integer states ``states``."""
    states = np.asarray(states, dtype=np.int64)
    if sp.issparse(matrix):
        return matrix.tocsr()[states][:, states].toarray()
    return np.asarray(matrix)[np.ix_(states, states)]


# --------------------------------------------------------------------------------------
# sectors, by brute force over the full space
# --------------------------------------------------------------------------------------

def digits(state, radix, n):
    return [(state // radix**i) % radix for i in range(n)]


def sector_states(site_type, n_sites, *, particles=None, sz=None, spin=0.5,
                  max_occupation=None):
    """All full-space integer states with the given particle number and/or total S^z."""
    dim = full_dimension(site_type, n_sites, spin=spin, max_occupation=max_occupation)
    keep = []
    for s in range(dim):
        if site_type == "spin":
            d = int(round(2 * spin)) + 1
            n_part = None
            mz = sum(spin - k for k in digits(s, d, n_sites))
        elif site_type == "fermion":
            n_part = bin(s).count("1")
            mz = None
        elif site_type == "electron":
            up = bin(s & ((1 << n_sites) - 1)).count("1")
            dn = bin(s >> n_sites).count("1")
            n_part = up + dn
            mz = (up - dn) / 2
        else:
            n_part = sum(digits(s, max_occupation + 1, n_sites))
            mz = None
        if particles is not None and n_part != particles:
            continue
        if sz is not None and abs(mz - sz) > 1e-12:
            continue
        keep.append(s)
    return np.array(keep, dtype=np.int64)


# --------------------------------------------------------------------------------------
# term types, from the design formulas
# --------------------------------------------------------------------------------------

def adjoint_product(coef, factors):
    """Hermitian conjugate of ``coef * O_1 ... O_n``: ``conj(coef) O_n^+ ... O_1^+``."""
    return (np.conj(coef), [(ADJOINT[name], site) for name, site in reversed(factors)])


def expand_term(site_type, kind, strength, *, bonds=(), sites=(), axis=None,
                operators=None, conjugate=False):
    """Operator description of one term of the design, from explicit bonds/sites.

    ``bonds`` are pairs (i, j) for two-site terms; ``sites`` a list for one-site terms.
    Formulas (docs/model-files.md, conventional forms):

    * hopping: ``-s sum_bonds sum_spin (c+_i c_j + c+_j c_i)``; bosons ``b+_i b_j + h.c.``
    * hubbard: ``s sum_i n_up n_dn``; bosons ``(s/2) n (n - 1)``
    * interaction: ``s sum_bonds n_i n_j`` (electrons: ``n = n_up + n_dn``)
    * potential: ``s sum_sites n_i``
    * exchange: ``s sum_bonds (Sz Sz + (S+ S- + S- S+)/2)``, electron spins via
      ``S+ = c+_up c_dn``, ``S- = c+_dn c_up``, ``Sz = (n_up - n_dn)/2``
    * field: ``s sum_sites S^axis``
    * product: ``s sum O_1(x_1) O_2(x_2) ...`` with ``x_k`` the k-th site of a bond (or the
      one site, for a site list), plus its adjoint if ``conjugate``.
    """
    s = strength
    out = []
    if kind == "hopping":
        for i, j in bonds:
            if site_type == "electron":
                for sig in ("up", "dn"):
                    out.append((-s, [(f"c+_{sig}", i), (f"c_{sig}", j)]))
                    out.append((-s, [(f"c+_{sig}", j), (f"c_{sig}", i)]))
            elif site_type == "fermion":
                out.append((-s, [("c+", i), ("c", j)]))
                out.append((-s, [("c+", j), ("c", i)]))
            elif site_type == "boson":
                out.append((-s, [("b+", i), ("b", j)]))
                out.append((-s, [("b+", j), ("b", i)]))
            else:
                raise ValueError("hopping needs particles")
    elif kind == "hubbard":
        for i in sites:
            if site_type == "electron":
                out.append((s, [("n_up", i), ("n_dn", i)]))
            elif site_type == "boson":
                out.append((s / 2, [("n", i), ("n", i)]))
                out.append((-s / 2, [("n", i)]))
            else:
                raise ValueError("hubbard needs electrons or bosons")
    elif kind == "interaction":
        for i, j in bonds:
            if site_type == "electron":
                for a in ("n_up", "n_dn"):
                    for b in ("n_up", "n_dn"):
                        out.append((s, [(a, i), (b, j)]))
            else:
                out.append((s, [("n", i), ("n", j)]))
    elif kind == "potential":
        for i in sites:
            if site_type == "electron":
                out.append((s, [("n_up", i)]))
                out.append((s, [("n_dn", i)]))
            else:
                out.append((s, [("n", i)]))
    elif kind == "exchange":
        for i, j in bonds:
            if site_type == "spin":
                out.append((s, [("Sz", i), ("Sz", j)]))
                out.append((s / 2, [("S+", i), ("S-", j)]))
                out.append((s / 2, [("S-", i), ("S+", j)]))
            elif site_type == "electron":
                # Sz_i Sz_j = (n_up,i - n_dn,i)(n_up,j - n_dn,j)/4
                for a, sa in (("n_up", 1), ("n_dn", -1)):
                    for b, sb in (("n_up", 1), ("n_dn", -1)):
                        out.append((s * sa * sb / 4, [(a, i), (b, j)]))
                # S+_i S-_j = c+_up,i c_dn,i c+_dn,j c_up,j, and the reverse
                out.append((s / 2, [("c+_up", i), ("c_dn", i), ("c+_dn", j), ("c_up", j)]))
                out.append((s / 2, [("c+_dn", i), ("c_up", i), ("c+_up", j), ("c_dn", j)]))
            else:
                raise ValueError("exchange needs spins")
    elif kind == "field":
        name = {"x": "Sx", "y": "Sy", "z": "Sz"}[axis]
        for i in sites:
            if site_type == "spin":
                out.append((s, [(name, i)]))
            elif site_type == "electron":
                if axis == "z":
                    out.append((s / 2, [("n_up", i)]))
                    out.append((-s / 2, [("n_dn", i)]))
                elif axis == "x":
                    out.append((s / 2, [("c+_up", i), ("c_dn", i)]))
                    out.append((s / 2, [("c+_dn", i), ("c_up", i)]))
                else:
                    out.append((s / 2j, [("c+_up", i), ("c_dn", i)]))
                    out.append((-s / 2j, [("c+_dn", i), ("c_up", i)]))
            else:
                raise ValueError("field needs spins")
    elif kind == "product":
        places = [tuple(b) for b in bonds] + [(i,) for i in sites]
        for place in places:
            if len(place) == 1:
                factors = [(name, place[0]) for name in operators]
            else:
                if len(place) != len(operators):
                    raise ValueError("one operator per bond site")
                factors = list(zip(operators, place))
            out.append((s, factors))
            if conjugate:
                out.append(adjoint_product(s, factors))
    else:
        raise ValueError(kind)
    return out


# --------------------------------------------------------------------------------------
# QuSpin builders
# --------------------------------------------------------------------------------------
# QuSpin conventions (P. Weinberg and M. Bukov, SciPost Phys. 2, 003 (2017); its docs):
# * spin bases use Pauli matrices unless pauli=0, then "z" = S^z, "+" = S^+, "-" = S^-;
# * for spinful fermions the operator string "+-|" acts on up modes, "|+-" on down modes,
#   and ["+-", [[J, i, j]]] means J c+_i c_j with full fermionic signs;
# * the coupling list [[J, i, j]] means J O(i) O(j) in string order.

def _quspin_hamiltonian(static, basis, dtype):
    from quspin.operators import hamiltonian

    # no lattice symmetry blocks are used, so the (slow) symmetry check is left out;
    # particle / magnetisation conservation is checked by check_pcon
    return hamiltonian(static, [], basis=basis, dtype=dtype, check_herm=True,
                       check_pcon=True, check_symm=False)


def quspin_hubbard_energies(n_sites, bonds, t, U, n_up, n_dn, *, k=None):
    """Eigenvalues of ``-t sum_bonds,s (c+_i c_j + h.c.) + U sum_i n_up n_dn``."""
    from quspin.basis import spinful_fermion_basis_1d

    basis = spinful_fermion_basis_1d(n_sites, Nf=(n_up, n_dn))
    hop = [[-t, i, j] for i, j in bonds] + [[-t, j, i] for i, j in bonds]
    static = [
        ["+-|", hop],
        ["|+-", hop],
        ["n|n", [[U, i, i] for i in range(n_sites)]],
    ]
    h = _quspin_hamiltonian(static, basis, np.float64)
    return _lowest(h, k)


def quspin_spinless_energies(n_sites, bonds, t, n_particles, *, V=0.0, mu=0.0, k=None):
    """Eigenvalues of ``-t sum (c+_i c_j + h.c.) + V sum n_i n_j + mu sum n_i``."""
    from quspin.basis import spinless_fermion_basis_1d

    basis = spinless_fermion_basis_1d(n_sites, Nf=n_particles)
    hop = [[-t, i, j] for i, j in bonds] + [[-t, j, i] for i, j in bonds]
    static = [["+-", hop], ["nn", [[V, i, j] for i, j in bonds]],
              ["n", [[mu, i] for i in range(n_sites)]]]
    h = _quspin_hamiltonian(static, basis, np.float64)
    return _lowest(h, k)


def quspin_xxz_energies(n_sites, bonds, jxy, jz, *, spin="1/2", sz=None, hz=0.0, k=None,
                        general=False):
    """Eigenvalues of ``sum_bonds [jxy (Sx Sx + Sy Sy) + jz Sz Sz] + hz sum Sz``.

    Uses spin operators (pauli=0).  ``sz`` is the total S^z (None: all sectors).
    ``general=True`` uses ``spin_basis_general`` instead of ``spin_basis_1d``.
    """
    from quspin.basis import spin_basis_1d, spin_basis_general

    s_val = float(Fraction(spin))
    kwargs = {"S": spin, "pauli": 0}
    if sz is not None:
        # Nup counts raised quanta: sum_i (S + m_i) = N S + Sz
        nup = n_sites * s_val + sz
        if abs(nup - round(nup)) > 1e-12:
            raise ValueError("sz incompatible with the cluster")
        kwargs["Nup"] = int(round(nup))
    if general:
        basis = spin_basis_general(n_sites, **kwargs)
    else:
        basis = spin_basis_1d(n_sites, **kwargs)
    static = [
        ["zz", [[jz, i, j] for i, j in bonds]],
        ["+-", [[jxy / 2, i, j] for i, j in bonds]],
        ["-+", [[jxy / 2, i, j] for i, j in bonds]],
        ["z", [[hz, i] for i in range(n_sites)]],
    ]
    h = _quspin_hamiltonian(static, basis, np.float64)
    return _lowest(h, k)


def quspin_bose_hubbard_energies(n_sites, bonds, t, U, n_particles, max_occupation, *,
                                 k=None):
    """Eigenvalues of ``-t sum (b+_i b_j + h.c.) + (U/2) sum n (n - 1)``, truncated."""
    from quspin.basis import boson_basis_1d

    basis = boson_basis_1d(n_sites, Nb=n_particles, sps=max_occupation + 1)
    hop = [[-t, i, j] for i, j in bonds] + [[-t, j, i] for i, j in bonds]
    static = [["+-", hop], ["nn", [[U / 2, i, i] for i in range(n_sites)]],
              ["n", [[-U / 2, i] for i in range(n_sites)]]]
    h = _quspin_hamiltonian(static, basis, np.float64)
    return _lowest(h, k)


def _lowest(h, k):
    """All eigenvalues (``k`` None) or the ``k`` lowest, ascending, by dense eigh."""
    import scipy.linalg

    dense = h.toarray()
    if k is None or k >= dense.shape[0]:
        return np.sort(scipy.linalg.eigvalsh(dense))
    return scipy.linalg.eigvalsh(dense, subset_by_index=[0, k - 1])
