"""Perturbation theory on H = H0 + V: the manifold P and the H0 / V split (``manifold``),
the Schrieffer–Wolff recursion (``schrieffer_wolff``), the Rayleigh–Schrödinger series
(``series``), convergence estimates (``convergence``) and validity diagnostics
(``diagnostics``)."""
