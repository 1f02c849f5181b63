"""Random small models: lowfold's Hamiltonian equals the dense Kronecker-product reference.

The reference (``tests/helpers/reference.py``) writes every term out from the formulas of docs/model-files.md
and builds full-space matrices from local operator matrices and explicit Jordan-Wigner
strings; the sector is cut out of the full space by brute force.  The matrix-free operator
must agree with the CSR matrix on random vectors.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import lowfold
from helpers import reference as ref

ATOL = 1e-12

SITE_KINDS = {
    # name: (site table, term types, product operator names)
    "spin-1/2": ({"type": "spin", "spin": 0.5}, ("exchange", "field", "product"),
                 ref.SPIN_NAMES + ref.PAULI_NAMES),
    "spin-1": ({"type": "spin", "spin": 1.0}, ("exchange", "field", "product"),
               ref.SPIN_NAMES),
    "spin-3/2": ({"type": "spin", "spin": 1.5}, ("exchange", "field", "product"),
                 ref.SPIN_NAMES),
    "fermion": ({"type": "fermion"}, ("hopping", "interaction", "potential", "product"),
                ref.FERMION_NAMES),
    "electron": ({"type": "electron"},
                 ("hopping", "hubbard", "interaction", "potential", "exchange", "field",
                  "product"),
                 ref.ELECTRON_NAMES),
    "boson": ({"type": "boson", "max_occupation": 2},
              ("hopping", "hubbard", "interaction", "potential", "product"),
              ref.BOSON_NAMES),
}
TWO_SITE = ("hopping", "interaction", "exchange")
FERMIONIC = {"c", "c+", "c_up", "c_dn", "c+_up", "c+_dn"}


def site_args(site):
    """Keyword arguments of the reference builders for a [site] table."""
    return {"spin": site.get("spin", 0.5), "max_occupation": site.get("max_occupation")}


def reference_terms(site, graph_bonds, n_sites, term):
    """The reference description of one [[term]] table, selectors resolved by hand."""
    kind = term["type"]
    bonds = term.get("bonds")
    if bonds == "nearest" or (bonds is None and kind in TWO_SITE):
        bonds = sorted(tuple(sorted(b)) for b in graph_bonds)   # lattice rows are (i < j)
    sites = term.get("sites")
    if sites == "all" or (sites is None and bonds is None):
        sites = list(range(n_sites))
    return ref.expand_term(site["type"], kind, term["strength"], bonds=bonds or (),
                           sites=sites or (), axis=term.get("axis"),
                           operators=term.get("operators"),
                           conjugate=term.get("conjugate", False))


def reference_matrix(case):
    site, n = case["site"], case["n_sites"]
    terms = []
    for term in case["terms"]:
        terms += reference_terms(site, case["graph_bonds"], n, term)
    return ref.sparse_hamiltonian(site["type"], n, terms, **site_args(site))


def is_hermitian(site, n_sites, terms):
    h = ref.sparse_hamiltonian(site["type"], n_sites, terms, **site_args(site))
    return abs(h - h.conj().T).max() < 1e-12


# --------------------------------------------------------------------------------------
# strategies


@st.composite
def random_models(draw):
    kind = draw(st.sampled_from(sorted(SITE_KINDS)))
    site, term_types, names = SITE_KINDS[kind]
    n = draw(st.integers(2, 3 if kind in ("electron", "spin-3/2") else 4))
    pairs = list(itertools.combinations(range(n), 2))
    graph_bonds = draw(st.lists(st.sampled_from(pairs), min_size=1, max_size=len(pairs),
                                unique=True))
    strength = st.floats(-2.0, 2.0, allow_nan=False).map(lambda x: round(x, 4))
    terms = []
    for index in range(draw(st.integers(1, 4))):
        term = {"type": draw(st.sampled_from(term_types)), "label": f"term{index}",
                "strength": draw(strength)}
        two_site = term["type"] in TWO_SITE
        if term["type"] == "product":
            two_site = draw(st.booleans())
            count = 2 if two_site else draw(st.integers(1, 3))
            ops = draw(st.lists(st.sampled_from(names), min_size=count, max_size=count))
            if kind in ("fermion", "electron") and sum(o in FERMIONIC for o in ops) % 2:
                ops[-1] = "n" if kind == "fermion" else "n_up"   # keep fermion parity even
            term["operators"] = ops
            term["conjugate"] = draw(st.booleans())
        if two_site:
            if draw(st.booleans()):
                term["bonds"] = "nearest"
            else:
                chosen = draw(st.lists(st.sampled_from(pairs), min_size=1, unique=True))
                term["bonds"] = [list(p) if draw(st.booleans()) else [p[1], p[0]]
                                 for p in chosen]
        else:
            term["sites"] = draw(st.one_of(
                st.just("all"),
                st.lists(st.integers(0, n - 1), min_size=1, max_size=n, unique=True)))
        if term["type"] == "field":
            term["axis"] = draw(st.sampled_from(["x", "y", "z"]))
        if term["type"] == "product" and not term["conjugate"]:
            # a product that is not Hermitian by itself gets its conjugate added
            if not is_hermitian(site, n, reference_terms(site, graph_bonds, n, term)):
                term["conjugate"] = True
        terms.append(term)
    return {"kind": kind, "site": site, "n_sites": n, "graph_bonds": graph_bonds,
            "terms": terms}


def model_dict(case, sector=None):
    data = {
        "title": f"random {case['kind']} model",
        "lattice": {"shape": "graph", "sites": case["n_sites"],
                    "bonds": [list(b) for b in case["graph_bonds"]]},
        "site": dict(case["site"]),
        "term": [dict(t) for t in case["terms"]],
    }
    if sector:
        data["sector"] = dict(sector)
    return data


def conserved_sectors(case, h):
    """Sector tables whose quantities commute with the reference H (by brute force)."""
    site, n = case["site"], case["n_sites"]
    kw = site_args(site)
    quantities = {"spin": ["sz"], "electron": ["particles", "sz"]}.get(site["type"],
                                                                      ["particles"])
    values = {}
    for q in quantities:
        name = "Sz" if q == "sz" else "n"
        total = sum(ref.site_operator(site["type"], n, name, i, **kw) for i in range(n))
        if abs(h @ total - total @ h).max() < 1e-10:
            values[q] = np.real(total.diagonal())
    dim = ref.full_dimension(site["type"], n, **kw)
    keys = {tuple(float(v[s]) for v in values.values()) for s in range(dim)} if values else ()
    out = []
    for key in sorted(keys):
        out.append({q: int(round(v)) if q == "particles" else v
                    for q, v in zip(values, key)})
    return out


# --------------------------------------------------------------------------------------
# properties


def check_against_reference(data, h_full, case, sector):
    model = lowfold.parse_model(data, source="<random>")
    basis = lowfold.build_basis(model)
    site = case["site"]
    expected_states = ref.sector_states(site["type"], case["n_sites"], **(sector or {}),
                                        **site_args(site))
    np.testing.assert_array_equal(np.asarray(basis.states), expected_states)
    h = lowfold.hamiltonian_matrix(model, basis)
    np.testing.assert_allclose(h.toarray(), ref.restrict(h_full, basis.states), rtol=0,
                               atol=ATOL)
    return model, basis, h


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=random_models(), pick=st.integers(0, 10**6))
def test_random_model_matches_reference(case, pick):
    h_full = reference_matrix(case)
    check_against_reference(model_dict(case), h_full, case, None)
    sectors = conserved_sectors(case, h_full)
    if sectors:
        sector = sectors[pick % len(sectors)]
        check_against_reference(model_dict(case, sector), h_full, case, sector)


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=random_models(), seed=st.integers(0, 2**32 - 1))
def test_matrix_free_operator_matches_csr(case, seed):
    h_full = reference_matrix(case)
    sectors = [None] + conserved_sectors(case, h_full)[:1]
    rng = np.random.default_rng(seed)
    for sector in sectors:
        model = lowfold.parse_model(model_dict(case, sector), source="<random>")
        basis = lowfold.build_basis(model)
        h = lowfold.hamiltonian_matrix(model, basis)
        op = lowfold.hamiltonian_operator(model, basis)
        assert op.shape == h.shape == (basis.size, basis.size)
        for _ in range(3):
            v = rng.standard_normal(basis.size)
            if np.iscomplexobj(h.data) or np.dtype(op.dtype).kind == "c":
                v = v + 1j * rng.standard_normal(basis.size)
            np.testing.assert_allclose(op @ v, h @ v, rtol=0, atol=1e-12)
        block = rng.standard_normal((basis.size, 2))
        np.testing.assert_allclose(op.matmat(block), h @ block, rtol=0, atol=1e-12)


# --------------------------------------------------------------------------------------
# hand-written cases: a hopping bond between distant sites and a periodic wrap bond


def chain_model(site, L, boundary, terms, sector=None):
    data = {"lattice": {"shape": "chain", "size": [L], "boundary": boundary},
            "site": site, "term": terms}
    if sector:
        data["sector"] = sector
    return lowfold.parse_model(data, source="<chain>")


@pytest.mark.parametrize("site_type", ["fermion", "electron"])
@pytest.mark.parametrize("bond", [[0, 3], [3, 0], [1, 3]])
@pytest.mark.parametrize("sector", [None, {"particles": 2}, {"particles": 3}])
def test_distant_hopping_bond(site_type, bond, sector):
    # -t (c+_0 c_3 + h.c.) on 4 sites: the Jordan-Wigner string covers sites 1 and 2
    t = 0.9
    terms = [{"type": "hopping", "strength": t, "bonds": [bond]},
             {"type": "potential", "strength": 0.3, "sites": [1]}]
    model = chain_model({"type": site_type}, 4, "open", terms, sector)
    basis = lowfold.build_basis(model)
    h = lowfold.hamiltonian_matrix(model, basis).toarray()
    ref_terms = (ref.expand_term(site_type, "hopping", t, bonds=[tuple(bond)])
                 + ref.expand_term(site_type, "potential", 0.3, sites=[1]))
    expected = ref.restrict(ref.sparse_hamiltonian(site_type, 4, ref_terms), basis.states)
    np.testing.assert_allclose(h, expected, rtol=0, atol=ATOL)
    # the string matters: <0011| c+_0 c_3 |1010> has c_3 pass the filled site 1 (sign -1),
    # so the hopping amplitude is -t * (-1) = +t
    if site_type == "fermion" and sector == {"particles": 2} and sorted(bond) == [0, 3]:
        a, b = basis.index(np.array([0b0011, 0b1010]))
        assert abs(h[a, b] - t) < ATOL


@pytest.mark.parametrize("site_type, L, sector", [
    ("fermion", 4, {"particles": 2}), ("fermion", 4, {"particles": 3}),
    ("fermion", 5, {"particles": 2}), ("electron", 3, {"particles": 3}),
    ("electron", 4, {"particles": 4, "sz": 0}), ("boson", 4, {"particles": 3}),
])
def test_periodic_wrap_bond(site_type, L, sector):
    site = {"type": site_type}
    if site_type == "boson":
        site["max_occupation"] = 2
    terms = [{"type": "hopping", "strength": 1.0, "bonds": "nearest"}]
    if site_type != "fermion":
        terms.append({"type": "hubbard", "strength": 2.0})
    model = chain_model(site, L, "periodic", terms, sector)
    bonds = [(i, i + 1) for i in range(L - 1)] + [(0, L - 1)]
    got_bonds = {tuple(map(int, b)) for b in model.lattice.bonds("nearest")}
    assert got_bonds == set(bonds)
    ref_terms = ref.expand_term(site_type, "hopping", 1.0, bonds=bonds)
    if site_type != "fermion":
        ref_terms += ref.expand_term(site_type, "hubbard", 2.0, sites=range(L))
    basis = lowfold.build_basis(model)
    h = lowfold.hamiltonian_matrix(model, basis).toarray()
    kw = {"max_occupation": site.get("max_occupation")}
    expected = ref.restrict(ref.sparse_hamiltonian(site_type, L, ref_terms, **kw),
                            basis.states)
    np.testing.assert_allclose(h, expected, rtol=0, atol=ATOL)
    np.testing.assert_allclose(basis.states,
                               ref.sector_states(site_type, L, **sector, **kw))


# --------------------------------------------------------------------------------------
# self-checks of the reference


def test_reference_adjoint_product_is_matrix_adjoint():
    rng = np.random.default_rng(7)
    for kind, (site, _, names) in SITE_KINDS.items():
        kw = site_args(site)
        for _ in range(5):
            factors = [(str(rng.choice(names)), int(rng.integers(0, 3))) for _ in range(3)]
            coef = complex(rng.standard_normal(), rng.standard_normal())
            a = ref.dense_hamiltonian(site["type"], 3, [(coef, factors)], **kw)
            b = ref.dense_hamiltonian(site["type"], 3, [ref.adjoint_product(coef, factors)],
                                      **kw)
            np.testing.assert_allclose(b, a.conj().T, atol=1e-13)


def test_reference_canonical_relations():
    # {c_a, c+_b} = delta_ab and {c_a, c_b} = 0 for the 2N electron modes (common practice)
    n = 3
    modes = [(f"c_{s}", i) for s in ("up", "dn") for i in range(n)]
    mats = {m: ref.dense_hamiltonian("electron", n, [(1.0, [m])]) for m in modes}
    eye = np.eye(4**n)
    for a, b in itertools.product(modes, modes):
        ca, cb = mats[a], mats[b]
        anti = ca @ cb.conj().T + cb.conj().T @ ca
        np.testing.assert_allclose(anti, eye if a == b else 0 * eye, atol=1e-13)
        np.testing.assert_allclose(ca @ cb + cb @ ca, 0 * eye, atol=1e-13)
    # spin-1: [S+, S-] = 2 Sz and S.S = S(S+1)
    m = ref.spin_matrices(1.0)
    np.testing.assert_allclose(m["S+"] @ m["S-"] - m["S-"] @ m["S+"], 2 * m["Sz"], atol=1e-13)
    s2 = m["Sx"] @ m["Sx"] + m["Sy"] @ m["Sy"] + m["Sz"] @ m["Sz"]
    np.testing.assert_allclose(s2, 2 * np.eye(3), atol=1e-13)


def test_reference_encoding_matches_design():
    # spin-1/2 digit 0 = up: Sz on site 1 of |up, down> = state 0 + 2 * 1 = 2 is -1/2
    sz1 = ref.dense_hamiltonian("spin", 2, [(1.0, [("Sz", 1)])])
    assert sz1[2, 2] == -0.5 and sz1[1, 1] == 0.5
    # electron: bit N + i = down mode of site i
    n_dn0 = ref.dense_hamiltonian("electron", 2, [(1.0, [("n_dn", 0)])])
    assert n_dn0[0b0100, 0b0100] == 1 and n_dn0[0b0001, 0b0001] == 0
    # c+_dn0 on the state with site 0 up and site 1 up (bits 0 and 1): string over 2 modes
    cd = ref.dense_hamiltonian("electron", 2, [(1.0, [("c+_dn", 0)])])
    assert cd[0b0111, 0b0011] == 1      # passes two occupied up modes: sign +1
    assert cd[0b0101, 0b0001] == -1     # passes one occupied up mode: sign -1
