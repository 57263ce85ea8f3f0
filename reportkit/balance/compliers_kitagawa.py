"""Kitagawa's (2015) variance-weighted test of the LATE assumptions' testable implication.

Binary instrument Z, binary treatment D. Let P(B, d) = P(Y in B, D=d | Z=1) and
Q(B, d) = P(Y in B, D=d | Z=0), estimated from the m rows with Z=1 and the n rows with
Z=0 (N = m + n, lambda = m / N). Independence, exclusion and monotonicity imply
Q(B, 1) <= P(B, 1) and P(B, 0) <= Q(B, 0) for every B. The statistic (Kitagawa 2015,
Econometrica 83(5), section 2) is

    T = sqrt(m n / N) * max over (B, d) of (-1)^d (P(B, d) - Q(B, d)) / max(xi, sigma(B, d)),
    sigma^2(B, d) = (1 - lambda) P(B, d) (1 - P(B, d)) + lambda Q(B, d) (1 - Q(B, d)),

the (estimated) standard deviation of sqrt(mn/N)(P - Q), floored at the trimming
constant xi. Here xi = 0.07, the smallest value of the paper's application. Its p-value
is the paper's bootstrap from the pooled sample, which imposes P = Q (the least
favourable null): each draw takes m units for the Z=1 sample and n units for the Z=0
sample, with replacement, from all rows regardless of Z, recomputes T (its sigma from the
draw), and p = share of draws with T* >= T.

Choices of ours, recorded in the result: B ranges over the closed intervals [a, b] whose
end points are two (possibly equal) points of a grid of at most 50 quantiles of the
pooled outcome (every distinct value when there are at most 50), not over all intervals
with sample end points, so the test stays fast at any n. With analytic weights P and Q are
weighted shares and a bootstrap row keeps its weight. With clusters and an instrument
constant within each cluster (assigned by cluster), a draw takes as many whole clusters
(from all clusters) as each arm has, since rows of a cluster share their instrument value.
When the instrument varies within clusters, rows are drawn one by one as in the paper:
if the instrument is assigned row by row, the pooled draw of rows mimics that assignment
under P = Q whatever the clustering of outcomes; the result says so. The sup is taken over
the grid's intervals only, so the test can detect only violations those intervals show.
"""

from __future__ import annotations

import numpy as np

from reportkit.balance.compliers_resample import Tally, Units, bootstrap_totals
from reportkit.results import NotApplicable, TestResult

KITAGAWA_TRIM = 0.07
GRID_POINTS = 50
_BLOCK = 256  # draws per block of interval masses (bounded memory at any number of draws)


def outcome_grid(y: np.ndarray, points: int = GRID_POINTS) -> np.ndarray:
    """Sorted grid: every distinct value of y, or ``points`` quantiles of y (observed
    values, duplicates merged) when y has more distinct values than that."""
    distinct = np.unique(y)
    if len(distinct) <= points:
        return distinct
    return np.unique(np.quantile(y, np.linspace(0.0, 1.0, points), method="inverted_cdf"))


def _atoms(y: np.ndarray, grid: np.ndarray) -> np.ndarray:
    """Each row's atom among 2K + 1: 2k+1 is {y = grid[k]}; 2k is the open gap below
    grid[k] (above grid[k-1]); 2K is above the last point."""
    k = np.searchsorted(grid, y, side="left")
    on_point = (k < len(grid)) & (grid[np.minimum(k, len(grid) - 1)] == y)
    return np.where(on_point, 2 * k + 1, 2 * k)


