"""Fast Hamiltonian routes against their slow twins.

The species split (two-species bases) and the bit-mask strings with chunk-table ranking
(radix-2 sites) must give the same CSR matrix and the same matrix-free products as the
general any-radix kernels (``route="general"``), which ``test_hamiltonian_property``
checks against the dense Kronecker-product reference.  The Jordan-Wigner sign of the
split is also checked directly against that reference (``tests/helpers/reference.py``: explicit
Jordan-Wigner strings, common practice), and the fast ranks against the combinatorial
ranks they replace.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import lowfold
from helpers import reference as ref
from lowfold._kernels import basis as basis_kernels
from lowfold._kernels import operators as op_kernels
from lowfold.build.basis import fixed_sum_basis, two_species_basis
from lowfold.errors import ModelError
from lowfold.build.hamiltonian import (compile_operator, count_nonzeros, operator_linear,
                                 operator_matrix, prefers_matrix_free)

ATOL = 1e-12

# per kind: site table, sectors to try, one-site / two-site term tables to draw from
ELECTRON_BOND_PRODUCTS = [("S+", "S-"), ("S-", "S+"), ("Sz", "Sz"), ("c+_up", "c_up"),
                          ("c+_dn", "c_dn"), ("n_up", "n_dn"), ("n", "Sz")]
ELECTRON_SITE_PRODUCTS = [("c+_up", "c_dn", "c+_dn", "c_up"), ("n_up", "n_dn"), ("Sz",),
                          ("S+", "S-")]
KINDS = {
    "electron": ({"type": "electron"}, [{"particles": "half", "sz": "min"}, {"particles": "half"},
                                        {"particles": "odd", "sz": "min"}, None]),
    "fermion": ({"type": "fermion"}, [{"particles": "half"}, None]),
    "spin-1/2": ({"type": "spin", "spin": 0.5}, [{"sz": "min"}, None]),
    "spin-1": ({"type": "spin", "spin": 1.0}, [{"sz": 0}]),
    "boson": ({"type": "boson", "max_occupation": 2}, [{"particles": "half"}]),
}


def strengths():
    return st.floats(-2.0, 2.0, allow_nan=False).map(lambda x: round(x, 3))


@st.composite
def random_cases(draw):
    kind = draw(st.sampled_from(sorted(KINDS)))
    site, sectors = KINDS[kind]
    n = draw(st.integers(2, 4 if kind != "spin-1" else 5))
    pairs = list(itertools.combinations(range(n), 2))
    bonds = draw(st.lists(st.sampled_from(pairs), min_size=1, max_size=len(pairs), unique=True))
    terms = []
    for index in range(draw(st.integers(1, 5))):
        term = {"label": f"t{index}", "strength": draw(strengths())}
        if kind == "electron":
            choice = draw(st.sampled_from(["hopping", "hubbard", "interaction", "potential",
                                           "exchange", "field", "bond product",
                                           "site product"]))
        elif kind == "fermion":
            choice = draw(st.sampled_from(["hopping", "interaction", "potential",
                                           "bond product"]))
        elif kind == "boson":
            choice = draw(st.sampled_from(["hopping", "hubbard", "interaction", "potential"]))
        else:
            choice = draw(st.sampled_from(["exchange", "field", "bond product"]))
        if choice == "bond product":
            names = {"electron": ELECTRON_BOND_PRODUCTS,
                     "fermion": [("c+", "c"), ("n", "n")]}.get(kind, [("S+", "S-"),
                                                                      ("Sz", "Sz")])
            term.update(type="product", operators=list(draw(st.sampled_from(names))),
                        conjugate=True, bonds="nearest")
        elif choice == "site product":
            term.update(type="product", sites="all", conjugate=True,
                        operators=list(draw(st.sampled_from(ELECTRON_SITE_PRODUCTS))))
        else:
            term["type"] = choice
        if choice == "field":
            term["axis"] = "z"
        terms.append(term)
    sector = draw(st.sampled_from(sectors))
    return {"kind": kind, "site": site, "n": n, "bonds": bonds, "terms": terms,
            "sector": sector}


def make_model(case):
    sector = None
    if case["sector"]:
        sector = dict(case["sector"])
        n = case["n"]
        if sector.get("particles") == "half":
            sector["particles"] = n
        elif sector.get("particles") == "odd":
            sector["particles"] = n if n % 2 else n - 1
        if sector.get("sz") == "min":
            odd = sector.get("particles", n if case["kind"] == "spin-1/2" else 0) % 2
            sector["sz"] = 0.5 * odd
    data = {"title": "random", "site": dict(case["site"]), "term": case["terms"],
            "lattice": {"shape": "graph", "sites": case["n"],
                        "bonds": [list(b) for b in case["bonds"]]}}
    if sector:
        data["sector"] = sector
    return lowfold.parse_model(data, source="<random>")


def routes_for(basis):
    routes = ["auto"]
    if basis.radix == 2:
        routes.append("mask")
    if basis.params[0] == basis_kernels.TWO_SPECIES:
        routes.append("split")
    return routes


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=random_cases(), seed=st.integers(0, 2**32 - 1))
def test_fast_routes_match_general_kernels(case, seed):
    model = make_model(case)
    basis = lowfold.build_basis(model)
    op = compile_operator(model)
    slow = operator_matrix(op, basis, route="general")
    slow_linear = operator_linear(op, basis, route="general")
    rng = np.random.default_rng(seed)
    vectors = [rng.standard_normal(basis.size),
               rng.standard_normal(basis.size) + 1j * rng.standard_normal(basis.size)]
    mixed = None
    for route in routes_for(basis):
        try:
            fast = operator_matrix(op, basis, route=route)
        except ModelError:
            # the split builds no CSR matrix with strings mixing the species
            assert route == "split"
            mixed = True
        else:
            np.testing.assert_allclose(fast.toarray(), slow.toarray(), rtol=0, atol=ATOL)
            assert fast.has_sorted_indices
            assert count_nonzeros(op, basis, route=route) >= fast.nnz
        linear = operator_linear(op, basis, route=route)
        for x in vectors:
            np.testing.assert_allclose(linear @ x, slow_linear @ x, rtol=0, atol=1e-11)
    if mixed:
        assert any(t["type"] == "exchange" or "S+" in t.get("operators", ())
                   or "c_dn" in t.get("operators", ()) for t in case["terms"])


@pytest.mark.parametrize("n_sites, n_up, n_dn", [(3, 1, 2), (3, 2, 1), (4, 1, 1), (4, 2, 2),
                                                 (4, 3, 2)])
def test_split_jordan_wigner_sign_against_reference(n_sites, n_up, n_dn):
    """Hopping on a ring with spin-dependent amplitudes and a spin-flip pair exchange:
    down-species strings pass all N_up up electrons; the reference writes the strings out."""
    bonds = [(i, (i + 1) % n_sites) for i in range(n_sites)]
    data = {"title": "ring", "site": {"type": "electron"},
            "lattice": {"shape": "graph", "sites": n_sites, "bonds": [list(b) for b in bonds]},
            "sector": {"particles": n_up + n_dn, "sz": (n_up - n_dn) / 2},
            "term": [{"type": "product", "operators": ["c+_up", "c_up"], "strength": 0.7,
                      "bonds": "nearest", "conjugate": True, "label": "up"},
                     {"type": "product", "operators": ["c+_dn", "c_dn"], "strength": -1.3,
                      "bonds": "nearest", "conjugate": True, "label": "dn"},
                     {"type": "hubbard", "strength": 2.5}]}
    model = lowfold.parse_model(data, source="<ring>")
    basis = lowfold.build_basis(model)
    terms = []
    for name, s in (("up", 0.7), ("dn", -1.3)):
        for i, j in sorted(tuple(sorted(b)) for b in bonds):
            terms += [(s, [(f"c+_{name}", i), (f"c_{name}", j)]),
                      (s, [(f"c+_{name}", j), (f"c_{name}", i)])]
    terms += [(2.5, [("n_up", i), ("n_dn", i)]) for i in range(n_sites)]
    full = ref.sparse_hamiltonian("electron", n_sites, terms)
    expected = ref.restrict(full, basis.states)
    split = lowfold.hamiltonian_matrix(model, basis, route="split")
    np.testing.assert_allclose(split.toarray(), expected, rtol=0, atol=ATOL)
    x = np.random.default_rng(n_sites + 10 * n_up).standard_normal(basis.size)
    linear = lowfold.hamiltonian_operator(model, basis, route="split")
    np.testing.assert_allclose(linear @ x, expected @ x, rtol=0, atol=ATOL)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 30), data=st.data())
def test_chunk_ranks_match_combinatorial_ranks(n, data):
    total = data.draw(st.integers(0, n))
    basis = fixed_sum_basis(n, 2, total)
    table = basis_kernels.rank_tables(n, total)
    empty = np.zeros((1, 1, 1), dtype=np.int64)
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    picks = rng.integers(0, basis.size, size=min(basis.size, 200))
    probes = np.concatenate([basis.states[picks], rng.integers(-5, 2 ** (n + 1), size=200)])
    fast = basis_kernels.lookup_many_fast(probes, basis.params, table, empty, basis.weights,
                                          basis.states)
    slow = basis_kernels.lookup_many(probes, *basis.lookup_arrays)
    np.testing.assert_array_equal(fast, slow)
    np.testing.assert_array_equal(fast[:picks.size], picks)


@settings(max_examples=30, deadline=None)
@given(n=st.integers(1, 12), data=st.data())
def test_two_species_chunk_ranks(n, data):
    up, dn = data.draw(st.integers(0, n)), data.draw(st.integers(0, n))
    basis = two_species_basis(n, up, dn)
    tables = [basis_kernels.rank_tables(n, t) for t in (up, dn)]
    rng = np.random.default_rng(data.draw(st.integers(0, 2**32 - 1)))
    probes = np.concatenate([basis.states[rng.integers(0, basis.size, size=100)],
                             rng.integers(-3, 2 ** (2 * n + 1), size=300)])
    fast = basis_kernels.lookup_many_fast(probes, basis.params, *tables, basis.weights,
                                          basis.states)
    np.testing.assert_array_equal(fast, basis_kernels.lookup_many(probes, *basis.lookup_arrays))


def test_mask_strings_match_apply_string_on_every_state():
    data = {"title": "mixed", "site": {"type": "electron"},
            "lattice": {"shape": "graph", "sites": 3, "bonds": [[0, 1], [1, 2], [0, 2]]},
            "term": [{"type": "hopping", "strength": 1.0},
                     {"type": "exchange", "strength": 0.6},
                     {"type": "field", "axis": "x", "strength": 0.3},
                     {"type": "product", "operators": ["Sz", "c+_dn"], "strength": 0.2,
                      "bonds": "nearest", "conjugate": True, "label": "p"}]}
    op = compile_operator(lowfold.parse_model(data), check_sector=False)
    masks = op_kernels.string_masks(op.offdiagonal_strings, op.ptr, op.slot, op.table, op.odd,
                                    op.table_new, op.table_amp, op.coef)
    assert masks is not None
    for a, k in enumerate(op.offdiagonal_strings):
        for s in range(2**6):
            new, amp = op_kernels.apply_string(np.int64(s), k, *op.arrays())
            new_m, amp_m = op_kernels.apply_mask(np.int64(s), a, *masks)
            assert amp_m == pytest.approx(amp, abs=1e-14)
            if amp != 0:
                assert new_m == new


def test_routes_that_do_not_apply_are_refused():
    spin = lowfold.parse_model({"title": "s", "site": {"type": "spin", "spin": 1.0},
                                "lattice": {"shape": "chain", "size": [3]},
                                "term": [{"type": "exchange", "strength": 1.0}]})
    basis = lowfold.build_basis(spin)
    op = compile_operator(spin)
    for route in ("split", "mask"):
        with pytest.raises(ModelError):
            operator_matrix(op, basis, route=route)
    with pytest.raises(ModelError, match="unknown route"):
        operator_linear(op, basis, route="fast")


def test_matrix_free_preferred_only_for_one_species_strings():
    def electrons(terms):
        return lowfold.parse_model({"title": "e", "site": {"type": "electron"},
                                    "lattice": {"shape": "chain", "size": [4]},
                                    "sector": {"particles": 4, "sz": 0}, "term": terms})

    hubbard = electrons([{"type": "hopping", "strength": 1.0},
                         {"type": "hubbard", "strength": 4.0}])
    t_j = electrons([{"type": "hopping", "strength": 1.0},
                     {"type": "exchange", "strength": 0.5}])
    for model, expected in ((hubbard, True), (t_j, False)):
        basis = lowfold.build_basis(model)
        assert prefers_matrix_free(compile_operator(model), basis) is expected
    spins = lowfold.parse_model({"title": "s", "site": {"type": "spin", "spin": 0.5},
                                 "lattice": {"shape": "chain", "size": [4]},
                                 "term": [{"type": "exchange", "strength": 1.0}]})
    assert not prefers_matrix_free(compile_operator(spins), lowfold.build_basis(spins))
