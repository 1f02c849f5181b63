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
from .perturbation.schrieffer_wolff import (effective_hamiltonian_orders,
                                            exact_effective_hamiltonian)
from .perturbation.series import SeriesResult, rayleigh_schrodinger, rayleigh_schrodinger_general
from .perturbation.convergence import pade_estimate, pade_table, partial_sums, ratio_test
from .readout import Coupling, pauli_coefficients, recognise_rational, spin_couplings
from .derive import EffectiveModel, derive
from .state_series import StateSeries, state_series
from .tasks import run_task

__all__ = [
    "__version__",
    "LowfoldError", "ModelError", "ManifoldError", "SizeError", "ConvergenceError",
    "SHAPES", "BOND_CLASSES", "Lattice", "make_lattice",
    "Site", "make_site", "Basis", "Sector", "Term", "Model", "PerturbationSpec",
    "load_model", "parse_model",
    "build_basis", "hamiltonian_matrix", "hamiltonian_operator",
    "SpectrumResult", "spectrum",
    "effective_hamiltonian_orders", "exact_effective_hamiltonian",
    "SeriesResult", "rayleigh_schrodinger", "rayleigh_schrodinger_general",
    "partial_sums", "pade_table", "pade_estimate", "ratio_test",
    "Coupling", "pauli_coefficients", "spin_couplings", "recognise_rational",
    "EffectiveModel", "derive", "StateSeries", "state_series", "run_task",
]
