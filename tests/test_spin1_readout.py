"""Spin-1 readouts: the pseudo-spin-1/2 XXZ model of easy-axis spin-1, and the spin-1 kinds.

Easy-axis chain, H0 = D sum_i (S^z_i)^2 (D < 0), V = J sum_<ij> S_i.S_j.  The manifold is
S^z_i = +1 or -1 on every site; pseudo-spin tau (S = 1/2) with |up> = |S^z = +1>.
Derived here (second-order degenerate perturbation theory, common practice):

- first order, P V P = J S^z_i S^z_j = 4 J tau^z_i tau^z_j (S^z = 2 tau^z on the manifold;
  S+-_i S-+_j always leaves it);
- second order, only |+1 -1> <-> |0 0> (amplitude J, cost 2|D|) and |-1 +1> <-> |0 0>:
  -(J^2 / 2|D|) (|+-> + |-+>)(<+-| + <-+|) = -(J^2/|D|)(tau^x tau^x + tau^y tau^y)
  + (J^2/|D|) tau^z tau^z - J^2 / (4|D|) per bond.

So to second order an XXZ chain: J_z = 4 J + J^2/|D|, J_xy = -J^2/|D|, and a constant
L D - N_bonds J^2 / (4|D|).  The spectrum is checked against an exact diagonalisation with
QuSpin (spin_basis_1d, S = "1") of the same cluster.
"""

from __future__ import annotations

from functools import reduce

import numpy as np
import pytest
from helpers.modelfiles import lattice_text, model_of, term_text

from lowfold.jobs.derive import derive
from lowfold.readout.local_basis import product_manifold
from lowfold.readout.local_names import name_strings
from lowfold.readout.local_strings import strings_of_orders

quspin = pytest.importorskip("quspin")

D = -1.0
L = 4                                   # periodic ring: bonds (0,1) (1,2) (2,3) (0,3)
BONDS = [(i, (i + 1) % L) for i in range(L)]


def _chain(j, order=2, size=L):
    terms = (term_text("product", "D", operators=["Sz", "Sz"], sites="all", label="anisotropy")
             + term_text("exchange", "J", bonds="nearest", label="exchange"))
    text = lattice_text("chain", [size], "periodic", {"type": "spin", "spin": 1}, terms,
                        parameters={"D": D, "J": j})
    return model_of(text + f'\n[perturbation]\nunperturbed = ["anisotropy"]\norder = {order}\n')


def _xxz(j):
    """(J_z, J_xy, constant) to second order, derived in the module docstring."""
    return 4 * j + j**2 / abs(D), -j**2 / abs(D), L * D - len(BONDS) * j**2 / (4 * abs(D))


def _xxz_levels(j):
    """Levels of the second-order XXZ ring built here from tau = sigma / 2."""
    half = 0.5 * np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]])
    op = lambda a, i: reduce(np.kron, [half[a] if k == i else np.eye(2) for k in range(L)])
    jz, jxy, constant = _xxz(j)
    h = constant * np.eye(2**L)
    for i, k in BONDS:
        h = h + jxy * (op(0, i) @ op(0, k) + op(1, i) @ op(1, k)) + jz * op(2, i) @ op(2, k)
    return np.linalg.eigvalsh(h)


def _quspin_levels(j, k):
    from quspin.basis import spin_basis_1d
    from quspin.operators import hamiltonian
    basis = spin_basis_1d(L, S="1")
    static = [["zz", [[D, i, i] for i in range(L)]], ["zz", [[j, a, b] for a, b in BONDS]],
              ["+-", [[j / 2, a, b] for a, b in BONDS]], ["-+", [[j / 2, a, b] for a, b in BONDS]]]
    h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_symm=False,
                    check_herm=False, check_pcon=False)
    return np.linalg.eigvalsh(h.toarray())[:k]


