"""Scans over parameters and cluster sizes: scan files (``scanfile``), running on Dask
(``run``), the result store on disk (``store``) and finite-size fits (``extrapolate``)."""
