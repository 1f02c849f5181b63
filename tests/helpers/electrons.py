"""Independent references for electrons with complex and spin-dependent hopping.

Two builders, neither using lowfold:

* :func:`quspin_electron_levels` -- QuSpin (P. Weinberg and M. Bukov, SciPost Phys. 2, 003
  (2017)) with the electrons as spinless fermions on ``2N`` modes, mode ``i + a N`` for site
  ``i`` and spin ``a`` (0 = up, 1 = down), so that spin-flipping hops are plain ``"+-"``
  strings (QuSpin's ``["+-", [[J, m, n]]]`` is ``J c+_m c_n`` with full fermionic signs);
* :func:`dense_electrons` -- a dense Jordan-Wigner build in numpy (common practice) on the
  same modes, with the electron spin operators ``S_i = (1/2) c+_i sigma c_i`` for
  expectation values.

A hop is ``(i, j, T)`` with ``T`` a 2x2 matrix: it adds ``-sum_ab c+_{ia} T_ab c_{jb} + h.c.``
(the convention of docs/model-files.md for ``hopping`` with ``phases`` and ``soc``).
"""

from __future__ import annotations

from functools import reduce

import numpy as np

PAULI = (np.array([[0, 1], [1, 0]], dtype=complex), np.array([[0, -1j], [1j, 0]]),
         np.array([[1, 0], [0, -1]], dtype=complex))


def hop_matrix(t, soc=(0.0, 0.0, 0.0), phase=0.0) -> np.ndarray:
    """``exp(i phase) (t 1 + i lambda . sigma)``."""
    return np.exp(1j * phase) * (t * np.eye(2) + 1j * sum(l * p for l, p in zip(soc, PAULI)))


def _static(n_sites, hops, U):
    """QuSpin static list of ``-sum c+ T c + h.c. + U sum n_up n_dn`` on 2N modes."""
    hop = []
    for i, j, matrix in hops:
        for a in range(2):
            for b in range(2):
                amp = complex(matrix[a, b])
                if amp != 0:
                    hop.append([-amp, i + a * n_sites, j + b * n_sites])
                    hop.append([-amp.conjugate(), j + b * n_sites, i + a * n_sites])
    return [["+-", hop], ["nn", [[U, i, i + n_sites] for i in range(n_sites)]]]


def quspin_electron_levels(n_sites, hops, U, n_particles, *, k=None) -> np.ndarray:
    """Ascending eigenvalues (all, or the ``k`` lowest) at fixed particle number (QuSpin's
    ``eigsh`` for the ``k`` lowest of more than 2000 states, else dense)."""
    from quspin.basis import spinless_fermion_basis_general
    from quspin.operators import hamiltonian

    basis = spinless_fermion_basis_general(2 * n_sites, Nf=n_particles)
    h = hamiltonian(_static(n_sites, hops, U), [], basis=basis, dtype=np.complex128,
                    check_herm=True, check_pcon=True, check_symm=False)
    if k is not None and basis.Ns > 2000:
        return np.sort(h.eigsh(k=k, which="SA", return_eigenvectors=False, tol=1e-12))
    values = np.linalg.eigvalsh(h.toarray())
    return values if k is None else values[:k]


def _annihilators(n_modes):
    """Dense ``c_m`` on the 2**n_modes Fock space (Jordan-Wigner, mode 0 leftmost)."""
    lower = np.array([[0.0, 1.0], [0.0, 0.0]])
    parity = np.diag([1.0, -1.0])
    return [reduce(np.kron, [parity] * m + [lower] + [np.eye(2)] * (n_modes - m - 1))
            for m in range(n_modes)]


def dense_electrons(n_sites, hops, U, n_particles):
    """``(H, spins)`` restricted to ``n_particles``: ``spins[i][a]`` is ``S^a_i``."""
    c = _annihilators(2 * n_sites)
    cd = [m.conj().T for m in c]
    dim = 2 ** (2 * n_sites)
    h = np.zeros((dim, dim), dtype=complex)
    for i, j, matrix in hops:
        for a in range(2):
            for b in range(2):
                term = matrix[a, b] * cd[i + a * n_sites] @ c[j + b * n_sites]
                h -= term + term.conj().T
    for i in range(n_sites):
        h += U * cd[i] @ c[i] @ cd[i + n_sites] @ c[i + n_sites]
    number = sum(cd[m] @ c[m] for m in range(2 * n_sites)).diagonal().real
    keep = np.flatnonzero(np.isclose(number, n_particles))
    spins = [[0.5 * sum(PAULI[x][a, b] * cd[i + a * n_sites] @ c[i + b * n_sites]
                        for a in range(2) for b in range(2))[np.ix_(keep, keep)]
              for x in range(3)] for i in range(n_sites)]
    return h[np.ix_(keep, keep)], spins


def chirality_operator(spins, i, j, k) -> np.ndarray:
    """``S_i . (S_j x S_k)`` from spin operator matrices."""
    out = 0
    for a, b, c in [(0, 1, 2), (1, 2, 0), (2, 0, 1)]:
        out = out + spins[i][a] @ (spins[j][b] @ spins[k][c] - spins[j][c] @ spins[k][b])
    return out
