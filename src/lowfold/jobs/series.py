"""The series job: the perturbation series of one state, its convergence and validity.

:func:`state_series` runs the Rayleigh-Schroedinger series of the eigenvalue that grows out
of one eigenstate of H0 (the lowest by default), compares partial sums and Pade values with
the exact eigenvalue followed adiabatically from the H0 state, and estimates the radius of
convergence (Domb-Sykes); with ``sweep`` it adds the exact levels against the coupling
(:mod:`lowfold.jobs.sweep`).
"""

from __future__ import annotations

import re
from typing import Callable

import numpy as np
import scipy.linalg as la

from lowfold.build.basis import Basis
from lowfold.build.hamiltonian import Hamiltonian, build_basis, hamiltonian_matrix
from lowfold.build.labels import state_labels
from lowfold.errors import LowfoldError, ModelError
from lowfold.jobs.sweep import sector_blocks, sweep_levels, sweep_warnings
from lowfold.model.model import Model
from lowfold.perturbation.convergence import convergence_warnings, pade_estimate, ratio_test
from lowfold.perturbation.diagnostics import followed_level_warnings
from lowfold.perturbation.orders import MAX_SERIES_ORDER, validate_order
from lowfold.perturbation.resolvent import DENSE_LIMIT
from lowfold.perturbation.series import rayleigh_schrodinger, rayleigh_schrodinger_general
from lowfold.results import Pade, RatioTest, SecondOrderTerm, StateAmplitude, StateSeries
from lowfold.results.common import finite
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["state_series", "MAX_ORDER"]

MAX_ORDER = MAX_SERIES_ORDER    # highest order the series job accepts (see perturbation.orders)
DENSE_FOLLOW_LIMIT = 600      # follow the exact level by dense diagonalisation up to here
MAX_FOLLOW_STEPS = 2000       # diagonalisations allowed while following it from 0 to 1


def _reference_index(model: Model, basis: Basis, h0_diag: np.ndarray, state: str | None) -> int:
    if state is None:
        return int(np.argmin(h0_diag))
    level = re.fullmatch(r"level:(\d+)", state.strip())
    if level:
        values = np.unique(np.round(h0_diag, 10))
        k = int(level.group(1))
        if k >= values.size:
            raise ModelError(f"state level:{k}: H0 has only {values.size} distinct levels")
        return int(np.flatnonzero(np.abs(h0_diag - values[k]) <= 1e-9 * max(1, abs(values[k])))[0])
    labels = state_labels(model, basis.states) if basis.size <= 2_000_000 else []
    try:
        return labels.index(state.strip())
    except ValueError:
        example = labels[int(np.argmin(h0_diag))] if labels else "..."
        raise ModelError(f"state {state!r} is not a basis state of the sector (labels look "
                         f"like {example!r}, or use level:K)") from None


# --------------------------------------------------------------------------- the job

