"""The sweep: exact levels against the coupling factor lambda, with avoided and true crossings.

:func:`sweep_levels` follows the lowest exact levels of ``H0 + lambda V`` (per S^z block when
both conserve it), the level grown from the reference state, and the series' partial sums,
and marks avoided crossings (between levels V couples) and true crossings (between S^z
sectors).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

from lowfold.build.basis import Basis
from lowfold.build.compiled import compile_operator
from lowfold.build.labels import twice_sz
from lowfold.errors import ModelError
from lowfold.model.model import Model
from lowfold.results import AvoidedCrossing, LevelCrossing, Sweep
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["lambda_grid", "sector_blocks", "sweep_levels", "sweep_warnings", "MAX_SWEEP_POINTS"]

MAX_SWEEP_POINTS = 2000


def lambda_grid(start: float, stop: float, count: int) -> np.ndarray:
    """``count`` equally spaced coupling factors from ``start`` to ``stop``; ModelError unless
    both are finite and different and 2 <= count <= MAX_SWEEP_POINTS."""
    if count < 2 or count > MAX_SWEEP_POINTS or not (np.isfinite(start) and np.isfinite(stop)) \
            or start == stop:
        raise ModelError(f"a sweep needs 2 to {MAX_SWEEP_POINTS} points between two different "
                         "finite values of lambda")
    return np.linspace(start, stop, count)


def sector_blocks(model: Model, basis: Basis):
    """Split the basis into S^z blocks when H0 and V conserve S^z (labels, index arrays)."""
    h_all = compile_operator(model)
    if not (model.site.has_spin and h_all.conserves_sz and model.sector.sz is None):
        return ["all"], [np.arange(basis.size)]
    sz2 = twice_sz(model, basis.states)
    values = np.unique(sz2)
    return [f"Sz={Fraction(int(s), 2)}" for s in values], [np.flatnonzero(sz2 == s) for s in values]


def sweep_levels(model: Model, basis: Basis, h0, v, psi0: np.ndarray, result,
                 lambdas: np.ndarray) -> Sweep:
    """The lowest exact levels of ``h0 + lambda v`` at each of ``lambdas`` (CSR matrices on
    ``basis``), the level followed from ``psi0``, the partial sums of the series ``result``
    (:class:`~lowfold.perturbation.series.SeriesResult`) and the crossings."""
    names, blocks = sector_blocks(model, basis)
    k_total = min(6, basis.size)
    rows, labels, followed, coupled_gaps, sector_lowest = [], [], [], [], []
    vector = psi0
    v_scale = max(abs(v).max() if v.nnz else 0.0, 1e-300)
    for lam in lambdas:
        h = (h0 + lam * v).tocsr()
        values, owners, vecs = [], [], []
        for b, idx in enumerate(blocks):
            sub = h[idx][:, idx]
            k = min(k_total, idx.size)
            e, vec = lowest_eigenpairs(sub, k, vectors=True)
            full = np.zeros((basis.size, e.size), dtype=vec.dtype)
            full[idx] = vec
            values.extend(e.tolist()), owners.extend([b] * e.size), vecs.append(full)
        vecs = np.hstack(vecs)
        sector_lowest.append([min(e for e, o in zip(values, owners) if o == b) for b in range(len(blocks))])
        order = np.argsort(values)[:k_total]
        overlaps = np.abs(vecs.conj().T @ vector)
        best = int(np.argmax(overlaps))
        followed.append(values[best])
        vector = vecs[:, best]
        energies, vecs = np.array(values)[order], vecs[:, order]
        rows.append(energies)
        labels.append(np.array(owners)[order])
        coupled_gaps.append(_coupled_gaps(energies, np.abs(vecs.conj().T @ (v @ vecs)), v_scale))
    levels, level_sectors = np.array(rows), np.array(labels)
    orders = list(range(2, result.order + 1, 2)) or [result.order]
    with np.errstate(over="ignore", invalid="ignore"):   # overflow: see sweep_warnings
        series = {n: np.array([result.energy(l, order=n) for l in lambdas]) for n in orders}
    lambdas, followed = np.asarray(lambdas), np.array(followed)
    avoided = _avoided_crossings(lambdas, levels, level_sectors, names, coupled_gaps)
    crossings = _true_crossings(lambdas, levels, names, np.array(sector_lowest))
    scale = result.smallest_denominator if np.isfinite(result.smallest_denominator) else 1.0
    useful = {}
    for n, values in series.items():
        bad = np.flatnonzero(~(np.abs(values - followed) <= 0.01 * abs(scale)))   # NaN: bad
        useful[n] = None if bad.size and bad[0] == 0 else float(
            lambdas[bad[0] - 1] if bad.size else lambdas[-1])
    return Sweep(lambdas, levels, tuple(names), level_sectors, followed, series, tuple(avoided),
                 tuple(crossings), useful)


def sweep_warnings(sweep: Sweep) -> list[str]:
    """Sentences on numbers of ``sweep`` that are not finite (the series' partial sums or the
    exact levels overflow at large lambda); such numbers are written as null in JSON."""
    def first_bad(values):
        bad = ~np.isfinite(np.asarray(values, dtype=float))
        rows = bad.reshape(bad.shape[0], -1).any(axis=1)
        return float(sweep.lambdas[np.flatnonzero(rows)[0]]) if rows.any() else None

    out = []
    orders = {n: first_bad(v) for n, v in sweep.series.items()}
    orders = {n: lam for n, lam in orders.items() if lam is not None}
    if orders:
        out.append(f"the partial sums of order {', '.join(map(str, orders))} overflow (or are "
                   f"undefined) from lambda = {min(orders.values(), key=abs):.4g}: not "
                   "finite, null in JSON")
    for name, values in (("the exact levels", sweep.levels), ("the followed level", sweep.followed)):
        lam = first_bad(values)
        if lam is not None:
            out.append(f"{name} overflow (or are undefined) from lambda = {lam:.4g}: not "
                       "finite, null in JSON")
    return out


def _coupled_gaps(energies, coupling, scale) -> list[tuple[float, int]]:
    """For each level, the gap to the nearest higher level that V couples to it."""
    out = []
    for j in range(energies.size):
        partners = [k for k in range(j + 1, energies.size) if coupling[j, k] > 1e-8 * scale]
        out.append((energies[partners[0]] - energies[j], partners[0]) if partners else (np.inf, -1))
    return out


def _avoided_crossings(lam, levels, owners, sectors, coupled_gaps) -> list[AvoidedCrossing]:
    """Pronounced local minima, in lambda, of the gap between a level and the nearest higher
    level that V couples to it (an uncoupled level running between them does not hide the
    repulsion)."""
    n_lam = lam.size
    tol = 1e-8 * max(1.0, float(np.abs(levels).max()))
    found = []
    for j in range(levels.shape[1]):
        gaps = np.array([coupled_gaps[i][j][0] for i in range(n_lam)])
        for i in range(1, n_lam - 1):
            if not np.isfinite(gaps[i]):
                continue
            left = gaps[:i][np.isfinite(gaps[:i])]
            right = gaps[i + 1:][np.isfinite(gaps[i + 1:])]
            if left.size and right.size and tol < gaps[i] <= gaps[i + 1] and gaps[i] < gaps[i - 1] \
                    and gaps[i] < 0.5 * min(left.max(), right.max()):
                partner = coupled_gaps[i][j][1]
                found.append(AvoidedCrossing(float(lam[i]), float(gaps[i]), (j, int(partner)),
                                             sectors[owners[i, j]]))
    return found


def _true_crossings(lam, levels, sectors, sector_lowest: np.ndarray) -> list[LevelCrossing]:
    """The lowest levels of two S^z sectors changing order (below the highest level shown)."""
    tol = 1e-8 * max(1.0, float(np.abs(levels).max()))
    top = levels[:, -1]                       # the highest level shown at each lambda
    found = []
    for a in range(len(sectors)):
        for b in range(a + 1, len(sectors)):
            diff = sector_lowest[:, a] - sector_lowest[:, b]
            signs = np.where(np.abs(diff) > tol, np.sign(diff), 0)
            nonzero = np.flatnonzero(signs)
            for i0, i1 in zip(nonzero[:-1], nonzero[1:]):
                low = max(sector_lowest[i0, a], sector_lowest[i0, b])
                if signs[i0] != signs[i1] and low <= top[i0] + tol:
                    found.append(LevelCrossing(float(0.5 * (lam[i0] + lam[i1])),
                                               (sectors[a], sectors[b])))
    return found
