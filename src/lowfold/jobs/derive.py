"""Effective low-energy models: manifold, Schrieffer-Wolff orders, readout, exact check.

:func:`derive` is lowfold's main job.  It splits the model into H0 and V, finds the manifold
P of H0, builds only the states reachable from P, computes the effective Hamiltonian order by
order (blocked by S^z when V conserves it), reads it out as Pauli strings and named spin
couplings when P is one spin-1/2 per site, and compares the effective spectrum of every
order with the exact low-lying spectrum of the same cluster.
"""

from __future__ import annotations

import dataclasses
import time
from fractions import Fraction
from typing import Callable

import numpy as np
import scipy.sparse as sp

from lowfold.build.basis import explicit_basis
from lowfold.build.labels import state_labels, twice_sz
from lowfold.errors import SizeError
from lowfold.jobs.check import ManifoldBlock, exact_check
from lowfold.jobs.check_levels import DEFAULT_CHECK_LEVELS, check_levels_value
from lowfold.jobs.check_winding import wrap_around_warnings
from lowfold.jobs.classes import group_into_classes
from lowfold.jobs.exact_couplings import check_exact_size
from lowfold.jobs.exact_couplings import exact_couplings as exact_couplings_of
from lowfold.model.model import Model
from lowfold.model.sector import sz_note
from lowfold.perturbation.diagnostics import (check_divergence, manifold_diagnostics,
                                              merge_diagnostics)
from lowfold.perturbation.manifold import (Manifold, diagonal_energies, find_manifold,
                                           reachable_from_states, split_operators,
                                           working_operator)
from lowfold.perturbation.orders import MAX_SCHRIEFFER_WOLFF_ORDER, validate_order
from lowfold.perturbation.schrieffer_wolff import effective_orders, second_order_matrix_free
from lowfold.perturbation.sparse_orders import OrderCost, matrix_bytes
from lowfold.readout.local_form import read_local_form
from lowfold.readout.rationals import recognise_couplings
from lowfold.readout.spin_form import read_spin_form
from lowfold.results import (EffectiveModel, ManifoldDiagnostics, ManifoldSummary, PauliTerm,
                             Recognised)

__all__ = ["derive", "MAX_ORDER"]

MAX_ORDER = MAX_SCHRIEFFER_WOLFF_ORDER   # highest order derive accepts (see perturbation.orders)
MAX_WORKING_STATES = 2_000_000  # intermediate states of one block for orders above 2


# --------------------------------------------------------------------------- the job

