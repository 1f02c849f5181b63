"""Exact spectra of a model: ``exact`` chooses the route (dense, sparse, matrix-free) and
``lanczos`` is the low-memory Lanczos eigensolver."""
