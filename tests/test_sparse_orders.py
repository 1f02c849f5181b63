"""The sparse Schrieffer-Wolff orders against dense twins, their memory report, and the
spin-reversal shortcut of the exact check.

References:
- BDL: Bravyi, DiVincenzo & Loss, Ann. Phys. 326, 2793 (2011), Sec. 3: the generator
  recursion ``S_m = L([S_{m-1}, V_d]) + sum_j a_2j L(S^2j_{m-1}(V_od))``,
  ``H_eff,m = sum_j b_{2j-1} P S^{2j-1}_{m-1}(V_od) P`` (a: x coth x, b: tanh(x/2)); the
  series summed to order n differs from the exact effective Hamiltonian by O(lambda^(n+1)).
- Oracle: the exact effective Hamiltonian by direct rotation (des Cloizeaux, Nucl. Phys. 20,
  321 (1960)), ``exact_effective_hamiltonian``.
- Taylor coefficients of x coth x and tanh(x/2): Abramowitz & Stegun 4.5.67 and 4.5.64
  (from memory), typed in below so the twin shares no code with the module.
"""

from __future__ import annotations

import json
from fractions import Fraction
from math import comb

import numpy as np
import pytest
import scipy.sparse as sp

import lowfold
from lowfold.build.hamiltonian import build_basis, hamiltonian_matrix
from lowfold.jobs.check_levels import levels_to_compare
from lowfold.jobs.check_mirror import mirror_images, reversed_states
from lowfold.jobs.derive import _blocks, _whole_manifold, derive
from lowfold.model.sector import Sector
from lowfold.perturbation.manifold import (find_manifold, reachable_from_states,
                                           restricted_operator, split_operators,
                                           working_operator)
from lowfold.perturbation.schrieffer_wolff import (effective_hamiltonian_orders,
                                                   effective_orders,
                                                   exact_effective_hamiltonian)

A_SERIES = {2: 1 / 3, 4: -1 / 45, 6: 2 / 945}
B_SERIES = {1: 1 / 2, 3: -1 / 24, 5: 1 / 240}
TOL = 1e-12


# ----------------------------------------------------------------------------- the twin


def plain_dense_orders(e, v, p, order):
    """BDL 2011 Sec. 3 on full dense matrices: no truncation, no dropping, no sparse code."""
    v = np.asarray(v.toarray() if sp.issparse(v) else v)
    in_p = np.zeros(e.size, bool)
    in_p[p] = True
    od = in_p[:, None] != in_p[None, :]
    denominator = np.where(od, e[:, None] - e[None, :], 1.0)
    solve = lambda x: np.where(od, x / denominator, 0)          # noqa: E731
    comm = lambda s, x: s @ x - x @ s                           # noqa: E731
    v_od = np.where(od, v, 0)
    v_d = v - v_od
    gens, memo = {1: solve(v_od)}, {}

    def nested(k, m):
        if k == 0:
            return v_od if m == 0 else np.zeros_like(v)
        if (k, m) not in memo:
            memo[k, m] = sum(comm(gens[n], nested(k - 1, m - n)) for n in range(1, m - k + 2))
        return memo[k, m]

    out = [np.diag(e[p]).astype(v.dtype), v[np.ix_(p, p)]]
    for m in range(2, order + 1):
        out.append(sum(B_SERIES[k] * nested(k, m - 1)[np.ix_(p, p)] for k in range(1, m, 2)))
        if m < order:
            rhs = comm(gens[m - 1], v_d) + sum(A_SERIES[k] * nested(k, m - 1)
                                               for k in range(2, m, 2))
            gens[m] = solve(rhs)
    return out[: order + 1]


# ----------------------------------------------------------------------------- models


def hubbard(shape, size, boundary, *, t=0.1, U=1.0, order=4):
    n_sites = int(np.prod(size))
    terms = [{"type": "hopping", "strength": "t", "bonds": "nearest"},
             {"type": "hubbard", "strength": "U"}]
    return lowfold.parse_model({
        "title": "Hubbard cluster", "site": {"type": "electron"},
        "lattice": {"shape": shape, "size": list(size), "boundary": boundary},
        "sector": {"particles": n_sites}, "parameters": {"t": t, "U": U}, "term": terms,
        "perturbation": {"unperturbed": ["hubbard"], "order": order}})


