"""Bootstrap draws of weighted group totals, for the complier analysis.

Every complier statistic (shares, kappa-weighted means, implied outcome masses, the
Kitagawa statistic) is a ratio of weighted totals over small groups of rows: instrument
arm x treatment, times an outcome bin or a covariate's presence. A bootstrap draw is a
vector of multiplicities (how often each unit, a row or a whole cluster, was drawn) and
its totals are the same group totals with the rows' weights multiplied by those
multiplicities. Draws are made a chunk at a time: a (chunk, n) matrix of multiplicities
and one ``np.bincount`` per tally, so no Python loop runs over rows and memory stays
bounded (about ``_CHUNK_ELEMENTS`` numbers per array).

The nonparametric bootstrap is Efron (1979); drawing whole clusters keeps the dependence
within them (Cameron, Gelbach & Miller 2008).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np

_CHUNK_ELEMENTS = 2_000_000


@dataclass(frozen=True)
class Tally:
    """Weighted row counts by group: total of ``weight`` over the rows of each group."""

    group: np.ndarray  # (n,) integer group of each row, 0..groups-1
    weight: np.ndarray  # (n,) float weight of each row (0 leaves a row out)
    groups: int

    def totals(self) -> np.ndarray:
        """(groups,) totals on the sample itself."""
        return np.bincount(self.group, weights=self.weight, minlength=self.groups)

    def draw_totals(self, multiplicity: np.ndarray) -> np.ndarray:
        """(chunk, groups) totals for a (chunk, n) matrix of row multiplicities."""
        chunk = multiplicity.shape[0]
        index = (np.arange(chunk)[:, None] * self.groups + self.group[None, :]).ravel()
        flat = np.bincount(
            index, weights=(multiplicity * self.weight).ravel(), minlength=chunk * self.groups
        )
        return flat.reshape(chunk, self.groups)


@dataclass(frozen=True)
class Units:
    """The resampling units: each row, or each cluster (``code[i]`` is row i's unit)."""

    code: np.ndarray  # (n,) unit of each row, 0..count-1
    count: int

    @classmethod
    def of(cls, clusters: np.ndarray | None, n: int) -> Units:
        """Rows when ``clusters`` is None, else the distinct cluster codes."""
        if clusters is None:
            return cls(code=np.arange(n), count=n)
        values, code = np.unique(np.asarray(clusters), return_inverse=True)
        return cls(code=code.reshape(-1), count=len(values))

    def subset(self, rows: np.ndarray) -> Units:
        """The units of the rows selected by the boolean mask ``rows``, renumbered."""
        values, code = np.unique(self.code[rows], return_inverse=True)
        return Units(code=code.reshape(-1), count=len(values))


def multiplicities(
    units: Units, *, size: int, draws: int, rng: np.random.Generator
) -> Iterator[np.ndarray]:
    """Chunks of (chunk, n) row multiplicities: ``size`` units drawn with replacement,
    uniformly among ``units.count``, in each of ``draws`` draws (in order)."""
    n = len(units.code)
    chunk = max(1, _CHUNK_ELEMENTS // max(n, size, units.count, 1))
    for start in range(0, draws, chunk):
        rows = min(chunk, draws - start)
        picks = rng.integers(0, units.count, size=(rows, size))
        offsets = np.arange(rows)[:, None] * units.count
        counts = np.bincount((offsets + picks).ravel(), minlength=rows * units.count)
        yield counts.reshape(rows, units.count)[:, units.code].astype(float)


def bootstrap_totals(
    tallies: Sequence[Tally],
    units: Units,
    *,
    size: int,
    draws: int,
    rng: np.random.Generator,
) -> list[np.ndarray]:
    """(draws, groups) totals of each tally over ``draws`` resamples of ``size`` units."""
    parts: list[list[np.ndarray]] = [[] for _ in tallies]
    for mult in multiplicities(units, size=size, draws=draws, rng=rng):
        for part, tally in zip(parts, tallies, strict=True):
            part.append(tally.draw_totals(mult))
    return [
        np.concatenate(part) if part else np.zeros((0, tally.groups))
        for part, tally in zip(parts, tallies, strict=True)
    ]
