"""lowfold: effective low-energy models of lattice Hamiltonians by exact perturbation theory.

The public API is re-exported here; everything else is an implementation detail.
"""

__version__ = "0.1.0"

from lowfold.errors import ConvergenceError, LowfoldError, ManifoldError, ModelError, SizeError
from lowfold.errors import StoreError
from lowfold.model.lattice import BOND_CLASSES, SHAPES, Lattice, make_lattice
from lowfold.model.sites import Site, make_site
from lowfold.model.sector import Sector
from lowfold.build.basis import Basis
from lowfold.model.terms import Term
from lowfold.model.model import Model, PerturbationSpec
from lowfold.model.modelfile import load_model, parse_model
from lowfold.build.hamiltonian import Hamiltonian, build_basis, hamiltonian_matrix, hamiltonian_operator
from lowfold.perturbation.schrieffer_wolff import (effective_hamiltonian_orders,
                                            exact_effective_hamiltonian)
from lowfold.perturbation.series import SeriesResult, rayleigh_schrodinger, rayleigh_schrodinger_general
from lowfold.perturbation.convergence import pade_estimate, pade_table, partial_sums, ratio_test
from lowfold.readout.couplings import Coupling, spin_couplings
from lowfold.readout.pauli import pauli_coefficients
from lowfold.readout.rationals import recognise_rational
from lowfold.readout.formulas import coupling_formula, latex_formula
from lowfold.readout.classes import class_name
from lowfold.results import (DeriveCheck, EffectiveModel, ManifoldDiagnostics, ManifoldSummary,
                             PauliTerm, PowerFit, Recognised, Spectrum, StateSeries, Sweep)
from lowfold.jobs.spectrum import spectrum
from lowfold.jobs.derive import derive
from lowfold.jobs.export import export_text, write_export
from lowfold.jobs.series import state_series
from lowfold.jobs.tasks import run_task

SpectrumResult = Spectrum     # the name before the results layer; kept for scripts

__all__ = [
    "__version__",
    "LowfoldError", "ModelError", "ManifoldError", "SizeError", "ConvergenceError", "StoreError",
    "SHAPES", "BOND_CLASSES", "Lattice", "make_lattice",
    "Site", "make_site", "Basis", "Sector", "Term", "Model", "PerturbationSpec",
    "load_model", "parse_model",
    "build_basis", "Hamiltonian", "hamiltonian_matrix", "hamiltonian_operator",
    "SpectrumResult", "spectrum",
    "effective_hamiltonian_orders", "exact_effective_hamiltonian",
    "SeriesResult", "rayleigh_schrodinger", "rayleigh_schrodinger_general",
    "partial_sums", "pade_table", "pade_estimate", "ratio_test",
    "Coupling", "pauli_coefficients", "spin_couplings", "recognise_rational",
    "coupling_formula", "latex_formula", "class_name",
    "EffectiveModel", "derive", "export_text", "write_export", "StateSeries", "state_series",
    "run_task",
    "Spectrum", "Sweep", "DeriveCheck", "PowerFit", "PauliTerm", "Recognised",
    "ManifoldSummary", "ManifoldDiagnostics",
]