def sector_problem(model, sz=Fraction(0)):
    """(H0 diagonal, V, P indices) of one S^z block of the model's whole sector."""
    h0_op, _ = split_operators(model)
    manifold = find_manifold(model, h0_op)
    block = model.with_sector(Sector(model.sector.particles, sz))
    basis = build_basis(block)
    h0 = hamiltonian_matrix(block, basis, model.unperturbed_labels, check=False)
    v = hamiltonian_matrix(block, basis, model.perturbation_labels, check=False)
    p = basis.index(manifold.states)
    return h0.diagonal().real, v.tocsr(), np.sort(p[p >= 0])


def spin_one_chain(n_sites=4, *, D=1.0, J=0.08, h=0.05):
    """Spin-1 chain: H0 = -D sum (S^z)^2 (P: every S^z = +-1, 2^N states), V = J S.S on the
    open chain plus a transverse field h S^x on every site; built from Kronecker products."""
    sz = np.diag([1.0, 0.0, -1.0])
    sp_ = np.sqrt(2) * np.diag([1.0, 1.0], 1)
    sx = (sp_ + sp_.T) / 2
    sy = (sp_ - sp_.T) / 2j

    def at(op, i):
        out = np.eye(1)
        for j in range(n_sites):
            out = np.kron(out, op if j == i else np.eye(3))
        return out

    h0 = sum(-D * at(sz @ sz, i) for i in range(n_sites))
    v = sum(J * (at(a, i) @ at(a, i + 1)) for i in range(n_sites - 1) for a in (sx, sy, sz))
    v = v + sum(h * at(sx, i) for i in range(n_sites))
    assert np.abs(v.imag).max() < 1e-15        # S^y S^y is real
    e = np.real(np.diag(h0))
    return e, sp.csr_matrix(v.real), np.flatnonzero(e == e.min())


def window_model(seed=3, dim=60):
    """A quasi-degenerate window: P = the H0 levels in [0, 0.3] (all distinct), Q in [1, 2.5],
    V complex, sparse and Hermitian."""
    rng = np.random.default_rng(seed)
    e = np.concatenate([rng.uniform(0.0, 0.3, 5), rng.uniform(1.0, 2.5, dim - 5)])
    a = sp.random(dim, dim, density=0.1, random_state=rng, format="csr", dtype=complex,
                  data_rvs=lambda k: rng.normal(size=k) + 1j * rng.normal(size=k))
    v = 0.05 * (a + a.conj().T)
    return e, v.tocsr(), np.flatnonzero(e <= 0.3)


def problems():
    cases = {
        "hubbard chain 4": lambda: sector_problem(hubbard("chain", [4], "open")),
        "hubbard ring 6": lambda: sector_problem(hubbard("chain", [6], "periodic")),
        "hubbard 2x2": lambda: sector_problem(hubbard("square", [2, 2], "open")),
        "hubbard 2x3": lambda: sector_problem(hubbard("square", [2, 3], "open")),
        "spin-1 transverse field": spin_one_chain,
        "window, complex V": window_model,
    }
    return list(cases.items())


# ----------------------------------------------------------------------------- sparse vs dense


@pytest.mark.parametrize("name, make", problems(), ids=[n for n, _ in problems()])
def test_sparse_orders_match_dense_twins(name, make):
    """Orders 0..6: the sparse route equals the dense twin kept in the module (no dropping,
    dense P-P blocks) and the plain dense recursion above, entry by entry to 1e-12."""
    e, v, p = make()
    order = 6
    sparse, costs = effective_orders(e, v, p, order)
    twin, _ = effective_orders(e, v, p, order, dense=True)
    plain = plain_dense_orders(e, v, p, order)
    assert len(sparse) == len(costs) == order + 1
    for m in range(order + 1):
        assert sp.issparse(sparse[m])
        assert sparse[m].dtype == np.result_type(v.dtype, np.float64)
        dense = sparse[m].toarray()
        assert np.max(np.abs(dense - twin[m]), initial=0.0) <= TOL, (name, m)
        assert np.max(np.abs(dense - plain[m]), initial=0.0) <= TOL, (name, m)


def test_complex_stays_complex_and_real_stays_real():
    e, v, p = window_model()
    assert all(h.dtype == complex for h in effective_hamiltonian_orders(e, v, p, 4, sparse=True))
    e, v, p = spin_one_chain()
    orders = effective_hamiltonian_orders(e, v, p, 4, sparse=True)
    assert all(h.dtype == np.float64 for h in orders)


def test_sparse_orders_are_sparse_on_a_mott_manifold():
    """The order-4 effective Hamiltonian of the 2x3 Hubbard cluster holds far fewer entries
    than its dense block: each row reaches only the states a closed 4-step path connects."""
    e, v, p = sector_problem(hubbard("square", [2, 3], "open"))
    orders, costs = effective_orders(e, v, p, 4)
    assert orders[4].nnz < 0.5 * p.size**2
    assert costs[4].effective_bytes < p.size**2 * 8


