"""Implied complier outcome masses per outcome bin, with bootstrap bands.

For a binary instrument Z and treatment D, independence, exclusion and monotonicity
imply, for every set B of outcome values (Imbens & Rubin 1997; Balke & Pearl 1997;
Kitagawa 2015):

    treated(B)   = P(Y in B, D=1 | Z=1) - P(Y in B, D=1 | Z=0) = P(C) P(Y(1) in B | C) >= 0
    untreated(B) = P(Y in B, D=0 | Z=0) - P(Y in B, D=0 | Z=1) = P(C) P(Y(0) in B | C) >= 0

C the compliers. Both are computed here on bins of the outcome; a bin whose bootstrap
band lies wholly below zero is evidence against the assumptions. The bins' edges are
quantiles of y (duplicates merged); when y takes no more distinct values than bins were
asked for, each value is its own bin.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportkit.results import DensityBin

# Arm x treatment groups used throughout the complier analysis: group = 2 * z + d.
OFF_UNTREATED, OFF_TREATED, ON_UNTREATED, ON_TREATED = 0, 1, 2, 3


@dataclass(frozen=True)
class OutcomeBins:
    """Bins of the outcome and each row's bin (``count`` for a row with a missing y)."""

    lower: np.ndarray
    upper: np.ndarray
    index: np.ndarray

    @property
    def count(self) -> int:
        return len(self.lower)


def make_outcome_bins(y: np.ndarray, bins: int) -> OutcomeBins:
    """Bins [lower, upper) (the last one closed) at quantiles of the finite values of y;
    one bin per value (lower = upper) when y has at most ``bins`` distinct values."""
    finite = np.isfinite(y)
    distinct = np.unique(y[finite])
    index = np.zeros(len(y), dtype=np.intp)
    if len(distinct) <= bins:
        lower = upper = distinct
        index[finite] = np.searchsorted(distinct, y[finite])
    else:
        edges = np.unique(np.quantile(y[finite], np.linspace(0.0, 1.0, bins + 1)))
        lower, upper = edges[:-1], edges[1:]
        position = np.searchsorted(edges, y[finite], side="right") - 1
        index[finite] = np.clip(position, 0, len(lower) - 1)
    index[~finite] = len(lower)
    return OutcomeBins(lower=lower, upper=upper, index=index)


def implied_masses(totals: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """(treated, untreated) masses, each (..., count), from weighted totals shaped
    (..., 4, count + 1): arm x treatment group by outcome bin (last: missing outcome).
    Rows with a missing outcome are left out of both arms."""
    observed = totals[..., :count]
    on = observed[..., ON_UNTREATED, :].sum(-1) + observed[..., ON_TREATED, :].sum(-1)
    off = observed[..., OFF_UNTREATED, :].sum(-1) + observed[..., OFF_TREATED, :].sum(-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        on_share = observed / on[..., None, None]
        off_share = observed / off[..., None, None]
    treated = on_share[..., ON_TREATED, :] - off_share[..., OFF_TREATED, :]
    untreated = off_share[..., OFF_UNTREATED, :] - on_share[..., ON_UNTREATED, :]
    return treated, untreated


def percentile_band(draws: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray] | None:
    """Bootstrap percentile band at ``level`` per column, over the finite draws; None when
    a column has no finite draw (Efron & Tibshirani 1993, ch. 13)."""
    draws = np.where(np.isfinite(draws), draws, np.nan)
    if draws.shape[0] == 0 or np.any(np.all(np.isnan(draws), axis=0)):
        return None
    tail = (1.0 - level) / 2.0
    low, high = np.nanquantile(draws, [tail, 1.0 - tail], axis=0)
    return low, high


def density_bins(
    bins: OutcomeBins,
    totals: np.ndarray,
    draw_totals: np.ndarray,
    level: float,
) -> tuple[list[DensityBin], int] | None:
    """Each bin's masses and bands, and the number of bins with a band wholly below zero
    (treated or untreated); None when a band cannot be formed (no finite draw)."""
    treated, untreated = implied_masses(totals, bins.count)
    boot_treated, boot_untreated = implied_masses(draw_totals, bins.count)
    treated_band = percentile_band(boot_treated, level)
    untreated_band = percentile_band(boot_untreated, level)
    if treated_band is None or untreated_band is None:
        return None
    rows = [
        DensityBin(
            lower=float(bins.lower[b]),
            upper=float(bins.upper[b]),
            treated=float(treated[b]),
            treated_low=float(treated_band[0][b]),
            treated_high=float(treated_band[1][b]),
            untreated=float(untreated[b]),
            untreated_low=float(untreated_band[0][b]),
            untreated_high=float(untreated_band[1][b]),
        )
        for b in range(bins.count)
    ]
    negative = int(np.sum((treated_band[1] < 0) | (untreated_band[1] < 0)))
    return rows, negative
