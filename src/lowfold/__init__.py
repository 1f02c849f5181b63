"""lowfold: effective low-energy models of lattice Hamiltonians by exact perturbation theory.

The public API is re-exported here; everything else is an implementation detail.
"""

__version__ = "0.1.0"

from .errors import ConvergenceError, LowfoldError, ManifoldError, ModelError, SizeError
from .lattice import BOND_CLASSES, SHAPES, Lattice, make_lattice
from .sites import Site, make_site
from .basis import Basis, Sector
from .terms import Term
from .model import Model, PerturbationSpec
from .modelfile import load_model, parse_model
from .hamiltonian import build_basis, hamiltonian_matrix, hamiltonian_operator
from .exact import SpectrumResult, spectrum
from .tasks import run_task

__all__ = [
    "__version__",
    "LowfoldError", "ModelError", "ManifoldError", "SizeError", "ConvergenceError",
    "SHAPES", "BOND_CLASSES", "Lattice", "make_lattice",
    "Site", "make_site", "Basis", "Sector", "Term", "Model", "PerturbationSpec",
    "load_model", "parse_model",
    "build_basis", "hamiltonian_matrix", "hamiltonian_operator",
    "SpectrumResult", "spectrum", "run_task",
]
