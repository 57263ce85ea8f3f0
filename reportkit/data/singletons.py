"""Rows alone in a fixed-effect group, dropped until none is left.

A row that is the only member of one of its fixed-effect groups is fitted exactly by
that group's effect: it carries no information about the other coefficients, but kept
it would overstate the sample size and bias cluster-robust standard errors (Correia
2015, "Singletons, cluster-robust standard errors and fixed effects: a bad mix").
Dropping one can leave another row alone in another dimension, so the search repeats
until nothing changes; pyhdfe implements exactly this iteration.
"""

from __future__ import annotations

import numpy as np


def singleton_rows(fixed_effects: np.ndarray) -> np.ndarray:
    """Boolean array: rows dropped as (iterated) singletons of the integer-coded effects."""
    if fixed_effects.shape[1] == 0 or fixed_effects.shape[0] == 0:
        return np.zeros(fixed_effects.shape[0], dtype=bool)
    import pyhdfe  # imported here: only needed with fixed effects

    algorithm = pyhdfe.create(fixed_effects, drop_singletons=True, compute_degrees=False)
    found = algorithm.singleton_indices
    if found is None:
        return np.zeros(fixed_effects.shape[0], dtype=bool)
    return np.asarray(found, dtype=bool)
