"""Montiel Olea & Pflueger (2013) effective F and its simplified critical values.

With one endogenous regressor x, first-stage coefficients pi on the (partialled)
instruments Z and V_pi their covariance under the spec's covariance (robust, cluster or
classical),

    F_eff = pi' Z'Z pi / tr(V_pi Z'Z).

The numerator is the classical F's; only the scale in the denominator changes, so F_eff
is the classical first-stage F under the classical covariance and the robust Wald / 1
with one instrument (Andrews, Stock & Sun 2019). It is unchanged when the
instruments are rescaled or rotated.

Critical values (5% test of the null that the 2SLS Nagar bias exceeds a fraction tau of
the worst-case benchmark), simplified conservative procedure of Montiel Olea & Pflueger
(2013): with W2 = R V_pi R' (R'R = Z'Z; the covariance of the first-stage coefficients
on orthonormalised instruments, up to a scale that cancels) and x = 1 / tau (the 2SLS
bias bound the simplified procedure uses),

    K_eff = (1 + 2x) tr(W2)^2 / (tr(W2'W2) + 2x tr(W2) maxeval(W2)),
    c     = ncx2.ppf(0.95, df=K_eff, nc=x K_eff) / K_eff.

K_eff depends on W2 only through its eigenvalues normalised to sum to one; it equals the
number of instruments when W2 is proportional to the identity (classical covariance), and
is 1 with one instrument, where c = 23.1 for tau = 10%. The generalized procedure (which
also uses the reduced-form covariance and is less conservative) is not implemented.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from reportkit.results import CriticalValue, EffectiveF, NotApplicable

LEVEL = 0.05  # size of the weak-instrument test
TAUS = (0.10, 0.20)  # Nagar bias as a fraction of the worst-case benchmark


def k_eff(w2_eigenvalues: np.ndarray, tau: float) -> float:
    """Effective degrees of freedom of the simplified procedure (Montiel Olea & Pflueger 2013)."""
    lam = np.asarray(w2_eigenvalues, dtype=float)
    lam = lam / lam.sum()  # scale-free: eigenvalues of W2 / tr(W2)
    x = 1.0 / tau
    return float((1.0 + 2.0 * x) / (float(lam @ lam) + 2.0 * x * float(lam.max())))


def simplified_critical_value(
    w2_eigenvalues: np.ndarray, tau: float, level: float = LEVEL
) -> float:
    """ncx2 quantile over K_eff: the conservative critical value for F_eff."""
    k = k_eff(w2_eigenvalues, tau)
    x = 1.0 / tau
    return float(stats.ncx2.ppf(1.0 - level, k, x * k) / k)


def effective_f(
    zz: np.ndarray, coef: np.ndarray, coef_cov: np.ndarray, covariance: str
) -> EffectiveF | NotApplicable:
    """F_eff and its simplified critical values for tau = 10% and 20% at the 5% level.

    ``zz`` is Z'Z of the partialled instruments, ``coef`` the first-stage coefficients
    (q,) and ``coef_cov`` their (q, q) covariance under the spec's covariance.
    """
    r = np.linalg.cholesky(zz).T  # upper triangular, r'r = Z'Z
    w2 = r @ coef_cov @ r.T
    w2 = (w2 + w2.T) / 2
    eig = np.linalg.eigvalsh(w2)
    trace = float(eig.sum())
    if not np.isfinite(trace) or trace <= 0 or eig.min() < -1e-10 * eig.max():
        return NotApplicable(
            reason="the covariance of the first-stage coefficients is not positive "
            "semi-definite with a positive trace, so the effective F is not defined"
        )
    eig = np.clip(eig, 0.0, None)
    numerator = float(coef @ zz @ coef)
    value = numerator / trace
    if not np.isfinite(value):
        return NotApplicable(reason="the effective F is not finite for this first stage")
    rows = []
    for tau in TAUS:
        cv = simplified_critical_value(eig, tau)
        rows.append(
            CriticalValue(
                criterion=(
                    f"2SLS Nagar bias at most {tau:.0%} of the worst-case benchmark "
                    f"(5% test, simplified procedure, K_eff = {k_eff(eig, tau):.2f})"
                ),
                estimator="2sls",
                kind="nagar_bias",
                threshold=tau,
                value=cv,
                exceeded=value > cv,
            )
        )
    return EffectiveF(
        value=value,
        k_eff=k_eff(eig, TAUS[0]),
        critical_values=rows,
        covariance=covariance,
    )
