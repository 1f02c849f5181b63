"""Perturbation series of one state: energies to high order, convergence and validity.

:func:`state_series` runs the Rayleigh-Schroedinger series of the eigenvalue that grows out
of one eigenstate of H0 (the lowest by default), compares partial sums and Pade values with
the exact eigenvalue followed adiabatically from the H0 state, estimates the radius of
convergence (Domb-Sykes), and with a sweep follows the lowest exact levels as the coupling
grows, marking avoided and true crossings.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Callable

import numpy as np
import scipy.linalg as la

from lowfold.build.basis import Basis
from lowfold.errors import LowfoldError, ModelError
from lowfold.solve.exact import lowest_eigenpairs
from lowfold.build.hamiltonian import Hamiltonian, build_basis, hamiltonian_matrix
from lowfold.build.labels import state_labels, twice_sz
from lowfold.build.compiled import compile_operator
from lowfold.model.model import Model
from lowfold.perturbation.convergence import pade_estimate, partial_sums, ratio_test
from lowfold.perturbation.series import SeriesResult, rayleigh_schrodinger, rayleigh_schrodinger_general

__all__ = ["StateSeries", "Sweep", "state_series", "parse_sweep", "MAX_ORDER"]

MAX_ORDER = 200
DENSE_FOLLOW_LIMIT = 600      # follow the exact level by dense diagonalisation up to here


@dataclass(eq=False)
class Sweep:
    """Exact levels against the coupling factor lambda (H = H0 + lambda V)."""

    lambdas: np.ndarray
    levels: np.ndarray                 # (n_lambda, k) lowest levels, ascending per lambda
    sectors: list[str]                 # symmetry label of each column, per lambda below
    level_sectors: np.ndarray          # (n_lambda, k) index into sectors
    followed: np.ndarray               # exact level grown from the reference state
    series: dict[int, np.ndarray]      # order -> partial sums at each lambda
    avoided: list[dict] = field(default_factory=list)
    crossings: list[dict] = field(default_factory=list)
    useful_up_to: dict[int, float | None] = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"lambda": self.lambdas.tolist(), "levels": self.levels.tolist(),
                "sectors": self.sectors, "level_sectors": self.level_sectors.tolist(),
                "followed": self.followed.tolist(),
                "series": {str(n): v.tolist() for n, v in self.series.items()},
                "avoided_crossings": self.avoided, "crossings": self.crossings,
                "useful_up_to": {str(n): v for n, v in self.useful_up_to.items()}}


@dataclass(eq=False)
class StateSeries:
    """Result of :func:`state_series`; ``to_dict`` gives the ``lowfold series --json`` object."""

    model: Model
    reference: str
    result: SeriesResult
    exact: float | None
    pade: dict | None
    ratio: dict | None
    validity_ratio: float | None
    first_order: list[dict]
    second_order: list[dict]
    sweep: Sweep | None = None
    warnings: list[str] = field(default_factory=list)

    @property
    def energies(self) -> np.ndarray:
        return self.result.energies

    def to_dict(self) -> dict:
        sums = partial_sums(self.energies)
        errors = None
        if self.exact is not None:
            errors = {str(n): float(abs(s - self.exact)) for n, s in enumerate(sums)}
        out = {
            "orders": {str(n): float(e) for n, e in enumerate(self.energies)},
            "energy": float(sums[-1]),
            "diagnostics": {
                "reference": self.reference,
                "partial_sums": [float(s) for s in sums],
                "exact": self.exact,
                "error_by_order": errors,
                "pade": self.pade,
                "ratio_test": self.ratio,
                "validity_ratio": self.validity_ratio,
                "first_order_norm": float(self.result.first_order_norm),
                "first_order_state": self.first_order,
                "second_order_contributions": self.second_order,
                "smallest_denominator": _finite(self.result.smallest_denominator),
            },
            "warnings": list(self.warnings) + list(self.result.warnings),
        }
        if self.sweep is not None:
            out["sweep"] = self.sweep.to_dict()
        return out


def _finite(x):
    return float(x) if x is not None and np.isfinite(x) else None


# --------------------------------------------------------------------------- input

def parse_sweep(text: str) -> np.ndarray:
    """``"lambda=0:1:41"`` -> 41 values from 0 to 1 (start:stop:count)."""
    match = re.fullmatch(r"\s*lambda\s*=\s*([^:]+):([^:]+):(\d+)\s*", text or "")
    if not match:
        raise ModelError(f"--sweep must look like lambda=START:STOP:COUNT (e.g. lambda=0:1:41), got {text!r}")
    try:
        start, stop = float(match.group(1)), float(match.group(2))
    except ValueError:
        raise ModelError(f"--sweep: START and STOP must be numbers, got {text!r}") from None
    count = int(match.group(3))
    if count < 2 or count > 2000 or not (np.isfinite(start) and np.isfinite(stop)) or start == stop:
        raise ModelError("--sweep: need 2 to 2000 points between two different finite values")
    return np.linspace(start, stop, count)


def _reference_index(model: Model, basis: Basis, h0_diag: np.ndarray, state: str | None) -> int:
    if state is None:
        return int(np.argmin(h0_diag))
    level = re.fullmatch(r"level:(\d+)", state.strip())
    if level:
        values = np.unique(np.round(h0_diag, 10))
        k = int(level.group(1))
        if k >= values.size:
            raise ModelError(f"--state level:{k}: H0 has only {values.size} distinct levels")
        return int(np.flatnonzero(np.abs(h0_diag - values[k]) <= 1e-9 * max(1, abs(values[k])))[0])
    labels = state_labels(model, basis.states) if basis.size <= 2_000_000 else []
    try:
        return labels.index(state.strip())
    except ValueError:
        example = labels[int(np.argmin(h0_diag))] if labels else "..."
        raise ModelError(f"--state {state!r} is not a basis state of the sector (labels look "
                         f"like {example!r}, or use level:K)") from None


# --------------------------------------------------------------------------- the job

def state_series(model: Model, order: int | None = None, *, state: str | None = None,
                 sweep: np.ndarray | None = None,
                 progress: Callable[[str], None] | None = None) -> StateSeries:
    """Rayleigh-Schroedinger series of one state of H0 with convergence analysis.

    Parameters
    ----------
    model : Model
        With a ``[perturbation]`` table naming H0.
    order : int, optional
        Highest order (default: the file's), 1 .. MAX_ORDER.
    state : str, optional
        A basis-state label (as ``lowfold`` prints them, e.g. ``"uudd"``) or ``"level:K"``
        for the K-th distinct H0 level; default the lowest H0 state.
    sweep : array, optional
        Coupling factors lambda at which to follow the lowest exact levels.
    """
    say = progress or (lambda message: None)
    spec = model.perturbation
    if spec is None:
        model.unperturbed_labels
    order = spec.order if order is None else order
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or not 1 <= order <= MAX_ORDER:
        raise ModelError(f"order must be an integer from 1 to {MAX_ORDER}, got {order!r}")
    basis = build_basis(model)
    say(f"building H0 and V on {basis.size:,} states")
    h0_hamiltonian = Hamiltonian.of(model, model.unperturbed_labels, basis)
    h0 = h0_hamiltonian.to_csr()
    h0_hamiltonian.check_hermitian(h0)
    v = hamiltonian_matrix(model, basis, model.perturbation_labels)
    warnings: list[str] = []
    say(f"series to order {order}")
    if h0_hamiltonian.operator.is_diagonal:
        h0_diag = np.real(h0_hamiltonian.diagonal()).astype(float)
        index = _reference_index(model, basis, h0_diag, state)
        result = rayleigh_schrodinger(h0_diag, v, index, order)
        reference = state_labels(model, basis.states[[index]])[0]
        psi0 = np.zeros(basis.size)
        psi0[index] = 1.0
        first, second, validity = _explicit_low_orders(model, basis, h0_diag, v, index, result)
    else:
        psi0, e0, reference, validity = _h0_eigenstate(h0, v, state)
        result = rayleigh_schrodinger_general(h0, v, psi0, e0, order)
        first, second = [], []
        warnings.append("H0 is not diagonal: the series used iterative solves; no list of "
                        "intermediate states")
    say("exact eigenvalue")
    exact = _exact_followed(model, basis, h0, v, psi0, warnings)
    pade, ratio = _convergence(result.energies, warnings)
    out = StateSeries(model, reference, result, exact, pade, ratio, validity, first, second,
                      warnings=warnings)
    if sweep is not None:
        say("sweeping the coupling")
        out.sweep = _sweep(model, basis, h0, v, psi0, result, sweep)
    return out


def _explicit_low_orders(model, basis, h0_diag, v, index, result):
    """First-order state and second-order contributions with labels; validity ratio."""
    column = v[:, index].toarray().ravel()
    column[index] = 0
    denominators = h0_diag[index] - h0_diag
    connected = np.flatnonzero(column != 0)
    partners = set(result.degenerate_partners.tolist()) | {index}
    usable = np.array([m for m in connected if m not in partners], dtype=np.int64)
    first, validity = [], None
    if usable.size:
        amplitude = column[usable] / denominators[usable]
        top = usable[np.argsort(-np.abs(amplitude))[:10]]
        labels = state_labels(model, basis.states[top])
        first = [{"state": lab, "amplitude": float(np.real(column[m] / denominators[m]))}
                 for lab, m in zip(labels, top)]
        validity = float(np.max(np.abs(column[usable])) / np.min(np.abs(denominators[usable])))
    second = []
    entries = result.second_order_contributions
    if entries:
        labels = state_labels(model, basis.states[[int(e[0]) for e in entries]])
        second = [{"state": lab, "coupling_squared": float(e[1]), "denominator": float(e[2]),
                   "contribution": float(e[3])} for lab, e in zip(labels, entries)]
    return first, second, validity


def _h0_eigenstate(h0, v, state):
    """Eigenstate of a non-diagonal H0 (lowest, or ``level:K``) and a validity ratio."""
    k = 0
    if state is not None:
        level = re.fullmatch(r"level:(\d+)", state.strip())
        if not level:
            raise ModelError("H0 is not diagonal: choose the state as level:K (K-th eigenstate of H0)")
        k = int(level.group(1))
    count = min(h0.shape[0], k + 3)
    values, vectors = lowest_eigenpairs(h0, count, vectors=True)
    if k >= values.size:
        raise ModelError(f"--state level:{k}: H0 has only {values.size} levels")
    e0, psi0 = values[k], vectors[:, k]
    others = np.delete(values, k)
    spacing = np.min(np.abs(others - e0)) if others.size else np.inf
    if spacing <= 1e-9 * max(1.0, abs(e0)):
        raise ModelError(f"H0 level {k} is degenerate: use lowfold derive for a degenerate "
                         "treatment")
    v_psi = v @ psi0
    off = v_psi - np.vdot(psi0, v_psi) * psi0
    return psi0, float(e0), f"level:{k}", float(np.linalg.norm(off) / spacing)


def _exact_followed(model, basis, h0, v, psi0, warnings) -> float | None:
    """Exact eigenvalue of H0 + V grown adiabatically from ``psi0`` (lambda from 0 to 1),
    within the reference's S^z block.  Small blocks: dense diagonalisation along lambda with
    the step halved wherever the overlap with the previous vector drops (narrow avoided
    crossings are followed adiabatically).  Large blocks: Lanczos for the lowest level,
    valid when the reference is the lowest H0 state of its block."""
    idx = _reference_block(model, basis, psi0)
    h0b, vb, ref = h0[idx][:, idx], v[idx][:, idx], psi0[idx]
    if idx.size <= DENSE_FOLLOW_LIMIT:
        return _follow_dense(h0b.toarray(), vb.toarray(), ref)
    e_ref = float(np.real(np.vdot(ref, h0b @ ref)))
    if e_ref > lowest_eigenpairs(h0b, 1)[0][0] + 1e-9 * max(1.0, abs(e_ref)):
        warnings.append("exact comparison skipped: following an excited state needs a block "
                        f"of at most {DENSE_FOLLOW_LIMIT} states")
        return None
    try:
        values, vectors = lowest_eigenpairs(h0b + vb, 1, vectors=True)
    except LowfoldError as exc:
        warnings.append(f"exact comparison skipped: {exc}")
        return None
    if abs(np.vdot(ref, vectors[:, 0])) < 0.1:
        warnings.append("the exact ground state of its block has little overlap with the "
                        "reference state: a level crossing may lie between lambda = 0 and 1")
    return float(values[0])


def _reference_block(model, basis, psi0) -> np.ndarray:
    """Indices of the S^z block that holds the reference state (all states if none)."""
    support = np.flatnonzero(np.abs(psi0) > 1e-12)
    for idx in _sector_blocks(model, basis)[1]:
        if np.all(np.isin(support, idx)):
            return idx
    return np.arange(basis.size)


def _follow_dense(h0, v, vector, *, max_step=0.05, min_step=1e-5) -> float:
    lam, step, value = 0.0, max_step, float(np.real(np.vdot(vector, h0 @ vector)))
    while lam < 1.0 - 1e-12:
        step = min(step, 1.0 - lam)
        values, vectors = la.eigh(h0 + (lam + step) * v)
        overlaps = np.abs(vectors.conj().T @ vector)
        k = int(np.argmax(overlaps))
        if overlaps[k] < 0.99 and step > min_step:
            step /= 2
            continue
        lam += step
        value, vector = float(values[k]), vectors[:, k]
        step = min(2 * step, max_step)
    return value


def _convergence(energies, warnings):
    pade = ratio = None
    try:
        estimate = pade_estimate(energies)
        pade = {"value": float(estimate.value), "spread": _finite(estimate.spread),
                "approximant": list(estimate.approximant)}
    except (ModelError, np.linalg.LinAlgError, ValueError) as exc:
        warnings.append(f"no Pade estimate: {exc}")
    try:
        test = ratio_test(energies)
        ratio = {"variable": test["variable"], "radius": _finite(test["radius"]),
                 "singularity": _finite(test["singularity"]), "side": test["side"],
                 "exponent": _finite(test["exponent"]), "fit_residual": test["fit_residual"]}
    except ModelError as exc:
        warnings.append(f"no ratio test: {exc}")
    return pade, ratio


# --------------------------------------------------------------------------- sweep

def _sector_blocks(model: Model, basis: Basis):
    """Split the basis into S^z blocks when H0 and V conserve S^z (labels, index arrays)."""
    h_all = compile_operator(model)
    if not (model.site.has_spin and h_all.conserves_sz and model.sector.sz is None):
        return ["all"], [np.arange(basis.size)]
    sz2 = twice_sz(model, basis.states)
    values = np.unique(sz2)
    return [f"Sz={Fraction(int(s), 2)}" for s in values], [np.flatnonzero(sz2 == s) for s in values]


def _sweep(model, basis, h0, v, psi0, result, lambdas) -> Sweep:
    names, blocks = _sector_blocks(model, basis)
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
    series = {n: np.array([result.energy(l, order=n) for l in lambdas])
              for n in range(2, result.order + 1, 2)} or {result.order: np.array([result.energy(l) for l in lambdas])}
    sweep = Sweep(np.asarray(lambdas), levels, names, level_sectors, np.array(followed), series)
    _mark_crossings(sweep, coupled_gaps, np.array(sector_lowest))
    scale = result.smallest_denominator if np.isfinite(result.smallest_denominator) else 1.0
    for n, values in series.items():
        bad = np.flatnonzero(np.abs(values - sweep.followed) > 0.01 * abs(scale))
        sweep.useful_up_to[n] = None if bad.size and bad[0] == 0 else float(
            sweep.lambdas[bad[0] - 1] if bad.size else sweep.lambdas[-1])
    return sweep


def _coupled_gaps(energies, coupling, scale) -> list[tuple[float, int]]:
    """For each level, the gap to the nearest higher level that V couples to it."""
    out = []
    for j in range(energies.size):
        partners = [k for k in range(j + 1, energies.size) if coupling[j, k] > 1e-8 * scale]
        out.append((energies[partners[0]] - energies[j], partners[0]) if partners else (np.inf, -1))
    return out


def _mark_crossings(sweep: Sweep, coupled_gaps, sector_lowest: np.ndarray) -> None:
    """Avoided crossings: pronounced local minima, in lambda, of the gap between a level and
    the nearest higher level that V couples to it (an uncoupled level running between them
    does not hide the repulsion); true crossings: the lowest levels of two S^z sectors
    changing order."""
    lam, levels, owners = sweep.lambdas, sweep.levels, sweep.level_sectors
    n_lam = lam.size
    tol = 1e-8 * max(1.0, float(np.abs(levels).max()))
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
                sweep.avoided.append({"lambda": float(lam[i]), "gap": float(gaps[i]),
                                      "levels": [j, int(partner)],
                                      "sector": sweep.sectors[owners[i, j]]})
    top = levels[:, -1]                       # the highest level shown at each lambda
    for a in range(len(sweep.sectors)):
        for b in range(a + 1, len(sweep.sectors)):
            diff = sector_lowest[:, a] - sector_lowest[:, b]
            signs = np.where(np.abs(diff) > tol, np.sign(diff), 0)
            nonzero = np.flatnonzero(signs)
            for i0, i1 in zip(nonzero[:-1], nonzero[1:]):
                low = max(sector_lowest[i0, a], sector_lowest[i0, b])
                if signs[i0] != signs[i1] and low <= top[i0] + tol:
                    sweep.crossings.append({"lambda": float(0.5 * (lam[i0] + lam[i1])),
                                            "sectors": [sweep.sectors[a], sweep.sectors[b]]})
