"""Shared helpers of the test suite: not test modules, and never collected as tests.

- :mod:`helpers.cli`: the installed ``lowfold`` script run as a subprocess, many at once,
  and the checks every command-line test makes on its output.
- :mod:`helpers.modelfiles`: model-file text writers (Hubbard clusters, spin chains, single
  ``[[term]]`` tables) and the broken model files of the bad-input tests.
- :mod:`helpers.series_models`: the model files of the single-state series tests.
- :mod:`helpers.exact`: exact results and dense Kronecker-product builds of spin-1/2 models,
  each with its source.
- :mod:`helpers.reference`: the slow, obviously correct reference Hamiltonians (and QuSpin).

Test modules import from here (``from helpers.cli import run_all``), never from each other.
"""
