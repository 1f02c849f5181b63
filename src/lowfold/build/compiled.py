"""Compiled operators: the terms of a model as arrays of operator strings.

:func:`compile_operator` turns the terms of a model into *strings*: a coefficient times a
product of single-slot factors, with factors sorted by slot (Jordan-Wigner reordering sign
applied), factors on the same slot multiplied together, and equal strings summed, so that
sums such as ``X X + Y Y`` cancel their non-conserving parts exactly.  Conservation of the
sector's quantities is checked on the collected strings before anything is built.

A :class:`CompiledOperator` needs no basis: it acts on any basis-encoded states (integers
whose radix-``radix`` digit ``k`` is the occupation of slot ``k``; slot
``site + mode * n_sites``).  Its two state-wise actions, :meth:`CompiledOperator.diagonal`
and :meth:`CompiledOperator.apply_to_states`, are what the perturbation layer uses on
manifolds and reachable spaces; the products on a whole basis live in
:mod:`lowfold.build.sparse` and :class:`lowfold.build.hamiltonian.Hamiltonian`.
"""

from __future__ import annotations

import contextlib
from dataclasses import dataclass
from itertools import product as cartesian
from typing import NamedTuple

import numba
import numpy as np

from lowfold._kernels import operators as kernels
from lowfold.build.kept_states import project_string
from lowfold.errors import ModelError
from lowfold.model.model import Model
from lowfold.model.sites import SlotOperator

__all__ = ["CompiledOperator", "StateImages", "compile_operator", "kernel_threads",
           "PARALLEL_MIN_STATES"]

PARALLEL_MIN_STATES = 20_000   # below this, thread start-up costs more than it saves


@contextlib.contextmanager
def kernel_threads(size: int):
    """Run the parallel numba kernels on one thread for inputs of fewer than
    ``PARALLEL_MIN_STATES`` states, where waking the thread pool dominates."""
    if size >= PARALLEL_MIN_STATES:
        yield
        return
    previous = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(previous)


class StateImages(NamedTuple):
    """The non-zero images of a list of states under an operator, in COO form.

    ``amplitudes[i] = <states[i]| O |input[rows[i]]>``: ``rows`` indexes the input states,
    ``states`` holds the (encoded) image states, which need not belong to any basis.
    """

    rows: np.ndarray
    states: np.ndarray
    amplitudes: np.ndarray


@dataclass(frozen=True, eq=False)
class CompiledOperator:
    """An operator as arrays of strings, ready for the kernels.

    String ``k`` is ``coef[k]`` times the factors ``ptr[k] <= f < ptr[k+1]``; factor ``f``
    acts on slot ``slot[f]`` through table ``table[f]`` (``table_new[t, digit]``: the new
    digit or -1, ``table_amp[t, digit]``: the amplitude); ``odd[f]`` marks a fermionic factor.
    ``delta_particles[k]`` and ``delta_twice_sz[k]`` are the changes string ``k`` makes.
    """

    coef: np.ndarray
    ptr: np.ndarray
    slot: np.ndarray
    table: np.ndarray
    odd: np.ndarray
    table_new: np.ndarray
    table_amp: np.ndarray
    radix: int
    powers: np.ndarray
    diagonal_strings: np.ndarray
    offdiagonal_strings: np.ndarray
    delta_particles: np.ndarray
    delta_twice_sz: np.ndarray

    @property
    def conserves_sz(self) -> bool:
        return not np.any(self.delta_twice_sz)

    @property
    def conserves_particles(self) -> bool:
        return not np.any(self.delta_particles)

    @property
    def n_strings(self) -> int:
        return int(self.coef.shape[0])

    @property
    def is_diagonal(self) -> bool:
        return self.offdiagonal_strings.size == 0

    @property
    def dtype(self) -> np.dtype:
        """float64 for a real operator, complex128 otherwise."""
        return self.coef.dtype

    def arrays(self) -> tuple:
        """The string arrays in the order the kernels take them (after the string list).

        For ``lowfold.build`` and the kernel tests only: other layers use the methods."""
        return (self.ptr, self.slot, self.table, self.odd, self.table_new, self.table_amp,
                self.coef, self.radix, self.powers)

    def diagonal(self, states, strings=None) -> np.ndarray:
        """``<s|O|s>`` for each encoded state ``s`` (dtype of the operator).

        ``strings``: indices of the diagonal strings to sum (default: all of them)."""
        states = _encoded(states)
        strings = self.diagonal_strings if strings is None else _strings(strings)
        with kernel_threads(states.size):
            return kernels.diagonal(states, strings, *self.arrays())

    def apply_to_states(self, states, strings=None) -> StateImages:
        """The non-zero images ``O|s>`` of the encoded ``states`` (see :class:`StateImages`).

        ``strings``: indices of the strings to apply (default: all; ``offdiagonal_strings``
        for the hopping part only)."""
        states = _encoded(states)
        strings = np.arange(self.n_strings, dtype=np.int64) if strings is None else _strings(strings)
        if strings.size == 0 or states.size == 0:
            empty = np.zeros(0, dtype=np.int64)
            return StateImages(empty, empty.copy(), np.zeros(0, dtype=self.dtype))
        with kernel_threads(states.size):
            rows, new, amps = kernels.images(states, strings, *self.arrays(), False)
        return StateImages(rows, new, amps)


