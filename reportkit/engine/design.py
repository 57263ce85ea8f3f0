"""The engine's input: numeric arrays of one estimation sample, with their names.

The data stage builds a ``Design`` (every row complete, categorical controls already
expanded to indicators, booleans coded 0/1, singletons removed); the engine never
sees a DataFrame. Fixed effects and clusters arrive as integer codes 0..G-1.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Design:
    """Arrays for outcome = endogenous b + controls g + fixed effects + e."""

    y: np.ndarray  # (n,)
    endog: np.ndarray  # (n, p)
    instruments: np.ndarray  # (n, q) excluded instruments
    controls: np.ndarray  # (n, c) exogenous controls, no constant column
    fixed_effects: np.ndarray  # (n, f) integer codes, f may be 0
    clusters: np.ndarray  # (n, m) integer codes, m in {0, 1, 2}
    weights: np.ndarray | None  # (n,) positive analytic weights, or None
    outcome_name: str
    endog_names: tuple[str, ...]
    instrument_names: tuple[str, ...]
    control_names: tuple[str, ...]
    fixed_effect_names: tuple[str, ...] = ()
    cluster_names: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        n = self.y.shape[0]
        for name in ("endog", "instruments", "controls", "fixed_effects", "clusters"):
            arr = getattr(self, name)
            if arr.ndim != 2 or arr.shape[0] != n:
                raise ValueError(f"Design.{name} must have shape (n, k) with n = {n}")
        if self.endog.shape[1] != len(self.endog_names):
            raise ValueError("endog_names does not match endog")
        if self.instruments.shape[1] != len(self.instrument_names):
            raise ValueError("instrument_names does not match instruments")
        if self.controls.shape[1] != len(self.control_names):
            raise ValueError("control_names does not match controls")
        if self.weights is not None and self.weights.shape != (n,):
            raise ValueError("weights must have shape (n,)")

    @property
    def n(self) -> int:
        return int(self.y.shape[0])

    @property
    def coarsest_cluster(self) -> int | None:
        """The cluster dimension with the fewest clusters (None without clusters).

        Procedures that resample or leave out whole clusters use it when the model clusters
        two ways (resampling by the coarser dimension is the conservative choice)."""
        if self.clusters.shape[1] == 0:
            return None
        counts = [int(self.clusters[:, d].max()) + 1 for d in range(self.clusters.shape[1])]
        return int(np.argmin(counts))

    @property
    def has_constant(self) -> bool:
        """A constant is included unless fixed effects absorb it."""
        return self.fixed_effects.shape[1] == 0
