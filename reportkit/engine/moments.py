"""Partialled columns and their cross-product (Gram) matrix: the engine's sufficient statistics.

After partialling out (``absorb.py``), one pass over the rows builds the Gram matrix of
[y, X, Z]; every point estimate of every linear IV estimator derives from it. Robust and
cluster covariances additionally need one residual pass per estimator (``covariance.py``).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from reportkit.engine.absorb import Partialler, build_partialler
from reportkit.engine.design import Design


@dataclass(frozen=True)
class Moments:
    """Partialled, weight-transformed columns and their cross-products.

    y: (n,), x: (n, p) endogenous, z: (n, q) excluded instruments. ``k_exog`` is the
    number of columns W uses (constant, kept controls, fixed-effect levels).
    """

    y: np.ndarray
    x: np.ndarray
    z: np.ndarray
    k_exog: int
    partialler: Partialler

    @property
    def n(self) -> int:
        return int(self.y.shape[0])

    @property
    def p(self) -> int:
        return int(self.x.shape[1])

    @property
    def q(self) -> int:
        return int(self.z.shape[1])

    @cached_property
    def gram(self) -> np.ndarray:
        """[y X Z]'[y X Z], (1 + p + q) square."""
        v = np.column_stack([self.y, self.x, self.z])
        g = v.T @ v
        return (g + g.T) / 2

    # blocks of the Gram matrix -------------------------------------------------
    @property
    def yy(self) -> float:
        return float(self.gram[0, 0])

    @property
    def xy(self) -> np.ndarray:
        return self.gram[1 : 1 + self.p, 0]

    @property
    def xx(self) -> np.ndarray:
        return self.gram[1 : 1 + self.p, 1 : 1 + self.p]

    @property
    def zy(self) -> np.ndarray:
        return self.gram[1 + self.p :, 0]

    @property
    def zx(self) -> np.ndarray:
        return self.gram[1 + self.p :, 1 : 1 + self.p]

    @property
    def zz(self) -> np.ndarray:
        return self.gram[1 + self.p :, 1 + self.p :]

    @cached_property
    def zz_inv(self) -> np.ndarray:
        return np.linalg.inv(self.zz)

    @cached_property
    def pi(self) -> np.ndarray:
        """First-stage coefficients (q, p): (Z'Z)^-1 Z'X."""
        return self.zz_inv @ self.zx

    @cached_property
    def xpx(self) -> np.ndarray:
        """X' P_Z X."""
        m = self.zx.T @ self.pi
        return (m + m.T) / 2

    @cached_property
    def xpy(self) -> np.ndarray:
        """X' P_Z y."""
        return self.pi.T @ self.zy

    @cached_property
    def ypy(self) -> float:
        return float(self.zy @ self.zz_inv @ self.zy)

    @cached_property
    def xhat(self) -> np.ndarray:
        """P_Z X, (n, p): the instrument-predicted endogenous regressors."""
        return self.z @ self.pi


def compute_moments(design: Design) -> Moments:
    """Partial out W from y, X and Z in one pass and build the moments."""
    part = build_partialler(design)
    cols = np.column_stack([design.y, design.endog, design.instruments])
    t = part.transform(cols)
    p = design.endog.shape[1]
    return Moments(
        y=np.ascontiguousarray(t[:, 0]),
        x=np.ascontiguousarray(t[:, 1 : 1 + p]),
        z=np.ascontiguousarray(t[:, 1 + p :]),
        k_exog=part.df_absorbed,
        partialler=part,
    )
