"""The exact check of an effective model: its spectrum at every order against the exact
low-lying levels of the same cluster, and optionally the fitted power of the error.

For each S^z block of the manifold the block's sector is diagonalised (dense, Lanczos, or
LOBPCG started from the effective eigenvectors); the error of the sum to order n must fall
like lambda^(n+1) when the couplings of V are scaled by lambda (DESIGN.md, "Perturbation
theory used"), which ``fit_scaling`` measures at lambda = 0.8, 0.64, 0.5, 0.4.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from scipy.sparse.linalg import lobpcg

from lowfold.build.basis import sector_size
from lowfold.build.hamiltonian import build_basis, hamiltonian_matrix
from lowfold.errors import SizeError
from lowfold.model.model import Model
from lowfold.model.sector import Sector
from lowfold.results import DeriveCheck, PowerFit
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["ManifoldBlock", "exact_check", "CHECK_MAX_STATES", "SCALE_FACTORS"]

CHECK_MAX_STATES = 400_000      # largest sector block diagonalised for the exact check
DENSE_CHECK_LIMIT = 5000
SCALE_FACTORS = (1.0, 0.8, 0.64, 0.5, 0.4)


@dataclass(frozen=True)
class ManifoldBlock:
    """One S^z block of the manifold: indices into P and the sector it lives in."""

    p_positions: np.ndarray
    sector: Sector


def exact_check(model: Model, states: np.ndarray, energies: np.ndarray, orders: list,
                blocks: list[ManifoldBlock], *, fit_scaling: bool = False,
                progress: Callable[[str], None] | None = None):
    """Compare the effective spectrum of every order with the exact levels.

    Parameters
    ----------
    model : Model
    states, energies : arrays
        The manifold's basis states (integers) and their H0 energies.
    orders : list of sparse matrices
        ``H_eff,m`` on the manifold, m = 0..n.
    blocks : list of ManifoldBlock
    fit_scaling : bool
        Repeat the check at the couplings scaled by ``SCALE_FACTORS`` and fit the power.

    Returns
    -------
    (DeriveCheck or None, dict of int to PowerFit or None, list of str)
        The check, the fitted powers (when asked for), and warnings (a check skipped says why
        and returns None).
    """
    order = len(orders) - 1
    exact_all, scaled = [], {}
    factors = SCALE_FACTORS if fit_scaling else (1.0,)
    try:      # every block's size first, so that nothing is diagonalised in vain
        sizes = [sector_size(model.site, model.n_sites, b.sector) for b in blocks]
        if max(sizes) > CHECK_MAX_STATES:
            raise SizeError(f"a sector block has {max(sizes):,} states, more than the "
                            f"{CHECK_MAX_STATES:,} the exact check diagonalises")
    except SizeError as exc:
        return None, None, [f"exact check skipped: {exc}"]
    for block in blocks:
        block_model = model.with_sector(block.sector)
        basis = build_basis(block_model, max_states=CHECK_MAX_STATES)
        h0 = hamiltonian_matrix(block_model, basis, model.unperturbed_labels, check=False)
        v = hamiltonian_matrix(block_model, basis, model.perturbation_labels, check=False)
        idx = block.p_positions
        p_in_basis = basis.index(states[idx])
        at_bottom = h0.diagonal().real.min() >= energies[idx].min() - 1e-9
        if not at_bottom and basis.size > DENSE_CHECK_LIMIT:
            return None, None, ["exact check skipped: the window is not at the bottom of the "
                                f"spectrum and the sector block has {basis.size:,} states"]
        partial = [orders[m][idx][:, idx].toarray() for m in range(order + 1)]
        for factor in factors:
            effective = sum(factor**m * partial[m] for m in range(order + 1))
            guess = np.zeros((basis.size, idx.size), dtype=effective.dtype)
            effective_levels, guess[p_in_basis] = la.eigh(effective)
            exact = _exact_levels(h0 + factor * v, guess, effective_levels, at_bottom)
            if factor == 1.0:
                exact_all.extend(exact.tolist())
            running = np.zeros_like(partial[0])
            for m in range(order + 1):
                running = running + factor**m * partial[m]
                error = float(np.max(np.abs(la.eigvalsh(running) - exact)))
                scaled[(factor, m)] = max(scaled.get((factor, m), 0.0), error)
    check = DeriveCheck(tuple(sorted(exact_all)), {m: scaled[(1.0, m)] for m in range(order + 1)})
    fits = _fit_powers(scaled, factors, order, model) if fit_scaling else None
    return check, fits, []


def _exact_levels(matrix, guess: np.ndarray, effective: np.ndarray, at_bottom: bool) -> np.ndarray:
    """The exact levels the effective ones approximate: the lowest dim(P) levels when P is at
    the bottom of the spectrum, else the levels nearest the effective ones (dense only).
    Many levels of a large block are found by LOBPCG started from the effective eigenvectors
    embedded in P, with a Jacobi preconditioner (the perturbative regime makes it converge
    in a few iterations); eigsh is the fallback."""
    n, k = guess.shape
    if not at_bottom:
        values = la.eigvalsh(matrix.toarray())
        chosen = []
        for e in effective:
            free = [i for i in np.argsort(np.abs(values - e)) if i not in chosen]
            chosen.append(free[0])
        return np.sort(values[chosen])
    if n <= 1200 or (n <= DENSE_CHECK_LIMIT and k > 20):
        return la.eigvalsh(matrix.toarray(), subset_by_index=[0, k - 1])
    if k > 10:
        values = _lobpcg_levels(matrix, guess)
        if values is not None:
            return values
    return lowest_eigenpairs(matrix, k)[0]


def _lobpcg_levels(matrix, guess: np.ndarray):
    """LOBPCG from a good guess; None if it does not converge to 1e-9 residuals."""
    diag = matrix.diagonal().real
    shift = diag.min() - 1.0
    precondition = sp.diags(1.0 / (diag - shift))
    rng = np.random.default_rng(11)
    start = guess + 1e-6 * rng.standard_normal(guess.shape)
    if np.iscomplexobj(matrix.data):
        start = start.astype(complex)
    try:
        values, vectors = lobpcg(matrix, start, M=precondition, largest=False, tol=1e-10,
                                 maxiter=200, retLambdaHistory=False)
    except (np.linalg.LinAlgError, ValueError):
        return None
    residual = np.linalg.norm(matrix @ vectors - vectors * values, axis=0)
    if not np.all(residual <= 1e-7 * max(1.0, np.abs(values).max())):
        return None
    return np.sort(values)


def _fit_powers(scaled: dict, factors, order: int, model: Model) -> dict[int, PowerFit]:
    """Fitted power of the error of each order against the coupling scale factor."""
    out = {}
    floor = 1e-11 * max(1.0, max(abs(x) for x in model.parameters.values()) if model.parameters else 1.0)
    for m in range(order + 1):
        xs = [f for f in factors if scaled[(f, m)] > floor]
        if len(xs) < 3:
            out[m] = PowerFit(None, m + 1, note="errors at round-off")
            continue
        slope = float(np.polyfit(np.log(xs), np.log([scaled[(f, m)] for f in xs]), 1)[0])
        out[m] = PowerFit(slope, m + 1, ok=bool(slope >= m + 1 - 0.2))
    return out
