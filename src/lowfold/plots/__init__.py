"""Figures of scan results and sweeps (matplotlib)."""
