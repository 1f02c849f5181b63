"""The spectrum job: the lowest energies of a model in its sector, as a result object."""

from __future__ import annotations

from typing import Callable

from lowfold.errors import ModelError
from lowfold.model.model import Model
from lowfold.results import Spectrum
from lowfold.solve import exact

__all__ = ["spectrum"]


def spectrum(model: Model, levels: int = 4, *, vectors: bool = False, method: str = "auto",
             memory_limit: int | None = None,
             progress: Callable[[str], None] | None = None) -> Spectrum:
    """The ``levels`` lowest energies of the model in its sector.

    ``method``: ``"auto"`` (dense for small spaces, the product basis for electrons at fixed
    N_up, N_dn whose terms act on one spin species, else Lanczos on a CSR matrix if it fits
    in memory, else matrix-free Lanczos), ``"csr"``, ``"matrix-free"``, ``"dense"`` or
    ``"product"``.  Raises
    ``SizeError`` before building anything that would not fit in ``memory_limit`` bytes
    (default: 80 % of the available memory).  See :func:`lowfold.solve.exact.spectrum`.
    """
    if model.lattice.infinite:
        raise ModelError("the lattice is infinite: an exact spectrum needs a finite cluster; "
                         "give the lattice a size (boundary open or periodic)")
    found = exact.spectrum(model, levels, vectors=vectors, method=method,
                           memory_limit=memory_limit, progress=progress)
    return Spectrum(found.dimension, found.energies, found.vectors, found.method)
