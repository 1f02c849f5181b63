"""The exact check of an effective model: its spectrum at every order against the exact
low-lying levels of the same cluster, and optionally the fitted power of the error.

For each S^z block of the manifold the lowest levels of the block's sector are found (dense,
or LOBPCG started from the effective eigenvectors: ``lowfold.jobs.check_levels`` says which
and how many; a large block of electrons whose terms each act on one spin species in the
product basis, without a sparse matrix: ``lowfold.jobs.check_product``; the result names the
route of each block); a -S^z block that is the spin reversal of the S^z block, entry by entry,
takes the S^z block's levels (``lowfold.jobs.check_mirror``); the error of the sum to order n must fall
like lambda^(n+1) when the couplings of V are scaled by lambda (DESIGN.md, "Perturbation
theory used"), which ``fit_scaling`` measures at lambda = 0.8, 0.64, 0.5, 0.4.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp

from lowfold.build.basis import sector_size
from lowfold.build.hamiltonian import available_memory, build_basis, compile_operator, hamiltonian_matrix
from lowfold.errors import SizeError
from lowfold.jobs.check_mirror import mirror_images
from lowfold.jobs.check_product import (product_at_bottom, product_check_bytes,
                                        product_hamiltonians, product_levels, product_mirror,
                                        uses_product)
from lowfold.jobs.check_levels import (DEFAULT_CHECK_LEVELS, check_levels_value, exact_lowest,
                                       levels_to_compare)
from lowfold.model.model import Model
from lowfold.model.sector import Sector
from lowfold.results import CheckedBlock, DeriveCheck, PowerFit
from lowfold.solve.exact import lowest_eigenpairs

__all__ = ["ManifoldBlock", "exact_check", "check_memory_estimate", "CHECK_MAX_STATES",
           "SCALE_FACTORS"]

CHECK_MAX_STATES = 4_000_000    # largest sector block diagonalised for the exact check
DENSE_CHECK_LIMIT = 5000
EFFECTIVE_DENSE_LIMIT = 4000    # manifold states of a product-basis block above which the
                                # effective matrices stay sparse (eigsh, not eigh)
SCALE_FACTORS = (1.0, 0.8, 0.64, 0.5, 0.4)


@dataclass(frozen=True)
class ManifoldBlock:
    """One S^z block of the manifold: indices into P and the sector it lives in."""

    p_positions: np.ndarray
    sector: Sector


def exact_check(model: Model, states: np.ndarray, energies: np.ndarray, orders: list,
                blocks: list[ManifoldBlock], *, levels: int | str = DEFAULT_CHECK_LEVELS,
                fit_scaling: bool = False, memory_limit: int | None = None,
                product_min_states: int | None = None,
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
    levels : int or "all"
        The lowest levels of each block compared (``check_levels.levels_to_compare``).
    fit_scaling : bool
        Repeat the check at the couplings scaled by ``SCALE_FACTORS`` and fit the power.
    memory_limit : int, optional
        Bytes the check may use (default: 80 % of the available memory); a check whose
        estimate (:func:`check_memory_estimate`, ``check_product.product_check_bytes``)
        passes it is skipped before anything is built.
    product_min_states : int, optional
        Blocks of more states than this whose sector allows it are solved in the product
        basis (default ``check_product.PRODUCT_CHECK_MIN_STATES``).

    Returns
    -------
    (DeriveCheck or None, dict of int to PowerFit or None, list of str)
        The check, the fitted powers (when asked for), and warnings (a check skipped says why
        and returns None).
    """
    say = progress or (lambda message: None)
    order = len(orders) - 1
    levels = check_levels_value(levels)
    exact_all, scaled, ground = [], {}, {}
    factors = SCALE_FACTORS if fit_scaling else (1.0,)
    sequence = sorted(range(len(blocks)), key=lambda i: _mirror_key(blocks[i].sector))
    block_models = [model.with_sector(b.sector) for b in blocks]
    try:      # every block's size and memory first, so that nothing is built in vain
        sizes = [sector_size(model.site, model.n_sites, b.sector) for b in blocks]
        product = [uses_product(m, s, product_min_states) for m, s in zip(block_models, sizes)]
        counts = [levels_to_compare(levels, b.p_positions.size, size)
                  for b, size in zip(blocks, sizes)]
        need = _memory_needed(model, block_models, sizes, counts, product, sequence,
                              fit_scaling)
        limit = int(0.8 * available_memory()) if memory_limit is None else memory_limit
        if need > limit:
            largest = int(np.argmax(sizes))
            route = ", in the product basis" if product[largest] else ""
            raise SizeError(f"it needs about {_gib(need)} for its largest sector block "
                            f"({sizes[largest]:,} states{route}), more than the {_gib(limit)} "
                            "allowed")
    except SizeError as exc:
        return None, None, [f"exact check skipped: {exc}"]
    described_by_block = {}
    previous = None        # the last block computed, for its spin-reversed partner
    for number in sequence:
        block, k = blocks[number], counts[number]
        say(f"exact check, block {number + 1}/{len(blocks)}: lowest {k} of "
            f"{block.p_positions.size} levels, {sizes[number]:,} states")
        idx = block.p_positions
        sparse = product[number] and idx.size > EFFECTIVE_DENSE_LIMIT
        partial = [orders[m][idx][:, idx] for m in range(order + 1)]
        partial = [h.tocsr() if sparse else h.toarray() for h in partial]
        effectives = {f: _summed(partial, f) for f in factors}
        if previous is not None and previous["kind"] != ("product" if product[number]
                                                         else "csr"):
            previous["data"] = None      # no partner of another route: free its matrices
        solve = _product_block if product[number] else _csr_block
        found = solve(block_models[number], states[idx], energies[idx], effectives, k,
                      previous, fit_scaling, say)
        if found is None:
            return None, None, ["exact check skipped: the window is not at the bottom of the "
                                f"spectrum and the sector block has {sizes[number]:,} states"]
        exact_by_factor, k, route, previous = found
        described_by_block[number] = CheckedBlock(_sz_text(block.sector), k, idx.size, route)
        for factor in factors:
            exact = exact_by_factor[factor]
            if factor == 1.0:
                exact_all.extend(exact.tolist())
            for m in range(order + 1):
                values = _effective_lowest(_summed(partial[:m + 1], factor), k)
                error = float(np.max(np.abs(values - exact)))
                scaled[(factor, m)] = max(scaled.get((factor, m), 0.0), error)
                if factor == 1.0:
                    ground.setdefault(m, []).append((float(exact[0]), float(values[0])))
    described = [described_by_block[number] for number in range(len(blocks))]
    lowest = {m: min(pairs) for m, pairs in ground.items()}
    check = DeriveCheck(tuple(sorted(exact_all)), {m: scaled[(1.0, m)] for m in range(order + 1)},
                        levels, tuple(described),
                        {m: abs(e_eff - e_exact) for m, (e_exact, e_eff) in lowest.items()})
    fits = _fit_powers(scaled, factors, order, model) if fit_scaling else None
    return check, fits, []


