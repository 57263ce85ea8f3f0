"""Over-identification tests: Sargan (classical) and Hansen J (robust / cluster).

Sargan (1958): n times the uncentered R-squared of the 2SLS residuals on all
instruments; with W partialled out this is n e'P_Z e / e'e. chi2(q - p) under iid errors.
Hansen (1982) J: the two-step GMM objective at its minimum, with the weight of the spec's
covariance; chi2(q - p). Both compare instruments with each other: a violation of the
exclusion restriction shared by all instruments leaves them unchanged.
"""

from __future__ import annotations

from scipy import stats

from reportkit.engine.estimators import EstimateArrays
from reportkit.engine.moments import Moments
from reportkit.results import NotApplicable, TestOrNA, TestResult

OVERID_NULL = "all excluded instruments are uncorrelated with the structural error"


def _just_identified(m: Moments) -> NotApplicable | None:
    if m.q == m.p:
        return NotApplicable(
            reason="the model is just-identified (as many instruments as endogenous "
            "regressors), so there are no over-identifying restrictions to test"
        )
    return None


def sargan(m: Moments, tsls_params) -> TestOrNA:  # type: ignore[no-untyped-def]
    na = _just_identified(m)
    if na:
        return na
    e = m.y - m.x @ tsls_params
    ze = m.z.T @ e
    stat = m.n * float(ze @ m.zz_inv @ ze) / float(e @ e)
    return classical_overid_result(m, "Sargan", stat, "Sargan 1958")


def classical_overid_result(m: Moments, name: str, stat: float, reference: str) -> TestResult:
    """A chi2(q - p) over-identification test under the classical (iid) assumption."""
    df = m.q - m.p
    return TestResult(
        name=name,
        statistic=stat,
        distribution="chi2",
        df=[float(df)],
        p_value=float(stats.chi2.sf(stat, df)),
        covariance="classical",
        null=OVERID_NULL,
        reference=reference,
    )


def hansen_j(
    m: Moments, gmm_fit: EstimateArrays, covariance: str, covariance_label: str
) -> TestOrNA:
    na = _just_identified(m)
    if na:
        return na
    if covariance == "classical":
        return NotApplicable(
            reason="the covariance is classical, under which Hansen's J reduces to the "
            "Sargan statistic; see Sargan"
        )
    # over-identified, so the two-step GMM fit carries its J statistic
    assert gmm_fit.j_stat is not None and gmm_fit.j_df is not None
    return TestResult(
        name="Hansen J",
        statistic=gmm_fit.j_stat,
        distribution="chi2",
        df=[float(gmm_fit.j_df)],
        p_value=float(stats.chi2.sf(gmm_fit.j_stat, gmm_fit.j_df)),
        covariance=covariance_label,
        null=OVERID_NULL,
        reference="Hansen 1982",
    )
