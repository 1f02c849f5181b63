"""numba kernels only: ``@njit(cache=True)`` functions on plain arrays, called from
``lowfold.build``; each keeps a slow pure-Python twin in the tests."""