def test_dropping_only_removes_round_off():
    """The entries dropped as round-off are below 1e-14 of their order's largest entry: the
    orders with and without dropping differ by no more than that."""
    e, v, p = sector_problem(hubbard("chain", [6], "periodic"))
    kept, _ = effective_orders(e, v, p, 6)
    full, _ = effective_orders(e, v, p, 6, drop_tol=0.0)
    for a, b in zip(kept, full):
        scale = max(np.abs(b.data).max(initial=0.0), 1e-300)
        assert np.abs((a - b).toarray()).max(initial=0.0) <= 1e-13 * scale


# ----------------------------------------------------------------------------- working space


@pytest.mark.parametrize("order", [3, 4, 5])
def test_working_operator_gives_the_orders_of_the_full_reachable_space(order):
    """V built without the entries inside the outermost shell (odd orders: with them) gives
    the same orders as V on every reachable state (the previous route)."""
    model = hubbard("square", [2, 3], "open")
    model, _ = _whole_manifold(model)
    h0, v = split_operators(model)
    manifold = find_manifold(model, h0)
    block = _blocks(model, manifold, True)[2]
    p_states = manifold.states[block.p_positions]
    n_slots = model.n_sites * model.site.modes
    working, v_new = working_operator(v, p_states, order // 2, outer=order % 2 == 1)
    assert np.array_equal(working, reachable_from_states(v, p_states, order // 2))
    v_old = restricted_operator(v, working, n_slots)
    e = np.real(h0.diagonal(working))
    p = np.searchsorted(working, p_states)
    new = effective_hamiltonian_orders(e, v_new, p, order)
    old = effective_hamiltonian_orders(e, v_old, p, order)
    for a, b in zip(new, old):
        assert np.max(np.abs(a - b), initial=0.0) <= TOL
    # ordered by shells with their distances, as derive calls it: the same orders
    shells, v_shells, distance = working_operator(v, p_states, order // 2,
                                                  outer=order % 2 == 1, by_shell=True)
    assert np.array_equal(np.sort(shells), working)
    assert np.array_equal(shells[:p_states.size], p_states) and distance[0] == 0
    e_shells = np.real(h0.diagonal(shells))
    by_shell, _ = effective_orders(e_shells, v_shells, np.arange(p_states.size), order,
                                   check_v=False, distance=distance)
    for a, b in zip(by_shell, old):
        assert np.max(np.abs(a.toarray() - b), initial=0.0) <= TOL


# ----------------------------------------------------------------------------- the physics


@pytest.mark.parametrize("name, make", [problems()[2], problems()[4]],
                         ids=["hubbard 2x2", "spin-1 transverse field"])
def test_sparse_series_error_falls_like_next_power(name, make):
    """BDL 2011 Sec. 3: the sparse orders summed to n differ from the exact effective
    Hamiltonian (direct rotation) by O(lambda^(n+1)) when V is scaled by lambda."""
    e, v, p = make()
    lams = np.array([0.4, 0.28, 0.2])
    order = 4
    errors = []
    for lam in lams:
        orders = effective_hamiltonian_orders(e, lam * v, p, order, sparse=True)
        exact = exact_effective_hamiltonian(np.diag(e) + lam * v.toarray(), p)
        partial = np.cumsum([h.toarray() for h in orders], axis=0)
        errors.append([np.linalg.norm(partial[n] - exact, 2) for n in range(order + 1)])
    errors = np.array(errors)
    for n in range(1, order + 1):
        slope = np.polyfit(np.log(lams), np.log(errors[:, n]), 1)[0]
        assert slope >= n + 1 - 0.25, (name, n, slope)


def test_hubbard_exchange_from_sparse_orders():
    """Two-site Hubbard at half filling: J = 4t^2/U - 16t^4/U^3 to fourth order (the series
    of the closed form (sqrt(U^2 + 16t^2) - U)/2, exact two-site result) from derive's sparse
    route."""
    t, U = 0.1, 1.0
    result = derive(hubbard("chain", [2], "open", t=t, U=U), 4, compare_exact=False)
    exchange = [c for c in result.couplings if c.kind == "exchange"][0]
    assert exchange.orders[2] == pytest.approx(4 * t**2 / U, abs=1e-13)
    assert exchange.orders[4] == pytest.approx(-16 * t**4 / U**3, abs=1e-13)


# ----------------------------------------------------------------------------- memory report


def test_memory_of_each_order_in_diagnostics_and_strict_json():
    result = derive(hubbard("chain", [6], "open"), 4, compare_exact=False)
    memory = result.diagnostics.memory
    assert sorted(memory, key=int) == ["0", "1", "2", "3", "4"]
    for m, cost in memory.items():
        assert cost["effective_bytes"] > 0
        assert cost["total_bytes"] == (cost["effective_bytes"] + cost["generator_bytes"]
                                       + cost["commutator_bytes"])
        assert cost["seconds"] >= 0
    assert memory["2"]["generator_bytes"] > 0 and memory["3"]["commutator_bytes"] > 0
    assert memory["4"]["generator_bytes"] == 0          # there is no S_4 at order 4
    text = json.dumps(result.to_dict(), allow_nan=False)
    again = type(result).from_dict(json.loads(text))
    assert again.diagnostics.memory == memory


def test_memory_at_second_order_route():
    result = derive(hubbard("chain", [4], "open", order=2), 2, compare_exact=False)
    memory = result.diagnostics.memory
    assert memory["2"]["effective_bytes"] > 0 and memory["2"]["generator_bytes"] == 0


# ----------------------------------------------------------------------------- spin reversal


def block_matrices(model, sz):
    block = model.with_sector(Sector(model.sector.particles, Fraction(sz)))
    basis = build_basis(block)
    return basis, (hamiltonian_matrix(block, basis, model.unperturbed_labels, check=False),
                   hamiltonian_matrix(block, basis, model.perturbation_labels, check=False))


def test_spin_reversal_maps_blocks_and_detects_a_field():
    """Reversing every spin maps the S^z = 1 block of a Hubbard ring onto S^z = -1 entry by
    entry; a field along z is odd under it and the check says so."""
    model = hubbard("chain", [4], "periodic")
    basis_a, mats_a = block_matrices(model, 1)
    basis_b, mats_b = block_matrices(model, -1)
    assert mirror_images(model, basis_a, mats_a, basis_b, mats_b)
    flipped = reversed_states(model, reversed_states(model, basis_a.states))
    assert np.array_equal(flipped, basis_a.states)
    tilted = lowfold.parse_model({**_spec_with_field(), "perturbation": {
        "unperturbed": ["hubbard"], "order": 2}})
    basis_a, mats_a = block_matrices(tilted, 1)
    basis_b, mats_b = block_matrices(tilted, -1)
    assert not mirror_images(tilted, basis_a, mats_a, basis_b, mats_b)


def _spec_with_field():
    return {"title": "Hubbard ring in a field", "site": {"type": "electron"},
            "lattice": {"shape": "chain", "size": [4], "boundary": "periodic"},
            "sector": {"particles": 4}, "parameters": {"t": 0.1, "U": 1.0},
            "term": [{"type": "hopping", "strength": "t", "bonds": "nearest"},
                     {"type": "hubbard", "strength": "U"},
                     {"type": "field", "axis": "z", "strength": 0.03, "label": "zeeman"}]}


def test_check_with_and_without_spin_reversal_agree(monkeypatch):
    """The exact check reusing the levels of spin-reversed blocks gives the same errors as
    computing every block (8-site chain, order 4, blocks above the dense limit, so the
    preconditioned LOBPCG runs), and its levels are those of ARPACK (scipy's eigsh) on each
    S^z block, an independent Lanczos."""
    from scipy.sparse.linalg import eigsh

    model = hubbard("chain", [8], "open")
    fast = derive(model, 4, check_levels=4)
    reference = []
    for sz in range(-4, 5):
        _, (h0, v) = block_matrices(model, sz)
        h = (h0 + v).tocsr()
        count = levels_to_compare(4, comb(8, 4 + sz), h.shape[0])
        if h.shape[0] <= 1200:
            values = np.linalg.eigvalsh(h.toarray())[:count]
        else:
            values = eigsh(h, k=count, which="SA", tol=1e-12, return_eigenvectors=False)
        reference += list(values)
    assert fast.check.exact == pytest.approx(sorted(reference), abs=1e-9)
    import lowfold.jobs.check as check_module
    monkeypatch.setattr(check_module, "mirror_images", lambda *args: False)
    slow = derive(model, 4, check_levels=4)
    assert fast.check.exact == pytest.approx(slow.check.exact, abs=1e-10)
    for m in range(5):
        assert fast.check.max_abs_error[m] == pytest.approx(slow.check.max_abs_error[m],
                                                            abs=1e-10)
