"""The Lieb-Wu Bethe-ansatz equations of a finite periodic Hubbard ring, solved numerically.

H = -t sum_{j,s} (c+_{j,s} c_{j+1,s} + h.c.) + U sum_j n_{j,up} n_{j,dn} on L sites with
c_{L,s} = c_{0,s}, N electrons of which M have spin down.  For the ground state (all
charge momenta k_j and spin rapidities Lambda_a real), in logarithmic form (E. H. Lieb and
F. Y. Wu, Phys. Rev. Lett. 20, 1445 (1968)), with u = U / (4 t):

    L k_j = 2 pi I_j - sum_a 2 arctan((sin k_j - Lambda_a) / u),          j = 1..N
    sum_j 2 arctan((Lambda_a - sin k_j) / u)
        = 2 pi J_a + sum_b 2 arctan((Lambda_a - Lambda_b) / (2 u)),       a = 1..M

    E = -2 t sum_j cos k_j.

Quantum numbers (from memory, in the form of F. H. L. Essler et al., The One-Dimensional
Hubbard Model, CUP (2005), ch. 3, for the periodic ring): I_j in Z + M/2 (an integer when M
is even, a half-odd integer when M is odd) and J_a in Z + (N - M + 1)/2.  The ground state takes N (M) consecutive numbers as symmetric about
zero as these rules allow.  This is how the fermion sign of the periodic ring enters: at
half filling with M = L/2 odd the sets are symmetric; with M even the I_j are integers and the
symmetric (half-odd) set is forbidden, equivalently the symmetric set with a twist of pi in
L k_j -- the "antiperiodic effective twist" of the closed-shell free-fermion picture (common
practice).  The two mirror-image sets give the same energy (k -> -k).  The test module
checks this choice against exact diagonalisation where the other choice differs.

The equations are solved with ``scipy.optimize.root`` by continuation in U, from U = 40 t
(where the Lambda_a are near the strong-coupling solution and the k_j near 2 pi I_j / L).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import root

__all__ = ["quantum_numbers", "lieb_wu_energy"]


def quantum_numbers(count: int, parity_half: bool) -> np.ndarray:
    """``count`` consecutive numbers, half-odd integers when ``parity_half`` (else
    integers), as symmetric about zero as that allows (ties: the set shifted up)."""
    centred = np.arange(count) - (count - 1) / 2        # symmetric: half-odd iff count even
    is_half = count % 2 == 0
    return centred + (0.5 if is_half != parity_half else 0.0)


def _residual(x, L, n, u, I, J):
    k, lam = x[:n], x[n:]
    s = np.sin(k)
    charge = L * k - 2 * np.pi * I + 2 * np.arctan((s[:, None] - lam[None, :]) / u).sum(axis=1)
    spin = (2 * np.arctan((lam[:, None] - s[None, :]) / u).sum(axis=1) - 2 * np.pi * J
            - 2 * np.arctan((lam[:, None] - lam[None, :]) / (2 * u)).sum(axis=1))
    return np.concatenate([charge, spin])


def lieb_wu_energy(L: int, n: int, m: int, U: float, t: float = 1.0, *,
                   I: np.ndarray | None = None, J: np.ndarray | None = None,
                   steps: int = 40) -> float:
    """Ground-state energy of the periodic ring from the Lieb-Wu equations (``n`` electrons,
    ``m`` of them spin down, ``U > 0``).  ``I``, ``J``: other quantum numbers (default:
    the ground-state rule of the module doc).  Raises ``RuntimeError`` if the root finder
    fails or leaves a residual above 1e-10."""
    if I is None:
        I = quantum_numbers(n, parity_half=m % 2 == 1)
    if J is None:
        J = quantum_numbers(m, parity_half=(n - m + 1) % 2 == 1)
    x = np.concatenate([2 * np.pi * I / L, np.zeros(m)])
    path = np.geomspace(max(40.0 * t, U), U, steps) if U < 40.0 * t else [U]
    for value in path:
        u = value / (4 * t)
        solution = root(_residual, x, args=(L, n, u, I, J), method="hybr",
                        options={"xtol": 1e-14})
        x = solution.x
    worst = float(np.abs(_residual(x, L, n, U / (4 * t), I, J)).max())
    if worst > 1e-10:
        raise RuntimeError(f"the Lieb-Wu equations did not converge (residual {worst:.2e})")
    return float(-2 * t * np.cos(x[:n]).sum())
