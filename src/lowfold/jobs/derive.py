"""Effective low-energy models: manifold, Schrieffer-Wolff orders, readout, exact check.

:func:`derive` is lowfold's main job.  It splits the model into H0 and V, finds the manifold
P of H0, builds only the states reachable from P, computes the effective Hamiltonian order by
order (blocked by S^z when V conserves it), reads it out as Pauli strings and named spin
couplings when P is one spin-1/2 per site, and compares the effective spectrum of every
order with the exact low-lying spectrum of the same cluster.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction
from typing import Callable

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from scipy.sparse.linalg import lobpcg

from lowfold.model.sector import Sector
from lowfold.build.basis import explicit_basis, sector_size
from lowfold.errors import ModelError, SizeError
from lowfold.solve.exact import lowest_eigenpairs
from lowfold.build.hamiltonian import build_basis, hamiltonian_matrix
from lowfold.build.labels import state_labels, twice_sz
from lowfold.model.model import Model
from lowfold.perturbation.diagnostics import Diagnostics, manifold_diagnostics, merge_diagnostics
from lowfold.perturbation.manifold import (Manifold, diagonal_energies, find_manifold,
                                    reachable_from_states, restricted_operator, split_operators)
from lowfold.perturbation.schrieffer_wolff import effective_hamiltonian_orders, second_order_matrix_free
from lowfold.readout.couplings import pauli_coefficients_by_order, recognise_rational, spin_couplings

__all__ = ["EffectiveModel", "derive"]

CHECK_MAX_STATES = 400_000      # largest sector block diagonalised for the exact check
DENSE_CHECK_LIMIT = 5000
MAX_WORKING_STATES = 2_000_000  # intermediate states of one block for orders above 2


@dataclass(frozen=True)
class _Block:
    """One S^z block of the manifold: indices into P and the sector it lives in."""

    p_positions: np.ndarray
    sector: Sector


@dataclass(eq=False)
class EffectiveModel:
    """Result of :func:`derive`.

    Attributes
    ----------
    orders : list of scipy.sparse.csr_matrix
        ``H_eff,m`` for m = 0..order on the manifold, in the order of ``manifold.states``.
    manifold : Manifold
        The states of P and their H0 energies; ``labels`` names them.
    spin_form : bool
        True when P is one spin-1/2 per site and ``terms`` / ``couplings`` are filled.
    terms : dict
        Pauli string -> list of coefficients per order (spin form only).
    couplings : list of readout.Coupling
    check : dict or None
        Exact lowest levels and the largest error of each order.
    """

    model: Model
    order: int
    manifold: Manifold
    labels: list[str]
    orders: list
    gap: float
    diagnostics: Diagnostics
    spin_form: bool = False
    readout_note: str = ""
    terms: dict = field(default_factory=dict)
    couplings: list = field(default_factory=list)
    residual: dict = field(default_factory=dict)
    recognised: dict = field(default_factory=dict)
    ratio_scale: str | None = None
    check: dict | None = None
    scaling: dict | None = None
    warnings: list[str] = field(default_factory=list)

    def matrix(self, up_to: int | None = None) -> np.ndarray:
        """The effective Hamiltonian summed to order ``up_to`` (default: all), dense."""
        up_to = self.order if up_to is None else up_to
        return sum(self.orders[m] for m in range(up_to + 1)).toarray()

    def to_dict(self) -> dict:
        energies = self.manifold.energies
        readout = "spin-1/2" if self.spin_form else f"matrix ({self.readout_note})"
        out = {
            "order": self.order,
            "manifold": {"dimension": self.manifold.dimension,
                         "energy": float(energies.min()),
                         "gap": float(self.gap) if np.isfinite(self.gap) else None,
                         "readout": readout},
            "terms": [{"operator": op, "coefficient": float(sum(cs)),
                       "orders": _orders_dict(cs)} for op, cs in self.terms.items()],
            "couplings": [self._coupling_dict(c) for c in self.couplings],
            "check": self.check,
            "diagnostics": self.diagnostics.to_dict(self._label),
            "warnings": list(self.warnings),
        }
        if self.scaling is not None:
            out["scaling"] = self.scaling
        if not self.spin_form:
            out["effective"] = {"basis": self.labels,
                                "orders": {str(m): _matrix_json(h) for m, h in enumerate(self.orders)}}
        return out

    def _coupling_dict(self, coupling) -> dict:
        d = coupling.to_dict()
        d["orders"] = {k: v for k, v in d["orders"].items() if np.max(np.abs(v)) > 1e-12}
        key = (coupling.kind, tuple(coupling.sites))
        if key in self.recognised:
            d["recognised"] = {"scale": self.ratio_scale, "coefficients": self.recognised[key]}
        return d

    def _label(self, state: int) -> str:
        return state_labels(self.model, np.array([state]))[0]


def _orders_dict(values) -> dict:
    return {str(m): float(v) for m, v in enumerate(values) if abs(v) > 1e-14}


def _matrix_json(h) -> dict:
    h = sp.coo_matrix(h)
    keep = np.abs(h.data) > 1e-14
    real = not np.iscomplexobj(h.data) or not np.any(h.data.imag[keep])
    values = (h.data[keep].real if real else h.data[keep])
    return {"rows": h.row[keep].tolist(), "cols": h.col[keep].tolist(),
            "values": [float(v) for v in values] if real else [[v.real, v.imag] for v in values]}


# --------------------------------------------------------------------------- the job

def derive(model: Model, order: int | None = None, *, check: bool = True,
           check_scaling: bool = False,
           progress: Callable[[str], None] | None = None) -> EffectiveModel:
    """Effective Hamiltonian of ``model`` on the low-energy manifold of H0, order by order.

    Parameters
    ----------
    model : Model
        Must have a ``[perturbation]`` table (H0 labels, order, manifold or window).
    order : int, optional
        Highest order (default: the model file's).
    check : bool
        Compare the effective spectrum of every order with the exact lowest levels.
    check_scaling : bool
        Also repeat the check at smaller couplings and fit the power of the error.
    """
    say = progress or (lambda message: None)
    spec = model.perturbation
    if spec is None:
        model.unperturbed_labels          # raises the ModelError that explains it
    order = spec.order if order is None else order
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or order < 1:
        raise ModelError(f"order must be an integer >= 1, got {order!r}")
    h0, v = split_operators(model)
    say("finding the manifold")
    manifold = find_manifold(model, h0)
    blocks = _blocks(model, manifold, h0.conserves_sz and v.conserves_sz)
    n_slots = model.n_sites * model.site.modes
    dim = manifold.dimension
    pieces = [[] for _ in range(order + 1)]
    parts = []
    for number, block in enumerate(blocks):
        p_states = manifold.states[block.p_positions]
        say(f"block {number + 1}/{len(blocks)}: {p_states.size:,} manifold states, order {order}")
        try:
            block_orders, diag = _block_orders(p_states, h0, v, order, n_slots)
        except MemoryError:
            raise SizeError(f"order {order} on {p_states.size:,} manifold states of one S^z "
                            "block does not fit in memory; use a lower order or a smaller "
                            "cluster") from None
        parts.append(diag)
        for m, h in enumerate(block_orders):
            h = sp.coo_matrix(h)
            pieces[m].append((block.p_positions[h.row], block.p_positions[h.col], h.data))
    orders = [_tidy(sp.csr_matrix((np.concatenate([p[2] for p in piece]),
                                   (np.concatenate([p[0] for p in piece]),
                                    np.concatenate([p[1] for p in piece]))), shape=(dim, dim)))
              for piece in pieces]
    diagnostics = merge_diagnostics(parts, lambda s: state_labels(model, np.array([s]))[0])
    labels = state_labels(model, manifold.states) if dim <= 4096 else []
    result = EffectiveModel(model, order, manifold, labels, orders, diagnostics.gap, diagnostics,
                            warnings=list(diagnostics.warnings))
    _read_out(result)
    if check:
        say("exact check")
        _check(result, blocks, check_scaling, say)
    return result


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


def _blocks(model: Model, manifold: Manifold, by_sz: bool) -> list[_Block]:
    if not (by_sz and model.site.has_spin):
        return [_Block(np.arange(manifold.dimension), model.sector)]
    sz2 = twice_sz(model, manifold.states)
    return [_Block(np.flatnonzero(sz2 == value), Sector(model.sector.particles, Fraction(int(value), 2)))
            for value in np.unique(sz2)]


def _block_orders(p_states, h0, v, order, n_slots):
    """Orders of the effective Hamiltonian of one block, and its diagnostics."""
    working = reachable_from_states(v, p_states, max(1, order // 2))
    energies = diagonal_energies(h0, working)
    p_index = np.searchsorted(working, p_states)
    if order > 2 and working.size > MAX_WORKING_STATES:
        raise SizeError(f"order {order} needs {working.size:,} intermediate states in one S^z "
                        f"block (limit {MAX_WORKING_STATES:,}); use a lower order or a smaller cluster")
    if order == 2:
        v_pq_parts = _coupling_rows(v, p_states, working, n_slots)
        q_mask = np.ones(working.size, dtype=bool)
        q_mask[p_index] = False
        v_pp = v_pq_parts[:, p_index]
        v_pq = v_pq_parts[:, q_mask]
        diag = manifold_diagnostics(energies, _embed(v_pq_parts, p_index, working.size),
                                    p_index, working)
        h2 = second_order_matrix_free(energies[p_index], energies[q_mask], v_pq)
        return [sp.diags(energies[p_index]).tocsr(), sp.csr_matrix(v_pp), h2], diag
    v_work = restricted_operator(v, working, n_slots)
    diag = manifold_diagnostics(energies, v_work, p_index, working)
    return effective_hamiltonian_orders(energies, v_work, p_index, order), diag


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

def _spin_map(model: Model, states: np.ndarray):
    """Qubit index and reordering sign of each manifold state, or a reason there is none."""
    site, n = model.site, model.n_sites
    if states.size != 2**n:
        return None, f"the manifold has {states.size} states, not 2^{n}"
    if site.type == "spin" and site.radix == 2:
        return (states, np.ones(states.size)), ""
    if site.type != "electron":
        return None, f"no spin-1/2 reading for {site.type} sites"
    mask = (1 << n) - 1
    up, dn = states & mask, states >> n
    if np.any((up ^ dn) != mask):
        return None, "the manifold is not one electron per site"
    # sign of reordering c+_{up sites} c+_{down sites} into site order: pairs (i up, j down, j < i)
    inversions = np.zeros(states.size, dtype=np.int64)
    for i in range(n):
        below = (1 << i) - 1
        is_up = (up >> i) & 1
        inversions += is_up * np.array([bin(x).count("1") for x in (dn & below)])
    return (dn, np.where(inversions % 2, -1.0, 1.0)), ""


def _read_out(result: EffectiveModel) -> None:
    model = result.model
    mapping, note = _spin_map(model, result.manifold.states)
    if mapping is None:
        result.readout_note = f"no spin form: {note}"
        return
    qubit, sign = mapping
    n = model.n_sites
    perm = sp.csr_matrix((sign, (qubit, np.arange(qubit.size))), shape=(2**n, 2**n))
    matrices = [perm @ h @ perm.T for h in result.orders]
    terms = pauli_coefficients_by_order(matrices, n, tol=1e-12)
    rings, triangles = lattice_cycles(model.lattice)
    couplings, residual = spin_couplings(terms, n, orders=list(range(result.order + 1)), tol=1e-10,
                                         ring_cycles=rings, triangles=triangles)
    result.spin_form, result.terms, result.couplings, result.residual = True, terms, couplings, residual
    _recognise(result)


def lattice_cycles(lattice) -> tuple[list[tuple], list[tuple]]:
    """The 4-cycles (cyclic order) and triangles of the nearest-neighbour bond graph: where
    ring exchange and scalar chirality are read out."""
    neighbours = {i: set() for i in range(lattice.n_sites)}
    for i, j in lattice.bonds("nearest"):
        neighbours[int(i)].add(int(j))
        neighbours[int(j)].add(int(i))
    triangles = sorted({tuple(sorted((i, j, k))) for i in neighbours for j in neighbours[i]
                        for k in neighbours[j] & neighbours[i] if len({i, j, k}) == 3})
    rings = set()
    for i in neighbours:
        for j in neighbours[i]:
            for k in neighbours[j] - {i}:
                for l in (neighbours[k] & neighbours[i]) - {i, j, k}:
                    rotations = [(i, j, k, l)[r:] + (i, j, k, l)[:r] for r in range(4)]
                    rotations += [tuple(reversed(c)) for c in rotations]
                    rings.add(min(rotations))
    return sorted(rings), triangles


def _single_ratio(model: Model):
    """(V parameter, H0 parameter) when each part has exactly one named strength."""
    def names(labels):
        strengths = {model.term(label).strength for label in labels}
        return strengths if all(isinstance(s, str) for s in strengths) else set()
    h0, v = names(model.unperturbed_labels), names(model.perturbation_labels)
    if len(h0) == 1 and len(v) == 1:
        return v.pop(), h0.pop()
    return None


def _recognise(result: EffectiveModel) -> None:
    ratio = _single_ratio(result.model)
    if ratio is None:
        return
    small, large = ratio
    t, u = result.model.parameters[small], result.model.parameters[large]
    if t == 0 or u == 0:
        return
    result.ratio_scale = f"{small}^n/{large}^(n-1)"
    for c in result.couplings:
        if c.kind not in ("exchange", "ring", "chirality", "constant"):
            continue
        found = {}
        for m, value in c.orders.items():
            if abs(value) > 1e-12:
                fraction = recognise_rational(value, t**m / u ** (m - 1), max_denominator=64, rtol=1e-7)
                if fraction is not None:
                    found[str(m)] = str(fraction)
        if found:
            result.recognised[(c.kind, tuple(c.sites))] = found


# --------------------------------------------------------------------------- check

def _check(result: EffectiveModel, blocks: list[_Block], scaling: bool, say) -> None:
    model = result.model
    exact_all, scaled = [], {}
    factors = (1.0, 0.8, 0.64, 0.5, 0.4) if scaling else (1.0,)
    try:      # every block's size first, so that nothing is diagonalised in vain
        sizes = [sector_size(model.site, model.n_sites, b.sector) for b in blocks]
        if max(sizes) > CHECK_MAX_STATES:
            raise SizeError(f"a sector block has {max(sizes):,} states, more than the "
                            f"{CHECK_MAX_STATES:,} the exact check diagonalises")
    except SizeError as exc:
        result.warnings.append(f"exact check skipped: {exc}")
        return
    for block in blocks:
        block_model = model.with_sector(block.sector)
        basis = build_basis(block_model, max_states=CHECK_MAX_STATES)
        h0 = hamiltonian_matrix(block_model, basis, model.unperturbed_labels, check=False)
        v = hamiltonian_matrix(block_model, basis, model.perturbation_labels, check=False)
        idx = block.p_positions
        p_in_basis = basis.index(result.manifold.states[idx])
        at_bottom = h0.diagonal().real.min() >= result.manifold.energies[idx].min() - 1e-9
        if not at_bottom and basis.size > DENSE_CHECK_LIMIT:
            result.warnings.append("exact check skipped: the window is not at the bottom of the "
                                   f"spectrum and the sector block has {basis.size:,} states")
            return
        partial = [result.orders[m][idx][:, idx].toarray() for m in range(result.order + 1)]
        for factor in factors:
            effective = sum(factor**m * partial[m] for m in range(result.order + 1))
            guess = np.zeros((basis.size, idx.size), dtype=effective.dtype)
            effective_levels, guess[p_in_basis] = la.eigh(effective)
            exact = _exact_levels(h0 + factor * v, guess, effective_levels, at_bottom)
            if factor == 1.0:
                exact_all.extend(exact.tolist())
            running = np.zeros_like(partial[0])
            for m in range(result.order + 1):
                running = running + factor**m * partial[m]
                error = float(np.max(np.abs(la.eigvalsh(running) - exact)))
                scaled[(factor, m)] = max(scaled.get((factor, m), 0.0), error)
    result.check = {"exact": sorted(exact_all),
                    "by_order": {str(m): {"max_abs_error": scaled[(1.0, m)]}
                                 for m in range(result.order + 1)}}
    if scaling:
        result.scaling = _fit_powers(scaled, factors, result.order, model)


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


def _fit_powers(scaled: dict, factors, order: int, model: Model) -> dict:
    """Fitted power of the error of each order against the coupling scale factor."""
    out = {}
    floor = 1e-11 * max(1.0, max(abs(x) for x in model.parameters.values()) if model.parameters else 1.0)
    for m in range(order + 1):
        xs = [f for f in factors if scaled[(f, m)] > floor]
        if len(xs) < 3:
            out[str(m)] = {"power": None, "expected_at_least": m + 1, "note": "errors at round-off"}
            continue
        slope = float(np.polyfit(np.log(xs), np.log([scaled[(f, m)] for f in xs]), 1)[0])
        out[str(m)] = {"power": slope, "expected_at_least": m + 1,
                       "ok": bool(slope >= m + 1 - 0.2)}
    return out