def _encoded(states) -> np.ndarray:
    states = np.ascontiguousarray(states, dtype=np.int64)
    if states.ndim != 1:
        raise ModelError(f"states must be a 1-d array of encoded states, got shape {states.shape}")
    return states


def _strings(strings) -> np.ndarray:
    return np.ascontiguousarray(strings, dtype=np.int64).reshape(-1)


def _canonical(factors):
    """Sort ``[(slot, SlotOperator), ...]`` by slot (stable), with the sign of reordering
    fermionic factors, multiply factors on the same slot, and scale every factor so that
    its first non-zero amplitude is 1 (so that equal operators written differently, such as
    ``S+ Sz`` and ``Sz S+``, collect into one string and can cancel).  Returns
    ``(coefficient, factors)``, or ``(0, ())`` if the product vanishes."""
    items = list(factors)
    sign = 1
    for a in range(1, len(items)):          # insertion sort, counting odd-odd swaps
        b = a
        while b > 0 and items[b - 1][0] > items[b][0]:
            if items[b - 1][1].fermionic and items[b][1].fermionic:
                sign = -sign
            items[b - 1], items[b] = items[b], items[b - 1]
            b -= 1
    merged = []
    for slot, op in items:
        if merged and merged[-1][0] == slot:
            op = merged[-1][1].compose(op)
            merged[-1] = (slot, op)
        else:
            merged.append((slot, op))
    if any(op.is_zero() for _, op in merged):
        return 0, ()
    coefficient = complex(sign)
    normalised = []
    for slot, op in merged:
        lead = next(a for a in op.amplitudes if a != 0)
        coefficient *= lead
        normalised.append((slot, SlotOperator(op.shift, _unit_lead(op.amplitudes, lead),
                                              op.fermionic)))
    return coefficient, tuple(normalised)


def _unit_lead(amplitudes, lead) -> tuple:
    """Amplitudes divided by ``lead`` (the lead becomes exactly 1)."""
    return tuple(complex(a) / lead for a in amplitudes)


def _term_strings(model: Model, label: str, products) -> dict:
    """Collected strings ``{factors: coefficient}`` of one term."""
    site, n_sites = model.site, model.n_sites
    strings: dict = {}
    for coef, factors in products:
        expanded = [site.operator(name) for name, _ in factors]
        for choice in cartesian(*expanded):
            c = complex(coef)
            slot_factors = []
            for (name, site_index), (mono_coef, mono_factors) in zip(factors, choice):
                c *= mono_coef
                slot_factors += [(site_index + mode * n_sites, op) for mode, op in mono_factors]
            factor, key = _canonical(slot_factors)
            if factor:
                strings[key] = strings.get(key, 0) + factor * c
    if site.is_restricted:                  # P O P on the kept local states
        strings = _project(site, n_sites, strings)
    scale = max((abs(c) for c in strings.values()), default=0.0)
    return {k: c for k, c in strings.items() if abs(c) > 1e-14 * scale}


def _project(site, n_sites: int, strings: dict) -> dict:
    """The strings ``{key: c}`` projected onto the kept local states, collected again."""
    out: dict = {}
    for key, c in strings.items():
        for factors in project_string(site, n_sites, key):
            factor, new = _canonical(factors)
            if factor:
                out[new] = out.get(new, 0) + factor * c
    return out