def _summed(partial: list, factor: float):
    """``sum_m factor^m H_eff,m`` (dense arrays or sparse matrices)."""
    total = partial[0].copy()
    for m in range(1, len(partial)):
        total = total + factor**m * partial[m]
    return total


def _effective_lowest(matrix, k: int) -> np.ndarray:
    """The ``k`` lowest effective levels: dense ``eigvalsh``, or for a sparse matrix its
    diagonal when it has no other entries, else Lanczos (``lowest_eigenpairs``, which
    completes degenerate levels)."""
    if not sp.issparse(matrix):
        return la.eigvalsh(matrix, subset_by_index=[0, k - 1])
    diagonal = matrix.diagonal()
    off = (matrix - sp.diags(diagonal)).tocsr()
    off.eliminate_zeros()
    if not off.nnz:
        return np.sort(diagonal.real)[:k]
    return np.sort(lowest_eigenpairs(matrix, k)[0])


def _memory_needed(model, block_models, sizes, counts, product, sequence, fit_scaling) -> int:
    """Bytes of the largest block, CSR or product route (``SizeError`` for a CSR block past
    ``CHECK_MAX_STATES``)."""
    csr = [i for i in range(len(sizes)) if not product[i]]
    if csr and max(sizes[i] for i in csr) > CHECK_MAX_STATES:
        raise SizeError(f"a sector block has {max(sizes[i] for i in csr):,} states, more than "
                        f"the {CHECK_MAX_STATES:,} the exact check diagonalises as a sparse "
                        "matrix")
    need = check_memory_estimate(model, [sizes[i] for i in csr],
                                 [counts[i] for i in csr]) if csr else 0
    for position, i in enumerate(sequence):
        if product[i]:
            before = sequence[position - 1] if position else None
            kept = sizes[before] if before is not None and product[before] else 0
            need = max(need, product_check_bytes(block_models[i], sizes[i], counts[i],
                                                 fit_scaling, kept))
    return need


def _partner(previous, block_model, route_kind, k, at_bottom) -> bool:
    """Whether the previous block is this one's -S^z partner, checked the same way."""
    sz = block_model.sector.sz
    return (previous is not None and sz is not None and sz != 0 and previous["sz"] == -sz
            and previous["kind"] == route_kind and previous["key"] == (k, at_bottom))


