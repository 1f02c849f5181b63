"""Exceptions raised by lowfold.

Every error a user can cause derives from :class:`LowfoldError` and from the matching
builtin, so ``except ValueError`` keeps working in scripts.  The command line turns any
``LowfoldError`` into one line on stderr and exit status 2.
"""

__all__ = ["LowfoldError", "ModelError", "ManifoldError", "SizeError", "ConvergenceError",
           "StoreError"]


class LowfoldError(Exception):
    """Base class of every error lowfold raises on purpose."""


class ModelError(LowfoldError, ValueError):
    """The model (file, terms, sector, options) is not valid; the message names the key."""


class ManifoldError(LowfoldError, ValueError):
    """The low-energy manifold is not separated from the rest of the spectrum by a gap."""


class SizeError(LowfoldError, MemoryError):
    """A basis or matrix would not fit in the memory allowed for it."""


class ConvergenceError(LowfoldError, RuntimeError):
    """An iterative solver did not converge; partial results are attached when known."""

    def __init__(self, message, partial=None):
        super().__init__(message)
        self.partial = partial


class StoreError(LowfoldError, OSError):
    """A results directory cannot be written (read-only, full, or in use by another scan)."""