def state_series(model: Model, order: int | None = None, *, state: str | None = None,
                 sweep: np.ndarray | None = None,
                 progress: Callable[[str], None] | None = None,
                 graph_map: Callable | None = None) -> StateSeries:
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
    graph_map : callable, optional
        Infinite lattice: how the distinct cluster graphs are computed
        (:func:`lowfold.jobs.lattice.linked_cluster_sum`; e.g. on Dask).
    """
    if model.lattice.infinite:       # energy per site by linked clusters (jobs/lattice.py)
        from lowfold.jobs.lattice import series_infinite
        return series_infinite(model, order, state=state, sweep=sweep, progress=progress,
                               graph_map=graph_map)
    say = progress or (lambda message: None)
    spec = model.perturbation
    if spec is None:
        model.unperturbed_labels
    order = spec.order if order is None else order
    order = validate_order(order, maximum=MAX_ORDER)
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
        route = ("a direct solve" if basis.size <= DENSE_LIMIT
                 else "iterative solves (MINRES) in the complement of the reference")
        warnings.append(f"H0 is not diagonal: the series used {route} instead of a sum over "
                        "basis states, so there is no list of intermediate states")
    say("exact eigenvalue")
    exact = _exact_followed(model, basis, h0, v, psi0, warnings)
    pade, ratio, estimate, test = _convergence(result.energies, warnings)
    swept = None
    if sweep is not None:
        say("sweeping the coupling")
        swept = sweep_levels(model, basis, h0, v, psi0, result, np.asarray(sweep, dtype=float))
        warnings += sweep_warnings(swept)
    warnings += _reliability_warnings(result.energies, exact, validity, estimate, test,
                                      None if sweep is None else np.asarray(sweep, dtype=float))
    return StateSeries(np.asarray(result.energies), reference, exact, pade, ratio, validity,
                       float(result.first_order_norm), tuple(first), tuple(second),
                       finite(result.smallest_denominator),
                       tuple(warnings) + tuple(result.warnings), swept, result)


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
        first = [StateAmplitude(lab, float(np.real(column[m] / denominators[m])))
                 for lab, m in zip(labels, top)]
        validity = float(np.max(np.abs(column[usable])) / np.min(np.abs(denominators[usable])))
    second = []
    entries = result.second_order_contributions
    if entries:
        labels = state_labels(model, basis.states[[int(e[0]) for e in entries]])
        second = [SecondOrderTerm(lab, float(e[1]), float(e[2]), float(e[3]))
                  for lab, e in zip(labels, entries)]
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
        raise ModelError(f"state level:{k}: H0 has only {values.size} levels")
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
        h0_dense = h0b.toarray()
        e_ref = float(np.real(np.vdot(ref, h0_dense @ ref)))
        level = la.eigvalsh(h0_dense)
        partners = int(np.sum(np.abs(level - e_ref) <= 1e-9 * max(1.0, abs(e_ref)))) - 1
        if partners > 0:
            warnings.append(f"exact comparison skipped: the reference H0 level is degenerate "
                            f"with {partners} other state(s) of its block, so no single exact "
                            "level grows out of it as lambda leaves 0")
            return None
        value = _follow_dense(h0_dense, vb.toarray(), ref)
        if value is None:
            warnings.append(f"exact comparison skipped: following the level from lambda = 0 "
                            f"to 1 took more than {MAX_FOLLOW_STEPS} diagonalisations (the "
                            "level meets others too closely)")
        return value
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
    for idx in sector_blocks(model, basis)[1]:
        if np.all(np.isin(support, idx)):
            return idx
    return np.arange(basis.size)


def _follow_dense(h0, v, vector, *, max_step=0.05, min_step=1e-5,
                  max_steps=None) -> float | None:
    """The eigenvalue of ``h0 + v`` reached by following ``vector`` (an eigenvector of
    ``h0``) along lambda from 0 to 1; None after ``max_steps`` diagonalisations
    (default :data:`MAX_FOLLOW_STEPS`)."""
    budget = MAX_FOLLOW_STEPS if max_steps is None else max_steps
    lam, step, value = 0.0, max_step, float(np.real(np.vdot(vector, h0 @ vector)))
    while lam < 1.0 - 1e-12:
        budget -= 1
        if budget < 0:
            return None
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
    """Pade and ratio-test results (objects of the JSON, and the raw estimate / dict)."""
    pade = ratio = estimate = test = None
    try:
        estimate = pade_estimate(energies)
        pade = Pade(float(estimate.value), finite(estimate.spread), tuple(estimate.approximant))
    except (ModelError, np.linalg.LinAlgError, ValueError) as exc:
        warnings.append(f"no Pade estimate: {exc}")
    try:
        test = ratio_test(energies)
        ratio = RatioTest(test["variable"], finite(test["radius"]), finite(test["singularity"]),
                          test["side"], finite(test["exponent"]), test["fit_residual"],
                          test["structure"], finite(test["relative_residual"]),
                          bool(test["reliable"]), test["reason"])
    except ModelError as exc:
        warnings.append(f"no ratio test: {exc}")
    return pade, ratio, estimate, test


def _reliability_warnings(energies, exact, validity, estimate, test, lambdas) -> list[str]:
    """Why the series should not be trusted (perturbation.convergence_warnings, at lambda = 1
    or at the sweep's largest |lambda|) and whether it describes the followed exact level
    (perturbation.followed_level_warnings, at lambda = 1)."""
    energies = np.asarray(energies)
    if np.iscomplexobj(energies):
        energies = energies.real
    lam = 1.0 if lambdas is None else float(np.max(np.abs(lambdas)))
    with np.errstate(over="ignore", invalid="ignore"):     # huge sweep lambdas: inf terms
        out = convergence_warnings(energies, lam=lam, validity_ratio=validity, ratio=test,
                                   pade=estimate if lam == 1.0 else None)
    if exact is not None:
        if estimate is not None and np.isfinite(estimate.value):
            out += followed_level_warnings(float(estimate.value), estimate.spread, exact)
        else:
            out += followed_level_warnings(float(np.sum(energies)), abs(float(energies[-1])), exact)
    return out