def _statistics(
    on_totals: np.ndarray,
    off_totals: np.ndarray,
    *,
    lam: float,
    scale: float,
    trim: float,
    points: int,
) -> np.ndarray:
    """T for each row of (draws, 2 * atoms) weighted totals of the two samples (cell =
    d * atoms + atom); NaN for a draw where a sample has no weight."""
    atoms = 2 * points + 1
    first, last = np.triu_indices(points)
    with np.errstate(divide="ignore", invalid="ignore"):
        p = on_totals / on_totals.sum(axis=1, keepdims=True)
        q = off_totals / off_totals.sum(axis=1, keepdims=True)

    def interval_mass(shares: np.ndarray) -> np.ndarray:
        by_d = shares.reshape(len(shares), 2, atoms)
        cum = np.concatenate([np.zeros((len(shares), 2, 1)), np.cumsum(by_d, axis=2)], axis=2)
        return cum[:, :, 2 * last + 2] - cum[:, :, 2 * first + 1]

    p_mass, q_mass = interval_mass(p), interval_mass(q)
    sign = np.array([1.0, -1.0])[None, :, None]  # d = 0: P - Q; d = 1: Q - P
    sigma = np.sqrt(
        np.clip((1 - lam) * p_mass * (1 - p_mass) + lam * q_mass * (1 - q_mass), 0.0, None)
    )
    weighted = sign * (p_mass - q_mass) / np.maximum(trim, sigma)
    return scale * weighted.reshape(len(weighted), -1).max(axis=1)


def kitagawa_test(
    *,
    z: np.ndarray,
    d: np.ndarray,
    y: np.ndarray,
    weights: np.ndarray,
    units: Units,
    draws: int,
    rng: np.random.Generator,
    clustered: bool,
    trim: float = KITAGAWA_TRIM,
    grid_points: int = GRID_POINTS,
) -> TestResult | NotApplicable:
    """The test on rows with a finite outcome (both arms present; see the module
    docstring). ``units`` are rows, or clusters when ``clustered`` (then drawn whole only
    if the instrument is constant within each)."""
    on = z == 1
    m, n = int(on.sum()), int((~on).sum())
    drawn = "rows"
    size_on, size_off = m, n
    if clustered:
        arm_of_unit = np.zeros(units.count)
        np.maximum.at(arm_of_unit, units.code, z)
        if np.any(arm_of_unit[units.code] != z):
            units = Units.of(None, len(z))
            drawn = (
                "rows (the instrument varies within clusters, so it is taken to be assigned "
                "row by row)"
            )
        else:
            drawn = "whole clusters (the instrument is constant within clusters)"
            size_on = int(arm_of_unit.sum())
            size_off = units.count - size_on
    grid = outcome_grid(y, grid_points)
    points = len(grid)
    cell = d.astype(np.intp) * (2 * points + 1) + _atoms(y, grid)
    groups = 2 * (2 * points + 1)
    arm_on = Tally(group=cell, weight=weights * on, groups=groups)
    arm_off = Tally(group=cell, weight=weights * (~on), groups=groups)
    pooled = Tally(group=cell, weight=weights, groups=groups)
    options = {
        "lam": m / (m + n),
        "scale": float(np.sqrt(m * n / (m + n))),
        "trim": trim,
        "points": points,
    }
    statistic = float(_statistics(arm_on.totals()[None], arm_off.totals()[None], **options)[0])
    (on_draws,) = bootstrap_totals([pooled], units, size=size_on, draws=draws, rng=rng)
    (off_draws,) = bootstrap_totals([pooled], units, size=size_off, draws=draws, rng=rng)
    null_draws = np.concatenate(
        [
            _statistics(on_draws[i : i + _BLOCK], off_draws[i : i + _BLOCK], **options)
            for i in range(0, draws, _BLOCK)
        ]
    )
    null_draws = null_draws[np.isfinite(null_draws)]
    if not np.isfinite(statistic) or len(null_draws) == 0:
        return NotApplicable(reason="the bootstrap of Kitagawa's (2015) test gave no usable draw")
    return TestResult(
        name=f"Kitagawa variance-weighted test (trimming constant {trim:g}; intervals "
        f"between {points} outcome quantiles)",
        statistic=statistic,
        distribution="bootstrap",
        df=[],
        p_value=float(np.mean(null_draws >= statistic)),
        covariance="bootstrap from the pooled sample (instrument values ignored), "
        f"{len(null_draws)} draws of {drawn}",
        null="the LATE assumptions' implication holds on every closed outcome interval B "
        f"between two of {points} quantile points of the outcome: "
        "P(Y in B, D=1 | Z=0) <= P(Y in B, D=1 | Z=1) and "
        "P(Y in B, D=0 | Z=1) <= P(Y in B, D=0 | Z=0)",
        reference="Kitagawa 2015",
    )
