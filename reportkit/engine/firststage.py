"""First stages, the reduced form and binned first-stage scatter data.

Each is a regression on the excluded instruments after the controls and fixed effects
are partialled out, so coefficients and their covariances come from Z'Z and one
residual pass. The joint test of the instrument coefficients uses the spec's covariance
(Wald / q, read against F(q, n - k), or F(q, G - 1) with clusters, G the smallest cluster
count) and is also given assuming iid errors, labelled as such.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportkit.engine.covariance import CovarianceSpec, sandwich
from reportkit.engine.moments import Moments

MAX_BINS = 20


@dataclass(frozen=True)
class LinearFit:
    """OLS of one partialled column on the partialled instruments."""

    coef: np.ndarray  # (q,)
    cov: np.ndarray  # (q, q) with the requested covariance
    cov_classical: np.ndarray
    rss: float
    tss: float  # sum of squares of the partialled dependent column
    k: int  # q + columns of W
    wald: float
    wald_classical: float
    df_denominator: int
    df_denominator_classical: int

    @property
    def partial_r2(self) -> float:
        return 1.0 - self.rss / self.tss if self.tss > 0 else float("nan")


def fit_on_instruments(m: Moments, col: np.ndarray, cov: CovarianceSpec) -> LinearFit:
    """Regress a partialled column on the partialled instruments."""
    n, q = m.n, m.q
    k = q + m.k_exog
    coef = m.zz_inv @ (m.z.T @ col)
    resid = col - m.z @ coef
    rss = float(resid @ resid)
    cov_cl = m.zz_inv * (rss / (n - k))
    cov_cl = (cov_cl + cov_cl.T) / 2
    if cov.kind == "classical":
        vc = cov_cl
        df2 = n - k
    else:
        vc = sandwich(m.zz_inv, cov.meat(m.z * resid[:, None], k))
        df2 = (cov.min_clusters - 1) if cov.kind == "cluster" else n - k  # type: ignore[operator]
    wald = float(coef @ np.linalg.solve(vc, coef))
    wald_cl = float(coef @ np.linalg.solve(cov_cl, coef))
    return LinearFit(
        coef=coef,
        cov=vc,
        cov_classical=cov_cl,
        rss=rss,
        tss=float(col @ col),
        k=k,
        wald=wald,
        wald_classical=wald_cl,
        df_denominator=int(df2),
        df_denominator_classical=int(n - k),
    )


@dataclass(frozen=True)
class Bins:
    instrument_index: int
    x: np.ndarray
    y: np.ndarray
    count: np.ndarray
    slope: float
    intercept: float


def binned_first_stage(
    m: Moments, endog_raw: np.ndarray, instr_raw: np.ndarray, j: int, weights: np.ndarray | None
) -> list[Bins]:
    """Binned means of endogenous j against each instrument, other instruments held fixed.

    Both variables are residualised on W and the other instruments (Frisch-Waugh-
    Lovell) and shifted back to their (weighted) sample means, so the axes are in the
    variables' own units and the line's slope is the first-stage coefficient.
    """
    out: list[Bins] = []
    sqrt_w = m.partialler.sqrt_w
    w = np.ones(m.n) if weights is None else m.partialler.weights_normalised
    assert w is not None
    for ell in range(m.q):
        others = np.delete(m.z, ell, axis=1)
        zl, xj = m.z[:, ell], m.x[:, j]
        if others.shape[1]:
            qo, _ = np.linalg.qr(others)
            zl = zl - qo @ (qo.T @ zl)
            xj = xj - qo @ (qo.T @ xj)
        if sqrt_w is not None:
            zl, xj = zl / sqrt_w, xj / sqrt_w
        zl = zl + np.average(instr_raw[:, ell], weights=w)
        xj = xj + np.average(endog_raw[:, j], weights=w)
        slope = float(np.sum(w * (zl - np.average(zl, weights=w)) * xj)) / float(
            np.sum(w * (zl - np.average(zl, weights=w)) ** 2)
        )
        intercept = float(np.average(xj, weights=w) - slope * np.average(zl, weights=w))
        labels = _bin_labels(zl)
        nb = int(labels.max()) + 1
        wsum = np.bincount(labels, weights=w, minlength=nb)
        keep = wsum > 0
        bx = np.bincount(labels, weights=w * zl, minlength=nb)[keep] / wsum[keep]
        by = np.bincount(labels, weights=w * xj, minlength=nb)[keep] / wsum[keep]
        cnt = np.bincount(labels, minlength=nb)[keep]
        out.append(Bins(ell, bx, by, cnt, slope, intercept))
    return out


def _bin_labels(v: np.ndarray) -> np.ndarray:
    """Bin by value when there are few distinct values, else by quantile."""
    rounded = np.round(v, 10)
    uniq = np.unique(rounded)
    if uniq.shape[0] <= MAX_BINS:
        return np.searchsorted(uniq, rounded)
    edges = np.quantile(v, np.linspace(0, 1, MAX_BINS + 1)[1:-1])
    edges = np.unique(edges)
    return np.searchsorted(edges, v, side="right")
