"""Labelled coefficients with normal-based intervals, shared by every stage that reports them.

IV estimators have no exact small-sample t distribution, and the small-sample factors
are already in the standard errors, so z statistics and normal intervals are used.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from reportkit.engine.estimators import EstimateArrays
from reportkit.results import Coefficient


def finite_coefficient_rows(
    fit: EstimateArrays, names: tuple[str, ...], labels: dict[str, str], level: float
) -> list[Coefficient] | None:
    """``coefficient_rows``, or None when an estimate or a variance is not finite and positive
    (a singular or degenerate fit that secondary analyses report as not applicable)."""
    diag = np.diag(fit.cov)
    if not (np.all(np.isfinite(fit.params)) and np.all(np.isfinite(diag)) and np.all(diag > 0)):
        return None
    return coefficient_rows(fit, names, labels, level)


def coefficient_rows(
    fit: EstimateArrays, names: tuple[str, ...], labels: dict[str, str], level: float
) -> list[Coefficient]:
    """One Coefficient per regressor: estimate, SE, z, p and the interval at ``level``."""
    zcrit = float(stats.norm.ppf(0.5 + level / 2))
    se = np.sqrt(np.diag(fit.cov))
    out = []
    for j, name in enumerate(names):
        est, s = float(fit.params[j]), float(se[j])
        zstat = est / s
        out.append(
            Coefficient(
                name=name,
                label=labels.get(name, name),
                estimate=est,
                std_error=s,
                statistic=zstat,
                p_value=float(2 * stats.norm.sf(abs(zstat))),
                ci_lower=est - zcrit * s,
                ci_upper=est + zcrit * s,
            )
        )
    return out
