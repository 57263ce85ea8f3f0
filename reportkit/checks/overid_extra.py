"""Basmann's over-identification statistic and per-instrument C (difference-in-J) statistics.

Basmann (1960): the Sargan statistic s rescaled to a small-sample form,
s (n - k_Z) / (n - s), with k_Z the number of columns of the whole instrument set (the
excluded instruments and every column of W: constant, controls, fixed-effect levels);
chi2(q - p) under homoskedastic errors, as linearmodels computes it (``IVResults.basmann``).

C statistics (Eichenbaum, Hansen & Singleton 1988; Hayashi 2000, sec. 3.6): for each
excluded instrument j, C_j = J - J_-j, where J is the full model's minimised GMM objective
and J_-j the minimised objective of the model that drops instrument j's moment, both with
the full model's score covariance S: the restricted model uses the sub-block S_-j,-j of S
(then inverted), not a new estimate. With a common S, C_j >= 0 in every sample (for any
coefficient value, g'S^-1 g >= g_-j' S_-j,-j^-1 g_-j, so the minima are ordered), and C_j is
chi2(1) under the null that instrument j is valid, on the assumption that the other
instruments are valid: the test compares instrument j with the others, and says nothing
when they are all invalid in the same way.

- robust and cluster: S is the covariance of the instrument scores z_i e_i (summed by
  cluster) at the first-step 2SLS residuals, unscaled, the weight of the two-step GMM fit
  (``engine/estimators.gmm``); J is then that fit's Hansen J;
- classical: S = sigma^2 Z'Z with sigma^2 = e'e / n from the full model's 2SLS residuals,
  so J is the Sargan statistic and J_-j the restricted 2SLS objective divided by the same
  sigma^2 (the difference-in-Sargan version).

Not applicable when the model is just-identified (q = p: nothing to test). Otherwise q > p,
so every restricted model keeps q - 1 >= p instruments and is identified: each C_j exists.
When q = p + 1, every restricted model is just-identified, its minimised objective is
zero, and every C_j equals the full J (with any common weight).

Controls, the constant and fixed effects are partialled out: the W moments are exactly
identified by their own coefficients, so concentrating them out leaves the problem in the
partialled instruments with S the score covariance of the partialled instruments, in the
full and in each restricted model (the transformation z -> z - Pi'w is the same for both).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from reportkit.checks.overid import classical_overid_result, sargan
from reportkit.engine.covariance import CovarianceSpec
from reportkit.engine.moments import Moments
from reportkit.results import InstrumentValidity, NotApplicable, TestOrNA, TestResult

C_REFERENCE = "Eichenbaum, Hansen & Singleton 1988; Hayashi 2000, sec. 3.6"
# S is treated as singular when its smallest eigenvalue (after scaling to unit diagonal)
# is below this
SINGULAR_TOL = 1e-12


def basmann(m: Moments, tsls_params: np.ndarray) -> TestOrNA:
    """Basmann (1960) over-identification statistic, from the Sargan statistic."""
    s = sargan(m, tsls_params)
    if isinstance(s, NotApplicable):
        return s
    n = m.n
    k_z = m.k_exog + m.q
    stat = s.statistic * (n - k_z) / (n - s.statistic)
    return classical_overid_result(m, "Basmann", stat, "Basmann 1960")


def _min_objective(zx: np.ndarray, zy: np.ndarray, w: np.ndarray) -> float:
    """min_b (zy - zx b)' w (zy - zx b): linear GMM with weight w."""
    a = zx.T @ w @ zx
    b = np.linalg.solve((a + a.T) / 2, zx.T @ w @ zy)
    g = zy - zx @ b
    return float(g @ w @ g)


def _score_covariance(m: Moments, cov: CovarianceSpec) -> np.ndarray:
    """S at the full model's 2SLS residuals: sigma^2 Z'Z (classical, sigma^2 = e'e/n) or
    the unscaled covariance of the instrument scores (robust, cluster)."""
    b = np.linalg.solve(m.xpx, m.xpy)
    e = m.y - m.x @ b
    if cov.kind == "classical":
        return m.zz * (float(e @ e) / m.n)
    s = cov.raw_meat(m.z * e[:, None])
    return (s + s.T) / 2


def _singular(s: np.ndarray) -> bool:
    d = np.sqrt(np.diag(s))
    if not np.all(d > 0):
        return True
    scaled = s / np.outer(d, d)
    return bool(np.linalg.eigvalsh(scaled)[0] < SINGULAR_TOL)


def c_statistics(
    m: Moments,
    cov: CovarianceSpec,
    cov_label: str,
    instrument_names: tuple[str, ...],
    labels: dict[str, str],
) -> list[InstrumentValidity] | NotApplicable:
    """One C statistic per excluded instrument (its validity given the others)."""
    if m.q == m.p:
        return NotApplicable(
            reason="the model is just-identified (as many instruments as endogenous "
            "regressors), so no instrument can be tested against the others"
        )
    s = _score_covariance(m, cov)
    if _singular(s):
        return NotApplicable(
            reason="the covariance of the instrument scores is singular (for example, "
            "fewer clusters than instruments), so the GMM objective is not defined"
        )
    classical = cov.kind == "classical"
    w = np.linalg.inv(s)
    j_full = _min_objective(m.zx, m.zy, (w + w.T) / 2)
    covariance = "classical" if classical else cov_label
    name = "C statistic (difference in Sargan)" if classical else "C statistic (difference in J)"
    out = []
    for j, inst in enumerate(instrument_names):
        # q > p here, so the model without instrument j keeps q - 1 >= p instruments
        keep = [k for k in range(m.q) if k != j]
        w_j = np.linalg.inv(s[np.ix_(keep, keep)])
        j_rest = _min_objective(m.zx[keep], m.zy[keep], (w_j + w_j.T) / 2)
        stat = max(j_full - j_rest, 0.0)  # >= 0 exactly; max() only absorbs rounding
        label = labels.get(inst, inst)
        test = TestResult(
            name=name,
            statistic=stat,
            distribution="chi2",
            df=[1.0],
            p_value=float(stats.chi2.sf(stat, 1)),
            covariance=covariance,
            null=f"{label} is uncorrelated with the structural error, given that the "
            "other instruments are",
            reference=C_REFERENCE,
        )
        out.append(InstrumentValidity(instrument=inst, label=label, test=test))
    return out
