"""Scans over parameters and cluster sizes: scan files (``scanfile``), the plan of points
(``plan``), Dask clusters (``cluster``), running and progress (``run``, ``progress``), the
result store on disk (``store``), selectors and tables of stored points (``select``,
``table``) and finite-size fits (``extrapolate``)."""
