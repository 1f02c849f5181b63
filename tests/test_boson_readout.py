"""Bose-Hubbard Mott insulator at unit filling: the particle and hole manifolds read out.

H = -t sum_<ij> (b+_i b_j + h.c.) + (U/2) sum_i n_i (n_i - 1) on a ring of L sites, H0 the U
term.  Strong-coupling expansion to second order in t/U (the scheme of Freericks & Monien,
Phys. Rev. B 53, 2691 (1996); their equation numbers are not quoted, from memory, so the
closed forms are derived here for filling n, coordination 2, ring of L >= 5 sites):

- Mott state: E_Mott = -2 L t^2 n (n+1) / U (each directed bond: amplitude t sqrt(n(n+1)),
  cost U);
- one extra particle, momentum k:
  E_p(k) - E_Mott = U n - 2 (n+1) t cos k + [4 n(n+1) - n(n+2)] t^2/U
                    - 2 n(n+1) (t^2/U) cos 2k
  (the four directed bonds at the particle lose their Mott energy; the neighbour hopping onto
  the particle costs 2U with amplitude t sqrt(n(n+2)); a background hop next to the particle
  followed by the particle filling the hole moves it two sites: t^2 n(n+1)/U);
- one hole: E_h(k) - E_Mott = -U (n-1) - 2 n t cos k + [4 n(n+1) - (n-1)(n+1)] t^2/U
                              - 2 n(n+1) (t^2/U) cos 2k.

Named couplings: particle hopping (n+1) t = 2t at first order (n = 1), hole hopping n t = t,
both n(n+1) t^2/U = 2 t^2/U to the next-nearest neighbour at second order.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers.modelfiles import lattice_text, model_of, term_text

from lowfold.jobs.derive import derive

L, N_FILL, U = 6, 1, 1.0


def _ring(t, particles, order=2):
    terms = (term_text("hopping", "t", bonds="nearest", label="hopping")
             + term_text("hubbard", "U", label="onsite"))
    text = lattice_text("chain", [L], "periodic", {"type": "boson", "max_occupation": 3}, terms,
                        sector={"particles": particles}, parameters={"t": t, "U": U})
    return model_of(text + f'\n[perturbation]\nunperturbed = ["onsite"]\norder = {order}\n')


def _mott(t, n=N_FILL):
    return -2 * L * t**2 * n * (n + 1) / U


def _band(t, kind, n=N_FILL):
    k = 2 * np.pi * np.arange(L) / L
    if kind == "particle":
        e = U * n - 2 * (n + 1) * t * np.cos(k) + (4 * n * (n + 1) - n * (n + 2)) * t**2 / U
    else:
        e = -U * (n - 1) - 2 * n * t * np.cos(k) + (4 * n * (n + 1) - (n - 1) * (n + 1)) * t**2 / U
    return np.sort(_mott(t, n) + e - 2 * n * (n + 1) * t**2 / U * np.cos(2 * k))


def test_mott_state_energy():
    t = 0.05
    result = derive(_ring(t, L), 2, compare_exact=False)
    assert result.manifold.dimension == 1
    (constant,) = [c for c in result.couplings if c.kind == "constant"]
    assert constant.orders[2] == pytest.approx(_mott(t), rel=1e-10)


@pytest.mark.parametrize("kind, particles", [("particle", L + 1), ("hole", L - 1)])
def test_second_order_band_and_hopping(kind, particles):
    t = 0.05
    result = derive(_ring(t, particles), 2, compare_exact=False)
    assert "at fixed particle number" in result.manifold.readout
    np.testing.assert_allclose(np.linalg.eigvalsh(result.matrix(2)), _band(t, kind), atol=1e-12)
    hops = {tuple(c.sites): c.orders for c in result.couplings if c.kind == f"{kind}-hopping"}
    nearest = (N_FILL + 1) * t if kind == "particle" else N_FILL * t
    for i in range(L):
        a, b = sorted((i, (i + 1) % L))
        assert hops[(a, b)][1] == pytest.approx(nearest, rel=1e-12)
        a, b = sorted((i, (i + 2) % L))
        assert hops[(a, b)][2] == pytest.approx(N_FILL * (N_FILL + 1) * t**2 / U, rel=1e-10)
    assert not [c for c in result.couplings if c.kind == "string"]


@pytest.mark.parametrize("kind, particles", [("particle", L + 1), ("hole", L - 1)])
def test_error_against_quspin_falls_like_t_cubed(kind, particles):
    pytest.importorskip("quspin")
    from quspin.basis import boson_basis_1d
    from quspin.operators import hamiltonian
    errors = []
    for t in (0.04, 0.02):
        basis = boson_basis_1d(L, Nb=particles, sps=4)
        bonds = [[-t, i, (i + 1) % L] for i in range(L)]
        static = [["+-", bonds], ["-+", bonds], ["nn", [[U / 2, i, i] for i in range(L)]],
                  ["n", [[-U / 2, i] for i in range(L)]]]
        h = hamiltonian(static, [], basis=basis, dtype=np.float64, check_symm=False,
                        check_herm=False, check_pcon=False)
        exact = np.linalg.eigvalsh(h.toarray())[:L]
        errors.append(np.abs(_band(t, kind) - exact).max())
        result = derive(_ring(t, particles), 2)
        np.testing.assert_allclose(np.sort(result.check.exact)[:L], exact, atol=1e-9)
    assert np.log2(errors[0] / errors[1]) == pytest.approx(3, abs=0.2)
