"""Figures (matplotlib): of scan results (``scan_figures``, ``from_directory``), of a series
sweep (``sweep_figure``), their common look (``style``) and ``where`` slices (``where``)."""
