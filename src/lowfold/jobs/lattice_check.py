"""The exact check of an infinite lattice's couplings on a periodic cluster.

The couplings of ``derive`` on ``boundary = "infinite"`` (coupling classes, per order) are
put on a periodic cluster of the same lattice -- the same export as ``derive --export``
(:func:`lowfold.jobs.export.export_text`) run with a size, one exported model per order --
and the spectrum of the effective spin model summed to each order is compared with the
lowest exact levels of the original model on that cluster (filling of the manifold, one
S^z block at a time), as the finite check does (:mod:`lowfold.jobs.check`).

Processes that wind around the cluster.  The couplings of order ``m`` of the cluster's own
effective Hamiltonian are those of the infinite lattice, placed on the cluster, as long as
no connected set of ``m`` bonds winds around it (:mod:`lowfold.jobs.check_winding`: the
shortest winding loop has ``w`` bonds).  From order ``w`` on the cluster also has
wrap-around processes that the infinite lattice does not, so the check compares orders
``0 .. w - 1`` only, says so in a warning, and gives ``w`` as ``check["winding_loop"]``.

The cluster (:func:`check_cluster`): among the periodic clusters of 8 to 12 sites of the
lattice's shape, the one with the longest winding loop (the most orders compared; on the
chain the 12-site ring, w = 12), and of those the one with the fewest sites (more sites
with the same loop compare no further order and cost more); its exact sector blocks must
have at most ``MAX_CLUSTER_STATES`` states (the cost of the check: the half-filled Hubbard
model then takes the 10-site ring, the 3x3 square and triangular clusters, the 2x2
honeycomb cluster of 8 sites; no kagome cluster of 8 to 12 sites fits, and its check is
skipped with a warning).  ``size`` takes another cluster, e.g. the 12-site ring.
"""

from __future__ import annotations

import dataclasses
import itertools
import tomllib
from fractions import Fraction
from typing import Callable

import numpy as np
import scipy.linalg as la

from lowfold.build.basis import sector_size
from lowfold.build.hamiltonian import build_basis, compile_operator, hamiltonian_matrix
from lowfold.errors import LowfoldError, ModelError
from lowfold.jobs.check import SCALE_FACTORS, _fit_powers
from lowfold.jobs.check_levels import (DEFAULT_CHECK_LEVELS, check_levels_value, exact_lowest,
                                       levels_to_compare)
from lowfold.jobs.check_winding import shortest_winding_loop
from lowfold.model.model import Model
from lowfold.model.sector import Sector
from lowfold.perturbation.diagnostics import check_divergence
from lowfold.readout.spin_form import spin_half_map
from lowfold.results import CheckedBlock, DeriveCheck
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["check_cluster", "lattice_check", "attach_check", "cluster_orders",
           "MAX_CLUSTER_STATES", "CLUSTER_SITES"]

CLUSTER_SITES = (8, 12)           # sites of the periodic clusters considered
MAX_CLUSTER_STATES = 100_000      # largest exact sector block of the cluster (cost)


# --------------------------------------------------------------------------- the cluster

def check_cluster(model: Model, size=None) -> tuple[Model, str, int | None]:
    """The original model on the periodic cluster of the check, its name, and the bonds of
    its shortest winding loop.

    ``size`` (cells per direction) chooses the cluster; default: the module's rule.

    Raises
    ------
    ModelError
        No periodic cluster of 8 to 12 sites fits (or ``size`` is not a cluster of the shape).
    """
    if size is not None:
        cluster = _periodic(model, tuple(int(n) for n in np.atleast_1d(size)))
        if cluster is None:
            raise ModelError(f"no periodic cluster of size {size} for the {model.lattice.shape}"
                             " lattice")
        return cluster, _name(cluster), shortest_winding_loop(cluster)
    best = None
    for cells in _candidate_sizes(model):
        cluster = _periodic(model, cells)
        if cluster is None or _largest_block(cluster) > MAX_CLUSTER_STATES:
            continue
        w = shortest_winding_loop(cluster) or 0
        key = (w, -cluster.n_sites, -(max(cells) - min(cells)))
        if best is None or key > best[0]:
            best = (key, cluster)
    if best is None:
        raise ModelError(f"no periodic {model.lattice.shape} cluster of {CLUSTER_SITES[0]} to "
                         f"{CLUSTER_SITES[1]} sites for the exact check")
    cluster = best[1]
    return cluster, _name(cluster), shortest_winding_loop(cluster)


def _candidate_sizes(model: Model):
    lat = model.lattice
    ndim, basis = len(lat.translations), len(lat.unit_cell)
    low, high = CLUSTER_SITES
    for cells in itertools.product(range(2, high + 1), repeat=ndim):
        if low <= basis * int(np.prod(cells)) <= high:
            yield cells


def _periodic(model: Model, cells: tuple) -> Model | None:
    """The model on ``cells`` with periodic boundaries, its sector at the manifold's filling."""
    from lowfold.jobs.lattice import one_site_filling
    try:
        cluster = model.with_lattice(size=list(cells), boundary="periodic")
    except LowfoldError:
        return None
    filling, _ = one_site_filling(model)
    sector = Sector() if filling is None else Sector(particles=filling * cluster.n_sites)
    return cluster.with_sector(sector)


