"""Bases and Hamiltonians: sector enumeration and ranking (``basis``), operator strings
compiled from a model (``compiled``), the sparse and matrix-free products (``sparse``,
``species``), the :class:`~lowfold.build.hamiltonian.Hamiltonian` object, state labels, and
the typed wrappers of the numba kernels (``numerics``).  The only user of ``_kernels/``."""
