"""OLS, 2SLS, LIML (k-class) and two-step efficient GMM from the moments.

k-class (Theil 1958; Nagar 1959): beta(kappa) = [(1-kappa) X'X + kappa X'P_Z X]^-1
[(1-kappa) X'y + kappa X'P_Z y]; kappa = 0 is OLS, 1 is 2SLS, and LIML's kappa is the
smallest root of det(Y'M_W Y - kappa Y'M_[W,Z] Y) = 0 with Y = [y X] (Anderson & Rubin
1949). Covariances follow linearmodels' conventions: the bread is the k-class matrix, the
robust and cluster meat uses the scores (P_Z X)_i e_i (X_i e_i for OLS).

Two-step GMM (Hansen 1982): the first step is 2SLS; its residuals give the weight
S^-1 with the spec's covariance type; J is evaluated with that weight at the final
estimate. With controls partialled out, the final residuals of the full GMM problem are
not the partialled residuals: at the optimum the control moments W'e are not zero but
S_12 S_22^-1 g_Z. ``gmm`` rebuilds the full residual as e + P_W r (derivation in
DEVELOPERS.md) so that the covariance matches the one computed on the full design.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from reportkit.engine.covariance import CovarianceSpec, sandwich
from reportkit.engine.moments import Moments


@dataclass(frozen=True)
class EstimateArrays:
    """Raw output of one estimator on the endogenous coefficients."""

    estimator: str
    params: np.ndarray  # (p,)
    cov: np.ndarray  # (p, p)
    kappa: float | None
    k: int  # model columns (for degrees of freedom)
    sigma: float  # sqrt(e'e / (n - k)) in the transformed space
    j_stat: float | None = None  # GMM only
    j_df: int | None = None


def liml_kappa(m: Moments) -> float:
    """Smallest generalized eigenvalue of (Y'M_W Y, Y'M_[W,Z] Y), Y = [y X]."""
    p = m.p
    yy_block = m.gram[: 1 + p, : 1 + p]  # [y X]'[y X], already partialled on W
    zyx = m.gram[1 + p :, : 1 + p]  # Z'[y X]
    resid = yy_block - zyx.T @ m.zz_inv @ zyx  # [y X]' M_Z [y X]
    resid = (resid + resid.T) / 2
    vals = scipy.linalg.eigh(yy_block, resid, eigvals_only=True)
    return float(np.min(vals))


def _kclass_parts(m: Moments, kappa: float) -> tuple[np.ndarray, np.ndarray]:
    a = (1 - kappa) * m.xx + kappa * m.xpx
    b = (1 - kappa) * m.xy + kappa * m.xpy
    return (a + a.T) / 2, b


def kclass(
    m: Moments, kappa: float, cov: CovarianceSpec, name: str, *, ols: bool = False
) -> EstimateArrays:
    """A k-class estimate and its covariance with the requested type."""
    a, b = _kclass_parts(m, kappa)
    a_inv = np.linalg.inv(a)
    params = a_inv @ b
    n, p = m.n, m.p
    k = p + m.k_exog
    e = m.y - m.x @ params
    ee = float(e @ e)
    if cov.kind == "classical":
        vcov = a_inv * (ee / (n - k))
        vcov = (vcov + vcov.T) / 2
    else:
        xs = m.x if ols else m.xhat
        vcov = sandwich(a_inv, cov.meat(xs * e[:, None], k))
    return EstimateArrays(
        estimator=name,
        params=params,
        cov=vcov,
        kappa=None if ols else float(kappa),
        k=k,
        sigma=float(np.sqrt(ee / (n - k))),
    )


def ols(m: Moments, cov: CovarianceSpec) -> EstimateArrays:
    out = kclass(m, 0.0, cov, "ols", ols=True)
    return EstimateArrays(**{**out.__dict__, "kappa": 0.0})


def tsls(m: Moments, cov: CovarianceSpec) -> EstimateArrays:
    return kclass(m, 1.0, cov, "2sls")


def liml(m: Moments, cov: CovarianceSpec) -> EstimateArrays:
    return kclass(m, liml_kappa(m), cov, "liml")


def gmm(m: Moments, cov: CovarianceSpec) -> EstimateArrays:
    """Two-step efficient GMM with the weight matrix of the spec's covariance type.

    With the classical covariance the efficient weight is proportional to (Z'Z)^-1 and
    GMM equals 2SLS; its variance then uses the centered residual variance (as
    linearmodels' homoskedastic weight does).
    """
    n, p, q = m.n, m.p, m.q
    k = p + m.k_exog
    first = tsls(m, CovarianceSpec(kind="classical"))
    e1 = m.y - m.x @ first.params
    if cov.kind == "classical":
        ec = e1 - e1.mean()
        s2 = float(ec @ ec) / n
        a_inv = np.linalg.inv(m.xpx)
        vcov = a_inv * (s2 * n / (n - k))
        g = m.z.T @ e1
        j = float(g @ m.zz_inv @ g) / s2 if q > p else None
        return EstimateArrays(
            estimator="gmm",
            params=first.params,
            cov=(vcov + vcov.T) / 2,
            kappa=None,
            k=k,
            sigma=float(np.sqrt(float(e1 @ e1) / (n - k))),
            j_stat=j,
            j_df=q - p if q > p else None,
        )
    ze1 = m.z * e1[:, None]
    s1 = cov.raw_meat(ze1)  # Sigma_22 of the first step, sums
    w = np.linalg.inv(s1)
    w = (w + w.T) / 2
    zx, zy = m.zx, m.zy
    a = zx.T @ w @ zx
    a_inv = np.linalg.inv((a + a.T) / 2)
    params = a_inv @ (zx.T @ w @ zy)
    e = m.y - m.x @ params
    g = m.z.T @ e  # moments of the excluded instruments (sums)
    j = float(g @ w @ g) if q > p else None
    # full-design residual: e + P_W r, with W'r = S_12 S_22^-1 g
    direction = w @ g  # S_22^-1 g
    r = e1 * (ze1 @ direction) if cov.kind == "robust" else _cluster_r(cov, ze1, e1, direction)
    pw_r = r - m.partialler.residualize_transformed(r)
    e_full = e + pw_r
    meat = cov.meat(m.z * e_full[:, None], k)
    bread = a_inv @ zx.T @ w
    vcov = bread @ meat @ bread.T
    return EstimateArrays(
        estimator="gmm",
        params=params,
        cov=(vcov + vcov.T) / 2,
        kappa=None,
        k=k,
        sigma=float(np.sqrt(float(e_full @ e_full) / (n - k))),
        j_stat=j,
        j_df=q - p if q > p else None,
    )


def _cluster_r(
    cov: CovarianceSpec, ze1: np.ndarray, e1: np.ndarray, direction: np.ndarray
) -> np.ndarray:
    """r_i = e1_i * (u_g(i)' d) summed over the cluster dimensions like the meat."""
    r = np.zeros_like(e1)
    parts = [(ix, 1.0) for ix in cov.clusters]
    if cov.intersection is not None:
        parts.append((cov.intersection, -1.0))
    for ix, sign in parts:
        u = ix.sums(ze1) @ direction  # (G,)
        r += sign * e1 * u[ix.codes]
    return r


ESTIMATOR_FUNCTIONS = {"ols": ols, "2sls": tsls, "liml": liml, "gmm": gmm}
ESTIMATOR_LABELS = {"ols": "OLS", "2sls": "2SLS", "liml": "LIML", "gmm": "GMM (two-step)"}