def test_easy_axis_chain_is_an_xxz_chain():
    j = 0.1
    result = derive(_chain(j), 2, compare_exact=False)
    assert result.manifold.readout.startswith("pseudo-spin-1/2")
    jz, jxy, constant = _xxz(j)
    iso = (2 * jxy + jz) / 3                       # lowfold: exchange = tr / 3, anisotropy rest
    for c in result.couplings:
        if c.kind == "exchange":
            assert c.value == pytest.approx(iso, rel=1e-10)
        elif c.kind == "anisotropy":
            np.testing.assert_allclose(np.diag(c.value), [jxy - iso, jxy - iso, jz - iso],
                                       rtol=1e-10, atol=1e-14)
        elif c.kind == "constant":
            assert c.value == pytest.approx(constant, rel=1e-10)
    kinds = sorted({c.kind for c in result.couplings})
    assert kinds == ["anisotropy", "constant", "exchange"]
    np.testing.assert_allclose(np.linalg.eigvalsh(result.matrix(2)), _xxz_levels(j), atol=1e-12)


def test_xxz_levels_against_quspin_error_falls_like_j_cubed():
    errors = []
    for j in (0.08, 0.04):
        exact = _quspin_levels(j, 2**L)
        errors.append(np.abs(_xxz_levels(j) - exact).max())
        # lowfold's own exact check of the same cluster agrees with QuSpin's levels
        result = derive(_chain(j), 2, check_levels="all")
        np.testing.assert_allclose(np.sort(result.check.exact), exact, atol=1e-9)
    assert np.log2(errors[0] / errors[1]) == pytest.approx(3, abs=0.2)


def test_spin1_kinds_of_a_whole_spin1_product():
    # every spin-1 state kept: J S.S + B (S.S)^2 + D' (S^z)^2 + h S^z on two sites, built
    # here from 3x3 spin matrices, is read back term by term (common practice: the four
    # operators are linearly independent on 9 states)
    model = _chain(0.1, size=2)
    states = np.arange(9, dtype=np.int64)        # radix 3, two slots: every state
    basis, reason = product_manifold(model, states)
    assert basis is not None and basis.is_hull, reason
    s = np.sqrt(2.0)
    sp_ = np.array([[0, s, 0], [0, 0, s], [0, 0, 0]])     # digit k = 1 - S^z, S+ lowers k
    sz = np.diag([1.0, 0.0, -1.0])
    # lowfold's state integer is digit_0 + 3 digit_1: site 0 is the fast (right) factor
    two = lambda a, b: np.kron(b, a)
    dot = two(sz, sz) + 0.5 * (two(sp_, sp_.T) + two(sp_.T, sp_))
    j, b, d, h = 0.7, -0.3, 0.45, 0.2
    matrix = (j * dot + b * dot @ dot + d * (two(sz @ sz, np.eye(3)) + two(np.eye(3), sz @ sz))
              + h * two(sz, np.eye(3)))
    strings = strings_of_orders(basis, [matrix])
    couplings, residual = name_strings(model, basis, strings, 1)
    found = {(c.kind, c.sites): c.value for c in couplings}
    assert not residual
    assert found[("exchange", (0, 1))] == pytest.approx(j)
    assert found[("biquadratic", (0, 1))] == pytest.approx(b)
    assert found[("single-ion", (0,))] == pytest.approx(d)
    assert found[("single-ion", (1,))] == pytest.approx(d)
    assert found[("field", (0,))] == pytest.approx([0, 0, h])


def test_infinite_easy_axis_chain_classes():
    # the linked-cluster expansion of the infinite chain reads the same pseudo-spin couplings
    # (every second-order process lives on one bond; one bond and one site per unit cell)
    j = 0.1
    text = f"""
[lattice]
shape = "chain"
boundary = "infinite"
[site]
type = "spin"
spin = 1
[parameters]
D = {D}
J = {j}
{term_text("product", "D", operators=["Sz", "Sz"], sites="all", label="anisotropy")}
{term_text("exchange", "J", bonds="nearest", label="exchange")}
[perturbation]
unperturbed = ["anisotropy"]
order = 2
"""
    result = derive(model_of(text), 2)
    classes = {(c.kind, c.name): c for c in result.classes}
    jz, jxy, _ = _xxz(j)
    iso = (2 * jxy + jz) / 3
    assert classes[("exchange", "nearest")].value == pytest.approx(iso, rel=1e-10)
    np.testing.assert_allclose(np.diag(classes[("anisotropy", "nearest")].value),
                               [jxy - iso, jxy - iso, jz - iso], rtol=1e-10, atol=1e-14)
    assert classes[("constant", "constant")].value == pytest.approx(D - j**2 / (4 * abs(D)))
