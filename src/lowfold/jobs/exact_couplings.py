"""The exact effective Hamiltonian of a cluster beside the series: ``derive --exact-couplings``.

For every block of the manifold P that derive uses (one per total S^z when H0 and V conserve
it), the dim(P) exact eigenvectors of H = H0 + V that grow out of P are found in the block's
sector basis, the manifold's states are located in that basis (the same occupation integers
and the same compiled operator as derive's reachable space, hence the same fermion signs),
and the direct rotation of :mod:`lowfold.perturbation.direct_rotation` gives the exact
effective Hamiltonian (des Cloizeaux, Nucl. Phys. 20, 321 (1960)).  It is then read out with
derive's own readout, so that every Pauli string and named coupling gets its exact value.

Which exact states: the lowest dim(P) of the block when P is at the bottom of H0 in the
block; for a window above the bottom (dense-sized blocks only), the dim(P) consecutive levels
with the largest weight on P.  The construction is refused (ManifoldError) when these levels
are not separated from the others or have left P; :func:`check_exact_size` refuses a cluster
whose exact eigenvectors would not fit (SizeError) before anything is built.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp

from lowfold.build.basis import sector_size
from lowfold.build.hamiltonian import (Hamiltonian, available_memory, build_basis,
                                       hamiltonian_matrix)
from lowfold.errors import ModelError, SizeError
from lowfold.jobs.check import ManifoldBlock, check_memory_estimate
from lowfold.jobs.classes import group_into_classes
from lowfold.model.model import Model
from lowfold.perturbation.direct_rotation import DirectRotation, direct_rotation
from lowfold.results.exact import ExactCouplings, coupling_key
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["check_exact_size", "exact_effective_matrix", "exact_couplings",
           "EXACT_MAX_VECTOR_ENTRIES", "EXACT_MAX_LANCZOS_WORK", "EXACT_MAX_STATES",
           "DENSE_EXACT_LIMIT"]

EXACT_MAX_VECTOR_ENTRIES = 50_000_000   # (dim(P) of a block + 1) x (its sector's states)
EXACT_MAX_LANCZOS_WORK = 100_000_000    # (dim(P) + 1)^2 x states, above the dense limit:
#   ARPACK's cost per restart grows so (the 8-site Hubbard chain, 71^2 x 4,900 = 2.5e7, takes
#   ~25 s; the 10-site chain, 253^2 x 63,504 = 4.1e9, does not finish in 15 minutes)
EXACT_MAX_STATES = 4_000_000            # largest sector block (as the exact check)
DENSE_EXACT_LIMIT = 3000                # blocks up to this size are diagonalised densely


def check_exact_size(model: Model, blocks: list[ManifoldBlock], *,
                     memory_limit: int | None = None) -> list[int]:
    """The sector size of every block, or SizeError naming the limit (nothing is built).

    The exact effective Hamiltonian needs dim(P) + 1 exact eigenvectors of each block's
    sector: at most ``EXACT_MAX_VECTOR_ENTRIES`` numbers, ``EXACT_MAX_STATES`` states, within
    ``memory_limit`` bytes (default 80 % of the available memory), and, for a block above
    ``DENSE_EXACT_LIMIT`` states (Lanczos), (dim(P) + 1)^2 x states at most
    ``EXACT_MAX_LANCZOS_WORK``."""
    if model.lattice.infinite:
        raise ModelError("exact couplings are those of a finite cluster; give the lattice a "
                         "size (the infinite lattice has no exact eigenvectors)")
    sizes = [sector_size(model.site, model.n_sites, b.sector) for b in blocks]
    for block, size in zip(blocks, sizes):
        k = block.p_positions.size
        if size > EXACT_MAX_STATES:
            raise SizeError(f"exact couplings: a sector block has {size:,} states, more than the "
                            f"limit of {EXACT_MAX_STATES:,} for exact eigenvectors")
        if (k + 1) * size > EXACT_MAX_VECTOR_ENTRIES:
            raise SizeError(f"exact couplings need {k + 1:,} exact eigenvectors of a sector block "
                            f"of {size:,} states ({(k + 1) * size:,} numbers), more than the "
                            f"limit of {EXACT_MAX_VECTOR_ENTRIES:,}; use a smaller cluster or "
                            "manifold")
        if size > DENSE_EXACT_LIMIT and (k + 1) ** 2 * size > EXACT_MAX_LANCZOS_WORK:
            raise SizeError(f"exact couplings need {k + 1:,} exact eigenvectors of a sector block "
                            f"of {size:,} states: (eigenvectors)^2 x states = "
                            f"{(k + 1) ** 2 * size:.2g}, more than the limit of "
                            f"{EXACT_MAX_LANCZOS_WORK:.0e} for Lanczos; use a smaller cluster "
                            "or manifold")
    limit = int(0.8 * available_memory()) if memory_limit is None else memory_limit
    dense = max((3 * 16 * s * s for s in sizes if s <= DENSE_EXACT_LIMIT), default=0)
    sparse = [s for s in sizes if s > DENSE_EXACT_LIMIT]
    need = max(dense, check_memory_estimate(
        model, sparse, [b.p_positions.size + 1 for b, s in zip(blocks, sizes)
                        if s > DENSE_EXACT_LIMIT]) if sparse else 0)
    if need > limit:
        raise SizeError(f"exact couplings need about {need / 2**30:.1f} GiB for the exact "
                        f"eigenvectors, more than the {limit / 2**30:.1f} GiB allowed")
    return sizes


def _where(model: Model, block: ManifoldBlock) -> str:
    sz = "" if block.sector.sz is None else f" (S^z = {block.sector.sz} block)"
    values = ", ".join(f"{name} = {value:g}" for name, value in model.parameters.items())
    return f"{sz} at {values}" if values else sz


def _block_rotation(model: Model, states: np.ndarray, energies: np.ndarray,
                    block: ManifoldBlock) -> DirectRotation:
    """Direct rotation of one block, in the order of ``block.p_positions``."""
    block_model = model.with_sector(block.sector)
    basis = build_basis(block_model, max_states=EXACT_MAX_STATES)
    labels = list(model.unperturbed_labels) + list(model.perturbation_labels)
    h = hamiltonian_matrix(block_model, basis, labels, check=False)
    idx = block.p_positions
    rows = basis.index(states[idx])
    if np.any(rows < 0):
        raise ModelError("a manifold state is not in its sector block (internal inconsistency)")
    k, n = idx.size, basis.size
    where = _where(model, block)
    h0 = Hamiltonian.of(block_model, list(model.unperturbed_labels), basis).diagonal()
    at_bottom = np.real(h0).min() >= energies[idx].min() - 1e-9       # H0 is diagonal
    if at_bottom and (n > DENSE_EXACT_LIMIT and k + 1 < n - 1):
        values, vectors = lowest_eigenpairs(h, k + 1, vectors=True)
        order = np.argsort(values)
        values, vectors = values[order], vectors[:, order]
        return direct_rotation(values[:k], vectors[rows, :k], next_energy=values[k], where=where)
    if not at_bottom and n > DENSE_EXACT_LIMIT:
        raise SizeError(f"exact couplings of a manifold above the bottom of its block need the "
                        f"whole spectrum of {n:,} states (limit {DENSE_EXACT_LIMIT:,})")
    # at the bottom: the k + 1 lowest levels; a window: the whole spectrum, to choose from
    values, vectors = la.eigh(h.toarray(), subset_by_index=[0, min(k, n - 1)] if at_bottom else None)
    start = 0 if at_bottom else _best_window(vectors[rows], k)
    stop = start + k
    return direct_rotation(values[start:stop], vectors[rows, start:stop],
                           next_energy=values[stop] if stop < values.size else None,
                           previous_energy=values[start - 1] if start > 0 else None, where=where)


def _best_window(overlap: np.ndarray, k: int) -> int:
    """Start of the k consecutive exact levels with the largest total weight on P."""
    weight = np.sum(np.abs(overlap) ** 2, axis=0)
    sums = np.convolve(weight, np.ones(k), mode="valid")
    return int(np.argmax(sums))


def exact_effective_matrix(model: Model, states: np.ndarray, energies: np.ndarray,
                           blocks: list[ManifoldBlock], *,
                           progress: Callable[[str], None] | None = None):
    """The exact effective Hamiltonian on the manifold, block by block.

    Parameters
    ----------
    model : Model
        The model derived (finite lattice, with a perturbation).
    states, energies : arrays
        The manifold's basis states and their H0 energies (rows in this order).
    blocks : list of ManifoldBlock
        The blocks derive uses.

    Returns
    -------
    (scipy.sparse.csr_matrix, list of DirectRotation)
        The matrix in the order of ``states``, and each block's rotation (energies, gap,
        overlap).
    """
    say = progress or (lambda message: None)
    sizes = check_exact_size(model, blocks)
    dim = states.size
    rows, cols, data, parts = [], [], [], []
    for number, (block, size) in enumerate(zip(blocks, sizes)):
        k = block.p_positions.size
        say(f"exact couplings, block {number + 1}/{len(blocks)}: {k} exact states of {size:,}")
        part = _block_rotation(model, states, energies, block)
        parts.append(part)
        r, c = np.meshgrid(block.p_positions, block.p_positions, indexing="ij")
        rows.append(r.ravel())
        cols.append(c.ravel())
        data.append(part.matrix.ravel())
    values = np.concatenate(data)
    matrix = sp.csr_matrix((values, (np.concatenate(rows), np.concatenate(cols))), shape=(dim, dim))
    return matrix, parts


def exact_couplings(model: Model, states: np.ndarray, energies: np.ndarray,
                    blocks: list[ManifoldBlock], read_out: Callable, *,
                    progress: Callable[[str], None] | None = None) -> ExactCouplings:
    """The exact couplings: the exact effective Hamiltonian read out by ``read_out``.

    ``read_out(model, states, [matrix])`` is derive's readout (a dict with ``terms`` of
    objects with ``operator`` and ``coefficient``, ``couplings`` with ``kind``, ``sites`` and
    ``value``; ``residual``), applied to the exact matrix as if it were a single order; on a
    translation-invariant cluster the exact couplings are also grouped into classes."""
    matrix, parts = exact_effective_matrix(model, states, energies, blocks, progress=progress)
    matrix = _tidy(matrix)
    readout = read_out(model, states, [matrix])
    terms = {t.operator: float(t.coefficient) for t in readout["terms"]
             if hasattr(t, "operator") and hasattr(t, "coefficient")}
    couplings = {coupling_key(c.kind, c.sites, getattr(c, "operator", None)): c.value
                 for c in readout["couplings"]}
    classes = {(c.kind, c.name, c.operator): c.value
               for c in group_into_classes(model, readout["couplings"],
                                           readout.get("residual") or {})}
    gaps = [p.gap for p in parts if p.gap is not None]
    levels = np.sort(np.concatenate([p.energies for p in parts]))
    return ExactCouplings(terms, couplings, min(gaps) if gaps else None,
                          min(p.smallest_singular_value for p in parts),
                          tuple(float(e) for e in levels), matrix, classes)


def _tidy(h: sp.csr_matrix) -> sp.csr_matrix:
    """Entries at round-off level dropped, a round-off imaginary part too."""
    if not h.nnz:
        return h
    scale = np.abs(h.data).max()
    if np.iscomplexobj(h.data) and np.abs(h.data.imag).max() <= 1e-13 * scale:
        h = sp.csr_matrix(h.real)
    h.data[np.abs(h.data) <= 1e-15 * scale] = 0
    h.eliminate_zeros()
    return h