def _name(cluster: Model) -> str:
    lat = cluster.lattice
    if lat.shape == "chain":
        return f"periodic chain, {cluster.n_sites} sites"
    cells = "x".join(str(n) for n in lat.size)
    return f"periodic {lat.shape} {cells}, {cluster.n_sites} sites"


def _largest_block(cluster: Model) -> int:
    return max(sector_size(cluster.site, cluster.n_sites, s) for s, _ in _blocks(cluster))


def _blocks(cluster: Model) -> list[tuple[Sector, Sector]]:
    """(sector of the original model, sector of the spin model) per S^z block, or one block
    when the model does not conserve S^z."""
    n = cluster.n_sites
    if not compile_operator(cluster, check_sector=False).conserves_sz:
        return [(cluster.sector, Sector())]
    out = []
    for up in range(n + 1):
        sz = Fraction(2 * up - n, 2)
        out.append((dataclasses.replace(cluster.sector, sz=sz), Sector(sz=sz)))
    return out


# --------------------------------------------------------------------------- the spin model

def cluster_orders(result, cluster: Model) -> tuple[list[Model | None], list[float], str | None]:
    """The exported effective model of each order on ``cluster``.

    Returns the spin model of each order ``0..result.order`` (only its zero constant when
    the order has no coupling), the constant of each order on the cluster (sites times the constant per site),
    and the reason why orders from the first one not returned on cannot be placed (an
    exported pattern that does not fit the cluster), or None.
    """
    from lowfold.jobs.export import export_text
    from lowfold.model.modelfile import parse_model
    per_site = next((c for c in result.classes if c.kind == "constant"), None)
    models, constants = [], []
    for m in range(result.order + 1):
        mine = []
        for c in result.classes:
            value = np.asarray(c.orders.get(m, 0.0), dtype=float)
            if c.kind != "constant" and np.any(np.abs(value) > 0):
                mine.append(dataclasses.replace(c, orders={m: c.orders[m]}, formula=None))
        constants.append(cluster.n_sites * float(per_site.orders.get(m, 0.0)) if per_site else 0.0)
        text = export_text(dataclasses.replace(result, classes=tuple(mine), couplings=()))
        try:
            spin = parse_model(tomllib.loads(text), source="<exported model>")
            spin = spin.with_lattice(size=list(cluster.lattice.size), boundary="periodic")
            compile_operator(spin, check_sector=False)
        except LowfoldError as exc:
            return models, constants, f"the couplings of order {m} do not fit on it ({exc})"
        models.append(spin)
    return models, constants, None


def _spin_matrices(models: list, constants: list, sector: Sector) -> list[np.ndarray]:
    """Dense matrix of each order's spin model in one S^z block (constant included)."""
    out = []
    for spin, constant in zip(models, constants):
        block = spin.with_sector(sector)
        h = hamiltonian_matrix(block, build_basis(block), check=False).toarray()
        out.append(h + constant * np.eye(h.shape[0]))
    return out


# --------------------------------------------------------------------------- the check

def lattice_check(result, *, size=None, levels: int | str = DEFAULT_CHECK_LEVELS,
                  fit_scaling: bool = False, progress: Callable[[str], None] | None = None):
    """The exact check of an infinite-lattice result on a periodic cluster.

    Parameters
    ----------
    result : EffectiveModel
        ``derive`` of a model with ``boundary = "infinite"`` (its ``classes`` and ``model``).
    size : int or sequence, optional
        Cells of the cluster per direction (default: :func:`check_cluster`'s choice).
    levels : int or "all"
        Lowest levels of each S^z block compared (as the finite check).
    fit_scaling : bool
        Repeat at V scaled by ``SCALE_FACTORS`` (order m of the couplings times factor^m)
        and fit the power of each order's error.

    Returns
    -------
    (DeriveCheck or None, dict of int to PowerFit or None, list of str)
        As :func:`lowfold.jobs.check.exact_check`; the check names its cluster.
    """
    say = progress or (lambda message: None)
    levels = check_levels_value(levels)
    model = result.model
    try:
        cluster, name, w = check_cluster(model, size)
    except ModelError as exc:
        return None, None, [f"exact check skipped: {exc}"]
    warnings = []
    top = result.order if w is None else min(result.order, w - 1)
    if top < result.order:
        warnings.append(f"exact check on the {name}: its shortest loop of bonds around the "
                        f"cluster has {w} bonds, so from order {w} on the cluster has "
                        "processes that wind around it and the infinite lattice has not; "
                        f"orders 0 to {top} are compared, {_orders_text(w, result.order)} "
                        "not")
    models, constants, misfit = cluster_orders(result, cluster)
    if misfit is not None:
        top = min(top, len(models) - 1)
        warnings.append(f"exact check on the {name}: {misfit}; orders 0 to {top} are compared")
    if top < 0:
        return None, None, warnings + ["exact check skipped: no order can be compared"]
    factors = SCALE_FACTORS if fit_scaling else (1.0,)
    try:
        scaled, ground, exact_all, described = _compare_blocks(
            cluster, name, models[:top + 1], constants[:top + 1], levels, factors, say)
    except LowfoldError as exc:        # a sector too large, a solver that did not converge
        return None, None, warnings + [f"exact check on the {name} skipped: {exc}"]
    lowest = {m: min(pairs) for m, pairs in ground.items()}
    check = DeriveCheck(tuple(sorted(exact_all)), {m: scaled[(1.0, m)] for m in range(top + 1)},
                        levels, tuple(described),
                        {m: abs(e_eff - e_exact) for m, (e_exact, e_eff) in lowest.items()},
                        cluster=name, winding_loop=w)
    fits = _fit_powers(scaled, factors, top, cluster) if fit_scaling else None
    return check, fits, warnings + check_divergence(check.max_abs_error)


