"""Robustness variants of the main estimate and sensitivity analyses."""
