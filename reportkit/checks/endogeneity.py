"""Regression-based Durbin-Wu-Hausman test of the endogeneity of the regressors.

The structural equation is re-estimated by OLS with the first-stage residuals added as
regressors (control-function form; Hausman 1978, Wooldridge 2010 sec. 6.3.1); the
joint Wald test that their coefficients are zero uses the spec's covariance, so the test
is robust when the covariance is. chi2(p) under exogeneity.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from reportkit.engine.covariance import CovarianceSpec, sandwich
from reportkit.engine.moments import Moments
from reportkit.results import TestResult


def durbin_wu_hausman(m: Moments, cov: CovarianceSpec, covariance_label: str) -> TestResult:
    n, p = m.n, m.p
    v = m.x - m.xhat  # first-stage residuals (orthogonal to W and Z)
    r = np.column_stack([m.x, v])
    k = 2 * p + m.k_exog
    a = r.T @ r
    a_inv = np.linalg.inv((a + a.T) / 2)
    b = a_inv @ (r.T @ m.y)
    e = m.y - r @ b
    if cov.kind == "classical":
        vc = a_inv * (float(e @ e) / (n - k))
    else:
        vc = sandwich(a_inv, cov.meat(r * e[:, None], k))
    theta = b[p:]
    v_theta = vc[p:, p:]
    stat = float(theta @ np.linalg.solve(v_theta, theta))
    return TestResult(
        name="Durbin-Wu-Hausman (regression-based)",
        statistic=stat,
        distribution="chi2",
        df=[float(p)],
        p_value=float(stats.chi2.sf(stat, p)),
        covariance=covariance_label,
        null="the endogenous regressors are exogenous (OLS and IV estimate the same thing)",
        reference="Durbin 1954; Wu 1973; Hausman 1978",
    )