def derive(model: Model, order: int | None = None, *, compare_exact: bool = True,
           fit_scaling: bool = False, check_levels: int | str = DEFAULT_CHECK_LEVELS,
           progress: Callable[[str], None] | None = None,
           exact_couplings: bool = False,
           graph_map: Callable | None = None) -> EffectiveModel:
    """Effective Hamiltonian of ``model`` on the low-energy manifold of H0, order by order.

    Parameters
    ----------
    model : Model
        Must have a ``[perturbation]`` table (H0 labels, order, manifold or window).  A
        sector that fixes the total S^z is widened to all S^z (particles kept): the effective
        model acts on the whole manifold, and ``warnings`` says so.
    order : int, optional
        Highest order, 1 .. ``MAX_ORDER`` (40; default: the model file's).
    compare_exact : bool
        Compare the effective spectrum of every order with the exact lowest levels
        (the result's ``check``).
    fit_scaling : bool
        Also repeat the comparison at smaller couplings and fit the power of the error
        (the result's ``scaling``).
    check_levels : int or "all"
        How many of the lowest levels of each S^z block the check compares (default 8; every
        level of a block with no more manifold states than that or a dense-sized sector);
        ``"all"`` compares every level of the manifold.  The result's ``check`` says which.
    exact_couplings : bool
        Also read out the exact effective Hamiltonian of the cluster by direct rotation
        (``lowfold.jobs.exact_couplings``): the result's ``exact``.  SizeError before anything
        is computed when the exact eigenvectors would not fit; ManifoldError when the exact
        states of the manifold are not separated from the rest.
    graph_map : callable, optional
        Infinite lattice: how the distinct cluster graphs are computed
        (:func:`lowfold.jobs.lattice.linked_cluster_sum`; e.g. on Dask).

    Returns
    -------
    EffectiveModel
        ``model`` is the model derived (with the widened sector, if any).
    """
    if model.lattice.infinite and exact_couplings:
        check_exact_size(model, [])      # the ModelError that says why
    if model.lattice.infinite:       # linked-cluster expansion (jobs/lattice.py)
        from lowfold.jobs.lattice import derive_infinite
        return derive_infinite(model, order, progress=progress, compare_exact=compare_exact,
                               check_levels=check_levels, fit_scaling=fit_scaling,
                               graph_map=graph_map)
    say = progress or (lambda message: None)
    spec = model.perturbation
    if spec is None:
        model.unperturbed_labels          # raises the ModelError that explains it
    order = validate_order(spec.order if order is None else order, maximum=MAX_ORDER)
    check_levels = check_levels_value(check_levels)
    model, warnings = _whole_manifold(model)
    warnings += [note for note in (sz_note(model),) if note]
    h0, v = split_operators(model)
    say("finding the manifold")
    manifold = find_manifold(model, h0)
    blocks = _blocks(model, manifold, h0.conserves_sz and v.conserves_sz)
    if exact_couplings:
        check_exact_size(model, blocks)
    n_slots = model.n_sites * model.site.modes
    dim = manifold.dimension
    pieces = [[] for _ in range(order + 1)]
    parts, costs = [], []
    for number, block in enumerate(blocks):
        p_states = manifold.states[block.p_positions]
        say(f"block {number + 1}/{len(blocks)}: {p_states.size:,} manifold states, order {order}")
        try:
            block_orders, diag, block_costs = _block_orders(p_states, h0, v, order, n_slots)
        except MemoryError:
            raise SizeError(f"order {order} on {p_states.size:,} manifold states of one S^z "
                            "block does not fit in memory; use a lower order or a smaller "
                            "cluster") from None
        parts.append(diag)
        costs.append(block_costs)
        for m, h in enumerate(block_orders):
            h = sp.coo_matrix(h)
            pieces[m].append((block.p_positions[h.row], block.p_positions[h.col], h.data))
    orders = [_tidy(sp.csr_matrix((np.concatenate([p[2] for p in piece]),
                                   (np.concatenate([p[0] for p in piece]),
                                    np.concatenate([p[1] for p in piece]))), shape=(dim, dim)))
              for piece in pieces]
    label_of = lambda s: state_labels(model, np.array([s]))[0]      # noqa: E731
    diagnostics = merge_diagnostics(parts, label_of)
    diagnostics.memory = _order_costs(costs, orders)
    warnings += list(diagnostics.warnings)
    labels = state_labels(model, manifold.states) if dim <= 4096 else []
    readout = _read_out(model, manifold.states, orders)
    warnings += readout.get("warnings", [])
    classes = group_into_classes(model, readout["couplings"], readout["residual"], warnings=warnings)
    check = scaling = None
    if compare_exact:
        say("exact check")
        check, scaling, skipped = exact_check(model, manifold.states, manifold.energies, orders,
                                              blocks, levels=check_levels,
                                              fit_scaling=fit_scaling, progress=say)
        warnings += skipped
        if check is not None:
            warnings += check_divergence(check.max_abs_error)
    warnings += wrap_around_warnings(model, order)
    exact = (exact_couplings_of(model, manifold.states, manifold.energies, blocks, _read_out,
                                progress=say) if exact_couplings else None)
    gap = diagnostics.gap
    summary = ManifoldSummary(dim, float(manifold.energies.min()),
                              float(gap) if np.isfinite(gap) else None, readout["readout"],
                              manifold.states, manifold.energies)
    return EffectiveModel(order, summary, tuple(orders), tuple(labels), readout["terms"],
                          readout["couplings"], readout["recognised"], check, scaling,
                          ManifoldDiagnostics.from_diagnostics(diagnostics, label_of),
                          tuple(warnings), readout["residual"], model, classes,
                          exact=exact)


def _whole_manifold(model: Model) -> tuple[Model, list[str]]:
    """The model with the sector's S^z constraint set aside (particles kept), and the warning
    that says so.  A fixed total S^z selects part of the manifold, not a different model;
    the effective model is read out on all the S^z blocks the manifold spans."""
    if model.sector.sz is None or not model.site.has_spin:
        return model, []
    wide = model.with_sector(dataclasses.replace(model.sector, sz=None))
    return wide, [f"the sector's sz = {model.sector.sz} was set aside for the effective model: "
                  "it acts on the manifold of every total S^z (particles kept), so that it can "
                  "be read out as a spin model"]


def _tidy(h: sp.csr_matrix) -> sp.csr_matrix:
    """Drop the imaginary part when it is round-off, and entries at round-off level."""
    if not h.nnz:
        return sp.csr_matrix(h.shape)
    scale = np.abs(h.data).max()
    if np.iscomplexobj(h.data) and np.abs(h.data.imag).max() <= 1e-13 * scale:
        h = sp.csr_matrix(h.real)
    h.data[np.abs(h.data) <= 1e-15 * scale] = 0
    h.eliminate_zeros()
    return h


def _blocks(model: Model, manifold: Manifold, by_sz: bool) -> list[ManifoldBlock]:
    if not (by_sz and model.site.has_spin):
        return [ManifoldBlock(np.arange(manifold.dimension), model.sector)]
    sz2 = twice_sz(model, manifold.states)
    return [ManifoldBlock(np.flatnonzero(sz2 == value),
                          dataclasses.replace(model.sector, sz=Fraction(int(value), 2)))
            for value in np.unique(sz2)]