def _deltas(model: Model, key) -> tuple[int, int]:
    """Changes of particle number and of 2 S^z made by one string."""
    site, n_sites = model.site, model.n_sites
    d_particles = sum(op.shift * site.slot_particles(slot // n_sites) for slot, op in key)
    d_twice_sz = sum(op.shift * site.slot_twice_sz(slot // n_sites) for slot, op in key)
    return d_particles, d_twice_sz


def _check_conservation(model: Model, label: str, key) -> None:
    """``ModelError`` naming the term ``label`` if the string ``key`` leaves the sector."""
    sector = model.sector
    d_particles, d_twice_sz = _deltas(model, key)
    where = f"{model.source}: {model.term_key(label)}"
    if sector.particles is not None and d_particles != 0:
        raise ModelError(f"{where} changes the particle number, but the sector fixes it; "
                         "remove sector.particles or the term")
    if sector.sz is not None and d_twice_sz != 0:
        raise ModelError(f"{where} changes S^z, but the sector fixes it; remove sector.sz "
                         "or the term")


def compile_operator(model: Model, labels=None, *, check_sector: bool = True) -> CompiledOperator:
    """Compile the terms named by ``labels`` (default: all) into kernel arrays.

    The sector's conservation laws are checked on the collected strings, so terms that
    conserve only together (``X X`` and ``Y Y`` in an S^z sector) are accepted."""
    collected: dict = {}
    sources: dict = {}
    for label, products in model.products(labels):
        for key, c in _term_strings(model, label, products).items():
            collected[key] = collected.get(key, 0) + c
            sources.setdefault(key, label)
    scale = max((abs(c) for c in collected.values()), default=0.0)
    collected = {k: c for k, c in collected.items() if abs(c) > 1e-14 * scale}
    if check_sector:
        for key in collected:
            _check_conservation(model, sources[key], key)
    deltas = np.array([_deltas(model, key) for key in collected], dtype=np.int64).reshape(-1, 2)
    return _to_arrays(collected, model.site.radix, model.n_sites * model.site.modes, deltas)


def _to_arrays(strings: dict, radix: int, n_slots: int, deltas: np.ndarray) -> CompiledOperator:
    tables: dict[SlotOperator, int] = {}
    ptr, slots, table_ids, odd, coef, is_diag = [0], [], [], [], [], []
    for key, c in strings.items():
        for slot, op in key:
            slots.append(slot)
            table_ids.append(tables.setdefault(op, len(tables)))
            odd.append(op.fermionic)
        ptr.append(len(slots))
        coef.append(c)
        is_diag.append(all(op.shift == 0 for _, op in key))
    ordered = sorted(tables, key=tables.get)
    table_new = np.full((max(len(ordered), 1), radix), -1, dtype=np.int64)
    table_amp = np.zeros((max(len(ordered), 1), radix), dtype=complex)
    for t, op in enumerate(ordered):
        table_new[t], table_amp[t] = op.table()
    coef = np.array(coef, dtype=complex) if coef else np.zeros(1, dtype=complex)
    real = not (np.any(coef.imag != 0) or np.any(table_amp.imag != 0))
    dtype = np.float64 if real else np.complex128
    is_diag = np.array(is_diag, dtype=bool)
    return CompiledOperator(
        coef=np.ascontiguousarray(coef.real if real else coef, dtype=dtype),
        ptr=np.array(ptr if len(ptr) > 1 else [0, 0], dtype=np.int64),
        slot=np.array(slots, dtype=np.int64),
        table=np.array(table_ids, dtype=np.int64),
        odd=np.array(odd, dtype=np.bool_),
        table_new=table_new,
        table_amp=np.ascontiguousarray(table_amp.real if real else table_amp, dtype=dtype),
        radix=radix,
        powers=np.array([radix**k for k in range(n_slots)], dtype=np.int64),
        diagonal_strings=np.flatnonzero(is_diag).astype(np.int64) if strings else np.zeros(0, np.int64),
        offdiagonal_strings=np.flatnonzero(~is_diag).astype(np.int64) if strings else np.zeros(0, np.int64),
        delta_particles=np.ascontiguousarray(deltas[:, 0]),
        delta_twice_sz=np.ascontiguousarray(deltas[:, 1]),
    )
