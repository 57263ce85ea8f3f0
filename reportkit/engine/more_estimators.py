"""Fuller's modified LIML and jackknife IV (JIVE), the robustness variants' extra estimators.

Fuller (1977): the k-class estimator with kappa = kappa_LIML - alpha / (n - K), K the
number of all instruments, the included exogenous columns (constant, controls,
fixed-effect levels) counted too; alpha = 1 is approximately unbiased, alpha = 4 has
smaller mean squared error. This is linearmodels' ``IVLIML(fuller=alpha)`` convention.

JIVE1 (Angrist, Imbens & Krueger 1999) replaces each row's first-stage prediction by one
fitted without that row: xtilde_i = (xhat_i - h_i x_i) / (1 - h_i), h_i = z_i'(Z'Z)^-1 z_i.
Applied after the controls and fixed effects are partialled out it is the improved JIVE
(IJIVE, Ackerberg & Devereux 2009). beta = (Xt'X)^-1 Xt'y is the just-identified IV
estimate with instrument Xt; its covariance is that IV estimator's on the full design
(W and Xt as instruments, W and X as regressors), whose scores by Frisch-Waugh-Lovell
use M_W Xt rather than Xt, with the engine's covariance types and small-sample factors.
"""

from __future__ import annotations

import math

import numpy as np

from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.estimators import EstimateArrays, kclass, liml_kappa
from reportkit.engine.moments import Moments

# a row whose residual on all instruments is below this (for unit-variance probes) has
# leverage one: its jackknife prediction is not defined
LEVERAGE_TOLERANCE = 1e-7
# probe columns for the leverage check; fixed seed, so the check is deterministic
LEVERAGE_PROBES = 4
LEVERAGE_SEED = 20_090_101


def fuller_kappa(m: Moments, alpha: float) -> float:
    """kappa_LIML - alpha / (n - K), K = excluded instruments + included exogenous columns."""
    if not math.isfinite(alpha) or alpha < 0:
        raise ValueError(f"Fuller's alpha must be a finite number of at least 0, got {alpha}")
    dof = m.n - (m.q + m.k_exog)
    if dof <= 0:
        raise ValueError(
            "Fuller's estimator needs more observations than instruments and controls together"
        )
    return liml_kappa(m) - alpha / dof


def fuller(m: Moments, alpha: float, cov: CovarianceSpec) -> EstimateArrays:
    """Fuller (1977) modified LIML with constant ``alpha``; named ``fuller_<alpha>``."""
    return kclass(m, fuller_kappa(m, alpha), cov, f"fuller_{alpha:g}")


def _degenerate_rows(m: Moments, h: np.ndarray) -> np.ndarray:
    """Rows fitted exactly by the instruments and the partialled-out columns together.

    With a constant or fixed effects partialled out, the leverage h_i of the partialled
    instruments stays below one even for an instrument that is nonzero in one row only;
    the full leverage (W and Z) is then one, and the row's jackknife prediction is its
    own value. The full leverage is one exactly when row i of M_[W,Z] r = M_W r - P_Z r
    is zero for every r; a few fixed-seed random probes r detect it (the diagonal of
    P_W is not available for absorbed fixed effects).
    """
    rng = np.random.default_rng(LEVERAGE_SEED)
    probes = rng.standard_normal((m.n, LEVERAGE_PROBES))
    resid = m.partialler.residualize_transformed(probes)
    resid = resid - m.z @ (m.zz_inv @ (m.z.T @ probes))
    flagged = np.max(np.abs(resid), axis=1) <= LEVERAGE_TOLERANCE
    return np.flatnonzero(flagged | (1.0 - h <= LEVERAGE_TOLERANCE))


def jackknife_first_stage(m: Moments) -> np.ndarray:
    """Leave-one-out first-stage predictions (n, p) of the partialled regressors.

    Raises ValueError when some row has leverage one (its prediction is undefined).
    """
    h = np.einsum("ij,jk,ik->i", m.z, m.zz_inv, m.z)
    bad = _degenerate_rows(m, h)
    if bad.size:
        first = int(bad[0]) + 1
        raise ValueError(
            f"the jackknife first stage is not defined: {bad.size} row(s) of the estimation "
            f"sample (the first is row {first}) are fitted exactly by the instruments and "
            "controls, so leaving the row out leaves nothing to predict it from (as with an "
            "instrument that is nonzero in a single row)"
        )
    return (m.xhat - h[:, None] * m.x) / (1.0 - h)[:, None]


def jive(m: Moments, cov: CovarianceSpec) -> EstimateArrays:
    """Jackknife IV (JIVE1, Angrist, Imbens & Krueger 1999) on the partialled data (IJIVE,
    Ackerberg & Devereux 2009), with the spec's covariance type."""
    n, p = m.n, m.p
    k = p + m.k_exog
    xt = jackknife_first_stage(m)
    zt = m.partialler.residualize_transformed(xt).reshape(n, p)  # M_W Xt, same estimate
    s = zt.T @ m.x  # (p, p), not symmetric
    s_inv = np.linalg.inv(s)
    params = s_inv @ (zt.T @ m.y)
    e = m.y - m.x @ params
    ee = float(e @ e)
    classical = cov.kind == "classical"
    meat = (zt.T @ zt) * (ee / (n - k)) if classical else cov.meat(zt * e[:, None], k)
    vcov = s_inv @ meat @ s_inv.T
    return EstimateArrays(
        estimator="jive",
        params=params,
        cov=(vcov + vcov.T) / 2,
        kappa=None,
        k=k,
        sigma=float(np.sqrt(ee / (n - k))),
    )
