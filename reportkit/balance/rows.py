"""The rows one balance or placebo regression uses, ready for the moment engine.

Each balance variable and placebo outcome is used on the rows of the estimation sample
where it is present, so every regression runs on its own subset. The subset keeps the
estimation sample's order; fixed-effect and cluster codes are recoded to 0..G-1 within
it, and rows left alone in a fixed-effect group are dropped, iteratively, exactly as the
data stage does for the main sample (``reportkit.data.singletons``; Correia 2015): such a
row is fitted exactly by its own effect and would only overstate the sample size.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportkit.data.singletons import singleton_rows
from reportkit.engine.design import Design


@dataclass(frozen=True)
class Rows:
    """A subset of the estimation sample: positions, recoded codes, weights."""

    index: np.ndarray  # (n_s,) increasing positions in the design
    fixed_effects: np.ndarray  # (n_s, f) codes 0..G-1; f = 0 when not conditioning on them
    clusters: np.ndarray  # (n_s, m) codes 0..G-1
    weights: np.ndarray | None
    singletons: int  # rows dropped as alone in a fixed-effect group

    @property
    def n(self) -> int:
        return int(self.index.shape[0])

    def where(self, condition: str) -> str:
        """The rows in words for reasons, e.g. 'in the 812 rows where age is present'."""
        total = self.n + self.singletons
        if total == 0:
            return f"where {condition}"
        text = f"in the {total:,} row{'s' if total != 1 else ''} where {condition}"
        if self.singletons:
            text += f", {self.singletons:,} of them left out as alone in a fixed-effect group"
        return text

    def take(self, values: np.ndarray) -> np.ndarray:
        """``values`` (rows of the design) on these rows, as contiguous floats."""
        return np.ascontiguousarray(values[self.index], dtype=float)


def recode(codes: np.ndarray) -> np.ndarray:
    """Integer codes of each column renumbered 0..G-1 (G the levels present)."""
    if codes.shape[1] == 0 or codes.shape[0] == 0:
        return np.zeros(codes.shape, dtype=np.int64)
    return np.column_stack(
        [np.unique(codes[:, j], return_inverse=True)[1] for j in range(codes.shape[1])]
    ).astype(np.int64)


def select_rows(design: Design, present: np.ndarray, *, fixed_effects: bool) -> Rows:
    """The rows where ``present`` is true, with the model's fixed effects or without them."""
    index = np.flatnonzero(present)
    singletons = 0
    if fixed_effects and design.fixed_effects.shape[1]:
        fe = recode(design.fixed_effects[index])
        alone = singleton_rows(fe)
        if alone.any():
            singletons = int(alone.sum())
            index = index[~alone]
            fe = recode(fe[~alone])
    else:
        fe = np.zeros((index.shape[0], 0), dtype=np.int64)
    return Rows(
        index=index,
        fixed_effects=fe,
        clusters=recode(design.clusters[index]),
        weights=None if design.weights is None else design.weights[index],
        singletons=singletons,
    )
