"""Blocks of opposite S^z with the same exact levels: reversing every spin.

The spin reversal R maps the S^z block of a cluster onto the -S^z block.  On spin sites it
sends each local state m to -m (digit d to 2S - d, so an encoded state s to
``radix^N - 1 - s``); on electron sites it exchanges the up and down occupations of every
site (bits 0..N-1 and N..2N-1), with the sign ``(-1)^(N_up N_dn)`` of reordering the
creation operators, one sign for the whole block.  When ``H_-[R(i), R(j)] = H_+[i, j]`` for
every entry (checked, not assumed: a field along z or any other term odd under R breaks it),
the two blocks are permutation-similar and have the same spectrum, so the exact levels of
one serve for the other (common practice in exact diagonalisation).
"""

from __future__ import annotations

import numpy as np

from lowfold.model.model import Model

__all__ = ["reversed_states", "mirror_images"]

MIRROR_TOL = 1e-13     # entries equal within this times the largest one


def reversed_states(model: Model, states: np.ndarray) -> np.ndarray | None:
    """The encoded states with every spin reversed, or None for sites without that map."""
    site, n = model.site, model.n_sites
    states = np.asarray(states, dtype=np.int64)
    if site.type == "spin" and site.modes == 1 and site.radix**n <= 2**62:
        return site.radix**n - 1 - states
    if site.type == "electron" and site.modes == 2 and site.radix == 2:
        mask = np.int64((1 << n) - 1)
        return ((states >> n) & mask) | ((states & mask) << n)
    return None


def mirror_images(model: Model, basis_a, matrices_a, basis_b, matrices_b) -> bool:
    """True when block b is block a with every spin reversed, matrix by matrix.

    Parameters
    ----------
    model : Model
    basis_a, basis_b : Basis
        The bases of the two sector blocks (S^z and -S^z).
    matrices_a, matrices_b : sequences of sparse matrices
        The same operators (e.g. H0 and V) on the two blocks.
    """
    if basis_a.size != basis_b.size:
        return False
    flipped = reversed_states(model, basis_a.states)
    if flipped is None:
        return False
    position = basis_b.index(flipped)
    if np.any(position < 0):
        return False
    for a, b in zip(matrices_a, matrices_b):
        a = a.tocsr()
        difference = (b.tocsr()[position][:, position] - a).tocsr()
        if not difference.nnz:
            continue
        scale = max(1.0, float(np.max(np.abs(a.data), initial=0.0)))
        if np.max(np.abs(difference.data)) > MIRROR_TOL * scale:
            return False
    return True
