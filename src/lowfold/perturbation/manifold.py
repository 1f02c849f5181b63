"""The H0 / V split, the low-energy manifold P of H0, and the space reachable from it.

H0 (the terms named in ``[perturbation] unperturbed``) must be diagonal in the occupation
basis.  The manifold P is found without enumerating the sector when H0 acts site by site
(Hubbard, potential, crystal-field and field terms): a dynamic programme over the sites gives
the lowest energy compatible with the sector, and a pruned site-by-site expansion lists every
state of P.  Otherwise (bond terms such as Ising couplings in H0) the sector is enumerated.

Only the states reachable from P by at most ``floor(n/2)`` applications of V enter the
order-``n`` effective Hamiltonian; :func:`reachable_from_states` finds them breadth first.
The operators are :class:`lowfold.build.compiled.CompiledOperator` objects acting on encoded
states; nothing here calls a kernel directly.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product as cartesian

import numpy as np
import scipy.sparse as sp

from lowfold.build.basis import explicit_basis
from lowfold.build.hamiltonian import build_basis
from lowfold.build.compiled import CompiledOperator, compile_operator
from lowfold.errors import ManifoldError, ModelError, SizeError
from lowfold.model.model import Model

__all__ = ["Manifold", "split_operators", "find_manifold", "reachable_from_states",
           "restricted_operator", "working_operator", "diagonal_energies"]


@dataclass(frozen=True, eq=False)
class Manifold:
    """The states of P (ascending integers) and their H0 energies."""

    states: np.ndarray
    energies: np.ndarray

    @property
    def dimension(self) -> int:
        return int(self.states.size)


def split_operators(model: Model) -> tuple[CompiledOperator, CompiledOperator]:
    """Compile H0 and V; ``ModelError`` naming the first H0 term that is not diagonal."""
    for label in model.unperturbed_labels:
        if not compile_operator(model, [label]).is_diagonal:
            raise ModelError(f"term {label!r} is in perturbation.unperturbed but is not diagonal "
                             "in the occupation basis; H0 must be diagonal (move it to V)")
    h0 = compile_operator(model, model.unperturbed_labels)
    v = compile_operator(model, model.perturbation_labels)
    return h0, v


def diagonal_energies(op: CompiledOperator, states: np.ndarray) -> np.ndarray:
    """Diagonal of ``op`` on the given states (real part)."""
    return np.real(op.diagonal(states)).astype(float)


def _local_quantities(model: Model):
    """Per local configuration of one site: digits per mode, particles, 2 S^z."""
    site = model.site
    configs = list(cartesian(range(site.radix), repeat=site.modes))
    if site.is_restricted:                 # kept local states only (model/local_space.py)
        configs = [c for c in configs
                   if sum(d * site.radix ** m for m, d in enumerate(c)) in site.states]
    particles = [sum(d * site.slot_particles(m) for m, d in enumerate(c)) for c in configs]
    if site.type == "spin":
        twice_sz = [int(2 * site.spin) - 2 * c[0] for c in configs]
    else:
        twice_sz = [sum(d * site.slot_twice_sz(m) for m, d in enumerate(c)) for c in configs]
    return configs, np.array(particles), np.array(twice_sz)


def _is_site_local(op: CompiledOperator, n_sites: int) -> bool:
    for k in range(op.n_strings):
        slots = op.slot[op.ptr[k]:op.ptr[k + 1]]
        if slots.size and np.unique(slots % n_sites).size > 1:
            return False
    return True


def find_manifold(model: Model, h0: CompiledOperator, *, max_states: int = 20_000_000) -> Manifold:
    """The manifold P: the lowest H0 level in the sector, or every state in the window."""
    spec = model.perturbation
    if _is_site_local(h0, model.n_sites):
        states, energies = _manifold_by_sites(model, h0, spec)
    else:
        basis = build_basis(model, max_states=max_states)
        energies = diagonal_energies(h0, basis.states)
        keep = _in_manifold(energies, spec)
        states, energies = basis.states[keep], energies[keep]
    if states.size == 0:
        raise ManifoldError(f"no H0 state lies in the window {spec.window}")
    order = np.argsort(states)
    return Manifold(states[order], energies[order])


def _in_manifold(energies: np.ndarray, spec) -> np.ndarray:
    if spec.window is not None:
        return (energies >= spec.window[0]) & (energies <= spec.window[1])
    lowest = energies.min()
    return energies <= lowest + spec.tolerance * max(1.0, abs(lowest))


def _manifold_by_sites(model: Model, h0: CompiledOperator, spec):
    """Exact P for a site-local H0 by a dynamic programme over sites (no sector enumeration)."""
    n_sites, site = model.n_sites, model.site
    configs, particles, twice_sz = _local_quantities(model)
    sector = model.sector
    use_n, use_s = sector.particles is not None, sector.sz is not None
    particles = particles if use_n else np.zeros_like(particles)
    twice_sz = twice_sz if use_s else np.zeros_like(twice_sz)
    target = (sector.particles if use_n else 0, int(2 * sector.sz) if use_s else 0)
    # local energies: the H0 strings of site i on states where only site i is filled
    local_states = np.array([[sum(d * site.radix ** (i + m * n_sites) for m, d in enumerate(c))
                              for c in configs] for i in range(n_sites)], dtype=np.int64)
    site_of_string = np.array([h0.slot[h0.ptr[k]] % n_sites if h0.ptr[k + 1] > h0.ptr[k] else -1
                               for k in range(h0.n_strings)])
    local_energy = np.zeros((n_sites, len(configs)))
    constant = float(np.real(h0.coef[site_of_string == -1].sum())) if h0.n_strings else 0.0
    for i in range(n_sites):
        strings = np.flatnonzero(site_of_string == i).astype(np.int64)
        if strings.size:
            local_energy[i] = np.real(h0.diagonal(local_states[i], strings))
    if spec.window is None and np.all(np.ptp(local_energy, axis=1) == 0):
        raise ManifoldError("H0 is constant on the sector: the manifold would be the whole "
                            "sector, with no gap to expand across (is its strength zero?)")
    # best[i][n, s]: lowest energy of sites i.. with totals (n, s) (offset by the minima)
    # the ranges hold 0 (no site yet) also when every kept local state has particles
    n_lo, n_hi = min(0, n_sites * particles.min()), max(0, n_sites * particles.max())
    s_lo, s_hi = min(0, n_sites * twice_sz.min()), max(0, n_sites * twice_sz.max())
    shape = (n_hi - n_lo + 1, s_hi - s_lo + 1)
    best = np.full((n_sites + 1, *shape), np.inf)
    best[n_sites, -n_lo, -s_lo] = 0.0
    for i in range(n_sites - 1, -1, -1):
        for c in range(len(configs)):
            shifted = np.full(shape, np.inf)
            dn, ds = particles[c], twice_sz[c]
            src = best[i + 1][max(0, -dn):shape[0] - max(0, dn), max(0, -ds):shape[1] - max(0, ds)]
            shifted[max(0, dn):shape[0] - max(0, -dn), max(0, ds):shape[1] - max(0, -ds)] = src
            best[i] = np.minimum(best[i], shifted + local_energy[i, c])

    def remaining(i, n, s):
        """Lowest energy sites i.. can add so that the totals reach the target."""
        a, b = target[0] - n - n_lo, target[1] - s - s_lo
        ok = (a >= 0) & (a < shape[0]) & (b >= 0) & (b < shape[1])
        out = np.full(n.shape, np.inf)
        out[ok] = best[i][a[ok], b[ok]]
        return out

    lowest = remaining(0, np.zeros(1, dtype=np.int64), np.zeros(1, dtype=np.int64))[0]
    if not np.isfinite(lowest):
        raise ModelError("the sector contains no state")
    if spec.window is not None:
        emin, emax = spec.window[0] - constant, spec.window[1] - constant
    else:
        emin, emax = -np.inf, lowest + spec.tolerance * max(1.0, abs(lowest + constant))
    slack = 1e-12 * max(1.0, abs(emax) if np.isfinite(emax) else 1.0)
    # expand site by site, keeping partial states that can still end inside [emin, emax]
    states = np.zeros(1, dtype=np.int64)
    energy = np.zeros(1)
    used_n = np.zeros(1, dtype=np.int64)
    used_s = np.zeros(1, dtype=np.int64)
    for i in range(n_sites):
        parts = []
        for c in range(len(configs)):
            e = energy + local_energy[i, c]
            n, s = used_n + particles[c], used_s + twice_sz[c]
            keep = e + remaining(i + 1, n, s) <= emax + slack
            parts.append((states[keep] + local_states[i, c], e[keep], n[keep], s[keep]))
        states = np.concatenate([p[0] for p in parts])
        energy = np.concatenate([p[1] for p in parts])
        used_n = np.concatenate([p[2] for p in parts])
        used_s = np.concatenate([p[3] for p in parts])
    done = (used_n == target[0]) & (used_s == target[1]) & (energy >= emin - slack)
    return states[done], energy[done] + constant


def _sorted_unique(x: np.ndarray) -> np.ndarray:
    """Ascending distinct values of an int array, by sorting (``np.unique`` of numpy 2.4
    hashes, which is tens of times slower on millions of encoded states)."""
    x = np.sort(np.asarray(x, dtype=np.int64), kind="stable")
    if x.size < 2:
        return x
    keep = np.empty(x.size, dtype=bool)
    keep[0] = True
    np.not_equal(x[1:], x[:-1], out=keep[1:])
    return x[keep]


def _member(x: np.ndarray, sorted_set: np.ndarray) -> np.ndarray:
    """``x[i] in sorted_set`` for each i (``sorted_set`` ascending and distinct)."""
    if sorted_set.size == 0:
        return np.zeros(x.shape, dtype=bool)
    pos = np.minimum(np.searchsorted(sorted_set, x), sorted_set.size - 1)
    return sorted_set[pos] == x


def _new_states(images: np.ndarray, visited: np.ndarray) -> np.ndarray:
    """The distinct images not yet visited, ascending."""
    images = _sorted_unique(images)
    return images[~_member(images, visited)]


def reachable_from_states(v: CompiledOperator, p_states: np.ndarray, steps: int) -> np.ndarray:
    """The encoded states ``p_states`` together with every state reachable from them by at
    most ``steps`` applications of the compiled ``v``, ascending (breadth first).

    Compare ``lowfold.perturbation.schrieffer_wolff.reachable_indices``, the same search on
    basis indices with a matrix."""
    visited = _sorted_unique(p_states)
    frontier = visited
    for _ in range(steps):
        if frontier.size == 0 or v.offdiagonal_strings.size == 0:
            break
        frontier = _new_states(v.apply_to_states(frontier, v.offdiagonal_strings).states, visited)
        visited = _sorted_unique(np.concatenate([visited, frontier]))
    return visited


def working_operator(v: CompiledOperator, p_states: np.ndarray, steps: int, *,
                     outer: bool, max_states: int | None = None, by_shell: bool = False
                     ) -> tuple[np.ndarray, sp.csr_matrix]:
    """The states reachable from ``p_states`` in at most ``steps`` applications of ``v``
    (ascending, as :func:`reachable_from_states`) and the matrix of ``v`` among them, found
    in one breadth-first pass.

    ``v`` is applied to the states nearer than ``steps`` only; the entries between them and
    the outermost shell follow from Hermiticity (``V_ij = conj(V_ji)``).  The entries inside
    the outermost shell (by far the largest set) are built only when ``outer`` is true: an
    order-n effective Hamiltonian with ``steps = n // 2`` needs them for odd n alone
    (an order-1 quantity enters only with ``dist(i) + dist(j) <= n - 1``).

    ``SizeError`` as soon as more than ``max_states`` states are reached.  With ``by_shell``
    the states come ordered by distance from P (P first, each shell ascending), the order
    the Schrieffer-Wolff recursion works in, so that it needs no permuted copy of V, and
    the distance of each state (its shell) is returned as a third item.

    Returns
    -------
    (1-d int64 array, CSR matrix[, 1-d int8 array])
        The states and ``<i|V|j>`` on them (``V`` must be Hermitian)[, their distances].
    """
    visited = _sorted_unique(p_states)
    frontier = visited
    shells = [visited]
    found = []          # (source states, image states, amplitudes) of each expanded shell
    for _ in range(steps):
        if frontier.size == 0:
            break
        rows, new, amps = v.apply_to_states(frontier)
        found.append((frontier[rows], new, amps))
        frontier = _new_states(new, visited)
        shells.append(frontier)
        visited = _sorted_unique(np.concatenate([visited, frontier]))
        if max_states is not None and visited.size > max_states:
            raise SizeError(f"{visited.size:,} intermediate states are reached within "
                            f"{len(found)} steps of V (limit {max_states:,})")
    shell = frontier if found else np.zeros(0, dtype=np.int64)
    inner_entries = len(found)
    if outer and shell.size:
        rows, new, amps = v.apply_to_states(shell)
        inside = _member(new, shell)
        found.append((shell[rows[inside]], new[inside], amps[inside]))
    size = visited.size
    index_type = np.int32 if size < 2**31 - 1 else np.int64
    position = np.arange(size, dtype=index_type)
    visited_order = visited
    if by_shell:
        visited_order = np.concatenate(shells)
        position[np.searchsorted(visited, visited_order)] = np.arange(size, dtype=index_type)
        distance = np.repeat(np.arange(len(shells), dtype=np.int8), [x.size for x in shells])
    del shells
    row_parts, col_parts, data_parts = [], [], []
    for number in range(len(found)):
        source, image, amp = found[number]
        found[number] = None                            # free each shell's images when read
        col = position[np.searchsorted(visited, source)]
        del source
        row = position[np.searchsorted(visited, image)]
        row_parts.append(row)
        col_parts.append(col)
        data_parts.append(amp)
        if number < inner_entries and shell.size:     # the partners in the outer shell
            in_shell = _member(image, shell)
            row_parts.append(col[in_shell])
            col_parts.append(row[in_shell])
            data_parts.append(np.conj(amp[in_shell]))
        del image
    if not data_parts:
        empty = sp.csr_matrix((size, size), dtype=v.dtype)
        return (visited_order, empty, distance) if by_shell else (visited_order, empty)
    rows, cols = np.concatenate(row_parts), np.concatenate(col_parts)
    del row_parts, col_parts
    data = np.concatenate(data_parts)
    del data_parts
    matrix = sp.coo_matrix((data, (rows, cols)), shape=(size, size))
    del rows, cols, data
    matrix = matrix.tocsr()
    matrix.sum_duplicates()
    return (visited_order, matrix, distance) if by_shell else (visited_order, matrix)


def restricted_operator(op: CompiledOperator, states: np.ndarray, n_slots: int) -> sp.csr_matrix:
    """Matrix of ``op`` between the given states only (images leaving the set are dropped)."""
    basis = explicit_basis(states, n_slots, op.radix)
    rows, new, amps = op.apply_to_states(basis.states)
    cols = basis.index(new)
    inside = cols >= 0
    # <new|O|state_row> = amp: entry (new, row)
    return sp.csr_matrix((amps[inside], (cols[inside], rows[inside])),
                         shape=(basis.size, basis.size))