def _csr_block(block_model, p_states, p_energies, effectives, k, previous, fit_scaling, say):
    """The exact levels of one block from its CSR matrix (dense, LOBPCG or Lanczos):
    ``(levels by factor, k, route, record for the partner)``, None when the window is
    not at the bottom of a large block."""
    basis = build_basis(block_model, max_states=CHECK_MAX_STATES)
    h0 = hamiltonian_matrix(block_model, basis, block_model.unperturbed_labels, check=False)
    v = hamiltonian_matrix(block_model, basis, block_model.perturbation_labels, check=False)
    p_in_basis = basis.index(p_states)
    at_bottom = h0.diagonal().real.min() >= p_energies.min() - 1e-9
    if not at_bottom and basis.size > DENSE_CHECK_LIMIT:
        return None
    if not at_bottom:
        k = p_states.size        # levels matched by nearness: all of them
    record = {"sz": block_model.sector.sz, "kind": "csr", "key": (k, at_bottom),
              "data": (basis, (h0, v))}
    if (_partner(previous, block_model, "csr", k, at_bottom)
            and mirror_images(block_model, previous["data"][0], previous["data"][1], basis,
                              (h0, v))):
        record["exact"] = previous["exact"]           # the same exact levels (check_mirror)
        return previous["exact"], k, "mirror", record
    exact_by_factor, routes = {}, []
    for factor, effective in effectives.items():
        effective = effective.toarray() if sp.issparse(effective) else effective
        guess = np.zeros((basis.size, k), dtype=effective.dtype)
        effective_levels, vectors = la.eigh(effective)
        guess[p_in_basis] = vectors[:, :k]
        exact_by_factor[factor] = _exact_levels(h0 + factor * v, guess, effective_levels,
                                                at_bottom, p_in_basis, effective, routes=routes)
    record["exact"] = exact_by_factor
    route = "lanczos" if "lanczos" in routes else routes[0]
    return exact_by_factor, k, route, record


def _product_block(block_model, p_states, p_energies, effectives, k, previous, fit_scaling,
                   say):
    """The exact levels of one block in the product basis (``lowfold.jobs.check_product``);
    a window above the bottom goes to the CSR route when the block is dense-sized."""
    if not product_at_bottom(block_model, float(p_energies.min())):
        if sector_size(block_model.site, block_model.n_sites,
                       block_model.sector) > DENSE_CHECK_LIMIT:
            return None
        return _csr_block(block_model, p_states, p_energies, effectives, k, None,
                          fit_scaling, say)
    hams = product_hamiltonians(block_model, fit_scaling)
    say(f"product basis: wave functions of {hams[0].shape2d[0]:,} x {hams[0].shape2d[1]:,}")
    record = {"sz": block_model.sector.sz, "kind": "product", "key": (k, True), "data": hams}
    if _partner(previous, block_model, "product", k, True) and product_mirror(
            previous["data"], hams):
        record["exact"] = previous["exact"]
        return previous["exact"], k, "mirror", record
    if previous is not None:
        previous["data"] = None         # the partner's Hamiltonians are no longer needed
    exact_by_factor, route = product_levels(hams, p_states, effectives, k, say)
    record["exact"] = exact_by_factor
    return exact_by_factor, k, route, record


def check_memory_estimate(model: Model, sizes: list[int], counts: list[int]) -> int:
    """Bytes the exact check needs for its largest block, before anything is built.

    Per sector block of ``s`` states: the basis (8 bytes a state and as much for its
    index), two CSR matrices (H0 and V: 12 bytes an entry, at most one entry per operator
    string acting on a state, plus the diagonal) and their sum, and 8 vectors per level
    compared (the LOBPCG blocks and the start), 16 bytes an entry (complex in general); the
    basis and matrices of the previous block are kept beside them (its spin-reversed
    partner may follow).
    """
    op = compile_operator(model, check_sector=False)
    per_row = 1 + int(op.offdiagonal_strings.size)
    stored = [16 * s + 3 * 12 * per_row * s for s in sizes]
    return max(2 * stored[i] + 8 * 16 * k * s for i, (s, k) in enumerate(zip(sizes, counts)))


def _mirror_key(sector: Sector):
    """Blocks ordered by |S^z|, -S^z before S^z: spin-reversed partners come one after the
    other."""
    return (0, 0) if sector.sz is None else (abs(sector.sz), sector.sz)


def _gib(n: int) -> str:
    return f"{n / 2**30:.1f} GiB"


def _sz_text(sector: Sector) -> str | None:
    return None if sector.sz is None else str(sector.sz)


def _exact_levels(matrix, guess: np.ndarray, effective: np.ndarray, at_bottom: bool,
                  p_rows: np.ndarray, effective_matrix: np.ndarray,
                  routes: list | None = None) -> np.ndarray:
    """The exact levels the effective ones approximate: the lowest ``k`` levels (``k`` the
    columns of ``guess``) when P is at the bottom of the spectrum, else the levels nearest
    the effective ones (dense only).  ``routes``: the eigensolver used is appended."""
    n, k = guess.shape
    routes = [] if routes is None else routes
    if not at_bottom:
        routes.append("dense")
        values = la.eigvalsh(matrix.toarray())
        chosen = []
        for e in effective:
            free = [i for i in np.argsort(np.abs(values - e)) if i not in chosen]
            chosen.append(free[0])
        return np.sort(values[chosen])
    if n <= 1200 or (n <= DENSE_CHECK_LIMIT and k > 20):
        routes.append("dense")
        return la.eigvalsh(matrix.toarray(), subset_by_index=[0, k - 1])
    return exact_lowest(matrix, k, guess[p_rows], p_rows, effective_matrix, routes=routes)


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
