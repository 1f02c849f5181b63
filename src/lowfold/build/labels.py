"""What the digits of encoded states mean: 2 S^z and readable labels.

States are the integers of :mod:`lowfold.build.basis`: digit ``k`` (radix of the site) is
the occupation of slot ``k = site + mode * n_sites``.  Electrons: mode 0 is spin up, mode 1
spin down.  Spins: digit ``d`` is ``S^z = S - d`` (digit 0 is the highest weight, ``u``).
"""

from __future__ import annotations

import numpy as np

from lowfold.errors import ModelError
from lowfold.model.model import Model

__all__ = ["state_digits", "twice_sz", "state_labels"]


def state_digits(model: Model, states) -> np.ndarray:
    """Digits of the encoded ``states``, shape ``(n, n_sites * modes)``; slot k in column k."""
    site = model.site
    n_slots = model.n_sites * site.modes
    states = np.asarray(states, dtype=np.int64).reshape(-1)
    return (states[:, None] // (site.radix ** np.arange(n_slots, dtype=np.int64))) % site.radix


def twice_sz(model: Model, states) -> np.ndarray:
    """2 S^z of each encoded state (spins and electrons); ``ModelError`` for other sites."""
    site, n = model.site, model.n_sites
    digits = state_digits(model, states)
    if site.type == "spin":
        return (int(2 * site.spin) - 2 * digits).sum(axis=1)
    if site.type == "electron":
        return digits[:, :n].sum(axis=1) - digits[:, n:].sum(axis=1)
    raise ModelError(f"{site.type} sites carry no spin")


def state_labels(model: Model, states) -> list[str]:
    """Readable labels: electrons ``0 u d 2`` per site, spins ``u d`` (S = 1/2) or the digit,
    fermions and bosons the occupation."""
    site, n = model.site, model.n_sites
    digits = state_digits(model, states)
    if site.type == "electron":
        symbols = np.array(["0", "u", "d", "2"])
        return ["".join(symbols[row[:n] + 2 * row[n:]]) for row in digits]
    if site.type == "spin" and site.radix == 2:
        return ["".join("ud"[d] for d in row) for row in digits]
    return [" ".join(str(d) for d in row) if site.radix > 10 else "".join(str(d) for d in row)
            for row in digits]
