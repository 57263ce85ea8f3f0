"""Groups of instrument values and covariate means within them (the balance table).

An instrument with at most two distinct values in the estimation sample is grouped by
value ('value 0', 'value 1'); any other instrument by the spec's cut points for it, or
else by its quartiles in the estimation sample (``numpy.quantile``, linear
interpolation; a quartile equal to the largest value is dropped, since it would leave the
top group empty; if every quartile equals it, the largest value is a group of its own).
Groups are right-closed intervals: 'x <= a', 'a < x <= b', ..., 'x > c'.
Groups are fixed once for the whole sample, so every covariate is shown across the same
groups; a group with no rows where the covariate is present has mean None and n 0.

With weights, means are weighted means and variances use the reliability-weight divisor
sum(w) - sum(w^2) / sum(w), which is n - 1 without weights. The standardized mean
difference is (mean of the last group - mean of the first) / sqrt((s_first^2 +
s_last^2) / 2), the normalised difference of Imbens & Rubin (2015, ch. 14; from memory)
and Austin (2009): a scale-free size of the imbalance that, unlike a t statistic, does
not grow with the sample.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from reportkit.data.values import format_value
from reportkit.results import GroupMean

QUARTILES = (0.25, 0.5, 0.75)


@dataclass(frozen=True)
class Grouping:
    """Which group each row of the estimation sample is in, and the groups' names."""

    instrument: str
    codes: np.ndarray  # (n,) group index 0..len(names)-1
    names: tuple[str, ...]


@dataclass(frozen=True)
class GroupSummary:
    groups: list[GroupMean]
    difference: float | None
    std_difference: float | None


def _edge_texts(edges: np.ndarray) -> list[str]:
    """Edges as text with the fewest decimals (at least 2) that keep them distinct."""
    if edges.size and (np.max(np.abs(edges)) >= 1e6 or 0 < np.min(np.abs(edges)) < 1e-3):
        for digits in range(4, 16):
            texts = [f"{v:.{digits}g}" for v in edges]
            if len(set(texts)) == len(texts):
                return texts
        return [repr(float(v)) for v in edges]
    for decimals in range(2, 10):
        texts = [f"{v:.{decimals}f}" for v in edges]
        if len(set(texts)) == len(texts):
            return texts
    return [repr(float(v)) for v in edges]


def interval_names(edges: np.ndarray, label: str) -> tuple[str, ...]:
    texts = _edge_texts(edges)
    names = [f"{label} <= {texts[0]}"]
    names += [f"{a} < {label} <= {b}" for a, b in itertools.pairwise(texts)]
    names.append(f"{label} > {texts[-1]}")
    return tuple(names)


def instrument_groups(
    values: np.ndarray, name: str, label: str, cut_points: list[float] | None
) -> Grouping:
    """Group the estimation sample by one instrument (see the module docstring)."""
    distinct = np.unique(values)
    if distinct.shape[0] <= 2:
        codes = np.searchsorted(distinct, values)
        return Grouping(name, codes, tuple(f"value {format_value(float(v))}" for v in distinct))
    if cut_points:
        edges = np.asarray(cut_points, dtype=float)
    else:
        edges = np.unique(np.quantile(values, QUARTILES))
        edges = edges[edges < distinct[-1]]
        if edges.size == 0:  # over three quarters of the rows at the largest value
            edges = distinct[-2:-1]
    codes = np.searchsorted(edges, values, side="left")
    return Grouping(name, codes, interval_names(edges, label))


def _variance(x: np.ndarray, w: np.ndarray) -> float | None:
    """Reliability-weighted variance; 0 exactly for a constant group; None below 2 rows."""
    if x.shape[0] < 2:
        return None
    if np.ptp(x) == 0:
        return 0.0
    total = float(w.sum())
    divisor = total - float(w @ w) / total
    if divisor <= 0:
        return None
    mean = float(w @ x) / total
    return float(w @ (x - mean) ** 2) / divisor


def summarise(
    x: np.ndarray, present: np.ndarray, grouping: Grouping, weights: np.ndarray | None
) -> GroupSummary:
    """Means per group, last minus first, and the standardized mean difference."""
    w_all = np.ones(x.shape[0]) if weights is None else weights
    groups: list[GroupMean] = []
    variances: list[float | None] = []
    for g, group_name in enumerate(grouping.names):
        sel = present & (grouping.codes == g)
        xs, ws = x[sel], w_all[sel]
        count = int(sel.sum())
        mean = float(ws @ xs) / float(ws.sum()) if count else None
        if mean is not None and np.ptp(xs) == 0:
            mean = float(xs[0])  # exact for a constant group
        groups.append(GroupMean(group=group_name, mean=mean, n=count))
        variances.append(_variance(xs, ws) if count else None)
    first, last = groups[0].mean, groups[-1].mean
    if len(groups) < 2 or first is None or last is None:
        return GroupSummary(groups, None, None)
    difference = last - first
    v_first, v_last = variances[0], variances[-1]
    smd = None
    if v_first is not None and v_last is not None and v_first + v_last > 0:
        smd = difference / float(np.sqrt((v_first + v_last) / 2))
    return GroupSummary(groups, difference, smd)