def _compare_blocks(cluster, name, models, constants, levels, factors, say):
    """Errors of the effective levels summed to each order against the exact ones, per
    S^z block and scale factor: ``(scaled, ground, exact levels, CheckedBlocks)``."""
    scaled, ground, exact_all, described = {}, {}, [], []
    for number, (original, spin_sector) in enumerate(_blocks(cluster)):
        effective = _spin_matrices(models, constants, spin_sector)
        p = effective[0].shape[0]
        block = cluster.with_sector(original)
        states = sector_size(block.site, block.n_sites, original)
        k = levels_to_compare(levels, p, states)
        say(f"exact check on the {name}, block {number + 1}: lowest {k} of {p} levels, "
            f"{states:,} states")
        basis = build_basis(block, max_states=MAX_CLUSTER_STATES)
        h0 = hamiltonian_matrix(block, basis, cluster.unperturbed_labels, check=False)
        v = hamiltonian_matrix(block, basis, cluster.perturbation_labels, check=False)
        described.append(CheckedBlock(None if spin_sector.sz is None else str(spin_sector.sz),
                                      k, p))
        spin_states = build_basis(models[0].with_sector(spin_sector)).states
        rows = _manifold_rows(cluster, spin_states, basis)
        for factor in factors:
            summed = sum(factor**m * effective[m] for m in range(len(models)))
            exact = _lowest(h0 + factor * v, k, summed, rows)
            if factor == 1.0:
                exact_all.extend(exact.tolist())
            running = np.zeros_like(effective[0])
            for m in range(len(models)):
                running = running + factor**m * effective[m]
                found = la.eigvalsh(running, subset_by_index=[0, k - 1])
                error = float(np.max(np.abs(found - exact)))
                scaled[(factor, m)] = max(scaled.get((factor, m), 0.0), error)
                if factor == 1.0:
                    ground.setdefault(m, []).append((float(exact[0]), float(found[0])))
    return scaled, ground, exact_all, described


def _orders_text(first: int, last: int) -> str:
    return f"order {first} is" if first == last else f"orders {first} to {last} are"


def _manifold_rows(cluster: Model, spin_states: np.ndarray, basis):
    """Rows of the spin model's basis states ``spin_states`` (one S^z block) in the
    original ``basis``, and the sign relating each to its original state, or None when the
    states do not map (:func:`lowfold.readout.spin_form.spin_half_map`: a spin-1/2 site is
    its own qubit, an electron state is read by its spin-down bits, with the sign of
    reordering its operators into site order)."""
    n, site = cluster.n_sites, cluster.site
    every = np.arange(2**n, dtype=np.int64)
    if site.type == "spin" and site.radix == 2:
        original = every
    elif site.type == "electron":
        original = (every ^ ((1 << n) - 1)) | (every << n)
    else:
        return None
    mapping, _ = spin_half_map(cluster, np.sort(original))
    if mapping is None:
        return None
    qubit, sign = mapping
    sign_of = np.empty(2**n)
    sign_of[qubit] = sign
    rows = basis.index(original[spin_states])
    if np.any(rows < 0):
        return None
    return rows, sign_of[spin_states]


def _lowest(matrix, k: int, effective: np.ndarray, rows) -> np.ndarray:
    """The ``k`` lowest levels of ``matrix``: LOBPCG from the effective eigenvectors placed
    on the manifold's rows (as the finite check, :func:`exact_lowest`), or a plain sparse
    eigensolver when the manifold's rows are not known."""
    if rows is None:
        values, _ = lowest_eigenpairs(matrix, k, tol=1e-10)
        return np.sort(np.asarray(values, dtype=float))
    p_rows, sign = rows
    signed = effective * sign[:, None] * sign[None, :]
    _, vectors = la.eigh(signed, subset_by_index=[0, k - 1])
    return exact_lowest(matrix, k, vectors, p_rows, signed)


def attach_check(result, *, levels=DEFAULT_CHECK_LEVELS, fit_scaling: bool = False,
                 progress=None):
    """``result`` with its :func:`lattice_check` (check, scaling and warnings added)."""
    check, fits, warnings = lattice_check(result, levels=levels, fit_scaling=fit_scaling,
                                          progress=progress)
    return dataclasses.replace(result, check=check, scaling=fits,
                               warnings=tuple(result.warnings) + tuple(warnings))