def _order_costs(costs: list[list[OrderCost]], orders: list) -> list[OrderCost]:
    """Cost of each order over the S^z blocks: the bytes of the merged ``H_eff,m``, the
    generator and commutator bytes of the largest block (blocks are computed one after the
    other), the seconds summed."""
    return [OrderCost(m, matrix_bytes(h), max(c[m].generator_bytes for c in costs),
                      max(c[m].commutator_bytes for c in costs), sum(c[m].seconds for c in costs))
            for m, h in enumerate(orders)]


def _block_orders(p_states, h0, v, order, n_slots):
    """Orders of the effective Hamiltonian of one block (CSR), its diagnostics and the cost
    of each order."""
    start = time.perf_counter()
    if order == 2:
        working = reachable_from_states(v, p_states, 1)
        energies = diagonal_energies(h0, working)
        p_index = np.searchsorted(working, p_states)
        v_pq_parts = _coupling_rows(v, p_states, working, n_slots)
        q_mask = np.ones(working.size, dtype=bool)
        q_mask[p_index] = False
        v_pp = v_pq_parts[:, p_index]
        v_pq = v_pq_parts[:, q_mask]
        diag = manifold_diagnostics(energies, _embed(v_pq_parts, p_index, working.size),
                                    p_index, working)
        h2 = second_order_matrix_free(energies[p_index], energies[q_mask], v_pq)
        orders = [sp.diags(energies[p_index]).astype(h2.dtype).tocsr(), sp.csr_matrix(v_pp), h2]
        seconds = time.perf_counter() - start
        return orders, diag, [OrderCost(m, matrix_bytes(h), seconds=seconds if m == 2 else 0.0)
                              for m, h in enumerate(orders)]
    try:
        working, v_work, distance = working_operator(v, p_states, max(1, order // 2),
                                           outer=order > 1 and order % 2 == 1,
                                           max_states=MAX_WORKING_STATES, by_shell=True)
    except SizeError as exc:
        raise SizeError(f"order {order} in one S^z block: {exc}; use a lower order or a "
                        "smaller cluster") from None
    energies = diagonal_energies(h0, working)
    p_index = np.arange(p_states.size)          # P first, in the order of p_states
    diag = manifold_diagnostics(energies, v_work, p_index, working)
    orders, costs = effective_orders(energies, v_work, p_index, order, check_v=False,
                                     distance=distance)
    return orders, diag, costs


def _coupling_rows(v, p_states, working, n_slots) -> sp.csr_matrix:
    """Rows ``<p|V|w>`` for p in P and w in the working space (dimP x dimW)."""
    basis = explicit_basis(working, n_slots, v.radix)
    rows, new, amps = v.apply_to_states(p_states)
    cols = basis.index(new)
    keep = cols >= 0
    # <new|V|p> = amp, so <p|V|new> = conj(amp)
    return sp.csr_matrix((np.conj(amps[keep]), (rows[keep], cols[keep])),
                         shape=(p_states.size, working.size))


def _embed(rows: sp.csr_matrix, p_index, size) -> sp.csr_matrix:
    """A working-space matrix holding the P rows (and their Hermitian partners)."""
    coo = rows.tocoo()
    r, c, d = p_index[coo.row], coo.col, coo.data
    return sp.csr_matrix((np.concatenate([d, np.conj(d)]), (np.concatenate([r, c]), np.concatenate([c, r]))),
                         shape=(size, size))


# --------------------------------------------------------------------------- readout

def _read_out(model: Model, states: np.ndarray, orders: list) -> dict:
    """Spin-1/2 readout of the orders (Pauli terms, named couplings, recognised rationals),
    or the reason there is none."""
    form, _ = read_spin_form(model, orders, states)
    if form is None:
        return _read_out_local(model, states, orders)
    pauli = tuple(PauliTerm(op, float(sum(cs)), {m: float(c) for m, c in enumerate(cs)})
                  for op, cs in form.terms.items())
    scale, found = recognise_couplings(model, form.couplings)
    recognised = {key: Recognised(scale, coefficients) for key, coefficients in found.items()}
    return {"readout": "spin-1/2", "terms": pauli, "couplings": tuple(form.couplings),
            "recognised": recognised, "residual": form.residual}


def _read_out_local(model: Model, states: np.ndarray, orders: list) -> dict:
    """Local-operator readout of a product manifold (readout/local_form.py), or the matrix
    and one warning saying why there is no named readout."""
    local = read_local_form(model, orders, states)
    pauli = tuple(PauliTerm(op, float(sum(cs)), {m: float(c) for m, c in enumerate(cs)})
                  for op, cs in local["terms"].items())
    scale, found = recognise_couplings(model, local["couplings"])
    recognised = {key: Recognised(scale, coefficients) for key, coefficients in found.items()}
    return {"readout": local["readout"], "terms": pauli, "couplings": tuple(local["couplings"]),
            "recognised": recognised,
            "residual": local["residual"] if local["terms"] else {},   # Pauli strings only
            "warnings": local["warnings"]}
