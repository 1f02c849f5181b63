"""Exact results and dense Kronecker-product builds of spin-1/2 models, each with its source.

Conventions: S = sigma / 2; site 0 is the leftmost Kronecker factor; the spin label of a
basis state has one letter per site, site 0 first, u = S^z +1/2 (lowfold's labels).
"""

from __future__ import annotations

from fractions import Fraction
from functools import reduce

import numpy as np

PAULI_X = np.array([[0.0, 1.0], [1.0, 0.0]])
PAULI_Y = np.array([[0.0, -1j], [1j, 0.0]])
PAULI_Z = np.array([[1.0, 0.0], [0.0, -1.0]])


def site_op(op, i, n_sites):
    """``op`` on site i of n spin-1/2 (site 0 the leftmost Kronecker factor, |u> = (1, 0))."""
    return reduce(np.kron, [op if j == i else np.eye(2) for j in range(n_sites)])


def heisenberg(bonds, n_sites):
    """sum over bonds of S_i.S_j, S = sigma / 2 (dense, real)."""
    out = sum(site_op(p, i, n_sites) @ site_op(p, j, n_sites)
              for i, j in bonds for p in (PAULI_X, PAULI_Y, PAULI_Z)) / 4
    return np.real(out)


def spin_z_total(n_sites):
    return np.real(sum(site_op(PAULI_Z, i, n_sites) for i in range(n_sites)).diagonal()) / 2


def label_index(label):
    """Index of a spin label in the Kronecker basis (u -> bit 0, site 0 most significant)."""
    return int("".join("0" if c == "u" else "1" for c in label), 2)


def followed_eigenvalue(h0, v, psi0, steps=400):
    """Eigenvalue of h0 + v grown from the eigenvector psi0 of h0 along lambda in [0, 1]
    by maximal overlap in small steps (numpy eigh; common practice)."""
    vector = psi0
    for lam in np.linspace(0.0, 1.0, steps + 1)[1:]:
        values, vectors = np.linalg.eigh(h0 + lam * v)
        k = int(np.argmax(np.abs(vectors.T.conj() @ vector)))
        vector = vectors[:, k]
    return values[k]


def binom_half(j):
    """C(1/2, j) exactly: Taylor coefficients of sqrt(1 + x) (binomial series)."""
    out = Fraction(1)
    for i in range(j):
        out *= (Fraction(1, 2) - i) / (i + 1)
    return out


def pfeuty_per_site(max_order):
    """Taylor coefficients in g of e(g) = -(1/pi) int_0^pi sqrt(1 + g^2 + 2 g cos k) dk,
    the ground-state energy per site of the infinite chain (Pfeuty, Ann. Phys. 57, 79
    (1970)), as exact fractions.  sqrt(1 + g^2 + 2 g cos k) = |1 + g e^{ik}|
    = sum_{a,b} C(1/2,a) C(1/2,b) g^(a+b) e^{ik(a-b)}; the k average keeps a = b:
    e(g) = -sum_a C(1/2,a)^2 g^(2a) (binomial series; common practice)."""
    coeffs = [Fraction(0)] * (max_order + 1)
    for a in range(max_order // 2 + 1):
        coeffs[2 * a] = -binom_half(a) ** 2
    return coeffs


def ring_coefficients(n_sites, max_order):
    """Exact Taylor coefficients in g of the ground-state energy of the periodic ring of
    n_sites: E = -sum_k sqrt(1 + g^2 + 2 g cos k), k = pi (2m + 1) / L (Jordan-Wigner
    fermions with even parity take antiperiodic momenta: Lieb, Schultz and Mattis, Ann.
    Phys. 16, 407 (1961); Pfeuty 1970).  With the expansion above, sum_k e^{ik(a-b)} =
    L (-1)^((a-b)/L) when L divides a - b, else 0."""
    coeffs = []
    for n in range(max_order + 1):
        total = Fraction(0)
        for a in range(n + 1):
            b = n - a
            if (a - b) % n_sites == 0:
                total += binom_half(a) * binom_half(b) * (-1) ** (abs(a - b) // n_sites)
        coeffs.append(-n_sites * total)
    return coeffs


def ring_energy(n_sites, g):
    """Closed-form ground-state energy of the ring (same source as ring_coefficients)."""
    k = np.pi * (2 * np.arange(n_sites) + 1) / n_sites
    return -np.sum(np.sqrt(1 + g * g + 2 * g * np.cos(k)))


def tfim_dense(n_sites, g):
    """H0 = -sum sigma^z, V = -g sum X X on a ring, by Kronecker products."""
    h0 = -sum(site_op(PAULI_Z, i, n_sites) for i in range(n_sites))
    v = -g * sum(site_op(PAULI_X, i, n_sites) @ site_op(PAULI_X, (i + 1) % n_sites, n_sites)
                 for i in range(n_sites))
    return h0, v
