"""Shared test settings and fixtures.

Dense LAPACK calls in the tests are small; on a shared, loaded machine multithreaded BLAS
makes them orders of magnitude slower, so the tests run BLAS single-threaded.

Helpers that are not fixtures (model-file writers, the CLI runner, exact results) live in
the ``helpers`` package beside this file.
"""

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import pytest  # noqa: E402  (after the BLAS settings, before numpy is imported)

from lowfold import load_model  # noqa: E402


@pytest.fixture
def load(tmp_path):
    """Write a model file and load it as a user does: ``load(text, name="model.toml")``."""
    def _load(text, name="model.toml"):
        path = tmp_path / name
        path.write_text(text)
        return load_model(path)
    return _load
