"""Shared test settings.

Dense LAPACK calls in the tests are small; on a shared, loaded machine multithreaded BLAS
makes them orders of magnitude slower, so the tests run BLAS single-threaded.
"""

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
