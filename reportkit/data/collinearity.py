"""Constant and collinear columns, found by sequential rank tests on partialled-out data.

Each column is first partialled on the constant, or on the fixed effects when there are
any (Frisch-Waugh-Lovell; Frisch and Waugh 1933, Lovell 1963), with the analytic weights
when given; fixed effects are absorbed with pyhdfe (within transformation for one,
alternating projections for several: Guimaraes and Portugal 2010; Correia 2016). Then
the columns are taken in order and each is compared with the span of the earlier ones,
kept as an orthonormal basis by classical Gram-Schmidt with one re-orthogonalisation
(Giraud, Langou and Rozloznik 2005), which is as accurate as Householder QR for this
use. A column is:

- ``constant`` when all its values are equal;
- ``absorbed`` when its residual after the fixed effects is at most ``TOLERANCE`` times
  its norm after removing its mean;
- ``collinear`` when its residual after the earlier columns is at most ``TOLERANCE``
  times its norm after the constant or the fixed effects.

Written here rather than taken from a library because the stage must say *which*
earlier columns a dependent column is a combination of, so that the message can tell
the user what to drop; rank-revealing QR with pivoting reorders columns and cannot.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import scipy.linalg

from reportkit.engine.absorb import fixed_effect_absorber

TOLERANCE = 1e-9  # relative residual norm below which a column counts as dependent
PARTNER_SHARE = 1e-6  # a column takes part in a combination if it carries this share of it
MAP_TOLERANCE = 1e-12  # convergence of alternating projections, on columns of unit scale


@dataclass(frozen=True)
class Verdict:
    """How a column relates to the constant/fixed effects and the columns before it."""

    status: Literal["independent", "constant", "absorbed", "collinear"]
    partners: tuple[str, ...] = ()  # for "collinear": the earlier columns it combines


def _weighted_center_scale(
    matrix: np.ndarray, weights: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray]:
    """Columns minus their (weighted) mean and divided by their (weighted) RMS, and the RMS."""
    w = np.ones(matrix.shape[0]) if weights is None else weights
    mean = (w @ matrix) / w.sum()
    centered = matrix - mean
    rms = np.sqrt((w @ centered**2) / w.sum())
    scale = np.where(rms > 0, rms, 1.0)
    return centered / scale, rms


class Absorber:
    """Partial the constant, or the fixed effects, out of columns (weighted when asked).

    ``rank`` is the number of columns the constant or fixed effects use up: 1, the number
    of levels for one fixed effect, or pyhdfe's pairwise count for several (exact for two,
    an upper bound beyond; Abowd, Creecy and Kramarz 2002).
    """

    def __init__(self, fixed_effects: np.ndarray, weights: np.ndarray | None) -> None:
        self.weights = weights
        self._algorithm = None
        self.rank = 1
        if fixed_effects.shape[1] > 0:
            self._algorithm = fixed_effect_absorber(fixed_effects, tolerance=MAP_TOLERANCE)
            self.rank = int(self._algorithm.degrees)

    @property
    def has_fixed_effects(self) -> bool:
        return self._algorithm is not None

    def residualize(self, matrix: np.ndarray) -> np.ndarray:
        """Residuals of each column on the constant or fixed effects, columns scaled to RMS 1.

        Scaling first makes the convergence tolerance of alternating projections
        meaningful whatever the units; every later test is scale-free.
        """
        scaled, _ = _weighted_center_scale(matrix, self.weights)
        if self._algorithm is None:
            return scaled
        w = None if self.weights is None else self.weights[:, None]
        return np.asarray(self._algorithm.residualize(scaled, weights=w))


def absorbed_by(
    column: np.ndarray, fixed_effects: np.ndarray, names: list[str], weights: np.ndarray | None
) -> list[str]:
    """The fixed effects that absorb ``column`` on their own (for messages)."""
    found = []
    for k, name in enumerate(names):
        single = Absorber(fixed_effects[:, [k]], weights)
        residual = single.residualize(column[:, None])[:, 0]
        if _norm(residual, weights) <= TOLERANCE * _unit_norm(len(column), weights):
            found.append(name)
    return found


def _norm(vector: np.ndarray, weights: np.ndarray | None) -> float:
    return float(np.sqrt(vector @ vector if weights is None else (weights * vector) @ vector))


def _unit_norm(n: int, weights: np.ndarray | None) -> float:
    """Weighted norm of a centered column scaled to weighted RMS 1."""
    return float(np.sqrt(n if weights is None else weights.sum()))


@dataclass
class SpanScreen:
    """An orthonormal basis (weighted inner product) of the columns accepted so far."""

    n: int
    weights: np.ndarray | None
    has_fixed_effects: bool
    capacity: int
    names: list[str] = field(default_factory=list)
    _basis: np.ndarray = field(init=False, repr=False)
    _r: np.ndarray = field(init=False, repr=False)  # triangular factor: columns = basis @ r
    _norms: list[float] = field(default_factory=list, repr=False)

    def __post_init__(self) -> None:
        self._basis = np.empty((self.n, self.capacity))
        self._r = np.zeros((self.capacity, self.capacity))
        self._root_w = None if self.weights is None else np.sqrt(self.weights)

    def copy(self, extra: int) -> SpanScreen:
        """A screen with the same basis and room for ``extra`` more columns."""
        m = len(self.names)
        twin = SpanScreen(self.n, self.weights, self.has_fixed_effects, m + extra)
        twin._basis[:, :m] = self._basis[:, :m]
        twin._r[:m, :m] = self._r[:m, :m]
        twin.names = list(self.names)
        twin._norms = list(self._norms)
        return twin

    def check(self, raw: np.ndarray, residual: np.ndarray, add_as: str | None = None) -> Verdict:
        """Test one column (``raw`` values, ``residual`` from ``Absorber.residualize``).

        With ``add_as`` an independent column joins the basis under that name.
        """
        if raw.size == 0 or np.ptp(raw) == 0:
            return Verdict("constant")
        start = residual if self._root_w is None else residual * self._root_w
        start_norm = float(np.linalg.norm(start))
        # the centered column was scaled to weighted RMS 1 by Absorber.residualize
        if self.has_fixed_effects and start_norm <= TOLERANCE * _unit_norm(self.n, self.weights):
            return Verdict("absorbed")
        m = len(self.names)
        basis = self._basis[:, :m]
        coefficients = basis.T @ start
        remainder = start - basis @ coefficients
        correction = basis.T @ remainder
        remainder -= basis @ correction
        coefficients += correction
        remainder_norm = float(np.linalg.norm(remainder))
        if remainder_norm <= TOLERANCE * start_norm:
            return Verdict("collinear", self._partners(coefficients, start_norm))
        if add_as is not None:
            if m == self.capacity:
                raise ValueError("SpanScreen is full; create it with more capacity")
            self._basis[:, m] = remainder / remainder_norm
            self._r[:m, m] = coefficients
            self._r[m, m] = remainder_norm
            self._norms.append(start_norm)
            self.names.append(add_as)
        return Verdict("independent")

    def _partners(self, coefficients: np.ndarray, total: float) -> tuple[str, ...]:
        m = len(self.names)
        if m == 0:
            return ()
        # coefficients in terms of the original (partialled) columns: solve r b = c
        b = scipy.linalg.solve_triangular(self._r[:m, :m], coefficients, lower=False)
        share = np.abs(b) * np.asarray(self._norms) / total
        return tuple(name for name, s in zip(self.names, share, strict=True) if s > PARTNER_SHARE)
